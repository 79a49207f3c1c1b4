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
