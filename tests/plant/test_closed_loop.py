# The plant and the real controller in a tiny closed loop (the runner's path, minus reports).
import math

import pytest

from controller.supervisor import Supervisor
from host_sim.plant.plant import Plant
from host_sim.scenario import builtin_names, load_scenario


def run_loop(sc, seconds):
    plant = Plant(sc)
    sup = Supervisor(sc.profile)
    dt_s = sc.profile.period_ms / 1000.0
    now_ms = 0
    snaps = []
    for _ in range(int(round(seconds / dt_s))):
        plant.measure(sup.m)
        sup.tick(now_ms)
        plant.step(sup.c, dt_s)
        snaps.append(plant.snapshot())
        now_ms += sc.profile.period_ms
    return plant, sup, snaps


def test_demo_first_minute_charges_everything():
    sc = load_scenario("demo")
    plant, _, snaps = run_loop(sc, 60.0)
    s = snaps[-1]
    assert 14.0 < s["bus_v"] < 24.0  # a pedalled bus that can feed a buck into 12 V, below the trip
    assert s["batt_a"] > 0.5  # the battery charges
    assert s["cap_v"] > 5.0  # the bank fills
    assert s["usb_devices_charging"] >= 1  # phone A attached at 20 s
    for x in snaps:
        for k, v in x.items():
            assert k == "p_ideal_w" or k == "wind_ms" or math.isfinite(v), (k, v)
    assert abs(plant.ledger()["balance_error_pct"]) < 0.5


@pytest.mark.parametrize("name", builtin_names())
def test_builtins_load_and_step(name):
    sc = load_scenario(name)
    _, _, snaps = run_loop(sc, 5.0)
    assert snaps[-1]["t_s"] == pytest.approx(5.0)


def test_hydro_drive_runs_and_reports_p_ideal():
    from host_sim.scenario import load_doc

    sc = load_doc({"duration_s": 30, "drive": {"kind": "hydro", "head_m": 6, "flow_lps": 4,
                                                "runaway_rpm": 900},
                   "machine": {"ke_v_per_krpm": 30, "ra_ohm": 0.6},
                   "profile": "hut_wind", "battery": {"soc0": 0.4}})
    plant, _, snaps = run_loop(sc, 30.0)
    s = snaps[-1]
    # P_max = rho g Q H eta = 1000 x 9.81 x 0.004 x 6 x 0.6 = 141 W at the turbine shaft
    assert 60.0 < s["p_ideal_w"] < 141.3
    assert 0.0 < s["p_in_w"] <= 141.3 + 1e-6
    last = snaps[-200:]  # the last 10 s
    assert sum(x["batt_a"] for x in last) / len(last) > 0.5  # the battery charges
    assert max(x["bus_v"] for x in last) < 24.0  # below the trip at the turbine's speed
    assert abs(plant.ledger()["balance_error_pct"]) < 0.5
