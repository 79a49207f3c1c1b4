# `spinrail size SITE.json`: what to buy and set for a site, each figure with the assumption it
# rests on and where the rule comes from ("derived" from the simulator's own envelope,
# "physics", "common practice", or a named source). Every key and rule: docs/design.md.
import json
import math
import sys

from host_sim import envelope
from host_sim.common import caution
from host_sim.errors import UserError

MARGIN = envelope.MARGIN
FUSE_FACTOR = 1.25  # fuse at 125 % of the continuous current
CONVERTER_FACTOR = 1.25  # converter rated 25 % above the current it is set to carry
DUMP_DERATE = 2.0  # a power resistor at half its rating in free air
STANDOFF_MARGIN = 1.05  # clamp standoff 5 % above the highest working bus (the trip)
# blade-fuse ratings, A (ISO 8820-3, from memory)
FUSES_A = (1, 2, 3, 4, 5, 7.5, 10, 15, 20, 25, 30, 35, 40, 50, 60, 80, 100, 125, 150, 200)
# the scenario schema's own bus_surge defaults: the surge assumed when the site names none
SURGE_V, SURGE_OHM, SURGE_S = 60.0, 2.0, 0.2
BATT_FULL_SOC = 1.0

S_DERIVED = "derived (host_sim/envelope.py)"
S_PHYSICS = "physics"
S_COMMON = "common practice"
S_FUSE = "common practice (the 125 % continuous-load rule of NFPA 70, from memory)"


# ---- the held drive ----------------------------------------------------------------------------
def flow_hold(trip_v, doc):
    """The water flow, l/s, at which the turbine turning at the speed of the bus limit gives
    just what the full dump absorbs there (envelope.dump_hold). The plant's turbine (drive.py
    Hydro): torque 4 k_p q / w_run x (1 - w / w_run), k_p = rho g H eta (W per l/s), so its power
    at x = w / w_run is 4 k_p q x (1 - x). inf when the bus limit's speed is past runaway (the
    turbine then gives nothing there)."""
    p_drive_w, rpm = envelope.dump_hold(trip_v, doc)
    d = doc["drive"]
    x = rpm / d["runaway_rpm"]
    if x >= 1.0:
        return math.inf
    k_p = 9.81 * d["head_m"] * d["efficiency"]  # W per l/s (1 l of water: 1 kg)
    return p_drive_w / (4.0 * k_p * x * (1.0 - x))


def hydro_flow_max(d):
    return max([d["flow_lps"]] + [v for _, v in d["flow_points"]])


def drive_held(sc):
    """(held, text): whether the full dump holds this site's drive with the bus at its limit,
    with MARGIN (envelope.py), and a short account of the figures."""
    d = sc.doc["drive"]
    trip_v = sc.profile.ovp_trip_mv / 1000.0
    k = d["kind"]
    if k in envelope.HUMAN_DRIVES:
        hold_w, _ = envelope.scenario_hold(sc)
        best = d["effort"] * d["power_start_w"]
        return best <= MARGIN * hold_w, "person's best %.0f W against %.0f W held x %g" % (
            best, hold_w, MARGIN)
    if k == "wind":
        v_hold = envelope.wind_hold(trip_v, sc.doc)
        top = envelope.wind_mean_max(v_hold, d["turbulence_pct"], envelope.gust_peak_ms(d["gusts"]))
        return d["wind_mean_ms"] <= top, "mean wind %.2f m/s against %.2f m/s held" % (
            d["wind_mean_ms"], top)
    if k == "hydro":
        q = flow_hold(trip_v, sc.doc)
        q_max = hydro_flow_max(d)
        return q_max <= MARGIN * q, "flow %.2f l/s against %.2f l/s held x %g" % (
            q_max, q, MARGIN)
    return True, "scripted drive: no bound"


def _drive_best_w(sc):
    """The drive's best power, W, at the machine shaft: what the dump must take with the stores
    full and the port idle."""
    d = sc.doc["drive"]
    eta = sc.doc["gear"]["efficiency"]
    if d["kind"] in envelope.HUMAN_DRIVES:
        return d["effort"] * d["power_start_w"] * eta
    if d["kind"] == "wind":
        v = d["wind_mean_ms"] * (1 + envelope.TURB_SIGMAS * d["turbulence_pct"] / 100.0)
        v += envelope.gust_peak_ms(d["gusts"])
        area = math.pi * d["rotor_radius_m"] ** 2
        return 0.5 * d["air_density"] * area * d["cp_max"] * v ** 3 * eta
    if d["kind"] == "hydro":
        return 9.81 * d["head_m"] * d["efficiency"] * hydro_flow_max(d) * eta
    return None


