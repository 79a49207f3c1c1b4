# `spinrail limits`: the resolved setpoints of a profile at a battery temperature, or a table
# over the charging window. The numbers come from the controller's own functions.
import json

from controller.leadacid import ceiling_mv
from controller.signals import ST_ABSORPTION, ST_EQUALIZE, ST_FLOAT
from host_sim.common import caution, load_profile
from host_sim.errors import UserError

KEYS = ("temp_dc", "absorption_mv", "float_mv", "equalize_mv", "charge_limit_ma", "tail_ma",
        "charge_temp_min_dc", "charge_temp_max_dc", "lvd_mv", "lvr_mv", "cap_clamp_mv",
        "cap_rating_mv", "ovp_trip_mv", "ovp_recover_mv", "ovp_hold_ms", "usb_vbus_min_mv",
        "usb_vbus_max_mv", "period_ms")


def resolve(p, temp_dc):
    """Setpoints at one battery temperature (deci-degrees C), as a dict of integers."""
    return {
        "temp_dc": temp_dc,
        "absorption_mv": ceiling_mv(p, ST_ABSORPTION, temp_dc),
        "float_mv": ceiling_mv(p, ST_FLOAT, temp_dc),
        "equalize_mv": ceiling_mv(p, ST_EQUALIZE, temp_dc) if p.eq_cell_mv else None,
        "charge_limit_ma": p.chg_limit_ma,
        "tail_ma": p.tail_ma,
        "charge_temp_min_dc": p.temp_min_dc,
        "charge_temp_max_dc": p.temp_max_dc,
        "charging_allowed": p.temp_min_dc <= temp_dc <= p.temp_max_dc,
        "lvd_mv": p.lvd_mv,
        "lvr_mv": p.lvr_mv,
        "cap_clamp_mv": p.cap_clamp_mv,
        "cap_rating_mv": p.cap_cells * p.cap_cell_rating_mv,
        "ovp_trip_mv": p.ovp_trip_mv,
        "ovp_recover_mv": p.ovp_recover_mv,
        "ovp_hold_ms": p.ovp_hold_ms,
        "usb_vbus_min_mv": p.vbus_min_mv,
        "usb_vbus_max_mv": p.vbus_max_mv,
        "period_ms": p.period_ms,
    }


def _table_temps(p):
    lo = (p.temp_min_dc // 50) * 50 - 50
    hi = p.temp_max_dc + 50
    return list(range(lo, hi + 1, 50))


def cmd_limits(args):
    p, path = load_profile(args.profile)
    caution()
    if args.temp_dc is not None:
        if not -400 <= args.temp_dc <= 850:
            raise UserError("--temp-dc = %d: allowed -400 to 850 deci-degrees C" % args.temp_dc)
        rows = [resolve(p, args.temp_dc)]
    else:
        rows = [resolve(p, t) for t in _table_temps(p)]
    if args.json:
        print(json.dumps(rows[0] if args.temp_dc is not None else rows, indent=2))
        return 0
    print("profile: %s (%s)" % (p.name or "(unnamed)", path))
    print("battery %s, %d cells, %.1f Ah; supercap %d cells, clamp %.2f V (rating %.2f V); "
          "bus trip %.1f V, recover %.1f V after %d ms"
          % (p.chemistry, p.cells, p.capacity_mah / 1000, p.cap_cells, p.cap_clamp_mv / 1000,
             p.cap_cells * p.cap_cell_rating_mv / 1000, p.ovp_trip_mv / 1000,
             p.ovp_recover_mv / 1000, p.ovp_hold_ms))
    print("%8s %10s %8s %9s %9s %8s" % ("temp C", "absorb V", "float V", "equal. V", "limit A",
                                         "charge"))
    for r in rows:
        eq = "%9.3f" % (r["equalize_mv"] / 1000) if r["equalize_mv"] else "%9s" % "-"
        print("%8.1f %10.3f %8.3f %s %9.2f %8s" % (
            r["temp_dc"] / 10, r["absorption_mv"] / 1000, r["float_mv"] / 1000, eq,
            r["charge_limit_ma"] / 1000, "yes" if r["charging_allowed"] else "NO"))
    return 0


def register(sub):
    lp = sub.add_parser(
        "limits", help="print the resolved charging and protection setpoints",
        description="Print the setpoints a profile resolves to: temperature-compensated "
                    "absorption, float and equalize voltages, current limits, the charging "
                    "temperature window, supercap clamp, overvoltage trip and USB window. Without "
                    "--temp-dc, a table over the charging window in 5 C steps (temperatures outside "
                    "the window use the window's edge for compensation and show charge NO).")
    lp.add_argument("--profile", help="profile JSON file or built-in name (default: shipped default)")
    lp.add_argument("--temp-dc", type=int, help="battery temperature in deci-degrees C (250 = 25.0 C)")
    lp.add_argument("--json", action="store_true", help="print JSON (an object with --temp-dc, "
                    "else a list of objects)")
    lp.set_defaults(func=cmd_limits)
