# Random scenarios for `spinrail fuzz`, and the deterministic shrinker for its failures.
#
# Example i of a campaign is drawn from numpy's Generator seeded with (seed, i) alone, over a
# base scenario (a built-in or the user's file): drive, ambient -10 to 50 C, battery SOC and
# capacity (aging), component tolerances, supercap state, USB network tolerances and assembly
# faults, and timed faults a correct design must survive. Which worker draws it, or how many
# there are, cannot change it. Everything drawn is scenario JSON, so an example is also a file
# that `spinrail simulate` replays.
#
# The shrinker takes a failing example and, while the same limit still fails, shortens the
# duration, drops events and moves perturbed fields back to the base, in a fixed order.
import copy
import json
import math
import re

import numpy as np

from host_sim import envelope
from host_sim.scenario import DRIVE_FIELDS, SCHEMA, load_scenario
from host_sim.plant.sensors import ADC_REF_V, CHANNELS, R_BOTTOM

# Timed faults and environment moves the generator chooses among (the drive stop counts as a
# fault: the rider walks away). Weights are ours: faults on the storage side come up most.
EVENT_CHOICES = ("battery_disconnected", "temp_sensor_open", "sensor_stuck", "sensor_open",
                 "wrong_divider_resistor", "bus_surge", "drive_stop", "ambient")
# The claim the campaign tests is the closed-loop envelope (README, known limits), so three
# things stay out: the bus voltage sensor stuck, open at 0 or wired to read low (no controller
# on one bus sensor can keep an unloaded source under the limit: that needs the hardware's
# clamp or an independent comparator), wind beyond what the dump load holds, and surges whose
# open-circuit voltage exceeds the bus limit. Go beyond them deliberately with `sweep`.
# Likewise the battery current sensor frozen inside the charge limit: the controller would go
# on raising a current it cannot see (3.2 A against 2.4 seen). Frozen above the limit it is
# caught (the loop cuts). And the battery voltage frozen inside its ceiling (13.5 V let a
# block reach 15.12 V against 15.1); frozen at 0 or above the ceiling it is caught.
STUCK_VALUES = {  # plausible readings a stuck input freezes at (inside each sensor's range)
    "batt_v": (0.0, 15.0), "cap_v": (0.0, 5.0, 12.0),  # battery: not inside its ceiling
    "batt_a": (None,), "usb_vbus": (0.0, 5.0), "src_a": (0.0, 2.0), "cap_a": (0.0, 1.0),
}
OPEN_SENSORS = ("batt_v", "bus_v", "cap_v", "batt_a", "usb_vbus", "usb_dp", "usb_dm")  # bus: full only
WIND_MEAN_MS = (2.0, 9.0)  # mean wind range, m/s, capped by what the dump holds (envelope.py)
GUST_PEAK_MS = (1.0, 4.0)  # added to the mean, as the built-in's gusts are
NET_FAULTS = ("open", "short_to_ground", "lines_shorted", "decade_up", "decade_down", "swapped")
NET_RESISTORS = ("dp_top", "dp_bottom", "dm_top", "dm_bottom", "between")
TOL_CHANNELS = ("bus_v", "src_a", "batt_v", "batt_a", "cap_v", "cap_a", "usb_vbus")
SURGE_MAX_S = 1.0  # longest bus surge drawn, s
# Stiffest bus surge drawn, ohm. A surge arrives within a control period and the converters
# pass it on until the guard answers at the next tick: a 27.5 V, 1 ohm surge put an aged
# 6.6 Ah block at 44 C 0.065 V over its ceiling-plus-margin, with 50 ms and 20 ms periods
# alike (fuzz seed 43, example 1600); behind 3 ohm a 6.0 Ah block aged to 2.2 x its
# resistance at 43 C went 0.005 V over (seed 67, example 1073), 0.019 V under behind 5 ohm
# (README, known limits). Stiffer surges are a hardware question: an input filter, a lower
# clamp, or a converter with a cycle-by-cycle current limit.
SURGE_OHM_MIN = 5.0
# Battery blocks: 3, 6 and 12 cells (6, 12 and 24 V), each with a profile made to match it
# (block_profile): cells, capacity, chemistry and the chemistry's documented setpoints and
# limits; a 24 V block on a 24 V system (bus levels, sensor ranges, supercap string and the
# machine's EMF constant doubled), as one would build it.
BLOCK_CELLS = (3, 6, 6, 12)  # the base's 12 V block drawn twice as often
CHEMS = ("flooded", "agm", "gel")
SOC0_FULL = 0.15  # share of examples that start on a full battery (SOC 1.0)
SURPLUS = 0.25  # share of sites whose source gives more than the stores can take
GAIN_EDGE = 0.3  # share of sensor channels whose gain error sits at an edge of its tolerance
GAIN_TOL_PCT = 0.5  # the board's stated gain tolerance (the schema default)
USB_R_OUT_OHM = (0.0, 0.15)  # USB converter output resistance (a 0.1 ohm one crossed VBUS)
RAMP_HI_S = 2.0  # torque rise times from one control period up to this (log-uniform)
EFFORT_LO, EFFORT_HI = 0.3, 1.5  # a person's effort against the base's rider (a tired one, a
# strong one), capped by what the dump load holds (host_sim/envelope.py)
SPRINT_HI = 1.5  # fresh power up to 1.5 x the base's, under the same cap


