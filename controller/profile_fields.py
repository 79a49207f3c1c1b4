# Field-by-field validation of a profile document: one function per section, each turning
# volts, amps, seconds and degrees into integer units on the Profile. Every error names the
# field, the value and the allowed range; hard caps say why they exist.
from controller.compat import ConfigError


CHEMISTRIES = ("flooded", "agm", "gel")
SCHEMES = ("dcp", "div_2v0_2v7", "div_2v7_2v0", "div_2v7_2v7", "short_1v2")

SECTIONS = {
    "battery": ("chemistry", "cells", "capacity_ah", "absorption_v_per_cell", "float_v_per_cell",
                "equalize_v_per_cell", "equalize_minutes", "temp_coeff_mv_per_c_per_cell",
                "ref_temp_c", "charge_limit_a", "tail_current_a", "tail_hold_s",
                "absorption_max_minutes", "charge_temp_min_c", "charge_temp_max_c",
                "rebulk_v_per_cell", "rebulk_hold_s", "absent_v_per_cell",
                "disconnect_v_per_cell", "reconnect_v_per_cell"),
    "supercap": ("cells", "cell_rating_v", "clamp_derate_pct", "hysteresis_v", "charge_limit_a",
                 "path_resistance_ohm", "cell_taps", "balance_threshold_mv"),
    "usb": ("scheme", "vbus_min_v", "vbus_max_v", "line_tolerance_pct", "short_tolerance_mv",
            "debounce_ms", "bus_min_v", "bus_hysteresis_v"),
    "bus": ("ovp_trip_v", "ovp_recover_v", "ovp_hold_ms", "trip_window_s", "lockout_trips",
            "floor_v"),
    "sensors": ("bus_full_scale_v", "batt_full_scale_v", "batt_current_full_scale_a",
                "cap_full_scale_v", "vbus_full_scale_v", "line_full_scale_v"),
    "control": ("period_ms", "mppt", "mppt_step_v", "mppt_interval_ms", "overspeed_bus_v"),
}


def section(doc, name):
    sec = doc.get(name, {})
    if not isinstance(sec, dict):
        raise ConfigError("%s: expected an object, got %r" % (name, sec))
    allowed = SECTIONS[name]
    for key in sec:
        if key not in allowed:
            raise ConfigError("%s.%s: unknown field; allowed: %s" % (name, key, ", ".join(allowed)))
    return sec


def _num(sec, sname, key, lo, hi, default, unit, why=""):
    v = sec.get(key, default)
    field = "%s.%s" % (sname, key)
    if v is None or isinstance(v, bool) or not isinstance(v, (int, float)):
        raise ConfigError("%s = %r: expected a number from %s to %s %s" % (field, v, lo, hi, unit))
    if v != v or v < lo or v > hi:  # v != v catches NaN
        msg = "%s = %r: allowed %s to %s %s" % (field, v, lo, hi, unit)
        if why:
            msg += " (" + why + ")"
        raise ConfigError(msg)
    return v


def _choice(sec, sname, key, choices, default):
    v = sec.get(key, default)
    if v not in choices:
        raise ConfigError("%s.%s = %r: allowed one of %s" % (sname, key, v, ", ".join(choices)))
    return v


def _flag(sec, sname, key, default):
    v = sec.get(key, default)
    if not isinstance(v, bool):
        raise ConfigError("%s.%s = %r: expected true or false" % (sname, key, v))
    return v


def _fail(field, value, allowed, why):
    raise ConfigError("%s = %r: %s (%s)" % (field, value, allowed, why))