# ---- parts -----------------------------------------------------------------------------------
def fuse_for(amps):
    """The smallest listed fuse rating at or above amps."""
    for f in FUSES_A:
        if f >= amps - 1e-9:
            return f
    return math.ceil(amps)


def clamp_current_a(v, knee_v, alpha):
    """The scenario's clamp model: I = 1 mA x (V / knee)^alpha (docs/scenario.md, bus)."""
    return 1e-3 * (v / knee_v) ** alpha


def clamp_surge(knee_v, alpha, surge_v, surge_ohm):
    """(clamp voltage, current) where a surge source behind its resistance meets the clamp,
    all of the surge into the clamp (the dump and the stores left out: the worst case)."""
    lo, hi = 0.0, surge_v
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        if (surge_v - mid) / surge_ohm > clamp_current_a(mid, knee_v, alpha):
            lo = mid
        else:
            hi = mid
    v = 0.5 * (lo + hi)
    return v, (surge_v - v) / surge_ohm


def _surge(doc):
    """The site's largest bus_surge event, or the schema's defaults: (surge dict, stated)."""
    ev = [e for e in doc["events"] if e["kind"] == "bus_surge"]
    if not ev:
        return {"surge_v": SURGE_V, "surge_ohm": SURGE_OHM, "duration_s": SURGE_S,
                "energy_j": None}, False
    def energy(e):
        if e["energy_j"] is not None:
            return e["energy_j"]
        return e["surge_v"] ** 2 / e["surge_ohm"] * e["duration_s"]
    return max(ev, key=energy), True


def _discharge_a(doc, v_batt):
    """The battery's continuous discharge with every load on and the USB port at its devices'
    most (through the USB converter, from the battery when the source is still)."""
    amps = 0.0
    for ld in doc["loads"]:
        if ld["kind"] == "resistive":
            amps += v_batt / ld["ohm"]
        elif ld["kind"] == "led":
            amps += max(0.0, v_batt - ld["led_v"]) / ld["ohm"]
        else:
            amps += ld["rated_w"] / ld["rated_v"] * (v_batt / ld["rated_v"])
    usb = doc["usb"]
    usb_a = sum(dv["max_a"] for dv in usb["devices"])
    conv = usb["converter"]
    amps += usb_a * conv["setpoint_v"] / conv["efficiency"] / v_batt + conv["quiescent_a"]
    return amps, usb_a