# ---- bases ------------------------------------------------------------------------------------

def load_base(name_or_path):
    """A base scenario for the generator: {"name", "raw", "resolved", "facts"}, JSON-able so it
    travels to any worker. A profile given as a path is inlined, so the base (and every file
    written from it) no longer depends on the folder it came from. Raises ScenarioError."""
    sc = load_scenario(name_or_path)
    src = str(sc.source)
    with open(src) as fh:
        raw = json.load(fh)
    prof = raw.get("profile", "default")
    if isinstance(prof, str) and ("/" in prof or prof.endswith(".json")):
        raw["profile"] = sc.profile_doc
    return {"name": sc.name, "src": src, "raw": raw, "resolved": _jsonable(sc.doc),
            "profile_doc": _jsonable(sc.profile_doc), "facts": facts(sc)}


def _jsonable(x):
    return json.loads(json.dumps(x))


def facts(sc):
    """What the generator needs to know about a base beyond its document."""
    p = sc.profile
    d = sc.doc
    dividers = {}
    for attr, _bip, div in CHANNELS.values():
        if div:
            fs_v = getattr(p, attr) / 1000.0
            dividers[div + "_top"] = R_BOTTOM * (fs_v / ADC_REF_V - 1.0)
            dividers[div + "_bottom"] = R_BOTTOM
    b = d["bus"]
    trip_v = p.ovp_trip_mv / 1000.0
    lim_v = trip_v + b["clamp_margin_v"]
    return {
        "duration_s": d["duration_s"],
        "drive_kind": d["drive"]["kind"],
        "cap_rating_v": p.cap_cell_rating_mv / 1000.0,
        # highest starting cell voltage that leaves the bank below its clamp (a bank that
        # starts above the clamp would fail the check before the controller could act)
        "cap_v0_max": min(p.cap_cell_rating_mv, p.cap_clamp_mv / d["supercap"]["cells"]) / 1000.0,
        "dividers": dividers,
        "trip_v": trip_v,
        # a battery current reading frozen this high is over the charge limit, inside the range
        "batt_a_stuck": min(1.5 * p.chg_limit_ma, 0.9 * p.batt_fs_ma) / 1000.0,
        "chg_limit_a": p.chg_limit_ma / 1000.0,
        "bus_limit_v": lim_v,
        "recover_v": p.ovp_recover_mv / 1000.0,
        "period_s": p.period_ms / 1000.0,
        "cells": p.cells,
    }


# ---- schema lookups (shared with `spinrail sweep`) -------------------------------------------

def parse_path(text):
    """'usb.devices[0].max_a' or 'usb.devices.0.max_a' -> ['usb', 'devices', 0, 'max_a']."""
    parts = []
    for seg in text.split("."):
        m = re.fullmatch(r"([A-Za-z_][A-Za-z0-9_]*)((?:\[\d+\])*)", seg)
        if seg.isdigit():
            parts.append(int(seg))
        elif m:
            parts.append(m.group(1))
            parts.extend(int(x) for x in re.findall(r"\[(\d+)\]", m.group(2)))
        else:
            raise KeyError("'%s' is not a field name" % seg)
    return parts


def path_text(parts):
    out = ""
    for p in parts:
        out += "[%d]" % p if isinstance(p, int) else ("." + p if out else p)
    return out


def schema_field(parts, drive_kind):
    """The schema entry (scenario.F) at a path; KeyError naming what exists there."""
    spec = SCHEMA
    f = None
    i = 0
    while i < len(parts):
        k = parts[i]
        here = path_text(parts[:i]) or "(top)"
        if isinstance(k, int):
            if f is None or f.kind != "L":
                raise KeyError("%s is not a list" % here)
            spec = f.sub
            f = None
            i += 1
            continue
        if spec is None:
            raise KeyError("%s has no fields (it is a single value)" % here)
        if f is not None and f.kind == "L":
            raise KeyError("%s is a list: give an index, e.g. %s[0].%s" % (here, here, k))
        if k not in spec:
            raise KeyError("%s has no field '%s'%s; fields there: %s"
                           % (here, k, " (drive kind %s)" % drive_kind if here == "drive" else "",
                              ", ".join(sorted(spec))))
        f = spec[k]
        if f.kind == "DRIVE":
            spec = dict(DRIVE_FIELDS[drive_kind])
            f = None
            if i + 1 < len(parts) and parts[i + 1] == "kind":
                raise KeyError("drive.kind cannot be varied (the other drive fields depend on it)")
        elif f.kind == "O":
            spec = f.sub
        elif f.kind == "L":
            spec = None
        else:
            spec = None
        i += 1
    if f is None:
        raise KeyError("%s is a section, not a field" % (path_text(parts) or "(top)"))
    return f


