# Scenario files: what the plant simulator runs. JSON in SI-ish units (V, A, ohm, s, rpm, C),
# every section optional except `drive`; unknown fields are errors so a typo never passes
# silently. Validation fills in every default and returns a Scenario whose `doc` is the whole
# resolved document (JSON-able), so a run can be reproduced from its summary alone.
# Every field, unit, default and allowed range: docs/scenario.md (kept in step with SCHEMA).
import copy
import json
import math
import numbers
import os
from pathlib import Path

from controller import profile as _profile
from controller.compat import ConfigError
from controller.profile_fields import CHEMISTRIES, SCHEMES
from host_sim.common import name_derived, read_profile
from host_sim.fileio import JsonError, load_json, short

# the parts a scenario may declare different from its profile on purpose (accept_mismatch);
# host_sim/service.py judges the others (profile_mismatch)
MISMATCH_NAMES = ("chemistry", "cells", "capacity_ah", "supercap_cells")

HERE = Path(__file__).resolve().parent
SCEN_DIR = HERE / "scenarios"
PROF_DIR = HERE / "profiles"


class ScenarioError(ValueError):
    """A scenario file is wrong: "<file>: <field.path> = <value>: allowed <range> [(why)]"."""


# ---- schema ---------------------------------------------------------------------------------
# Field kinds: N number, I whole number, B bool, S string, C choice, O object, L list of objects,
# PTS list of [t_s, value] points, SPANS list of [start_s, end_s], TIMES list of times,
# CL list of distinct choices.
# None as a default means "derived" (filled in after validation, documented as such).


class F:
    def __init__(self, kind, default=None, lo=None, hi=None, unit="", why="", choices=None,
                 sub=None, doc="", nullable=False, max_len=64):
        self.kind = kind
        self.default = default
        self.lo = lo
        self.hi = hi
        self.unit = unit
        self.why = why
        self.choices = choices
        self.sub = sub
        self.doc = doc
        self.nullable = nullable
        self.max_len = max_len


def N(default, lo, hi, unit, doc, why="", nullable=False):
    return F("N", default, lo, hi, unit, why, doc=doc, nullable=nullable)


def I(default, lo, hi, unit, doc, why=""):
    return F("I", default, lo, hi, unit, why, doc=doc)


def B(default, doc):
    return F("B", default, doc=doc)


def S(default, doc):
    return F("S", default, doc=doc)


def C(default, choices, doc):
    return F("C", default, choices=choices, doc=doc)


def O(sub, doc=""):
    return F("O", None, sub=sub, doc=doc)


def L(sub, doc, max_len=64):
    return F("L", [], sub=sub, doc=doc, max_len=max_len)


def CL(choices, doc):
    return F("CL", [], choices=choices, doc=doc)


def PTS(lo, hi, unit, doc):
    return F("PTS", [], lo, hi, unit, doc=doc)


def SPANS(doc):
    return F("SPANS", [], doc=doc)


def TIMES(doc):
    return F("TIMES", [], doc=doc)


T_MAX = 7 * 86400.0
DRIVE_KINDS = ("pedal", "crank", "wind", "hydro", "scripted")

_HUMAN = {
    "cadence_rpm": N(70, 10, 200, "rpm", "cadence the person aims at (freely chosen pedal cadence "
                     "60-90 rpm, from memory)"),
    "torque_max_nm": N(35, 0.5, 300, "N m", "largest torque the person puts on the crank"),
    "power_start_w": N(150, 1, 2000, "W", "sustainable power when fresh"),
    "power_sustained_w": N(75, 1, 1000, "W", "sustainable power after long effort (Malewicki 1983: "
                           "about 75 W for hours on pedals; arm cranking 30-60 W, from memory)"),
    "fatigue_tau_s": N(300, 1, 86400, "s", "working time over which fresh power falls to sustained"),
    "recovery_tau_s": N(180, 1, 86400, "s", "rest time constant of recovery during pauses"),
    "effort": N(1.0, 0, 1.5, "1", "fraction of the sustainable power the person chooses to give"),
    "inertia_kg_m2": N(2.5, 1e-4, 1000, "kg m^2", "inertia on the drive shaft: crank, wheel, "
                       "flywheel, limbs"),
    "start_s": N(0, 0, T_MAX, "s", "the person starts turning at this time"),
    "start_ramp_s": N(1.0, 0.005, 60, "s", "torque rise time: after each start or rest the "
                      "torque limit ramps up over this long (down to one 5 ms control period)"),
    "stop_s": N(None, 0, T_MAX, "s", "the person stops for good at this time (null: never)",
                nullable=True),
    "pauses": SPANS("[start_s, end_s] spans with no torque (rest); fatigue recovers"),
    "reversals_s": TIMES("times at which the person turns the other way (the rotor is braked "
                         "and driven backwards)"),
}
_CRANK_DEFAULTS = {"cadence_rpm": 60, "torque_max_nm": 15, "power_start_w": 70,
                   "power_sustained_w": 40, "inertia_kg_m2": 0.05, "fatigue_tau_s": 180}