def size(sc):
    """The sizing of a loaded scenario: (figures, basis). figures: {key: value} with units in
    the keys; basis: {key: {"assumption", "source"}}."""
    from host_sim.plant.battery import ocv_block
    doc = sc.doc
    p = sc.profile
    b, bus = doc["battery"], doc["bus"]
    trip_v = p.ovp_trip_mv / 1000.0
    lim_v = trip_v + bus["clamp_margin_v"]
    f, why = {}, {}

    def put(key, value, assumption, source, nd=3):
        if value is not None and not math.isfinite(value):  # JSON has no infinity
            value = None
            assumption += " (none: no bound, any amount is held)"
        f[key] = None if value is None else round(value, nd)
        why[key] = {"assumption": assumption, "source": source}

    put("bus_trip_v", trip_v, "the profile's overvoltage trip", "profile", 2)
    put("bus_limit_v", lim_v, "the trip plus bus.clamp_margin_v: the bus limit the closed-loop "
        "check judges", "scenario", 2)
    # dump resistor
    r = bus["dump_ohm"]
    best_w = _drive_best_w(sc)
    put("dump_ohm", r, "the site's bus.dump_ohm (spinrail init chose it so the full dump holds "
        "the drive at the bus limit)", S_DERIVED)
    put("dump_w", lim_v ** 2 / r, "dissipation fully on at the bus limit, V^2 / R", S_PHYSICS, 1)
    cont = min(lim_v ** 2 / r, best_w) if best_w is not None else lim_v ** 2 / r
    put("dump_continuous_w", cont, "the drive's best power all into the dump (stores full, "
        "port idle), at most dump_w", S_DERIVED, 1)
    put("dump_rating_w", DUMP_DERATE * cont, "rated twice its continuous dissipation (a power "
        "resistor run at half its rating in free air); its surface still reaches a few hundred "
        "C at full rating: mount it off the battery box and out of reach, on metal or in free "
        "air", S_COMMON, 1)
    duty = None if best_w is None else min(1.0, best_w / (trip_v ** 2 / r))
    put("dump_duty_at_trip", duty, "duty that takes the drive's best power with the bus at the "
        "trip: P / (V_trip^2 / R)", S_PHYSICS)
    put("dump_switch_a", lim_v / r, "the dump switch's current fully on at the bus limit; rate "
        "the switch for at least bus_limit_v", S_PHYSICS, 2)
    # surge clamp
    put("clamp_standoff_v", STANDOFF_MARGIN * trip_v, "standoff at least 5 % above the trip, "
        "the highest bus in normal service (a TVS leaks above its standoff)", S_COMMON, 2)
    put("clamp_breakdown_v", bus["clamp_knee_v"], "breakdown at 1 mA: the site's "
        "bus.clamp_knee_v (the clamp model I = 1 mA x (V / knee)^alpha)", "scenario", 2)
    s, named = _surge(doc)
    v_c, i_c = clamp_surge(bus["clamp_knee_v"], bus["clamp_alpha"], s["surge_v"], s["surge_ohm"])
    if s["energy_j"] is not None:
        e_j = s["energy_j"]
        model = "the site's bus_surge of %g J over %g s" % (e_j, s["duration_s"])
    else:
        e_j = v_c * i_c * s["duration_s"]
        model = ("%s: %g V behind %g ohm for %g s, all of it into the clamp (dump and stores "
                 "left out), V_clamp x I x t" % (
                     "the site's largest bus_surge" if named else
                     "no surge in the site, so the scenario schema's bus_surge defaults",
                     s["surge_v"], s["surge_ohm"], s["duration_s"]))
    put("clamp_clamping_v", v_c, "bus held by the clamp during the surge (%s)" % model,
        S_PHYSICS, 2)
    put("clamp_peak_a", i_c, "clamp current during the surge", S_PHYSICS, 2)
    put("clamp_energy_j", e_j, "energy the clamp absorbs: " + model, S_PHYSICS, 1)
    # battery lead
    v_full = ocv_block(BATT_FULL_SOC) * b["cells"] / 6.0
    chg_a = p.chg_limit_ma / 1000.0
    dis_a, usb_a = _discharge_a(doc, ocv_block(0.5) * b["cells"] / 6.0)
    cont_a = max(chg_a, dis_a)
    put("batt_continuous_a", cont_a, "the larger of the charge limit (%.2f A) and the discharge "
        "with every load on and the port's devices at their most (%.2f A)" % (chg_a, dis_a),
        "profile + scenario", 2)
    put("fuse_batt_a", fuse_for(FUSE_FACTOR * cont_a), "1.25 x batt_continuous_a, next blade "
        "rating up (ISO 8820-3, from memory); at the battery post", S_FUSE, 1)
    r0 = b["r0_mohm_ah"] / b["capacity_ah"] / 1000.0
    put("batt_short_circuit_a", v_full / r0, "full block over its ohmic resistance (the "
        "scenario's r0_mohm_ah / capacity): the fuse's breaking capacity must exceed it; "
        "insulate tools", "scenario battery model", 0)
    # supercap lead
    cap_lim_a = p.cap_limit_ma / 1000.0
    put("fuse_cap_a", fuse_for(FUSE_FACTOR * cap_lim_a), "1.25 x the bank's charge limit %.2f A"
        " (its discharge through the or-diode is the bus's load, limited the same way), next "
        "blade rating up" % cap_lim_a, S_FUSE, 1)
    cap = doc["supercap"]
    clamp_v = p.cap_clamp_mv / 1000.0
    esr = cap["cells"] * cap["esr_mohm"] / 1000.0
    put("cap_short_circuit_a", clamp_v / esr if esr > 0 else math.inf, "bank at its clamp over "
        "its ESR (cells x esr_mohm): a charged bank is a short-circuit source; discharge it "
        "before work", S_PHYSICS, 0)
    # converters
    put("batt_converter_a", CONVERTER_FACTOR * chg_a, "battery buck output, 1.25 x the charge "
        "limit; input rated for bus_limit_v", S_COMMON, 2)
    put("cap_converter_a", CONVERTER_FACTOR * cap_lim_a, "supercap buck output, 1.25 x its "
        "charge limit (a 0 V bank is a short circuit: the limit is what protects it)", S_COMMON, 2)
    put("usb_converter_a", CONVERTER_FACTOR * usb_a, "USB 5 V output, 1.25 x the devices' "
        "most (%.2f A); input %g V to bus_limit_v" % (usb_a, doc["usb"]["converter"]["in_min_v"]),
        S_COMMON, 2)
    # the strongest drive held
    d = doc["drive"]
    if d["kind"] in envelope.HUMAN_DRIVES:
        hold_w, rpm = envelope.scenario_hold(sc)
        put("drive_hold_w", hold_w, "drive-side power the full dump absorbs with the bus at its "
            "limit (at %.0f rpm at the crank)" % rpm, S_DERIVED, 1)
        put("rider_power_max_w", MARGIN * hold_w, "the largest best power (effort x fresh "
            "power) a person may give: %g x drive_hold_w" % MARGIN, S_DERIVED, 1)
    elif d["kind"] == "wind":
        v_hold = envelope.wind_hold(trip_v, doc)
        put("wind_hold_ms", v_hold, "steady wind the full dump holds at the bus limit",
            S_DERIVED, 2)
        put("wind_mean_max_ms", envelope.wind_mean_max(
            v_hold, d["turbulence_pct"], envelope.gust_peak_ms(d["gusts"])),
            "strongest mean wind: its 3-sigma turbulence peak plus gusts within %g x "
            "wind_hold_ms" % MARGIN, S_DERIVED, 2)
    elif d["kind"] == "hydro":
        q = flow_hold(trip_v, doc)
        put("flow_hold_lps", q, "water flow the full dump holds at the bus limit (the plant's "
            "turbine curve at that speed)", "derived (host_sim/sizing.py flow_hold, on "
            "envelope.dump_hold)", 2)
        put("flow_max_lps", MARGIN * q, "the largest flow the site should see: %g x "
            "flow_hold_lps" % MARGIN, "derived (host_sim/sizing.py)", 2)
    # the bank
    c_bank = cap["cell_f"] / cap["cells"]
    e_j = 0.5 * c_bank * clamp_v ** 2
    put("bank_f", c_bank, "%d cells of %g F in series: C / n" % (cap["cells"], cap["cell_f"]),
        S_PHYSICS)
    put("bank_v", clamp_v, "the controller's clamp: cells x rating x (1 - derate)", "profile", 2)
    put("bank_energy_j", e_j, "E = C V^2 / 2 at bank_v", S_PHYSICS, 1)
    put("bank_energy_wh", e_j / 3600.0, "bank_energy_j / 3600", S_PHYSICS, 3)
    put("bank_usable_j", 0.75 * e_j, "down to half voltage: E (1 - 1/4)", S_PHYSICS, 1)
    put("bank_charge_s", c_bank * clamp_v / cap_lim_a, "0 V to bank_v at the converter's "
        "limit %.2f A: t = C V / I (the source strong enough)" % cap_lim_a, S_PHYSICS, 1)
    return f, why


