# Shared helpers for the identification and USB-design tests: a tiny `spinrail` parser holding
# only the command groups these modules register (the lead wires them into host_sim/cli.py), and
# a CSV writer for hand-made logs.
import argparse
import sys

import pytest

from host_sim import usbdesign
from host_sim.errors import UserError
from host_sim.identify import cli as identify_cli


def _parser():
    ap = argparse.ArgumentParser(prog="spinrail")
    sub = ap.add_subparsers(dest="cmd", required=True)
    identify_cli.register(sub)
    usbdesign.register(sub)
    return ap


@pytest.fixture
def spinrail(capsys):
    """Run a command line; returns (exit code, stdout, stderr) the way host_sim/cli.py would."""
    def run(*argv):
        args = _parser().parse_args([str(a) for a in argv])
        try:
            rc = args.func(args) or 0
        except UserError as e:
            print("spinrail: %s" % e, file=sys.stderr)
            rc = e.exit_code
        out = capsys.readouterr()
        return rc, out.out, out.err
    return run


@pytest.fixture
def write_log(tmp_path):
    """write_log(name, text) -> path of a CSV file holding text."""
    def write(name, text):
        p = tmp_path / name
        p.write_text(text)
        return p
    return write