_GUST = {
    "t_s": N(None, 0, T_MAX, "s", "gust start"),
    "duration_s": N(4, 0.1, 600, "s", "gust length (1 - cos shape)"),
    "peak_ms": N(None, 0, 80, "m/s", "added wind speed at the gust peak"),
}
_WIND = {
    "rotor_radius_m": N(0.8, 0.05, 10, "m", "rotor radius (swept area pi r^2)"),
    "cp_max": N(0.40, 0.05, 0.593, "1", "peak power coefficient (typical 0.35-0.45)",
                "the Betz limit 16/27 = 0.593 (Betz 1920) bounds any rotor"),
    "tsr_opt": N(6.0, 1, 15, "1", "tip-speed ratio at cp_max"),
    "runaway_ratio": N(1.6, 1.2, 3.0, "1", "no-load (runaway) tip-speed ratio over tsr_opt"),
    "air_density": N(1.2, 0.5, 1.5, "kg/m^3", "air density (about 1.0 at 2000 m)"),
    "wind_mean_ms": N(6.0, 0, 40, "m/s", "mean wind speed"),
    "turbulence_pct": N(15, 0, 60, "%", "turbulence intensity (std / mean)"),
    "turbulence_tau_s": N(8, 0.5, 600, "s", "correlation time of the turbulence"),
    "series_dt_s": N(0.25, 0.01, 10, "s", "sample spacing of the wind series"),
    "gusts": L(_GUST, "gust events added to the series", 200),
    "inertia_kg_m2": N(0.5, 1e-4, 1000, "kg m^2", "rotor inertia"),
    "start_s": N(0, 0, T_MAX, "s", "wind starts at this time"),
}
_HYDRO = {
    "head_m": N(5, 0.1, 500, "m", "net head"),
    "flow_lps": N(5, 0.01, 10000, "l/s", "flow"),
    "efficiency": N(0.6, 0.05, 0.95, "1", "turbine efficiency at its optimal speed"),
    "runaway_rpm": N(800, 10, 20000, "rpm", "no-load turbine speed (optimal speed is half)"),
    "flow_points": PTS(0, 10000, "l/s", "[t_s, flow_lps] schedule (overrides flow_lps)"),
    "inertia_kg_m2": N(0.05, 1e-4, 1000, "kg m^2", "runner inertia"),
    "start_s": N(0, 0, T_MAX, "s", "water starts at this time"),
}
_SCRIPTED = {
    "mode": C("speed", ("speed", "torque"), "points give drive-shaft speed (rpm) or torque (N m)"),
    "points": PTS(-1e5, 1e5, "rpm or N m", "[t_s, value] points, linear in between, held after"),
    "inertia_kg_m2": N(0.01, 1e-5, 1000, "kg m^2", "drive-side inertia"),
}
DRIVE_FIELDS = {"pedal": _HUMAN, "crank": _HUMAN, "wind": _WIND, "hydro": _HYDRO,
                "scripted": _SCRIPTED}

_BUCK = {
    "r_out_ohm": N(0.15, 0.01, 5, "ohm", "output resistance of the averaged buck "
                   "(the controller's loop assumes about 0.1-0.2 ohm)"),
    "efficiency": N(0.92, 0.5, 1.0, "1", "input power = output power / efficiency"),
    "max_duty": N(0.95, 0.5, 0.97, "1", "largest duty the switch allows",
                  "u <= max_duty x bus keeps a store from feeding its own converter"),
}
_USB_CONV = {
    "setpoint_v": N(5.0, 4.5, 5.5, "V", "nominal VBUS setpoint"),
    "setpoint_tol_pct": N(1.5, 0, 10, "%", "setpoint tolerance; the actual setpoint is drawn per "
                          "seed within +/- this"),
    "r_out_ohm": N(0.03, 0, 1, "ohm", "output resistance (load regulation)"),
    "dropout_v": N(1.0, 0.05, 5, "V", "VBUS stays at least this far below the bus"),
    "in_min_v": N(6.0, 3, 30, "V", "converter runs only with the bus at or above this"),
    "efficiency": N(0.85, 0.3, 1.0, "1", "input power = output power / efficiency"),
    "quiescent_a": N(0.01, 0, 1, "A", "input current while enabled"),
}
_NET_FAULT = {
    "kind": C(None, ("open", "short_to_ground", "lines_shorted", "value", "decade_up",
                     "decade_down", "swapped"), "what is wrong"),
    "resistor": C("dp_top", ("dp_top", "dp_bottom", "dm_top", "dm_bottom", "between"),
                  "resistor for open/value/decade_*"),
    "line": C("dp", ("dp", "dm"), "line for short_to_ground"),
    "ohm": N(None, 0.01, 1e9, "ohm", "resistor value for kind value", nullable=True),
}
_NETWORK = {
    "scheme": C(None, SCHEMES, "signalling the data-line network is built for "
                "(default: the profile's usb.scheme)"),
    "tol_pct": N(1.0, 0, 20, "%", "resistor tolerance; values drawn per seed within +/- this"),
    "dcp_short_ohm": N(None, 0, 200, "ohm", "D+ to D- resistance of the dcp scheme (null: drawn "
                       "0-200 ohm per seed)", "BC1.2 ch. 5 resistances table: R_DCP_DAT 0-200 ohm",
                       nullable=True),
    "leak_ohm": N(1e7, 1e3, 1e10, "ohm", "each line to ground (ADC input, ESD parts)"),
    "probe_v": N(0.6, 0, 3.3, "V", "D+ probe source voltage",
                 "BC1.2 ch. 5 DC table: V_DP_SRC 0.5-0.7 V"),
    "probe_ohm": N(10000, 100, 1e6, "ohm", "D+ probe source resistance"),
    "faults": L(_NET_FAULT, "assembly faults present from the start", 8),
}
_DEVICE = {
    "name": S("", "label"),
    "arrive_s": N(0, 0, T_MAX, "s", "plugged in at"),
    "leave_s": N(None, 0, T_MAX, "s", "unplugged at (null: never)", nullable=True),
    "battery_wh": N(12, 0.1, 500, "Wh", "device battery energy"),
    "soc0": N(0.3, 0, 1, "1", "device battery state of charge when plugged in"),
    "max_a": N(2.0, 0.05, 5, "A", "most the device ever draws"),
    "taper_soc": N(0.8, 0.1, 1.0, "1", "above this its own charger tapers the current"),
    "min_vbus_v": N(4.4, 3.0, 5.0, "V", "detaches below this VBUS"),
    "reattach_s": N(3.0, 0.1, 600, "s", "tries again this long after a drop-out"),
}
_LOAD = {
    "name": S("", "label"),
    "kind": C("resistive", ("resistive", "led", "filament"), "load type"),
    "ohm": N(12, 0.1, 1e6, "ohm", "resistive: resistance; led: series resistor"),
    "led_v": N(9.0, 1, 40, "V", "led: forward voltage of the string"),
    "rated_w": N(10, 0.1, 1000, "W", "filament: power at rated voltage"),
    "rated_v": N(12, 1, 48, "V", "filament: rated voltage"),
    "cold_ratio": N(0.12, 0.02, 1, "1", "filament: cold resistance over hot"),
    "tau_s": N(0.08, 0.005, 10, "s", "filament: thermal time constant"),
    "on": SPANS("[start_s, end_s] spans when switched on (empty: always on)"),
}
_CHANNEL = {
    "bits": I(12, 6, 24, "bits", "ADC resolution"),
    "noise_lsb": N(0.7, 0, 1000, "LSB", "gaussian noise, rms"),
    "offset_lsb": N(0, -1000, 1000, "LSB", "fixed offset"),
    "gain_tol_pct": N(0.5, 0, 20, "%", "divider/shunt gain error drawn per seed within +/-"),
    "gain_err_pct": N(None, -20, 20, "%", "a fixed gain error in place of the drawn one, e.g. "
                      "at an edge of gain_tol_pct (null: drawn)", nullable=True),
    "present": B(True, "false: the board has no such sensor (reads 0)"),
}
SENSOR_CHANNELS = ("bus_v", "src_a", "batt_v", "batt_a", "cap_v", "cap_a", "usb_vbus", "usb_dp",
                   "usb_dm", "cell_v")