def get_path(doc, parts, default=None):
    x = doc
    for p in parts:
        if isinstance(p, int):
            if not isinstance(x, list) or p >= len(x):
                return default
            x = x[p]
        else:
            if not isinstance(x, dict) or p not in x:
                return default
            x = x[p]
    return x


def set_path(doc, parts, value):
    """Set a value in a raw document, creating sections as needed. A list item must exist."""
    x = doc
    for j, p in enumerate(parts[:-1]):
        if isinstance(p, int):
            if not isinstance(x, list) or p >= len(x):
                raise KeyError("%s has no item %d" % (path_text(parts[:j]), p))
            x = x[p]
        else:
            nxt = parts[j + 1]
            if p not in x or x[p] is None:
                if isinstance(nxt, int):
                    raise KeyError("%s has no item %d" % (path_text(parts[:j + 1]), nxt))
                x[p] = {}
            x = x[p]
    last = parts[-1]
    if isinstance(last, int):
        if not isinstance(x, list) or last >= len(x):
            raise KeyError("%s has no item %d" % (path_text(parts[:-1]), last))
    x[last] = value


def clip(value, f):
    """Keep a drawn number inside the schema's range for its field."""
    return min(max(value, f.lo), f.hi)


# ---- generation -------------------------------------------------------------------------------

def _r(x, nd=3):
    """Round for a readable file (4 significant digits at least)."""
    if x == 0 or not math.isfinite(x):
        return float(x)
    mag = int(math.floor(math.log10(abs(x))))
    return float(round(x, max(nd, 3 - mag)))


class _Gen:
    def __init__(self, base, rng, max_duration_s):
        self.base = base
        self.rng = rng
        self.doc = copy.deepcopy(base["raw"])
        self.res = base["resolved"]
        self.facts = base["facts"]  # this example's (block_step replaces them)
        self.kind = base["facts"]["drive_kind"]
        self.max_duration_s = max_duration_s

    def u(self, lo, hi):
        return float(self.rng.uniform(lo, hi))

    def chance(self, p):
        return bool(self.rng.random() < p)

    def pick(self, seq):
        return seq[int(self.rng.integers(len(seq)))]

    def merged(self, sections):
        """The resolved base with this example's draws so far, for the named flat sections."""
        return {k: dict(self.res[k], **self.doc.get(k, {})) for k in sections}

    def field(self, path):
        return schema_field(parse_path(path), self.kind)

    def put(self, path, value, nd=3):
        """Set a number, clipped to the schema's range and rounded."""
        parts = parse_path(path)
        f = schema_field(parts, self.kind)
        set_path(self.doc, parts, _r(clip(value, f), nd))

    def scale(self, path, lo, hi):
        """Multiply the base's resolved value by a factor drawn in [lo, hi]."""
        x = get_path(self.res, parse_path(path))
        k = self.u(lo, hi)
        if isinstance(x, (int, float)) and not isinstance(x, bool):
            self.put(path, x * k)


def generate(bases, seed, i, max_duration_s=300.0):
    """Example i of a campaign: (scenario document, index of its base). Only (seed, i) and the
    bases decide it."""
    rng = np.random.default_rng([int(seed), int(i)])
    bi = int(rng.integers(len(bases)))
    base = bases[bi]
    g = _Gen(base, rng, max_duration_s)
    doc = g.doc
    hi = min(base["facts"]["duration_s"], max_duration_s)
    dur = _r(g.u(min(20.0, hi), hi), 1)
    doc["duration_s"] = dur
    doc["seed"] = int(rng.integers(0, 2**32))  # the plant's own draws: tolerances, noise, wind
    doc["name"] = "fuzz_%s_s%d_i%d" % (base["name"], seed, i)
    doc["description"] = ("spinrail fuzz example %d of seed %d over %s (%s)"
                          % (i, seed, base["name"], doc.get("description", "")))[:2000]
    g.surplus = g.chance(SURPLUS)
    _block(g)
    _environment(g)
    _components(g)
    _drive(g, dur)
    _usb(g)
    _events(g, dur)
    return doc, bi


# docs/profile.md: charge limit and tail current per chemistry, in C
_C_RATE = {"flooded": (0.125, 0.02), "agm": (0.2, 0.02), "gel": (0.05, 0.01)}
_CHEM_FIELDS = ("absorption_v_per_cell", "float_v_per_cell", "equalize_v_per_cell",
                "temp_coeff_mv_per_c_per_cell", "charge_limit_a", "tail_current_a")
