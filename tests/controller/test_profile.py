"""profile: defaults inside the published ranges, and every bad profile rejected with a
ConfigError that names the field, the value and what is allowed."""
import json
import math

import pytest
from ctl_bench import DEFAULT_DOC, build, doc_with, write_doc

from controller import profile
from controller.compat import ConfigError


def chem_only(chem):
    """A document that sets only the chemistry: every battery number is the chemistry's default."""
    return {"battery": {"chemistry": chem}}


# --- defaults against published values --------------------------------------------------------
# Ranges per cell at 25 C, each with its source:
# absorption (cyclic use) and float: battery makers' published charging manuals (confirmed);
# equalize: makers' flooded-battery manuals (confirmed; AGM and gel: not recommended);
# temperature coefficient: -5 mV/C/cell (flooded, gel, AGM's steep end) from the makers'
# charging manuals; -3 mV/C/cell (AGM's shallow end) from Battery University BU-403, whose
# worked example uses it.
PUBLISHED = {
    #          absorption mV/cell  float mV/cell   equalize   coeff mV/C/cell
    "flooded": ((2450, 2470), (2200, 2250), 2580, (-5.0, -5.0)),
    "agm": ((2400, 2450), (2250, 2300), None, (-5.0, -3.0)),
    "gel": ((2350, 2400), (2250, 2250), None, (-5.0, -5.0)),
}


@pytest.mark.parametrize("chem", sorted(PUBLISHED))
def test_chemistry_defaults_inside_published_ranges(chem):
    p = build(chem_only(chem))
    (a_lo, a_hi), (f_lo, f_hi), eq, (tc_lo, tc_hi) = PUBLISHED[chem]
    assert p.chemistry == chem
    assert a_lo <= p.abs_cell_mv <= a_hi
    assert f_lo <= p.float_cell_mv <= f_hi
    if eq is None:
        assert p.eq_cell_mv == 0  # not recommended for sealed batteries: no equalize at all
    else:
        assert p.eq_cell_mv == eq
    # tc_uv_dc_cell is uV per deci-degree C per cell = mV/C/cell x 100
    assert tc_lo * 100 <= p.tc_uv_dc_cell <= tc_hi * 100
    assert p.ref_temp_dc == 250  # the table quotes per-cell values at 25 C


@pytest.mark.parametrize("chem, c_lo, c_hi, tail_lo, tail_hi", [
    # charge current limit (makers' SLA datasheets, low authority): flooded about C/8, AGM
    # 0.2-0.3 C, gel conservative C/20; end of absorption (tail current, makers' charging
    # notes): 0.01-0.02 C, gel 0.01 C
    ("flooded", 0.125, 0.125, 0.01, 0.02),
    ("agm", 0.2, 0.3, 0.01, 0.02),
    ("gel", 0.05, 0.05, 0.01, 0.01),
])
def test_chemistry_current_defaults_inside_published_ranges(chem, c_lo, c_hi, tail_lo, tail_hi):
    p = build(chem_only(chem))  # capacity default 7 Ah
    c_mah = p.capacity_mah
    assert round(c_lo * c_mah) <= p.chg_limit_ma <= round(c_hi * c_mah)
    assert round(tail_lo * c_mah) <= p.tail_ma <= round(tail_hi * c_mah)


def test_default_window_and_disconnect_follow_published_guidance():
    p = build({})
    # charging temperature, Battery University BU-410: never charge a
    # frozen battery; avoid above about 49-50 C
    assert p.temp_min_dc >= 0
    assert p.temp_max_dc <= 490
    # end of discharge, makers' discharge tables: 1.75 V/cell (10.5 V) at C/10
    assert p.lvd_mv == 10500
    # the margin above the ceiling: 0.1 V per 12 V block (docs/profile.md), scaled per cell
    assert p.over_margin_mv == 100


def test_shipped_default_profile_inside_the_agm_ranges():
    p = profile.load(profile.default_path())
    (a_lo, a_hi), (f_lo, f_hi), _eq, (tc_lo, tc_hi) = PUBLISHED["agm"]
    assert p.chemistry == "agm" and p.cells == 6
    assert a_lo <= p.abs_cell_mv <= a_hi and f_lo <= p.float_cell_mv <= f_hi
    assert p.eq_cell_mv == 0
    assert tc_lo * 100 <= p.tc_uv_dc_cell <= tc_hi * 100
    # AGM charge limit 0.2-0.3 C (makers' SLA datasheets, low authority)
    assert 0.2 * p.capacity_mah <= p.chg_limit_ma <= 0.3 * p.capacity_mah
    # supercap clamp below the bank rating (makers' application notes: 2.7 V cells)
    assert p.cap_clamp_mv <= p.cap_cells * 2700
    # USB V_CHG window, BC1.2 ch. 5 DC electrical characteristics: 4.75-5.25 V
    assert (p.vbus_min_mv, p.vbus_max_mv) == (4750, 5250)
    assert profile.default_path().endswith("default_profile.json")