_TEMP = {
    "noise_c": N(0.2, 0, 20, "C", "noise, rms"),
    "offset_c": N(0, -20, 20, "C", "fixed offset"),
}
EVENT_KINDS = ("battery_disconnected", "battery_reconnected", "temp_sensor_open",
               "temp_sensor_ok", "sensor_stuck", "sensor_open", "sensor_ok",
               "wrong_divider_resistor", "bus_surge", "drive_stop", "drive_start",
               "equalize_request", "reset_request", "ambient", "wind_mean")
DIVIDER_RESISTORS = ("bus_top", "bus_bottom", "batt_top", "batt_bottom", "cap_top", "cap_bottom",
                     "vbus_top", "vbus_bottom", "dp_top", "dp_bottom", "dm_top", "dm_bottom",
                     "between")
_EVENT = {
    "t_s": N(None, 0, T_MAX, "s", "when"),
    "kind": C(None, EVENT_KINDS, "what happens"),
    "sensor": C(None, SENSOR_CHANNELS + ("batt_temp",), "sensor_*: which sensor"),
    "value": N(None, -1e6, 1e6, "V, A or C", "sensor_stuck: the value it reads; ambient: C; "
               "wind_mean: m/s", nullable=True),
    "reads": C("zero", ("zero", "full"), "sensor_open: an open input reads 0 or full scale"),
    "resistor": C(None, DIVIDER_RESISTORS, "wrong_divider_resistor: which resistor (sensor "
                  "divider or USB data-line network)"),
    "ohm": N(None, 0.01, 1e9, "ohm", "wrong_divider_resistor: its value", nullable=True),
    "surge_v": N(60, 1, 1000, "V", "bus_surge: source voltage"),
    "surge_ohm": N(2.0, 0.01, 1000, "ohm", "bus_surge: source resistance"),
    "energy_j": N(None, 0, 1e6, "J", "bus_surge: if set, inject this energy evenly over the "
                  "duration instead of the voltage source", nullable=True),
    "duration_s": N(0.2, 0.001, 3600, "s", "bus_surge, equalize_request, reset_request: length"),
}

for _k in ("sensor", "resistor"):
    _EVENT[_k].nullable = True  # required only by some kinds (EVENT_NEEDS)

