# The envelope's derived rider bound (host_sim/envelope.py) against the plant itself: turn the
# demo rig's crank at the speed the bound names, with the full dump and everything else off,
# and the plant must settle with the bus at the closed-loop limit and the drive putting in the
# power the bound names. The bound is then the plant's own steady state, not a fitted number.
import copy

import pytest

from controller.signals import DUTY_MAX, Commands
from host_sim import envelope
from host_sim.plant.plant import Plant
from host_sim.scenario import load_doc, load_scenario


@pytest.mark.parametrize("name", ["demo", "crank_relief"])
def test_the_rider_bound_is_the_plants_steady_state_at_the_bus_limit(name):
    base = load_scenario(name)
    hold_w, crank_rpm = envelope.scenario_hold(base)
    v_lim = base.profile.ovp_trip_mv / 1000.0 + base.doc["bus"]["clamp_margin_v"]
    doc = copy.deepcopy(base.doc)
    doc["profile"] = base.profile_doc
    doc["drive"] = {"kind": "scripted", "mode": "speed", "points": [[0, crank_rpm]]}
    doc["events"] = []
    plant = Plant(load_doc(doc, base.source))
    c = Commands()  # storage and USB off (the trip's safe state), the dump full
    c.dump_duty = DUTY_MAX
    for _ in range(200):  # 4 s at 20 ms: many time constants of the bus and the armature
        plant.step(c, 0.02)
    s = plant.snapshot()
    assert s["bus_v"] == pytest.approx(v_lim, rel=1e-3)
    assert s["p_in_w"] == pytest.approx(hold_w, rel=1e-3)


def test_demo_rig_holds_less_than_the_sprint_that_crossed():
    """The bound agrees with the crossing the campaign found: a 240 W sprint at 110 rpm took
    the demo rig's bus to 28.55 V against 28 V (fuzz seed 29, example 329; README known
    limits), so the demo's dump must hold less than 240 W at the limit, at about that speed."""
    hold_w, crank_rpm = envelope.scenario_hold(load_scenario("demo"))
    assert 200.0 < hold_w < 240.0
    assert 105.0 < crank_rpm < 120.0


def test_the_effort_cap_keeps_the_best_power_under_the_margin():
    assert envelope.effort_max(200.0, 100.0) == pytest.approx(1.8)
    assert envelope.effort_max(200.0, 100.0, margin=1.0) == pytest.approx(2.0)


def test_the_wind_bound_is_the_plants_steady_state_at_the_bus_limit():
    """A steady wind at envelope.wind_hold on the hut's mast, full dump, everything else off:
    the rotor settles with the bus at the closed-loop limit."""
    base = load_scenario("hut_wind")
    trip_v = base.profile.ovp_trip_mv / 1000.0
    v_hold = envelope.wind_hold(trip_v, base.doc)
    v_lim = trip_v + base.doc["bus"]["clamp_margin_v"]
    doc = copy.deepcopy(base.doc)
    doc["profile"] = base.profile_doc
    doc["drive"].update(wind_mean_ms=v_hold, turbulence_pct=0.0, gusts=[])
    doc["events"] = []
    plant = Plant(load_doc(doc, base.source))
    c = Commands()
    c.dump_duty = DUTY_MAX
    for _ in range(3000):  # 60 s: the rotor's inertia settles in seconds
        plant.step(c, 0.02)
    assert plant.snapshot()["bus_v"] == pytest.approx(v_lim, rel=2e-3)


def test_the_wind_envelope_keeps_the_peak_under_the_hold():
    """mean x (1 + 3 TI) + gusts = 90 % of the hold at the largest mean drawn."""
    v = envelope.wind_mean_max(20.0, 30.0, 2.0)
    assert v * (1.0 + 3.0 * 0.30) + 2.0 == pytest.approx(0.9 * 20.0)
    gusts = [{"t_s": 0.0, "duration_s": 10.0, "peak_ms": 3.0},
             {"t_s": 0.0, "duration_s": 10.0, "peak_ms": 1.0},
             {"t_s": 50.0, "duration_s": 4.0, "peak_ms": 3.5}]
    assert envelope.gust_peak_ms(gusts) == pytest.approx(4.0, rel=1e-4)  # coinciding ones add


