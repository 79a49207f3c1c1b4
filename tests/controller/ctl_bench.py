"""Shared helpers for the controller tests: profile documents and a small bench that drives a
Supervisor with hand-set readings.

Profile variants are written out in full (every battery number the oracles need is in the
document), so the oracles in ctl_props.py can work from the JSON numbers instead of from the
controller's own integer Profile.
"""
import copy
import json
import os
import tempfile
from pathlib import Path

from controller import profile
from controller.compat import TICKS_MASK
from controller.supervisor import Supervisor

ROOT = Path(__file__).resolve().parents[2]
DEFAULT_PATH = ROOT / "controller" / "default_profile.json"

with open(DEFAULT_PATH) as _f:
    DEFAULT_DOC = json.load(_f)


def doc_with(base=None, **fields):
    """A copy of a profile document with fields replaced; keys are 'section__field'
    (None deletes the field)."""
    d = copy.deepcopy(DEFAULT_DOC if base is None else base)
    for key, value in fields.items():
        sec, field = key.split("__", 1)
        d.setdefault(sec, {})
        if value is None:
            d[sec].pop(field, None)
        else:
            d[sec][field] = value
    return d


def build(doc):
    return profile.from_dict(doc)


# Valid variants for the property and stateful tests: chemistries, cell counts, schemes, MPPT on
# and off, supercap taps on and off. Invented settings (our own demo sites), not product data.
VARIANTS = {
    # the shipped default: 12 V AGM, six-cell supercap, dedicated charging port
    "agm6_dcp": copy.deepcopy(DEFAULT_DOC),
    # micro-wind mast at a mountain hut: flooded 12 V bank, equalize allowed, MPPT, cell taps
    "flooded6_mppt_taps": doc_with(
        battery__chemistry="flooded", battery__capacity_ah=100, battery__absorption_v_per_cell=2.45,
        battery__float_v_per_cell=2.23, battery__equalize_v_per_cell=2.58,
        battery__equalize_minutes=10, battery__temp_coeff_mv_per_c_per_cell=-5.0,
        battery__charge_limit_a=12.5, battery__tail_current_a=2.0, battery__tail_hold_s=2,
        battery__absorption_max_minutes=10, battery__rebulk_hold_s=2,
        supercap__cell_taps=True, usb__scheme="div_2v0_2v7",
        control__mppt=True, control__mppt_interval_ms=200, control__overspeed_bus_v=22.0),
    # pedal point at a field clinic: gel block, short holds, shorted-and-biased USB lines
    "gel6_short": doc_with(
        battery__chemistry="gel", battery__absorption_v_per_cell=2.40,
        battery__float_v_per_cell=2.25, battery__temp_coeff_mv_per_c_per_cell=-5.0,
        battery__charge_limit_a=0.6, battery__tail_current_a=0.12, battery__tail_hold_s=1,
        battery__rebulk_hold_s=1, battery__charge_temp_min_c=5, battery__charge_temp_max_c=40,
        usb__scheme="short_1v2", usb__line_tolerance_pct=5, usb__debounce_ms=100,
        bus__ovp_hold_ms=300, bus__lockout_trips=3, bus__trip_window_s=10),
    # hand crank with a 6 V AGM block, four-cell bank with taps, 2.7/2.7 divider port
    "agm3_taps_div27": doc_with(
        battery__cells=3, battery__capacity_ah=4, battery__absorption_v_per_cell=2.45,
        battery__float_v_per_cell=2.30, battery__temp_coeff_mv_per_c_per_cell=-3.0,
        battery__ref_temp_c=20, battery__charge_limit_a=1.0, battery__tail_current_a=0.08,
        battery__tail_hold_s=1,
        supercap__cells=4, supercap__cell_taps=True, supercap__hysteresis_v=0.1,
        supercap__charge_limit_a=1.0, supercap__path_resistance_ohm=0.5,
        usb__scheme="div_2v7_2v7", usb__line_tolerance_pct=14, usb__debounce_ms=10,
        bus__ovp_trip_v=16, bus__ovp_recover_v=13, bus__ovp_hold_ms=50, bus__lockout_trips=2,
        bus__trip_window_s=5, sensors__bus_full_scale_v=20, sensors__batt_full_scale_v=10),
    # micro-hydro with a 24 V flooded bank (12 cells), 2.7/2.0 divider port
    "flooded12_div2720": doc_with(
        battery__chemistry="flooded", battery__cells=12, battery__capacity_ah=200,
        battery__absorption_v_per_cell=2.47, battery__float_v_per_cell=2.25,
        battery__equalize_v_per_cell=2.60, battery__equalize_minutes=10,
        battery__temp_coeff_mv_per_c_per_cell=-5.0, battery__charge_limit_a=25,
        battery__tail_current_a=4, battery__tail_hold_s=1, battery__charge_temp_min_c=-10,
        battery__charge_temp_max_c=50,
        usb__scheme="div_2v7_2v0", usb__line_tolerance_pct=1, usb__short_tolerance_mv=10,
        bus__ovp_trip_v=44, bus__ovp_recover_v=38, bus__floor_v=30, bus__ovp_hold_ms=100,
        sensors__bus_full_scale_v=60, sensors__batt_full_scale_v=40,
        sensors__batt_current_full_scale_a=60,
        control__mppt=True, control__mppt_step_v=0.5, control__mppt_interval_ms=100),
}


def write_doc(doc, path):
    """Write a profile document whole (temporary file, then rename)."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=str(path.parent), prefix=path.name + ".", suffix=".tmp")
    with os.fdopen(fd, "w") as f:
        json.dump(doc, f, indent=1)
    os.replace(tmp, str(path))


class Bench:
    """A Supervisor with quiet, healthy readings that a test changes field by field.

    bench.run(n, **fields) sets the given Measurements fields, runs n ticks of the profile's
    period on a clock that starts at start_ms and wraps at 2**30, and returns the Commands."""

    def __init__(self, p, start_ms=0, **fields):
        self.p = p
        self.sup = Supervisor(p)
        self.t_ms = start_ms  # unwrapped bench time, ms
        m = self.sup.m
        m.bus_mv = 15000
        m.batt_mv = p.cells * 2100
        m.batt_ma = 0
        m.batt_temp_dc = 250
        m.cap_mv = p.cap_clamp_mv // 2
        m.usb_vbus_mv = 0
        self.set(**fields)

    def set(self, **fields):
        m = self.sup.m
        for k, v in fields.items():
            if not hasattr(m, k):
                raise AttributeError("Measurements has no field %s" % k)
            setattr(m, k, v)

    def run(self, n=1, dt_ms=None, **fields):
        self.set(**fields)
        step = self.p.period_ms if dt_ms is None else dt_ms
        for _ in range(n):
            self.sup.tick(self.t_ms & TICKS_MASK)
            self.t_ms += step
        return self.sup.c

    @property
    def c(self):
        return self.sup.c

    @property
    def charger(self):
        return self.sup.charger