SCHEMA = {
    "name": S(None, "scenario name (default: the file name)"),
    "description": S("", "free text"),
    "duration_s": N(600, 0.05, T_MAX, "s", "simulated time"),
    "seed": I(1, 0, 2**32 - 1, "", "seed of every random draw (numpy Generator)"),
    "profile": F("P", "default", doc="controller profile: a built-in name (default: "
                 "controller/default_profile.json, others host_sim/profiles/NAME.json), a path "
                 "relative to the scenario file, or an inline profile object"),
    "accept_mismatch": CL(MISMATCH_NAMES, "parts that may differ from the controller profile on "
                          "purpose (a mismatch study): no profile_mismatch service warning for "
                          "them (docs/simulate.md)"),
    "drive": F("DRIVE", doc="the drive (required); fields depend on kind"),
    "machine": O({
        "ke_v_per_krpm": N(16, 0.5, 500, "V/krpm", "back-EMF constant (K_t = K_e in SI)"),
        "ra_ohm": N(0.8, 0.005, 100, "ohm", "armature resistance (brushes included)"),
        "la_mh": N(1.5, 0, 1000, "mH", "armature inductance (the averaged plant neglects it; "
                   "the ngspice check includes it)"),
        "inertia_kg_m2": N(2e-4, 1e-6, 10, "kg m^2", "rotor inertia"),
        "viscous_nm_per_krpm": N(0.01, 0, 10, "N m/krpm", "viscous friction"),
        "coulomb_nm": N(0.03, 0, 10, "N m", "Coulomb (brush and bearing) friction"),
    }),
    "gear": O({
        "ratio": N(1, 0.05, 200, "1", "machine turns per drive turn"),
        "efficiency": N(0.95, 0.3, 1.0, "1", "gear efficiency (either direction)"),
    }),
    "rectifier": O({
        "is_a": N(1e-6, 1e-15, 1e-2, "A", "diode saturation current (SPICE IS)"),
        "n": N(1.05, 0.5, 3.0, "1", "diode emission coefficient (SPICE N)"),
        "rs_ohm": N(0.06, 0, 2, "ohm", "diode series resistance (SPICE RS)"),
        "temp_c": N(25, -40, 150, "C", "junction temperature for the thermal voltage"),
    }),
    "bus": O({
        "capacitance_uf": N(1000, 1, 1e6, "uF", "bus capacitor"),
        "initial_v": N(0, 0, 100, "V", "bus voltage at t = 0"),
        "clamp_knee_v": N(26, 5, 200, "V", "surge clamp (TVS/MOV) voltage at 1 mA"),
        "clamp_alpha": N(35, 5, 80, "1", "clamp exponent: I = 1 mA x (V / knee)^alpha"),
        "clamp_margin_v": N(4.0, 0, 50, "V", "closed-loop check: bus may exceed the overvoltage "
                            "trip by this much (the clamp's job)"),
        "dump_ohm": N(4.7, 0.1, 1000, "ohm", "dump resistor (switched by dump_duty, averaged)"),
        "bleed_ohm": N(10000, 10, 1e9, "ohm", "bleeder across the bus capacitor"),
    }),
    "converters": O({
        "batt": O(_BUCK, "battery buck"),
        "cap": O(dict(_BUCK, r_out_ohm=N(0.25, 0.01, 5, "ohm", "output resistance of the "
                                         "averaged buck (the profile's path resistance)")),
                 "supercap buck"),
        "or_diode_v": N(0.3, 0, 1.5, "V", "discharge diodes (store -> bus): knee voltage"),
        "or_diode_ohm": N(0.03, 0.001, 1, "ohm", "discharge diodes: slope resistance"),
    }),
    "battery": O({
        "present": B(True, "false: no battery wired (terminals float)"),
        "chemistry": C(None, CHEMISTRIES, "default: the profile's chemistry"),
        "cells": I(None, 1, 12, "cells", "default: the profile's cells"),
        "capacity_ah": N(None, 0.5, 2000, "Ah", "default: the profile's capacity_ah"),
        "soc0": N(0.5, 0, 1, "1", "state of charge at t = 0"),
        "ambient_c": N(25, -30, 55, "C", "air around the battery"),
        "temp0_c": N(None, -30, 70, "C", "battery temperature at t = 0 (default: ambient)",
                     nullable=True),
        "r0_mohm_ah": N(250, 10, 5000, "mohm Ah", "ohmic resistance x capacity at 25 C, 50 % "
                        "(a 12 Ah block: about 21 mohm)"),
        "rp_base_ohm_ah": N(3.0, 0, 100, "ohm Ah", "charge polarisation resistance x capacity"),
        "rp_full_ohm_ah": N(1.5, 0, 100, "ohm Ah", "... plus this / (1 - soc): acceptance falls "
                            "as the plates fill"),
        "rp_dis_ohm_ah": N(2.0, 0, 100, "ohm Ah", "discharge polarisation resistance x capacity"),
        "cp_f_per_ah": N(15, 0.1, 1e4, "F/Ah", "polarisation capacitance per Ah"),
        "gas_i0_ma_per_ah": N(None, 0.01, 100, "mA/Ah", "gassing current per Ah at the onset "
                              "voltage and 25 C (default flooded 6, agm 4, gel 3)", nullable=True),
        "gas_onset_v_per_cell": N(2.40, 2.2, 2.6, "V/cell", "gassing onset (Linden's Handbook "
                                  "of Batteries: about 2.39-2.40 V/cell at 20-25 C, from memory)"),
        "gas_slope_mv": N(40, 5, 300, "mV", "gassing current grows e-fold per this much cell voltage"),
        "gas_doubling_c": N(10, 2, 50, "C", "gassing current doubles per this many degrees"),
        "heat_j_per_k_ah": N(300, 10, 1e4, "J/K/Ah", "heat capacity per Ah"),
        "thermal_k_per_w": N(None, 0.01, 100, "K/W", "to ambient (default 2 x (12 Ah / C)^(2/3))",
                             nullable=True),
    }),
    "supercap": O({
        "present": B(True, "false: no bank fitted"),
        "cells": I(None, 1, 16, "cells", "default: the profile's supercap.cells"),
        "cell_f": N(50, 0.01, 1e5, "F", "nominal cell capacitance"),
        "cap_spread_pct": N(3, 0, 30, "%", "cell capacitance spread (std, drawn per seed)"),
        "esr_mohm": N(15, 0, 10000, "mohm", "ESR per cell"),
        "leak_ua": N(30, 0, 1e5, "uA", "leakage per cell at 2.7 V"),
        "leak_spread_pct": N(30, 0, 100, "%", "leakage spread (std, drawn per seed)"),
        "balance_ohm": N(2200, 10, 1e9, "ohm", "passive balancing resistor across each cell "
                         "(makers' notes: about 10x the leakage current)"),
        "bleeder_ohm": N(47, 1, 1e6, "ohm", "switched bleeder per cell (bal_mask bit i)"),
        "v0_per_cell": N(0, 0, 3.0, "V", "cell voltage at t = 0"),
    }),
    "usb": O({
        "converter": O(_USB_CONV, "5 V converter"),
        "network": O(_NETWORK, "data-line network"),
        "devices": L(_DEVICE, "phones and other devices plugged into the port", 16),
    }),
    "loads": L(_LOAD, "battery-side loads behind the discharge switch", 16),
    "sensors": O(dict({k: O(_CHANNEL) for k in SENSOR_CHANNELS}, batt_temp=O(_TEMP))),
    "events": L(_EVENT, "timed events", 500),
    "solver": O({
        "max_substep_ms": N(25, 0.5, 1000, "ms", "longest plant sub-step"),
    }),
}
EVENT_NEEDS = {
    "sensor_stuck": ("sensor", "value"), "sensor_open": ("sensor",), "sensor_ok": ("sensor",),
    "wrong_divider_resistor": ("resistor", "ohm"), "ambient": ("value",), "wind_mean": ("value",),
}