def test_profile_resolves_to_integers():
    d = build(DEFAULT_DOC).to_dict()
    assert d["abs_cell_mv"] == 2420 and d["tc_uv_dc_cell"] == -400
    assert all(isinstance(v, (int, str, bool)) for v in d.values())
    assert d["cap_clamp_mv"] == 14580  # 6 x 2.7 V x (1 - 10 %)


# --- bad profiles --------------------------------------------------------------------------
def flooded(**kw):
    return doc_with(battery__chemistry="flooded", battery__absorption_v_per_cell=2.45,
                    battery__float_v_per_cell=2.23, **kw)


NAN = float("nan")
# (id, document, field named, value as printed, what the message says is allowed)
BAD = [
    # battery: ranges and hard caps
    ("chemistry", doc_with(battery__chemistry="lithium"), "battery.chemistry", "'lithium'",
     "flooded, agm, gel"),
    ("cells-0", doc_with(battery__cells=0), "battery.cells", "0", "1 to 12"),
    ("cells-13", doc_with(battery__cells=13), "battery.cells", "13", "1 to 12"),
    ("cells-fraction", doc_with(battery__cells=6.5), "battery.cells", "6.5", "whole number"),
    ("capacity", doc_with(battery__capacity_ah=0.5), "battery.capacity_ah", "0.5", "1 to 1000"),
    ("absorption-cap", doc_with(battery__absorption_v_per_cell=2.51),
     "battery.absorption_v_per_cell", "2.51", "2.2 to 2.5 V/cell (hard cap 2.50"),
    ("absorption-low", doc_with(battery__absorption_v_per_cell=2.19),
     "battery.absorption_v_per_cell", "2.19", "2.2 to 2.5"),
    ("float-cap", doc_with(battery__float_v_per_cell=2.36), "battery.float_v_per_cell", "2.36",
     "2.1 to 2.35 V/cell (hard cap 2.35"),
    ("float-above-absorption", doc_with(battery__absorption_v_per_cell=2.25,
                                        battery__float_v_per_cell=2.30),
     "battery.float_v_per_cell", "2.3", "must be below absorption_v_per_cell = 2.25"),
    ("float-equal-absorption", doc_with(battery__absorption_v_per_cell=2.30,
                                        battery__float_v_per_cell=2.30),
     "battery.float_v_per_cell", "2.3", "must be below absorption_v_per_cell = 2.3"),
    ("equalize-agm", doc_with(battery__equalize_v_per_cell=2.50),
     "battery.equalize_v_per_cell", "2.5", "only for chemistry flooded"),
    ("equalize-gel", doc_with(battery__chemistry="gel", battery__absorption_v_per_cell=2.37,
                              battery__float_v_per_cell=2.25, battery__equalize_v_per_cell=2.45),
     "battery.equalize_v_per_cell", "2.45", "only for chemistry flooded"),
    ("equalize-cap", flooded(battery__equalize_v_per_cell=2.61),
     "battery.equalize_v_per_cell", "2.61", "2.45 to 2.6 V/cell (hard cap 2.60"),
    ("equalize-below-absorption", flooded(battery__equalize_v_per_cell=2.44),
     "battery.equalize_v_per_cell", "2.44", "2.45 to 2.6"),
    ("equalize-nan", flooded(battery__equalize_v_per_cell=NAN),
     "battery.equalize_v_per_cell", "nan", "2.45 to 2.6"),
    ("equalize-minutes", flooded(battery__equalize_minutes=241), "battery.equalize_minutes",
     "241", "10 to 240 min"),
    ("coeff-positive", doc_with(battery__temp_coeff_mv_per_c_per_cell=1.0),
     "battery.temp_coeff_mv_per_c_per_cell", "1.0", "-8.0 to 0.0 mV/C/cell"),
    ("coeff-steep", doc_with(battery__temp_coeff_mv_per_c_per_cell=-8.5),
     "battery.temp_coeff_mv_per_c_per_cell", "-8.5", "-8.0 to 0.0"),
    ("ref-temp", doc_with(battery__ref_temp_c=41), "battery.ref_temp_c", "41", "0 to 40 C"),
    ("charge-limit-c-rate", doc_with(battery__charge_limit_a=5.0), "battery.charge_limit_a",
     "5.0", "at most 0.4 C = 4.8 A"),
    ("charge-limit-range", doc_with(battery__charge_limit_a=0.01), "battery.charge_limit_a",
     "0.01", "0.05 to 30.0 A"),
    ("tail-not-below-limit", doc_with(battery__tail_current_a=2.4), "battery.tail_current_a",
     "2.4", "must be below charge_limit_a = 2.4"),
    ("tail-hold", doc_with(battery__tail_hold_s=0), "battery.tail_hold_s", "0", "1 to 3600 s"),
    ("absorption-max", doc_with(battery__absorption_max_minutes=5),
     "battery.absorption_max_minutes", "5", "10 to 600 min"),
    ("temp-min-frozen", doc_with(battery__charge_temp_min_c=-11), "battery.charge_temp_min_c",
     "-11", "-10 to 20 C (hard cap -10 C: never charge a frozen battery"),
    ("temp-max-hot", doc_with(battery__charge_temp_max_c=51), "battery.charge_temp_max_c", "51",
     "25 to 50 C (hard cap 50 C"),
    ("rebulk-not-below-float", doc_with(battery__float_v_per_cell=2.15,
                                        battery__rebulk_v_per_cell=2.18),
     "battery.rebulk_v_per_cell", "2.18", "must be below float_v_per_cell = 2.15"),
    ("rebulk-hold", doc_with(battery__rebulk_hold_s=3601), "battery.rebulk_hold_s", "3601",
     "1 to 3600 s"),
    ("absent", doc_with(battery__absent_v_per_cell=0.4), "battery.absent_v_per_cell", "0.4",
     "0.5 to 1.75 V/cell"),
    ("disconnect", doc_with(battery__disconnect_v_per_cell=1.59),
     "battery.disconnect_v_per_cell", "1.59", "1.6 to 1.95 V/cell"),
    ("reconnect-not-above-disconnect", doc_with(battery__disconnect_v_per_cell=1.95,
                                                battery__reconnect_v_per_cell=1.92),
     "battery.reconnect_v_per_cell", "1.92", "must be above disconnect_v_per_cell = 1.95"),
    # supercap
    ("cap-cells", doc_with(supercap__cells=17), "supercap.cells", "17", "1 to 16"),
    ("cap-cells-fraction", doc_with(supercap__cells=2.5), "supercap.cells", "2.5",
     "whole number"),
    ("cap-rating", doc_with(supercap__cell_rating_v=3.1), "supercap.cell_rating_v", "3.1",
     "2.3 to 3.0 V"),
    ("clamp-above-rating", doc_with(supercap__clamp_derate_pct=-1), "supercap.clamp_derate_pct",
     "-1", "0 to 30 % (the clamp may not exceed the bank rating"),
    ("cap-hysteresis", doc_with(supercap__hysteresis_v=0.01), "supercap.hysteresis_v", "0.01",
     "0.02 to 2.0 V"),
    ("cap-limit", doc_with(supercap__charge_limit_a=21), "supercap.charge_limit_a", "21",
     "0.05 to 20 A"),
    ("cap-path", doc_with(supercap__path_resistance_ohm=0.001),
     "supercap.path_resistance_ohm", "0.001", "0.005 to 10 ohm"),
    ("cap-taps-type", doc_with(supercap__cell_taps="yes"), "supercap.cell_taps", "'yes'",
     "true or false"),
    ("cap-taps-13", doc_with(supercap__cells=13, supercap__cell_taps=True), "supercap.cells",
     "13", "at most 12 with cell_taps"),
    ("cap-balance", doc_with(supercap__balance_threshold_mv=4),
     "supercap.balance_threshold_mv", "4", "5 to 300 mV"),
    # usb
    ("scheme", doc_with(usb__scheme="fast"), "usb.scheme", "'fast'",
     "dcp, div_2v0_2v7, div_2v7_2v0, div_2v7_2v7, short_1v2"),
    ("vbus-min", doc_with(usb__vbus_min_v=4.7), "usb.vbus_min_v", "4.7",
     "4.75 to 5.0 V (BC1.2 ch. 5: V_CHG"),
    ("vbus-max", doc_with(usb__vbus_max_v=5.3), "usb.vbus_max_v", "5.3", "5.0 to 5.25 V"),
    ("vbus-empty-window", doc_with(usb__vbus_min_v=5.0, usb__vbus_max_v=5.0), "usb.vbus_min_v",
     "5.0", "must be below vbus_max_v = 5.0"),
    ("line-tolerance", doc_with(usb__line_tolerance_pct=15), "usb.line_tolerance_pct", "15",
     "1 to 14 %"),
    ("short-tolerance", doc_with(usb__short_tolerance_mv=301), "usb.short_tolerance_mv", "301",
     "10 to 300 mV"),
    ("debounce", doc_with(usb__debounce_ms=9), "usb.debounce_ms", "9",
     "10 to 5000 ms (BC1.2 ch. 5: T_DCD_DBNC"),
    ("usb-bus-min", doc_with(usb__bus_min_v=5.4), "usb.bus_min_v", "5.4", "5.5 to 30 V"),
    ("usb-bus-hyst", doc_with(usb__bus_hysteresis_v=3.1), "usb.bus_hysteresis_v", "3.1",
     "0.1 to 3.0 V"),
    # bus
    ("trip-high", doc_with(bus__ovp_trip_v=61), "bus.ovp_trip_v", "61", "8 to 60 V"),
    ("trip-low", doc_with(bus__ovp_trip_v=7), "bus.ovp_trip_v", "7", "8 to 60 V"),
    ("recover-not-below-trip", doc_with(bus__ovp_recover_v=24), "bus.ovp_recover_v", "24",
     "must be below ovp_trip_v = 24"),
    ("ovp-hold", doc_with(bus__ovp_hold_ms=49), "bus.ovp_hold_ms", "49", "50 to 60000 ms"),
    ("trip-window", doc_with(bus__trip_window_s=0.5), "bus.trip_window_s", "0.5", "1 to 3600 s"),
    ("lockout-1", doc_with(bus__lockout_trips=1), "bus.lockout_trips", "1", "2 to 50"),
    ("lockout-fraction", doc_with(bus__lockout_trips=2.5), "bus.lockout_trips", "2.5",
     "whole number from 2 to 50"),
    ("floor-not-below-recover", doc_with(bus__floor_v=21), "bus.floor_v", "21",
     "must be below ovp_recover_v = 21"),
    # sensors
    ("bus-fs", doc_with(sensors__bus_full_scale_v=9), "sensors.bus_full_scale_v", "9",
     "10 to 100 V"),
    ("batt-fs", doc_with(sensors__batt_full_scale_v=61), "sensors.batt_full_scale_v", "61",
     "5 to 60 V"),
    ("batt-ma-fs", doc_with(sensors__batt_current_full_scale_a=0.4),
     "sensors.batt_current_full_scale_a", "0.4", "0.5 to 100 A"),
    ("cap-fs", doc_with(sensors__cap_full_scale_v=2), "sensors.cap_full_scale_v", "2",
     "3 to 60 V"),
    ("vbus-fs", doc_with(sensors__vbus_full_scale_v=5.4), "sensors.vbus_full_scale_v", "5.4",
     "5.5 to 20 V"),
    ("line-fs", doc_with(sensors__line_full_scale_v=2.7), "sensors.line_full_scale_v", "2.7",
     "2.8 to 5.5 V"),
    # control
    ("period", doc_with(control__period_ms=4), "control.period_ms", "4", "5 to 1000 ms"),
    ("mppt-type", doc_with(control__mppt="on"), "control.mppt", "'on'", "true or false"),
    ("mppt-step", doc_with(control__mppt_step_v=0.01), "control.mppt_step_v", "0.01",
     "0.02 to 2.0 V"),
    ("mppt-interval", doc_with(control__mppt_interval_ms=49), "control.mppt_interval_ms", "49",
     "50 to 10000 ms"),
    ("overspeed-range", doc_with(control__overspeed_bus_v=4), "control.overspeed_bus_v", "4",
     "5 to 60 V"),
    # cross-checks
    ("x-batt-fs-absorption", doc_with(sensors__batt_full_scale_v=14.5),
     "sensors.batt_full_scale_v", "14.5", "must exceed the highest battery setpoint 14.52 V"),
    ("x-batt-fs-equalize", flooded(battery__equalize_v_per_cell=2.58,
                                   sensors__batt_full_scale_v=15.5),
     "sensors.batt_full_scale_v", "15.5", "must exceed the highest battery setpoint 15.48 V"),
    ("x-cap-fs-clamp", doc_with(sensors__cap_full_scale_v=14.5), "sensors.cap_full_scale_v",
     "14.5", "must exceed the supercap clamp 14.58 V"),
    ("x-recover-clamp", doc_with(supercap__cells=8, bus__ovp_recover_v=19),
     "bus.ovp_recover_v", "19", "must be above the supercap clamp 19.44 V"),
    ("x-trip-bus-fs", doc_with(bus__ovp_trip_v=40), "sensors.bus_full_scale_v", "40",
     "must exceed bus.ovp_trip_v = 40.00 V"),
    ("x-usb-headroom", doc_with(usb__bus_min_v=5.8, usb__bus_hysteresis_v=0.5),
     "usb.bus_hysteresis_v", "0.5", "bus_min_v - bus_hysteresis_v must be at least 5.5 V"),
    ("x-usb-bus-min-recover", doc_with(usb__bus_min_v=21), "usb.bus_min_v", "21",
     "must be below bus.ovp_recover_v = 21.00 V"),
    ("x-overspeed-above-trip", doc_with(control__mppt=True, control__overspeed_bus_v=25),
     "control.overspeed_bus_v", "25", "between bus.floor_v and bus.ovp_trip_v"),
    ("x-overspeed-below-floor", doc_with(control__mppt=True, control__overspeed_bus_v=8),
     "control.overspeed_bus_v", "8", "between bus.floor_v and bus.ovp_trip_v"),
    # unknown names
    ("unknown-section", dict(DEFAULT_DOC, batery={}), "batery", "unknown section",
     "allowed: name, notes, battery"),
    ("unknown-field", doc_with(battery__absorb_v=2.4), "battery.absorb_v", "unknown field",
     "allowed: chemistry, cells"),
    # wrong types and values no number has
    ("section-not-object", dict(DEFAULT_DOC, battery=[2.4]), "battery", "[2.4]",
     "expected an object"),
    ("name-not-string", dict(DEFAULT_DOC, name=5), "name", "5", "expected a string"),
    ("string-number", doc_with(battery__absorption_v_per_cell="2.4"),
     "battery.absorption_v_per_cell", "'2.4'", "expected a number from 2.2 to 2.5 V/cell"),
    ("null-number", dict(DEFAULT_DOC, bus=dict(DEFAULT_DOC["bus"], ovp_trip_v=None)),
     "bus.ovp_trip_v", "None", "expected a number from 8 to 60 V"),
    ("bool-number", doc_with(battery__cells=True), "battery.cells", "True",
     "expected a number from 1 to 12"),
    ("list-number", doc_with(usb__debounce_ms=[250]), "usb.debounce_ms", "[250]",
     "expected a number from 10 to 5000 ms"),
    ("nan-absorption", doc_with(battery__absorption_v_per_cell=NAN),
     "battery.absorption_v_per_cell", "nan", "2.2 to 2.5"),
    ("nan-trip", doc_with(bus__ovp_trip_v=NAN), "bus.ovp_trip_v", "nan", "8 to 60 V"),
    ("nan-derate", doc_with(supercap__clamp_derate_pct=NAN), "supercap.clamp_derate_pct", "nan",
     "0 to 30 %"),
    ("inf-period", doc_with(control__period_ms=math.inf), "control.period_ms", "inf",
     "5 to 1000 ms"),
]