# (section, field, default) of the system voltages a 24 V system doubles (docs/profile.md)
_SYSTEM_V = (("bus", "ovp_trip_v", 24), ("bus", "ovp_recover_v", 21), ("bus", "floor_v", 9.0),
             ("sensors", "bus_full_scale_v", 40), ("sensors", "batt_full_scale_v", 20),
             ("sensors", "cap_full_scale_v", 20), ("supercap", "cells", 6))


def block_profile(profile_doc, cells, chemistry, capacity_ah):
    """(profile document, system voltage factor) for a block of `cells` cells of this chemistry
    and capacity, made from a 12 V system's profile document. The profile's own setpoints stay
    when the chemistry is its own (else the chemistry's documented defaults apply); the charge
    limit and tail current keep the profile's C rates (the chemistry's defaults for another
    chemistry). A 12-cell block gets a 24 V system: the bus levels, the sensor ranges and the
    supercap string doubled (factor 2; the caller doubles the machine's EMF constant)."""
    prof = copy.deepcopy(profile_doc)
    b = prof.setdefault("battery", {})
    own = b.get("chemistry", "agm")
    lim_c, tail_c = _C_RATE[chemistry]
    if own == chemistry:
        cap0 = b.get("capacity_ah", 7.0)
        lim_c = b.get("charge_limit_a", _C_RATE[own][0] * cap0) / cap0
        tail_c = b.get("tail_current_a", _C_RATE[own][1] * cap0) / cap0
    else:
        for k in _CHEM_FIELDS:
            b.pop(k, None)
    b.update(chemistry=chemistry, cells=cells, capacity_ah=_r(capacity_ah))
    b["charge_limit_a"] = round(max(0.05, min(lim_c, 0.4) * b["capacity_ah"]), 3)
    b["tail_current_a"] = round(max(0.001, min(tail_c * b["capacity_ah"],
                                               0.5 * b["charge_limit_a"])), 4)
    k = 2 if cells > 6 else 1
    if k != 1:
        for sec, key, dflt in _SYSTEM_V:
            prof.setdefault(sec, {})[key] = prof.get(sec, {}).get(key, dflt) * k
        ctl = prof.get("control", {})
        if ctl.get("overspeed_bus_v") is not None:
            ctl["overspeed_bus_v"] = ctl["overspeed_bus_v"] * k
    return prof, k


def _block(g):
    """The battery block and the profile that matches it (block_profile); the example's facts
    and resolved base follow it."""
    from host_sim.scenario import load_doc
    cells = g.pick(BLOCK_CELLS)
    own = g.base["profile_doc"].get("battery", {}).get("chemistry", "agm")
    chem = own if g.chance(0.5) else g.pick(CHEMS)
    # a smaller or an aged block (its label, in the profile, says so)
    cap_ah = get_path(g.res, ["battery", "capacity_ah"]) * g.u(0.5, 1.0)
    prof, k = block_profile(g.base["profile_doc"], cells, chem, cap_ah)
    g.doc["profile"] = prof
    bat = g.doc.setdefault("battery", {})
    bat.update(cells=cells, chemistry=chem, capacity_ah=prof["battery"]["capacity_ah"])
    if k != 1:
        g.doc.setdefault("machine", {})["ke_v_per_krpm"] = _r(
            get_path(g.res, ["machine", "ke_v_per_krpm"]) * k)
        if "cells" in g.doc.get("supercap", {}):
            g.doc["supercap"]["cells"] = prof["supercap"]["cells"]
    sc = load_doc(g.doc, g.base["src"])
    g.res = _jsonable(sc.doc)
    g.facts = dict(g.base["facts"], **facts(sc))


def _environment(g):
    amb = g.u(-10.0, 50.0)
    g.put("battery.ambient_c", amb, 1)
    g.put("battery.temp0_c", amb + g.u(-5.0, 5.0), 1)
    if g.chance(SOC0_FULL):
        g.put("battery.soc0", 1.0)
    elif g.surplus:  # nearly full stores: the source gives more than they take
        g.put("battery.soc0", g.u(0.9, 1.0))
    else:
        g.put("battery.soc0", g.u(0.05, 1.0))
    g.scale("battery.r0_mohm_ah", 1.0, 2.0)  # aging: the resistance rises
    v0 = g.u(0.9, 0.98) if g.surplus else g.u(0.0, 0.98)
    g.put("supercap.v0_per_cell", v0 * g.facts["cap_v0_max"])
    g.put("rectifier.temp_c", amb + g.u(0.0, 40.0), 1)