# ---- validation -----------------------------------------------------------------------------

def _fmt(v):
    """A value as the user wrote it, plain (numpy numbers print as numbers) and short."""
    if isinstance(v, (str, bool)) or v is None:
        return short(json.dumps(v))
    if isinstance(v, numbers.Integral):
        return str(int(v))
    if isinstance(v, numbers.Real):
        return repr(float(v))
    if isinstance(v, (list, dict)):
        return short(json.dumps(v, default=str))
    return short(repr(v))


class _V:
    def __init__(self, src):
        self.src = src

    def err(self, path, value, allowed, why=""):
        msg = "%s: %s = %s: allowed %s" % (self.src, path, _fmt(value), allowed)
        if why:
            msg += " (%s)" % why
        raise ScenarioError(msg)

    def obj(self, doc, spec, path):
        if doc is None:
            doc = {}
        if not isinstance(doc, dict):
            self.err(path or "(top)", doc, "an object")
        for k in doc:
            if k not in spec:
                self.err(_join(path, k), doc[k], "no such field; fields here: "
                         + ", ".join(sorted(spec)), "unknown fields are errors so typos show")
        out = {}
        for k, f in spec.items():
            out[k] = self.field(doc.get(k, _MISSING), f, _join(path, k))
        return out

    def field(self, v, f, path):
        if v is _MISSING:
            if f.kind == "O":
                return self.obj({}, f.sub, path)
            return copy.deepcopy(f.default)
        k = f.kind
        if k == "N":
            if v is None and (f.nullable or f.default is None):
                return None
            return self.num(v, f, path)
        if k == "I":
            x = self.num(v, f, path)
            if x != int(x):
                self.err(path, v, "a whole number from %s to %s" % (f.lo, f.hi))
            return int(x)
        if k == "B":
            if not isinstance(v, bool):
                self.err(path, v, "true or false")
            return v
        if k == "S":
            if not isinstance(v, str) or len(v) > 2000:
                self.err(path, v, "a string (at most 2000 characters)")
            return v
        if k == "C":
            if v not in f.choices:
                self.err(path, v, "one of " + ", ".join(f.choices))
            return v
        if k == "O":
            return self.obj(v, f.sub, path)
        if k == "L":
            if not isinstance(v, list) or len(v) > f.max_len:
                self.err(path, v if not isinstance(v, list) else "[%d items]" % len(v),
                         "a list of at most %d objects" % f.max_len)
            return [self.obj(x, f.sub, "%s[%d]" % (path, i)) for i, x in enumerate(v)]
        if k == "CL":
            allowed = "a list of distinct names from " + ", ".join(f.choices)
            if not isinstance(v, list):
                self.err(path, v, allowed)
            for i, x in enumerate(v):
                if x not in f.choices or x in v[:i]:
                    self.err("%s[%d]" % (path, i), x, allowed)
            return list(v)
        if k in ("PTS", "SPANS", "TIMES"):
            return self.series(v, f, path)
        raise AssertionError(k)

    def num(self, v, f, path):
        rng = "%s to %s %s" % (_g(f.lo), _g(f.hi), "" if f.unit == "1" else f.unit)
        if isinstance(v, bool) or not isinstance(v, (int, float)) or math.isnan(v):
            self.err(path, v, "a number from " + rng.strip(), f.why)
        if v < f.lo or v > f.hi or math.isinf(v):
            self.err(path, v, rng.strip(), f.why)
        return float(v) if f.kind == "N" else v  # in range: float() cannot overflow

    def series(self, v, f, path):
        if not isinstance(v, list) or len(v) > 100000:
            self.err(path, v if not isinstance(v, list) else "[%d items]" % len(v),
                     "a list of at most 100000 items")
        out = []
        last = -math.inf
        for i, x in enumerate(v):
            p = "%s[%d]" % (path, i)
            if f.kind == "TIMES":
                t = self.num(x, N(0, 0, T_MAX, "s", ""), p)
                if t <= last:
                    self.err(p, x, "times in increasing order")
                last = t
                out.append(t)
                continue
            if not isinstance(x, list) or len(x) != 2:
                self.err(p, x, "a pair [t_s, value]" if f.kind == "PTS" else "a pair [start_s, end_s]")
            t = self.num(x[0], N(0, 0, T_MAX, "s", ""), p + "[0]")
            if t <= last:
                self.err(p + "[0]", x[0], "times in increasing order")
            if f.kind == "PTS":
                y = self.num(x[1], N(0, f.lo, f.hi, f.unit, ""), p + "[1]")
                last = t
            else:
                y = self.num(x[1], N(0, 0, T_MAX, "s", ""), p + "[1]")
                if y <= t:
                    self.err(p + "[1]", x[1], "an end after the start %s s" % _g(t))
                last = y
            out.append([t, y])
        return out


