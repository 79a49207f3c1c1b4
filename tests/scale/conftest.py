# Shared helpers for the fuzz and sweep tests: the command line as `spinrail` runs it (the
# subcommands registered on a parser of their own, UserError -> "spinrail: ..." and its exit
# code), and a short base scenario so each example costs a fraction of a second.
import argparse
import json
import sys

import pytest

from host_sim import fuzz, simulate, sweep
from host_sim.errors import UserError


def run_cli(argv):
    ap = argparse.ArgumentParser(prog="spinrail")
    sub = ap.add_subparsers(dest="cmd", required=True)
    for mod in (simulate, fuzz, sweep):
        mod.register(sub)
    args = ap.parse_args([str(a) for a in argv])
    try:
        return args.func(args) or 0
    except UserError as e:
        print("spinrail: %s" % e, file=sys.stderr)
        return e.exit_code


# A hand-crank rig like crank_relief, shortened (invented settings, our own demo)
SHORT_CRANK = {
    "name": "short_crank",
    "description": "test base: a geared hand crank, no battery wired, a small supercap bank",
    "duration_s": 20,
    "seed": 11,
    "profile": "default",
    "drive": {"kind": "crank", "cadence_rpm": 60, "power_start_w": 60, "power_sustained_w": 45},
    "machine": {"ke_v_per_krpm": 18, "ra_ohm": 0.6},
    "gear": {"ratio": 18, "efficiency": 0.9},
    "battery": {"present": False},
    "supercap": {"cell_f": 10, "v0_per_cell": 1.5},
}


@pytest.fixture
def short_crank(tmp_path):
    path = tmp_path / "short_crank.json"
    path.write_text(json.dumps(SHORT_CRANK))
    return path
