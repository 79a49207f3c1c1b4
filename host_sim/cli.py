# The `spinrail` command: one parser, subcommands registered by the module that owns each.
# Results go to stdout, progress and diagnostics to stderr; a UserError prints
# "spinrail: message" and exits with its code (2 for bad input).
import argparse
import sys

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
    return rc or 0


if __name__ == "__main__":
    sys.exit(main())