_MISSING = object()


def _join(path, k):
    return k if not path else path + "." + k


def _g(x):
    if isinstance(x, int) and not isinstance(x, bool):
        return str(x)
    return "%g" % x if isinstance(x, float) else str(x)


def validate(doc, src="<scenario>", base_dir=None):
    """Validate a parsed scenario document; return the resolved Scenario."""
    v = _V(src)
    if not isinstance(doc, dict):
        v.err("(top)", doc, "a JSON object")
    if "drive" not in doc:
        v.err("drive", None, "an object with a kind (%s)" % ", ".join(DRIVE_KINDS),
              "the drive is the one required section")
    out = {}
    for k in doc:
        if k not in SCHEMA:
            v.err(k, doc[k], "no such top-level field; fields: " + ", ".join(SCHEMA),
                  "unknown fields are errors so typos show")
    for k, f in SCHEMA.items():
        if f.kind == "DRIVE":
            out[k] = _drive(v, doc["drive"])
        elif f.kind == "P":
            out[k] = doc.get("profile", "default")
        else:
            out[k] = v.field(doc.get(k, _MISSING), f, k)
    prof_doc, prof = _load_profile(v, out["profile"], base_dir)
    _derive(v, out, prof, src)
    return Scenario(out, prof, prof_doc, src)


def _drive(v, d):
    if not isinstance(d, dict):
        v.err("drive", d, "an object with a kind (%s)" % ", ".join(DRIVE_KINDS))
    kind = d.get("kind")
    if kind not in DRIVE_KINDS:
        v.err("drive.kind", kind, "one of " + ", ".join(DRIVE_KINDS))
    spec = dict(DRIVE_FIELDS[kind])
    if kind == "crank":
        for k, x in _CRANK_DEFAULTS.items():
            f = copy.copy(spec[k])
            f.default = x
            spec[k] = f
    spec["kind"] = C(kind, DRIVE_KINDS, "drive kind")
    out = v.obj(d, spec, "drive")
    if kind in ("pedal", "crank"):
        if out["power_sustained_w"] > out["power_start_w"]:
            v.err("drive.power_sustained_w", out["power_sustained_w"],
                  "at most power_start_w = %g W" % out["power_start_w"], "fatigue only lowers power")
    if kind == "wind":
        for i, g in enumerate(out["gusts"]):
            for key in ("t_s", "peak_ms"):
                if g[key] is None:
                    v.err("drive.gusts[%d].%s" % (i, key), None, "a number", "required")
    if kind == "scripted" and not out["points"]:
        v.err("drive.points", [], "at least one [t_s, value] point", "nothing to follow")
    return out


def _load_profile(v, p, base_dir):
    try:
        if isinstance(p, dict):
            try:
                return p, _profile.from_dict(p)
            except ConfigError as e:
                raise ConfigError(name_derived(p, str(e)))
        if not isinstance(p, str) or not p:
            v.err("profile", p, "a built-in name, a path or an inline object")
        if p == "default":
            path = _profile.default_path()
        elif "/" not in p and not p.endswith(".json"):
            path = str(PROF_DIR / (p + ".json"))
            if not os.path.exists(path):
                names = ["default"] + sorted(x.stem for x in PROF_DIR.glob("*.json"))
                v.err("profile", p, "a built-in profile (%s) or a path" % ", ".join(names))
        else:
            path = os.path.join(base_dir or ".", p)
        return read_profile(path)
    except ConfigError as e:
        raise ScenarioError("%s: profile: %s" % (v.src, e))
    except OSError as e:
        v.err("profile", p, "a readable profile file", str(e))
    except ValueError as e:
        v.err("profile", p, "a valid JSON profile", str(e))