# ---- the torque rise bound: one period of bus rise before the controller can answer --------
# A strong hand crank (84 rpm cadence, 150 W) on the crank_relief rig: its EMF at the end of
# the person's torque (1.15 x cadence) is 31.3 V, above the 28 V limit, so the bound is the
# one-period rise from the soft zone's bottom (21 V).
def _strong_crank(torque_nm, ramp_s, period_ms, stores_full=False):
    base = load_scenario("crank_relief")
    doc = copy.deepcopy(base.doc)
    doc["profile"] = copy.deepcopy(base.profile_doc)
    doc["profile"]["control"]["period_ms"] = period_ms
    doc["drive"].update(cadence_rpm=84, torque_max_nm=torque_nm, effort=1.0, power_start_w=150,
                        power_sustained_w=150, start_ramp_s=ramp_s)
    if stores_full:  # nothing but the dump can take the rider's power
        doc["battery"]["soc0"] = 1.0
        doc["supercap"]["v0_per_cell"] = 2.43
        doc["usb"]["devices"] = []
    return doc, base.source


@pytest.mark.parametrize("torque_nm,ramp_s", [(19.5, 0.005), (19.5, 1.0), (8.0, 0.005),
                                              (15.0, 0.05)])
def test_the_one_period_rise_bounds_the_plants_bus(torque_nm, ramp_s):
    """Open loop from the soft zone's bottom, nothing loading the bus: the plant's steepest
    rise over any 20 ms is at most the bound's, and the bus never passes the bound's E_max.
    The bound is not loose where the person's torque, not the cadence, ends the rise (8 N m:
    the plant reaches 84 % of it)."""
    doc, src = _strong_crank(torque_nm, ramp_s, 20)
    doc["drive"].update(pauses=[], reversals_s=[])
    doc["bus"]["initial_v"] = 21.0
    doc["events"] = []
    sc = load_doc(doc, src)
    r = envelope.scenario_rise(sc)
    plant = Plant(sc)
    c = Commands()  # everything off
    vs = []
    for _ in range(1500):  # 1.5 s in 1 ms steps
        plant.step(c, 0.001)
        vs.append(plant.v)
    worst_rise_v = max(b - a for a, b in zip(vs, vs[20:]))
    assert worst_rise_v <= r["rise_v"]
    assert max(vs) <= r["e_max_v"]
    if torque_nm == 8.0:
        assert worst_rise_v > 0.8 * r["rise_v"]


def test_the_rise_bound_separates_the_periods_that_hold_from_those_that_cannot():
    """Crossing 4 of the campaigns: a crank whose torque builds within 0.05 s after a rest, at
    66 % of the rider power bound, took the bus over its limit at a 50 ms period. With the
    stores full (only the dump can take the rider's power) the strong crank, its torque at
    95 % of the bound's cap for a 20 ms period, holds at 20 ms whatever the rise time (down to
    one period); at 50 ms the bound makes no promise (its one-period rise is 2.5 times the
    room). The bound is sufficient, not necessary: since the controller puts the dump on when
    a converter steps off a rising bus, that 50 ms case holds too (25.9 V seen), so only the
    bound's verdict is asserted there."""
    from host_sim import runner
    hold_w, _ = envelope.scenario_hold(load_scenario("crank_relief"))
    assert 150.0 < 0.7 * hold_w  # the rider is well inside the steady bound
    doc, src = _strong_crank(19.5, 0.02, 20)
    cap_nm = envelope.scenario_rise(load_doc(doc, src))["torque_cap_nm"]
    for ramp_s in (0.02, 0.05, 1.0):
        doc, src = _strong_crank(0.95 * cap_nm, ramp_s, 20, stores_full=True)
        sc = load_doc(doc, src)
        assert envelope.scenario_rise(sc)["inside"]
        assert runner.run(sc, progress=False).limits["bus"].held, ramp_s
    doc, src = _strong_crank(0.95 * cap_nm, 0.05, 50, stores_full=True)
    sc = load_doc(doc, src)
    r = envelope.scenario_rise(sc)
    assert not r["inside"] and r["rise_v"] > 2.0 * r["room_v"]


