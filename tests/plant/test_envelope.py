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