UNITS = (("_ohm", "ohm"), ("_w", "W"), ("_v", "V"), ("_a", "A"), ("_j", "J"), ("_wh", "Wh"),
         ("_ms", "m/s"), ("_lps", "l/s"), ("_f", "F"), ("_s", "s"))


def _unit(key):
    for suf, u in UNITS:
        if key.endswith(suf):
            return u
    return ""


def print_table(f, why, out=None):
    out = out or sys.stdout
    w = max(len(k) for k in f)
    print("%-*s %10s %-4s  %s" % (w, "figure", "value", "unit", "assumption [source]"), file=out)
    for k, v in f.items():
        val = "no bound" if v is None else ("%.4g" % v if isinstance(v, float) else str(v))
        print("%-*s %10s %-4s  %s [%s]" % (w, k, val, _unit(k), why[k]["assumption"],
                                           why[k]["source"]), file=out)


def cmd_size(args):
    from host_sim.scenario import ScenarioError, load_scenario
    caution()
    try:
        sc = load_scenario(args.site)
    except ScenarioError as e:
        raise UserError(str(e))
    if sc.doc["drive"]["kind"] == "scripted":
        raise UserError("%s: drive.kind = scripted: allowed pedal, crank, wind, hydro (a "
                        "scripted drive has no power to size for)" % args.site)
    f, why = size(sc)
    if args.json:
        print(json.dumps({"site": str(sc.source), "figures": f, "basis": why}, indent=2))
    else:
        print("site: %s (%s drive)" % (sc.source, sc.doc["drive"]["kind"]))
        print_table(f, why)
    return 0


def register(sub):
    sp = sub.add_parser(
        "size", help="what to buy and set for a site: dump, clamp, fuses, converters, bank",
        description="Size the parts of a site from what the simulator derives (the dump hold, "
                    "wind and flow bounds of host_sim/envelope.py), each figure with the "
                    "assumption it rests on and its source (derived, physics, common practice, "
                    "or a named rule). JSON keys carry their units (dump_ohm, dump_w, "
                    "clamp_standoff_v, fuse_batt_a, ...): docs/design.md.")
    sp.add_argument("site", metavar="SITE", help="scenario file or built-in name")
    sp.add_argument("--json", action="store_true", help="print the figures and their basis as "
                    "JSON on stdout")
    sp.set_defaults(func=cmd_size)
    return sp