@pytest.mark.parametrize("doc, field, value, allowed", [pytest.param(*row[1:], id=row[0])
                                                         for row in BAD])
def test_bad_profile_rejected_naming_field_value_and_range(doc, field, value, allowed):
    with pytest.raises(ConfigError) as e:
        profile.from_dict(doc)
    msg = str(e.value)
    assert msg.startswith((field + " ", field + ":")), msg
    assert value in msg, msg
    assert allowed in msg, msg


def test_top_level_must_be_an_object():
    with pytest.raises(ConfigError, match="expected a JSON object"):
        profile.from_dict([DEFAULT_DOC])


def test_every_section_and_field_is_optional():
    p = profile.from_dict({})
    assert p.chemistry == "agm" and p.cells == 6 and p.period_ms == 50


def test_load_names_the_file(tmp_path):
    bad = tmp_path / "hut.json"
    write_doc(doc_with(battery__absorption_v_per_cell=2.55), bad)
    with pytest.raises(ConfigError) as e:
        profile.load(str(bad))
    assert str(e.value).startswith(str(bad) + ": battery.absorption_v_per_cell = 2.55")
    broken = tmp_path / "broken.json"
    broken.write_text('{"battery": {"cells": 6,}}')
    with pytest.raises(ConfigError, match="broken.json: not valid JSON"):
        profile.load(str(broken))
    with pytest.raises(ConfigError, match="missing.json: cannot read profile"):
        profile.load(str(tmp_path / "missing.json"))


def test_load_reads_json_nan_as_nan_and_rejects_it(tmp_path):
    # JSON files from other tools may carry NaN; it must not slip through a range check
    f = tmp_path / "nan.json"
    f.write_text(json.dumps(doc_with(battery__float_v_per_cell=NAN)))
    with pytest.raises(ConfigError, match=r"battery.float_v_per_cell = nan: allowed"):
        profile.load(str(f))
