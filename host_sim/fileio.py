# Files the tools write are written whole: into a temporary file in the same folder, then
# renamed over the target, so an interrupted run never leaves a half-written file.
import json
import os
import tempfile
from contextlib import contextmanager

_umask = os.umask(0)
os.umask(_umask)
_MODE = 0o666 & ~_umask  # what a plain open() would have made


@contextmanager
def atomic_path(path):
    """A temporary path beside path for another program to write; renamed to path on success,
    removed on error."""
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    os.makedirs(folder, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix="." + os.path.basename(path) + ".", dir=folder)
    os.close(fd)
    os.chmod(tmp, _MODE)
    try:
        yield tmp
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


@contextmanager
def atomic_open(path, mode="w", **kw):
    """Open a temporary file beside path; on success rename it to path, on error remove it."""
    with atomic_path(path) as tmp:
        with open(tmp, mode, **kw) as f:
            yield f


def write_json(path, obj):
    with atomic_open(path) as f:
        json.dump(obj, f, indent=2, sort_keys=False)
        f.write("\n")


# -- reading JSON: one loader for profiles, scenarios and board files -------------------------
MAX_JSON_DEPTH = 64  # objects and lists nested deeper than this are refused (no RecursionError)
MAX_INT_DIGITS = 30  # a longer integer literal is refused (no OverflowError further on)
MAX_MESSAGE_CHARS = 200  # longest piece of a file quoted in an error message


class JsonError(ValueError):
    """A JSON file cannot be used: the message names the file and what is wrong."""


def short(text, n=MAX_MESSAGE_CHARS):
    """text cut to about n characters for an error message (a 100,001-point list once gave
    a 1.5 MB message)."""
    text = str(text)
    return text if len(text) <= n else text[:n] + "... (%d characters)" % len(text)


def _pairs(pairs):
    seen = set()
    for k, _ in pairs:
        if k in seen:
            raise JsonError("duplicate key %s (JSON would keep only the last one)" % json.dumps(k))
        seen.add(k)
    return dict(pairs)


def _int(text):
    if len(text.lstrip("-")) > MAX_INT_DIGITS:
        raise JsonError("integer %s has more than %d digits" % (short(text, 40), MAX_INT_DIGITS))
    return int(text)


def _constant(name):
    raise JsonError("%s is not a number JSON allows" % name)


def _depth(text):
    """Deepest nesting of [ and { outside strings (checked before parsing: the parser itself
    recurses)."""
    depth = top = 0
    in_str = esc = False
    for ch in text:
        if in_str:
            if esc:
                esc = False
            elif ch == "\\":
                esc = True
            elif ch == '"':
                in_str = False
        elif ch == '"':
            in_str = True
        elif ch in "[{":
            depth += 1
            if depth > top:
                top = depth
                if top > MAX_JSON_DEPTH:
                    return top
        elif ch in "]}":
            depth -= 1
    return top


def parse_json(text, src="<json>"):
    """Parse JSON text strictly: duplicate keys, NaN/Infinity, integers longer than
    MAX_INT_DIGITS digits and nesting deeper than MAX_JSON_DEPTH are errors. Raises
    JsonError naming src."""
    if text.startswith("\ufeff"):
        text = text[1:]  # a byte-order mark: accepted, as JSON readers commonly do
    if _depth(text) > MAX_JSON_DEPTH:
        raise JsonError("%s: nested more than %d levels deep" % (src, MAX_JSON_DEPTH))
    try:
        return json.loads(text, object_pairs_hook=_pairs, parse_int=_int,
                          parse_constant=_constant)
    except JsonError as e:
        raise JsonError("%s: %s" % (src, e))
    except ValueError as e:
        raise JsonError("%s: not valid JSON (%s)" % (src, short(e)))


def load_json(path):
    """Read and parse a JSON file (UTF-8, a BOM allowed) with parse_json's rules. Raises
    JsonError for bad content, OSError when the file cannot be read."""
    with open(path, "rb") as f:
        data = f.read()
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as e:
        raise JsonError("%s: not UTF-8 text (byte 0x%02x at offset %d)"
                        % (path, data[e.start], e.start))
    return parse_json(text, str(path))