def _components(g):
    g.scale("machine.ke_v_per_krpm", 0.9, 1.1)
    g.scale("machine.ra_ohm", 0.8, 1.3)
    g.scale("bus.capacitance_uf", 0.6, 1.2)  # electrolytics lose capacitance as they age
    for conv in ("batt", "cap"):
        g.scale("converters.%s.r_out_ohm" % conv, 0.7, 1.5)
        g.scale("converters.%s.efficiency" % conv, 0.95, 1.03)
    g.scale("supercap.cell_f", 0.8, 1.2)
    g.put("supercap.cap_spread_pct", g.u(0.0, 3.0), 2)  # 10 % derate: > 3 std for 6 cells
    g.scale("supercap.esr_mohm", 0.7, 2.0)
    g.put("supercap.leak_spread_pct", g.u(0.0, 60.0), 1)
    # sensor chains: within the board's stated gain tolerance (the schema default, 0.5 %),
    # some at either edge of it
    for ch in TOL_CHANNELS:
        if g.chance(GAIN_EDGE):
            g.put("sensors.%s.gain_tol_pct" % ch, GAIN_TOL_PCT)
            g.put("sensors.%s.gain_err_pct" % ch, GAIN_TOL_PCT * g.pick((-1.0, 1.0)))
        else:
            g.put("sensors.%s.gain_tol_pct" % ch, g.u(0.0, GAIN_TOL_PCT))
        g.put("sensors.%s.noise_lsb" % ch, g.u(0.2, 1.5))
        g.put("sensors.%s.offset_lsb" % ch, g.u(-2.0, 2.0))
    g.put("sensors.batt_temp.offset_c", g.u(-1.0, 1.0))


def _drive(g, dur):
    k = g.kind
    if k in ("pedal", "crank"):
        effort_at = g.u(0.0, 1.0)  # where in its range the effort falls (drawn here, set below)
        if g.surplus:
            effort_at = 1.0  # the strongest rider the dump holds
        g.scale("drive.cadence_rpm", 0.5, 1.4)
        g.scale("drive.torque_max_nm", 0.7, 1.3)
        start = get_path(g.res, ["drive", "power_start_w"]) * g.u(0.6, SPRINT_HI)
        g.put("drive.power_start_w", start, 1)
        start = g.doc["drive"]["power_start_w"]
        # a rider the dump load can hold at the trip (with the storage converters off, the
        # dump alone loads the generator): their best, effort x fresh power, within 90 % of
        # what the full dump absorbs with the bus at its limit on this example's machine
        # (host_sim/envelope.py; the demo rig holds 219 W, and a 240 W sprint took its bus to
        # 28.55 V against 28 V: README, known limits)
        hold_w, _ = envelope.dump_hold(g.facts["trip_v"], g.merged(
            ("bus", "machine", "rectifier", "gear")))
        hi = min(EFFORT_HI, envelope.effort_max(hold_w, start))
        lo = min(EFFORT_LO, hi)
        effort = lo + effort_at * (hi - lo)
        g.put("drive.effort", math.floor(effort * 1000.0) / 1000.0)  # rounded, never over hi
        # how fast the torque builds after a start or a rest: from one control period up
        # (log-uniform), with the person's torque within what a controller acting once per
        # period holds (envelope.rise_hold: one period of bus rise from the soft zone's
        # bottom; a stronger crank is capped, or slowed so its EMF stays under the limit)
        per_s = g.facts["period_s"]
        g.put("drive.start_ramp_s", math.exp(g.u(math.log(per_s), math.log(RAMP_HI_S))))
        _rise_cap(g)
        sus = get_path(g.res, ["drive", "power_sustained_w"]) * g.u(0.6, 1.2)
        g.put("drive.power_sustained_w", min(sus, start), 1)
        if g.chance(0.4):  # a new pattern of rests
            spans = []
            t = g.u(1.0, dur)
            while t < dur - 2.0 and len(spans) < 3:
                end = min(t + g.u(2.0, 40.0), dur)
                spans.append([_r(t, 1), _r(end, 1)])
                t = end + g.u(1.0, dur / 2.0)
            g.doc["drive"]["pauses"] = [s for s in spans if s[1] > s[0]]
        if g.chance(0.3):  # turned the wrong way, once or twice
            ts = sorted({_r(g.u(1.0, max(1.5, dur - 1.0)), 1) for _ in range(1 + g.chance(0.5))})
            g.doc["drive"]["reversals_s"] = ts
    elif k == "wind":
        mean_at = g.u(0.0, 1.0)  # where in its range the mean falls (drawn here, set below)
        g.put("drive.turbulence_pct", g.u(5.0, 40.0), 1)
        g.put("drive.air_density", g.u(0.9, 1.25))
        if g.chance(0.6):
            g.doc["drive"]["gusts"] = [
                {"t_s": _r(g.u(0.0, dur), 1), "duration_s": _r(g.u(2.0, 15.0), 1),
                 "peak_ms": _r(g.u(*GUST_PEAK_MS), 2)} for _ in range(int(g.rng.integers(0, 4)))]
        # a wind the dump load can hold at the trip: its three-sigma turbulence peak plus the
        # gusts within 90 % of the steady wind the full dump holds with the bus at its limit
        # on this example's machine (host_sim/envelope.py: 20.0 m/s on the hut's mast; a
        # mean of 8.85 m/s at 34 % turbulence took the bus to 30.7 V: README, known limits)
        if g.surplus:
            mean_at = 1.0  # the strongest wind the dump holds
        doc = g.merged(("bus", "machine", "rectifier", "gear", "drive"))
        v_hold = envelope.wind_hold(g.facts["trip_v"], doc)
        hi = min(WIND_MEAN_MS[1], envelope.wind_mean_max(
            v_hold, doc["drive"]["turbulence_pct"], envelope.gust_peak_ms(doc["drive"]["gusts"])))
        lo = min(WIND_MEAN_MS[0], hi)
        g.put("drive.wind_mean_ms", lo + mean_at * (hi - lo), 2)
    elif k == "hydro":
        g.scale("drive.flow_lps", 0.5, 1.5)  # (no hydro base: the envelope has no hydro bound)
        g.scale("drive.head_m", 0.8, 1.2)
    elif k == "scripted":
        f = g.u(0.8, 1.2)
        g.doc["drive"]["points"] = [[t, _r(v * f)] for t, v in g.res["drive"]["points"]]


