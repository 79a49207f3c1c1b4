# `spinrail identify machine|supercap|battery LOG.csv`: the command-line side of the
# identifiers. Results on stdout, warnings on stderr; --write adds a section to a JSON fragment.
from host_sim.errors import UserError


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
    p.add_argument("--write", metavar="FILE", help="write the result as a JSON fragment (other "
                   "sections of an existing fragment are kept)")


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
                    "95 % intervals. Warns when the data cannot separate the parameters.")
    _common(mp)
    mp.add_argument("--brush", choices=("auto", "fit", "none"), default="auto",
                    help="brush or diode drop: fit it when the data support it (auto, default), "
                         "always when separable (fit), or never (none)")
    mp.add_argument("--open-below", type=float, default=0.005, metavar="A",
                    help="rows with |i_a| below this count as open circuit (default 0.005 A)")
    mp.set_defaults(func=_machine)

    sp = isub.add_parser(
        "supercap", help="capacitance and DC resistance from a constant-current discharge",
        description="IEC 62391-1 constant-current method on a log of t_s, v, i_a (optional "
                    "cell1..cellN): C = I (t2 - t1) / (U1 - U2) at 80 % and 40 % of U_R, R from "
                    "the initial drop extrapolated back to the start. The 80/40 % points and the "
                    "extrapolation detail are from memory until checked against the standard.")
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
                    "the instantaneous jump, R_p and tau from an exponential fit of the "
                    "relaxation, state of charge from a rested open-circuit voltage (BCI table, "
                    "flooded, 26.7 C, scaled per cell).")
    _common(bp)
    bp.add_argument("--cells", type=int, default=6,
                    help="cells in series (default 6: a 12 V block)")
    bp.add_argument("--capacity-ah", type=float, metavar="AH",
                    help="rated capacity (needed by --write: the scenario gives resistances "
                         "per Ah)")
    bp.set_defaults(func=_battery)
