# Files the tools write are written whole: into a temporary file in the same folder, then
# renamed over the target, so an interrupted run never leaves a half-written file.
import json
import os
import tempfile
from contextlib import contextmanager

from host_sim.errors import UserError

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


# -- output sets: a folder of files replaced as one -------------------------------------------
class OutputSetError(UserError):
    """--out cannot take the set; the message names the folder (one line, exit 2)."""


def _pid_alive(pid):
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True
    return True


class OutputSet:
    """The files of one run (timeseries.csv, summary.json, report.png, ...) land in out_dir
    as a set: they are written into a sibling temporary folder (.NAME.tmp-PID) that then
    takes out_dir's place, so a reader never sees a mix of two runs, and an interrupted or
    failed write (a kill, a full disk) leaves the previous set whole.

    Made before the long work: it checks that out_dir can be written (not a file, its
    parent a folder, writable) and locks it (flock on the folder itself, released by the
    kernel even after a kill -9), so a second run into the same folder is refused. Stale
    temporary folders of killed runs are removed (or an interrupted swap undone) here."""

    def __init__(self, out_dir):
        import fcntl
        self.path = os.path.abspath(os.fspath(out_dir))
        self.parent, self.name = os.path.split(self.path)
        if os.path.exists(self.path) and not os.path.isdir(self.path):
            raise OutputSetError("--out %s: exists and is not a folder" % out_dir)
        try:
            os.makedirs(self.parent, exist_ok=True)
            self._tidy()
            os.makedirs(self.path, exist_ok=True)
            if not os.access(self.path, os.W_OK | os.X_OK) or not os.access(
                    self.parent, os.W_OK | os.X_OK):
                raise PermissionError(13, "Permission denied")
            self.fd = os.open(self.path, os.O_RDONLY)
        except OSError as e:
            raise OutputSetError("--out %s: cannot write there (%s)" % (out_dir, e.strerror or e))
        try:
            fcntl.flock(self.fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(self.fd)
            self.fd = None
            raise OutputSetError("--out %s: another spinrail run is writing into this folder; "
                                 "wait for it or choose another --out" % out_dir)

    def _sibling(self, kind, pid=None):
        return os.path.join(self.parent, ".%s.%s-%d" % (self.name, kind, pid or os.getpid()))

    def _tidy(self):
        """Leftovers of killed runs into this folder: temporary sets go; a set moved aside
        by a swap that was cut short comes back."""
        import shutil
        prefix = "." + self.name + "."
        for entry in os.listdir(self.parent):
            if not entry.startswith(prefix):
                continue
            kind, _, pid = entry[len(prefix):].rpartition("-")
            if kind not in ("tmp", "old") or not pid.isdigit() or _pid_alive(int(pid)):
                continue
            p = os.path.join(self.parent, entry)
            if kind == "old" and not os.path.exists(self.path):
                os.rename(p, self.path)
            else:
                shutil.rmtree(p, ignore_errors=True)

    def write(self, fill):
        """fill(folder: pathlib.Path) writes the files; then the folder replaces out_dir."""
        import shutil
        from pathlib import Path
        tmp = self._sibling("tmp")
        old = self._sibling("old")
        try:
            os.mkdir(tmp)
            fill(Path(tmp))
            for entry in os.listdir(tmp):
                fd = os.open(os.path.join(tmp, entry), os.O_RDONLY)
                try:
                    os.fsync(fd)
                finally:
                    os.close(fd)
            os.rename(self.path, old)  # the locked folder (empty, or the previous set)
            os.rename(tmp, self.path)
        except OSError as e:
            shutil.rmtree(tmp, ignore_errors=True)
            if os.path.exists(old) and not os.path.exists(self.path):
                os.rename(old, self.path)
            raise OutputSetError("--out %s: cannot write the files (%s); the folder keeps its "
                                 "previous contents" % (self.path, e.strerror or e))
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
        shutil.rmtree(old, ignore_errors=True)

    def close(self):
        if getattr(self, "fd", None) is not None:
            os.close(self.fd)  # releases the lock
            self.fd = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
