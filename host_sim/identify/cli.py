# `spinrail identify machine|supercap|battery LOG.csv`: the command-line side of the
# identifiers. Results on stdout, warnings on stderr; --write adds a section to a JSON fragment.
from host_sim.errors import UserError
from host_sim.identify.common import DEFAULT_GAIN_TOL_PCT


def _points(text):
    try:
        hi, lo = (float(x) for x in text.split(","))
    except ValueError:
        raise UserError("--points %r: expected two fractions of U_R, upper,lower (e.g. 0.8,0.4)"
                        % text)
    if not 0 < lo < hi < 1:
        raise UserError("--points %s: need 0 < lower < upper < 1" % text)
    return hi, lo


def _machine(args):
    from host_sim.identify import machine
    return machine.run(args)


def _supercap(args):
    from host_sim.identify import supercap
    args.points = _points(args.points)
    return supercap.run(args)


def _battery(args):
    from host_sim.identify import battery
    return battery.run(args)


def _common(p):
    p.add_argument("log", metavar="LOG.csv", help="bench log (CSV with a header line; columns and "
                   "units: docs/identify.md)")
    p.add_argument("--plot", metavar="PNG", help="write a plot of the fit to this PNG file")
    p.add_argument("--write", metavar="FILE", help="merge the result into this scenario (or "
                   "fragment) file: the merged scenario is validated first, each field changed "
                   "is printed old -> new, and a machine that cannot charge the site's battery "
                   "is warned about")
    p.add_argument("--json", action="store_true", help="print the result as JSON on stdout: "
                   "values, 95 %% intervals, method, source, calibration, warnings")
    p.add_argument("--gain-tol-pct", type=float, default=DEFAULT_GAIN_TOL_PCT, metavar="PCT",
                   help="meter gain tolerance, %%%% of reading, for every logged voltage, "
                        "current and speed (default %g %%%%: a handheld multimeter's DC "
                        "accuracy, common practice; give your meters' figure)"
                        % DEFAULT_GAIN_TOL_PCT)
    p.add_argument("--offset-v", type=float, default=0.0, metavar="V",
                   help="voltage meter offset tolerance, V (default 0: a meter zeroed before "
                        "the run)")
    p.add_argument("--offset-a", type=float, default=0.0, metavar="A",
                   help="current meter offset tolerance, A (default 0: a meter zeroed before "
                        "the run)")


def register(sub):
    ip = sub.add_parser(
        "identify", help="identify a machine, supercap bank or battery from a bench log",
        description="Fit the numbers the simulator and the profile need from bench logs: a "
                    "salvaged permanent-magnet DC machine (K_e, R_a, brush drop), a supercap bank "
                    "(capacitance, DC resistance, per cell) or a lead-acid battery (ohmic and "
                    "polarisation resistance, time constant, state of charge). Methods and "
                    "sources: docs/identify.md.")
    isub = ip.add_subparsers(dest="what", metavar="PART", required=True)

    mp = isub.add_parser(
        "machine", help="K_e, R_a (and brush drop) from open-circuit and loaded runs",
        description="Least-squares fit of V_term = K_e w - R_a I - V_b sgn(I) to rows of rpm, "
                    "v_term, i_a (i_a = 0 on open circuit, + while the machine delivers), with "
                    "95 % intervals from the HC3 heteroscedasticity-robust covariance "
                    "(MacKinnon & White 1985) and the meters' calibration tolerance. Warns when "
                    "the data cannot separate the parameters, when the residuals show structure "
                    "the model lacks, and on clipped or held readings.")
    _common(mp)
    mp.add_argument("--brush", choices=("auto", "fit", "none"), default="auto",
                    help="brush or diode drop: fit it when the data support it (auto, default), "
                         "always when separable (fit), or never (none)")
    mp.add_argument("--open-below", type=float, default=0.005, metavar="A",
                    help="rows with |i_a| below this count as open circuit (default 0.005 A)")
    mp.set_defaults(func=_machine)

    sp = isub.add_parser(
        "supercap", help="capacitance and DC resistance from a constant-current discharge",
        description="The constant-current discharge method of IEC 62391-1 (capacitance and "
                    "internal resistance) on a log of t_s, v, i_a (optional cell1..cellN): "
                    "charge to U_R, hold, discharge at constant current I; capacitance C = I "
                    "(t2 - t1) / (U1 - U2) between U1 = 0.8 U_R and U2 = 0.4 U_R; internal "
                    "resistance R = dU3 / I, dU3 the drop between the held voltage and the "
                    "straight part of the discharge extrapolated back to the moment the current "
                    "started. Every value comes from your log (the crossing times, a straight "
                    "line fitted between U1 and U2, the held voltage, the mean current); the "
                    "80/40 % points are the standard's as recalled (from memory), and --points "
                    "moves them.")
    _common(sp)
    sp.add_argument("--rated-v", type=float, metavar="V",
                    help="rated voltage U_R of the bank (default: the held voltage before the "
                         "discharge)")
    sp.add_argument("--points", default="0.8,0.4", metavar="HI,LO",
                    help="U1 and U2 as fractions of U_R (default 0.8,0.4)")
    sp.add_argument("--cells", type=int, metavar="N",
                    help="cells in series (default: the log's cell columns; needed by --write "
                         "when there are none)")
    sp.add_argument("--spread-pct", type=float, default=10.0, metavar="PCT",
                    help="flag cells whose C is more than this far from the bank median "
                         "(default 10 %%, common practice)")
    sp.set_defaults(func=_supercap)

    bp = isub.add_parser(
        "battery", help="ohmic and polarisation resistance, time constant, state of charge",
        description="From a current step in a log of t_s, v, i_a (+ into the battery): R_0 from "
                    "the jump read at the step's own time (the middle of the row gap), R_p and "
                    "tau from an exponential fit of the relaxation, the open-circuit voltage "
                    "from the whole rest and the state of charge from the BCI open-circuit "
                    "table (flooded 12 V block, rested, 80 F = 26.7 C, scaled per cell: Battery "
                    "Council International, Battery Service Manual, as commonly reproduced; from "
                    "memory). Methods and sources: "
                    "docs/identify.md.")
    _common(bp)
    bp.add_argument("--cells", type=int, default=6,
                    help="cells in series (default 6: a 12 V block)")
    bp.add_argument("--capacity-ah", type=float, metavar="AH",
                    help="rated capacity (needed by --write: the scenario gives resistances "
                         "per Ah)")
    bp.set_defaults(func=_battery)