def _derive(v, out, prof, src):
    """Fill the defaults that depend on the profile or on other fields; cross-field checks."""
    if out["name"] is None:
        out["name"] = Path(src).stem if src and not src.startswith("<") else "scenario"
    b = out["battery"]
    if b["chemistry"] is None:
        b["chemistry"] = prof.chemistry
    if b["cells"] is None:
        b["cells"] = prof.cells
    if b["capacity_ah"] is None:
        b["capacity_ah"] = prof.capacity_mah / 1000.0
    if b["temp0_c"] is None:
        b["temp0_c"] = b["ambient_c"]
    if b["gas_i0_ma_per_ah"] is None:
        b["gas_i0_ma_per_ah"] = {"flooded": 6.0, "agm": 4.0, "gel": 3.0}[b["chemistry"]]
    if b["thermal_k_per_w"] is None:
        b["thermal_k_per_w"] = round(2.0 * (12.0 / b["capacity_ah"]) ** (2.0 / 3.0), 4)
    sc = out["supercap"]
    if sc["cells"] is None:
        sc["cells"] = prof.cap_cells
    if sc["v0_per_cell"] > prof.cap_cell_rating_mv / 1000.0:
        v.err("supercap.v0_per_cell", sc["v0_per_cell"],
              "0 to the cell rating %g V" % (prof.cap_cell_rating_mv / 1000.0))
    if prof.cap_taps and sc["cells"] > 12:
        v.err("supercap.cells", sc["cells"], "at most 12 with the profile's cell_taps")
    net = out["usb"]["network"]
    if net["scheme"] is None:
        net["scheme"] = SCHEMES[prof.scheme]
    for i, f in enumerate(net["faults"]):
        if f["kind"] is None:
            v.err("usb.network.faults[%d].kind" % i, None, "one of " + ", ".join(_NET_FAULT["kind"].choices))
        if f["kind"] == "value" and f["ohm"] is None:
            v.err("usb.network.faults[%d].ohm" % i, None, "0.01 to 1e9 ohm", "kind value needs it")
    for i, d in enumerate(out["usb"]["devices"]):
        if d["leave_s"] is not None and d["leave_s"] <= d["arrive_s"]:
            v.err("usb.devices[%d].leave_s" % i, d["leave_s"], "after arrive_s = %g s" % d["arrive_s"])
    last = -1.0
    for i, e in enumerate(out["events"]):
        p = "events[%d]" % i
        if e["t_s"] is None:
            v.err(p + ".t_s", None, "0 to %g s" % T_MAX, "every event needs a time")
        if e["kind"] is None:
            v.err(p + ".kind", None, "one of " + ", ".join(EVENT_KINDS))
        if e["t_s"] < last:
            v.err(p + ".t_s", e["t_s"], "at or after the previous event's %g s" % last,
                  "events run in order")
        last = e["t_s"]
        for need in EVENT_NEEDS.get(e["kind"], ()):
            if e[need] is None:
                v.err(p + "." + need, None, "a value", "kind %s needs it" % e["kind"])
    _physical(v, out, prof)
    d = out["drive"]
    for k in ("stop_s",):
        if k in d and d[k] is not None and d[k] < d.get("start_s", 0):
            v.err("drive." + k, d[k], "after drive.start_s")


MACHINE_RPM_MAX = 20000  # from memory: small brushed PM machines are rated 3,000-20,000 rpm
SCRIPTED_NM_MAX = 1000  # drive-shaft torque; a person gives at most 300 (drive.torque_max_nm)


def _physical(v, out, prof):
    """What the machine and the stores can physically take, and a start inside the limits
    the run judges (a start outside them is the scenario's state, not the controller's
    doing)."""
    d = out["drive"]
    ratio = out["gear"]["ratio"]
    if d["kind"] == "scripted":
        for i, (t, y) in enumerate(d["points"]):
            p = "drive.points[%d][1]" % i
            if d["mode"] == "speed" and abs(y) * ratio > MACHINE_RPM_MAX:
                v.err(p, y, "|rpm| x gear.ratio %s <= %d rpm at the machine, i.e. up to %s rpm "
                      "here" % (_g(ratio), MACHINE_RPM_MAX, _g(MACHINE_RPM_MAX / ratio)),
                      "a small PM machine, from memory: rated 3,000-20,000 rpm")
            if d["mode"] == "torque" and abs(y) > SCRIPTED_NM_MAX:
                v.err(p, y, "-%d to %d N m" % (SCRIPTED_NM_MAX, SCRIPTED_NM_MAX),
                      "a drive shaft a person or a small rotor turns")
    sc = out["supercap"]
    clamp_v = prof.cap_clamp_mv / 1000.0
    # compared in whole mV, as the profile holds the clamp: 6 x 2.43 V is the clamp, not above
    if sc["present"] and round(sc["cells"] * sc["v0_per_cell"] * 1000) > prof.cap_clamp_mv:
        v.err("supercap.v0_per_cell", sc["v0_per_cell"], "0 to %g V: the bank of %d cells would "
              "start at %g V, above the profile's clamp %g V" % (
                  clamp_v / sc["cells"], sc["cells"], sc["cells"] * sc["v0_per_cell"], clamp_v),
              "a start state outside the limits, not something the controller did")
    bus_v = prof.ovp_trip_mv / 1000.0 + out["bus"]["clamp_margin_v"]
    if out["bus"]["initial_v"] > bus_v:
        v.err("bus.initial_v", out["bus"]["initial_v"], "0 to %g V (the overvoltage trip plus "
              "bus.clamp_margin_v)" % bus_v, "a start state outside the limits, not something "
              "the controller did")


class Scenario:
    def __init__(self, doc, profile, profile_doc, source):
        self.doc = doc
        self.profile = profile
        self.profile_doc = profile_doc
        self.source = source
        self.name = doc["name"]
        self.duration_s = doc["duration_s"]
        self.seed = doc["seed"]
        self.clamp_margin_v = doc["bus"]["clamp_margin_v"]

    def to_json(self):
        d = dict(self.doc)
        d["profile"] = self.profile_doc
        return d


def builtin_names():
    """Names of the scenarios shipped in host_sim/scenarios/."""
    return sorted(p.stem for p in SCEN_DIR.glob("*.json"))


def load_scenario(name_or_path):
    """Load a built-in scenario by name or a scenario file by path. Raises ScenarioError."""
    s = os.fspath(name_or_path)
    path = s
    if not os.path.exists(s) and "/" not in s and not s.endswith(".json"):
        path = str(SCEN_DIR / (s + ".json"))
        if not os.path.exists(path):
            raise ScenarioError("%s: no such scenario file or built-in name; built-ins: %s"
                                % (s, ", ".join(builtin_names())))
    try:
        doc = load_json(path)
    except OSError as e:
        raise ScenarioError("%s: cannot read scenario (%s)" % (path, e.strerror or e))
    except JsonError as e:
        raise ScenarioError(str(e))
    return validate(doc, path, os.path.dirname(os.path.abspath(path)))