def _rise_cap(g):
    f = g.facts
    d = g.merged(("bus", "machine", "gear", "drive"))
    best_w = d["drive"]["effort"] * d["drive"]["power_start_w"]
    r = envelope.rise_hold(f["trip_v"], f["recover_v"], f["period_s"], d, best_w)
    if r["inside"]:
        return
    lo = g.field("drive.torque_max_nm").lo
    if r["torque_cap_nm"] >= lo:
        g.put("drive.torque_max_nm", math.floor(r["torque_cap_nm"] * 100.0) / 100.0)
    else:  # slow the cadence until the EMF at the torque's end stays under the limit
        scale = 0.98 * (f["trip_v"] + d["bus"]["clamp_margin_v"]) / r["e_max_v"]
        g.put("drive.cadence_rpm", math.floor(d["drive"]["cadence_rpm"] * scale * 10.0) / 10.0)


def _usb(g):
    g.put("usb.network.tol_pct", g.u(0.0, 5.0), 2)
    g.put("usb.converter.setpoint_tol_pct", g.u(0.0, 3.0), 2)
    g.put("usb.converter.r_out_ohm", g.u(*USB_R_OUT_OHM))
    if g.chance(0.15):  # an assembly fault on the data-line network
        kind = g.pick(NET_FAULTS)
        f = {"kind": kind}
        if kind in ("open", "decade_up", "decade_down"):
            f["resistor"] = g.pick(NET_RESISTORS)
        elif kind == "short_to_ground":
            f["line"] = g.pick(("dp", "dm"))
        g.doc.setdefault("usb", {}).setdefault("network", {})["faults"] = [f]


def _events(g, dur):
    if dur < 3.0:
        return
    facts = g.facts
    evs = []

    def later(t, lo, hi):
        return _r(min(dur - 0.5, t + g.u(lo, hi)), 2)

    for _ in range(int(g.rng.integers(0, 4))):
        t = _r(g.u(1.0, dur - 1.0), 2)
        kind = g.pick(EVENT_CHOICES)
        ev = {"t_s": t, "kind": kind}
        undo = None
        if kind == "battery_disconnected":
            undo = {"kind": "battery_reconnected"}
        elif kind == "temp_sensor_open":
            undo = {"kind": "temp_sensor_ok"}
        elif kind == "sensor_stuck":
            ev["sensor"] = g.pick(tuple(STUCK_VALUES))
            ev["value"] = g.pick(STUCK_VALUES[ev["sensor"]])
            if ev["value"] is None:  # battery current: over the block's own charge limit
                ev["value"] = _r(facts["batt_a_stuck"])
            elif ev["sensor"] == "batt_v" and ev["value"] > 1.0 and facts["cells"] != 6:
                ev["value"] = _r(15.5 * facts["cells"] / 6.0)  # above this block's ceiling
            undo = {"kind": "sensor_ok", "sensor": ev["sensor"]}
        elif kind == "sensor_open":
            ev["sensor"] = g.pick(OPEN_SENSORS)
            # the bus voltage and battery current inputs only at full scale: open at 0 they
            # read a plausible value inside the limit they guard (the gap above)
            ev["reads"] = ("full" if ev["sensor"] in ("bus_v", "batt_a")
                           else g.pick(("zero", "full")))
            undo = {"kind": "sensor_ok", "sensor": ev["sensor"]}
        elif kind == "wrong_divider_resistor":
            # the classic wrong part: a decade off (5.1 k fitted where 51 k belongs)
            r = g.pick(tuple(sorted(facts["dividers"])))
            nom = facts["dividers"][r]
            ev["resistor"] = r
            ev["ohm"] = _r(nom * g.pick((10.0, 0.1)))
            if r in ("bus_top", "batt_top"):  # the bus and battery dividers only the way
                ev["ohm"] = _r(nom * 0.1)  # that reads high (a guard acts); one that reads
            elif r in ("bus_bottom", "batt_bottom"):  # low hides the limit it guards
                ev["ohm"] = _r(nom * 10.0)
            undo = {"kind": "wrong_divider_resistor", "resistor": r, "ohm": _r(nom)}
        elif kind == "bus_surge":
            # above the trip (the guard must act), open-circuit voltage at most the bus limit:
            # the controller answers a period later, and until then only the clamp holds the
            # bus (a stiffer surge is a clamp-sizing question: `sweep`); no stiffer than
            # SURGE_OHM_MIN, which the battery's converter passes on within that period
            ohm = g.u(SURGE_OHM_MIN, 10.0)
            trip_v = facts["trip_v"]
            lim_v = facts["bus_limit_v"]
            ev["surge_ohm"] = _r(ohm)
            ev["surge_v"] = _r(trip_v + (lim_v - trip_v) * g.u(0.1, 0.99))
            ev["duration_s"] = _r(g.u(0.02, SURGE_MAX_S))
        elif kind == "drive_stop":
            undo = {"kind": "drive_start"}
        elif kind == "ambient":
            ev["value"] = _r(g.u(-10.0, 50.0), 1)
        evs.append(ev)
        if undo is not None and g.chance(0.5):
            undo["t_s"] = later(t, 0.5, 30.0)
            evs.append(undo)
    base_evs = [e for e in g.doc.get("events", []) if not outside_envelope(e, facts)]
    left_out = len(g.doc.get("events", [])) - len(base_evs)
    if left_out:  # say so: the base itself shows what the envelope leaves out
        g.doc["description"] = ("%s [%d event(s) of the base outside the envelope left out]"
                                % (g.doc.get("description", ""), left_out))[:2000]
    if evs or left_out:
        g.doc["events"] = sorted(base_evs + evs, key=lambda e: e["t_s"])