# ---- the generator draws inside the envelope ------------------------------------------------
def test_generated_examples_stay_inside_the_derived_envelope():
    """Invariant over 200 examples of `spinrail fuzz` (seed 3, every built-in base): the
    battery block matches its profile (cells, chemistry, capacity); a person's best power is
    within 90 % of what the full dump holds, their torque within the rise bound for the
    example's own period; a wind's three-sigma peak plus gusts within 90 % of the wind the
    dump holds. And the widened draws happen: 3-, 6- and 12-cell blocks, full batteries, rise
    times of a few periods, USB converter resistance of 0.1 ohm or more, gains at an edge."""
    from host_sim import scenario_gen as G
    bases = [G.load_base(n) for n in ("demo", "crank_relief", "hut_wind", "fault_parade")]
    seen = {"cells": set(), "soc1": 0, "fast": 0, "usb_r": 0, "edge": 0}
    for i in range(200):
        doc, bi = G.generate(bases, 3, i, 300.0)
        sc = load_doc(doc, bases[bi]["src"])
        b, p, d = sc.doc["battery"], sc.profile, sc.doc["drive"]
        assert (b["cells"], b["chemistry"]) == (p.cells, p.chemistry), i
        assert round(b["capacity_ah"] * 1000) == p.capacity_mah, i
        trip_v = sc.profile_doc["bus"].get("ovp_trip_v", 24) if "bus" in sc.profile_doc else 24
        if d["kind"] in envelope.HUMAN_DRIVES:
            hold_w, _ = envelope.dump_hold(trip_v, sc.doc)
            assert d["effort"] * d["power_start_w"] <= envelope.MARGIN * hold_w + 1e-9, i
            assert envelope.scenario_rise(sc)["inside"], i
            seen["fast"] += d["start_ramp_s"] <= 3 * p.period_ms / 1000.0
        elif d["kind"] == "wind":
            v_hold = envelope.wind_hold(trip_v, sc.doc)
            peak = (d["wind_mean_ms"] * (1 + envelope.TURB_SIGMAS * d["turbulence_pct"] / 100.0)
                    + envelope.gust_peak_ms(d["gusts"]))
            assert peak <= envelope.MARGIN * v_hold + 0.01, i  # (the mean is rounded to 0.01)
        seen["cells"].add(b["cells"])
        seen["soc1"] += b["soc0"] == 1.0
        seen["usb_r"] += sc.doc["usb"]["converter"]["r_out_ohm"] >= 0.1
        seen["edge"] += sum(abs(abs(sc.doc["sensors"][ch]["gain_err_pct"] or 0) - 0.5) < 1e-12
                            for ch in G.TOL_CHANNELS)
    assert seen["cells"] == {3, 6, 12}
    assert min(seen["soc1"], seen["fast"], seen["usb_r"], seen["edge"]) > 5, seen


@pytest.mark.parametrize("base", ["demo", "crank_relief", "hut_wind"])
@pytest.mark.parametrize("cells", [3, 6, 12])
@pytest.mark.parametrize("chem", ["flooded", "agm", "gel"])
def test_a_block_profile_is_a_valid_profile_for_its_block(base, cells, chem):
    from controller import profile
    from host_sim.scenario_gen import block_profile
    sc = load_scenario(base)
    prof, k = block_profile(sc.profile_doc, cells, chem, 0.6 * sc.doc["battery"]["capacity_ah"])
    p = profile.from_dict(prof)  # the controller's own checks across the sections pass
    assert (p.cells, p.chemistry) == (cells, chem)
    assert p.chg_limit_ma <= 0.4 * p.capacity_mah and p.tail_ma < p.chg_limit_ma
    assert k == (2 if cells == 12 else 1)
    top_v = cells * max(p.abs_cell_mv, p.eq_cell_mv) / 1000.0
    assert top_v < p.ovp_recover_mv / 1000.0  # the block charges below the soft zone