def load_doc(doc, src="<inline>", base_dir=None):
    """Validate an in-memory scenario document (tests, fuzzers)."""
    return validate(copy.deepcopy(doc), src, base_dir)


# ---- documentation --------------------------------------------------------------------------
# docs/scenario.md embeds the tables below between markers; tests/plant/test_scenario.py checks
# they match, so the documentation cannot drift from the schema.

DERIVED = {
    "name": "the file name",
    "battery.chemistry": "the profile's", "battery.cells": "the profile's",
    "battery.capacity_ah": "the profile's", "battery.temp0_c": "ambient_c",
    "battery.gas_i0_ma_per_ah": "flooded 6, agm 4, gel 3",
    "battery.thermal_k_per_w": "2 x (12 Ah / capacity)^(2/3)",
    "supercap.cells": "the profile's", "usb.network.scheme": "the profile's usb.scheme",
    "usb.network.dcp_short_ohm": "drawn 0-200 per seed",
}


def _doc_rows(spec, path, rows, kind_note=""):
    for k, f in spec.items():
        p = _join(path, k)
        if f.kind == "O":
            _doc_rows(f.sub, p, rows)
            continue
        if f.kind == "L":
            rows.append((p, "list", "[]", "up to %d objects" % f.max_len, f.doc))
            _doc_rows(f.sub, p + "[]", rows)
            continue
        if f.kind in ("N", "I"):
            rng = "%s .. %s" % (_g(f.lo), _g(f.hi))
        elif f.kind == "C":
            rng = " / ".join(f.choices)
        elif f.kind == "CL":
            rng = "[names]: " + " / ".join(f.choices)
        elif f.kind == "B":
            rng = "true / false"
        elif f.kind == "PTS":
            rng = "[[t_s, v], ...], t increasing, v %s .. %s" % (_g(f.lo), _g(f.hi))
        elif f.kind == "SPANS":
            rng = "[[start_s, end_s], ...], increasing"
        elif f.kind == "TIMES":
            rng = "[t_s, ...], increasing"
        else:
            rng = "see text"
        if p in DERIVED or p.replace("[]", "") in DERIVED:
            dflt = "(%s)" % DERIVED.get(p, DERIVED.get(p.replace("[]", "")))
        elif f.default is None:
            dflt = "null" if f.nullable else "required"
        elif f.kind == "S":
            dflt = json.dumps(f.default)
        elif isinstance(f.default, bool):
            dflt = "true" if f.default else "false"
        elif isinstance(f.default, list):
            dflt = "[]"
        else:
            dflt = _g(f.default)
        text = f.doc + (" (%s)" % f.why if f.why and f.why not in f.doc else "")
        rows.append((p, f.unit or "", dflt, rng, text))


def schema_markdown():
    """The field tables of docs/scenario.md, generated from SCHEMA."""
    out = []

    def table(title, rows):
        out.append("### " + title)
        out.append("")
        out.append("| field | unit | default | allowed | meaning |")
        out.append("|---|---|---|---|---|")
        for p, u, d, r, t in rows:
            out.append("| `%s` | %s | %s | %s | %s |" % (p, u, d, r, t.replace("|", "/")))
        out.append("")

    top = [(k, f) for k, f in SCHEMA.items() if f.kind not in ("O", "L", "DRIVE")]
    rows = []
    for k, f in top:
        if f.kind == "P":
            rows.append((k, "", '"default"', "name / path / object", f.doc))
        else:
            _doc_rows({k: f}, "", rows)
    table("Top level", rows)
    for kind in DRIVE_KINDS:
        if kind == "crank":
            continue
        rows = [("drive.kind", "", "required", " / ".join(DRIVE_KINDS), "the drive")]
        _doc_rows(DRIVE_FIELDS[kind], "drive", rows)
        if kind == "pedal":
            title = "drive: pedal and crank (crank defaults: %s)" % ", ".join(
                "%s %s" % (k, _g(v)) for k, v in _CRANK_DEFAULTS.items())
        else:
            title = "drive: " + kind
        table(title, rows)
    for k, f in SCHEMA.items():
        if k == "sensors":
            rows = []
            _doc_rows(_CHANNEL, "sensors.<channel>", rows)
            _doc_rows(_TEMP, "sensors.batt_temp", rows)
            table("sensors (<channel>: %s)" % ", ".join(SENSOR_CHANNELS), rows)
        elif f.kind in ("O", "L"):
            rows = []
            _doc_rows({k: f}, "", rows)
            table(k, rows)
    return "\n".join(out)


def write_docs(path=None):
    """Regenerate the field tables in docs/scenario.md (python -m host_sim.scenario)."""
    import tempfile

    path = path or str(HERE.parent / "docs" / "scenario.md")
    with open(path) as fh:
        text = fh.read()
    a = text.index("<!-- fields:begin -->\n") + len("<!-- fields:begin -->\n")
    b = text.index("\n<!-- fields:end -->")
    text = text[:a] + schema_markdown() + text[b:]
    fd, tmp = tempfile.mkstemp(dir=os.path.dirname(path), prefix=".scenario.md.")
    with os.fdopen(fd, "w") as fh:
        fh.write(text)
    os.chmod(tmp, 0o644)
    os.replace(tmp, path)


if __name__ == "__main__":
    write_docs()