def outside_envelope(ev, facts):
    """A base's own fault event the campaign leaves out (see STUCK_VALUES above): the bus
    voltage sensor stuck, open at 0, or behind a divider that reads low; the battery current
    sensor frozen inside the charge limit or open at 0; the battery divider reading low; a bus
    surge stiffer than SURGE_OHM_MIN."""
    k = ev.get("kind")
    if k == "sensor_stuck" and ev.get("sensor") == "bus_v":
        return True
    if (k == "sensor_stuck" and ev.get("sensor") == "batt_a"
            and ev.get("value", 0) <= facts["chg_limit_a"]):
        return True
    if k == "sensor_open" and ev.get("sensor") == "batt_a" and ev.get("reads") == "zero":
        return True
    if (k == "sensor_stuck" and ev.get("sensor") == "batt_v"
            and 1.0 < ev.get("value", 0) < 14.5 * facts.get("cells", 6) / 6.0):
        return True  # the battery voltage frozen inside its ceiling hides the ceiling
    if k == "sensor_open" and ev.get("sensor") == "bus_v" and ev.get("reads") == "zero":
        return True
    if k == "bus_surge" and ev.get("energy_j") is None and ev.get("surge_ohm", 2.0) < SURGE_OHM_MIN:
        return True  # stiffer than the converters ride through in a period (SURGE_OHM_MIN)
    if k == "wrong_divider_resistor" and ev.get("resistor") in ("bus_top", "bus_bottom",
                                                                  "batt_top", "batt_bottom"):
        nom = facts["dividers"][ev["resistor"]]
        # (a decade off, not a restore to a near-nominal value)
        return ev["ohm"] > 2 * nom if ev["resistor"].endswith("_top") else ev["ohm"] < nom / 2
    return False


# ---- shrinking --------------------------------------------------------------------------------

