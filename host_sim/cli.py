# The `spinrail` command: one parser, subcommands registered by the module that owns each.
# Results go to stdout, progress and diagnostics to stderr; a UserError prints
# "spinrail: message" and exits with its code (2 for bad input).
#
# Exit status (README): 0 done, every limit held; 1 a limit was crossed; 2 bad input (the
# file, field and allowed range named); 3 limits held but the system did not do its job;
# 4 internal error (a bug: the traceback goes to a log file, named in the message);
# 130 interrupted (Ctrl-C). No traceback ever reaches the terminal.
import argparse
import os
import sys
import tempfile
import time
import traceback

from host_sim.errors import UserError


def build_parser():
    ap = argparse.ArgumentParser(
        prog="spinrail",
        description="Charge controller and plant simulator for small off-grid DC generators "
                    "(hand-crank, pedal, micro-wind, micro-hydro): supercap clamp, staged "
                    "temperature-compensated lead-acid charging, USB port check, overvoltage "
                    "guard. CAUTION: hydrogen from overcharged lead-acid, short-circuit currents "
                    "from batteries and supercaps, hot dump resistors, pinching gears; defaults are "
                    "starting points, follow makers' data, local codes and licensed practice.")
    sub = ap.add_subparsers(dest="cmd", metavar="COMMAND", required=True)
    from host_sim import bench, cmd_board, fuzz, hil, limits, simulate, sweep, usbdesign, vectors
    from host_sim import init_site, sizing
    from host_sim.identify import cli as identify_cli
    for mod in (simulate, vectors, limits, identify_cli, usbdesign, fuzz, sweep, cmd_board, hil, bench,
                init_site, sizing):
        mod.register(sub)
    return ap


def main(argv=None):
    ap = build_parser()
    args = ap.parse_args(argv)
    try:
        rc = args.func(args)
    except UserError as e:
        print("spinrail: %s" % e, file=sys.stderr)
        return e.exit_code
    except KeyboardInterrupt:
        print("spinrail: interrupted", file=sys.stderr)
        return 130
    except RecursionError:
        # only input structures recurse this deep here (JSON nesting, long chains)
        print("spinrail: input nested too deeply to process (RecursionError)", file=sys.stderr)
        return 2
    except Exception as e:  # a bug: say so, keep the traceback out of the terminal
        path = log_traceback(argv)
        print("spinrail: internal error: %s: %s (traceback in %s)"
              % (type(e).__name__, _short(e), path), file=sys.stderr)
        return INTERNAL_ERROR
    return rc or 0


INTERNAL_ERROR = 4


def _short(e, n=200):
    text = " ".join(str(e).split())
    return text if len(text) <= n else text[:n] + "..."


def log_dir():
    """Where internal-error tracebacks go: $SPINRAIL_LOG_DIR, else ~/.cache/spinrail/logs,
    else the temporary folder."""
    d = os.environ.get("SPINRAIL_LOG_DIR")
    if not d:
        base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
        d = os.path.join(base, "spinrail", "logs")
    try:
        os.makedirs(d, exist_ok=True)
        return d
    except OSError:
        return tempfile.gettempdir()


def log_traceback(argv):
    """Write the current exception's traceback to a new file; returns its path."""
    name = "internal-%s-%d.log" % (time.strftime("%Y%m%d-%H%M%S"), os.getpid())
    path = os.path.join(log_dir(), name)
    try:
        with open(path, "w") as f:
            f.write("spinrail %s\n" % " ".join(sys.argv[1:] if argv is None else argv))
            traceback.print_exc(file=f)
    except OSError:
        path = "(could not be written: %s)" % path
    return path


if __name__ == "__main__":
    sys.exit(main())
