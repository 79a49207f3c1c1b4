# `spinrail demo`: the main job on the built-in demo.
import sys
from pathlib import Path

from host_sim import vectors
from host_sim.common import caution


def cmd_demo(args):
    out = Path(args.out)
    caution()
    p, _ = vectors.load_profile(None)
    lines = vectors.read_checked(str(vectors.DEMO_VECTORS))
    n = vectors.run_cpython(p, lines, out / "commands.csv")
    print("demo: %d ticks of the built-in pedal-session vectors -> %s" % (n, out / "commands.csv"),
          file=sys.stderr)
    return 0


def register(sub):
    d = sub.add_parser("demo", help="run the built-in demo",
                       description="Run the controller over the built-in demo.")
    d.add_argument("--out", default="spinrail-out/demo", help="output folder (default: %(default)s)")
    d.set_defaults(func=cmd_demo)