class Shrinker:
    """Greedy and deterministic. fails(doc) -> (still_fails, t_first_crossed_s or None) runs the
    simulation; every step that still fails is kept (so the newest failing run always describes
    the current document). At most max_runs runs."""

    def __init__(self, fails, base, max_runs=40):
        self.fails = fails
        self.base = base
        self.max_runs = max_runs
        self.runs = 0
        self.t_cross_s = None  # first crossing in the current document, s

    def _try(self, doc):
        if self.runs >= self.max_runs:
            return False, None
        self.runs += 1
        ok, t = self.fails(doc)
        if ok and t is not None:
            self.t_cross_s = t
        return ok, t

    def shrink(self, doc, t_cross_s):
        """The shrunk copy of doc, whose first crossing (t_cross_s, None for a run that raised)
        is known from the run that found it."""
        doc = copy.deepcopy(doc)
        self.t_cross_s = t_cross_s
        doc = self._duration(doc)
        for _ in range(2):
            changed = False
            doc, c = self._events(doc)
            changed |= c
            doc, c = self._fields(doc)
            changed |= c
            doc = self._duration(doc)
            if not changed or self.runs >= self.max_runs:
                break
        return doc

    def _duration(self, doc):
        t_cross_s = self.t_cross_s
        if t_cross_s is None:
            return doc
        dur = doc["duration_s"]
        for new in (math.ceil(t_cross_s + 1.0), math.ceil((t_cross_s + dur) / 2.0)):
            new = float(new)
            if new >= dur:
                continue
            cand = copy.deepcopy(doc)
            cand["duration_s"] = new
            cand["events"] = [e for e in cand.get("events", []) if e["t_s"] < new]
            if not cand["events"]:
                cand.pop("events", None)
            if self._try(cand)[0]:
                return cand
        return doc

    def _events(self, doc):
        changed = False
        evs = doc.get("events", [])
        if evs:
            cand = copy.deepcopy(doc)
            cand.pop("events")
            if self._try(cand)[0]:
                return cand, True
        j = len(doc.get("events", [])) - 1
        while j >= 0:  # last first: later events are the likelier bystanders
            cand = copy.deepcopy(doc)
            del cand["events"][j]
            if not cand["events"]:
                cand.pop("events")
            if self._try(cand)[0]:
                doc = cand
                changed = True
            j -= 1
        return doc, changed

    def _fields(self, doc):
        """Perturbed fields back to the base: all at once, then a section at a time, then one
        field at a time; a number that cannot go all the way back is bisected toward the base
        (three steps), keeping the closest value that still fails."""
        changed = False
        paths = [p for p in _diff_paths(doc, self.base["raw"])
                 if p[0] not in _KEEP and not _block_path(p)]
        if not paths:
            return doc, False
        groups = [paths]
        sections = {}
        for p in paths:
            sections.setdefault(tuple(p[:2]) if p[0] in ("sensors", "converters", "usb")
                                else (p[0],), []).append(p)
        if len(sections) > 1:
            groups += list(sections.values())
        for grp in groups:
            grp = [p for p in grp if get_path(doc, p, _MISSING) is not _MISSING]
            if not grp:
                continue
            cand = copy.deepcopy(doc)
            for p in grp:
                self._revert(cand, p)
            if cand != doc and self._try(cand)[0]:
                doc = cand
                changed = True
        for parts in _diff_paths(doc, self.base["raw"]):
            if parts[0] in _KEEP or _block_path(parts):
                continue
            cur = get_path(doc, parts)
            cand = copy.deepcopy(doc)
            self._revert(cand, parts)
            if self._try(cand)[0]:
                doc = cand
                changed = True
                continue
            had, base_v = _lookup(self.base["raw"], parts)
            target = base_v if had else get_path(self.base["resolved"], parts)
            if not (_num(cur) and _num(target)):
                continue
            # bisect between the base (passes) and the current value (fails), three steps
            lo = target
            for _ in range(3):
                mid = _r((cur + lo) / 2.0, 4)
                if mid == cur or mid == lo:
                    break
                cand = copy.deepcopy(doc)
                set_path(cand, parts, mid)
                if self._try(cand)[0]:
                    doc = cand
                    cur = mid
                    changed = True
                else:
                    lo = mid
        return doc, changed

    def _revert(self, doc, parts):
        had, base_v = _lookup(self.base["raw"], parts)
        if had:
            set_path(doc, parts, copy.deepcopy(base_v))
        elif _lookup(doc, parts)[0]:
            _delete(doc, parts)


_KEEP = ("events", "name", "description", "duration_s", "seed")  # not "perturbed fields"


def _block_path(parts):
    """The battery block and its profile (block_profile) move together or not at all: a field
    of one put back alone would leave a block on another block's profile."""
    return parts[0] == "profile" or (parts[0] == "battery" and len(parts) > 1
                                     and parts[1] in ("cells", "chemistry", "capacity_ah"))


def changed_fields(doc, base):
    """Dotted paths where a document differs from its base's file (events aside)."""
    return [path_text(p) for p in _diff_paths(doc, base["raw"]) if p[0] not in _KEEP]


def _num(x):
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def _lookup(doc, parts):
    x = doc
    for p in parts:
        if isinstance(x, dict) and p in x:
            x = x[p]
        else:
            return False, None
    return True, x


def _delete(doc, parts):
    """Remove a key from a raw document; sections left empty go too."""
    x = doc
    chain = []
    for p in parts[:-1]:
        chain.append((x, p))
        x = x[p]
    del x[parts[-1]]
    for parent, p in reversed(chain):
        if parent[p] == {}:
            del parent[p]
        else:
            break


def _diff_paths(doc, base, prefix=()):
    """Dotted paths (as lists) where doc differs from base: dicts descend, lists and values
    compare whole. In document order, so the shrinker's order is fixed."""
    out = []
    for k, v in doc.items():
        b = base.get(k, _MISSING) if isinstance(base, dict) else _MISSING
        if isinstance(v, dict) and isinstance(b, dict):
            out.extend(_diff_paths(v, b, prefix + (k,)))
        elif isinstance(v, dict) and b is _MISSING:
            out.extend(_diff_paths(v, {}, prefix + (k,)))
        elif b is _MISSING or v != b:
            out.append(list(prefix + (k,)))
    return out


_MISSING = object()
