# Energy ledger: what the drive puts in equals what is stored, delivered and lost (within 0.5 %
# over a run), open loop with fixed duties and in closed loop with the real controller.
# The error that remains is the integrator's, so it must shrink as the sub-step shrinks: a
# flow missing from the books would not.
import copy

import pytest

from controller.signals import Commands
from controller.supervisor import Supervisor
from host_sim.plant.plant import LEDGER_KEYS, Plant
from host_sim.scenario import builtin_names, load_doc, load_scenario

DEMO = load_scenario("demo")


def _fixed(**kw):
    c = Commands()
    c.batt_duty = 8000
    c.cap_duty = 7000
    c.dump_duty = 1500
    c.usb_conv = 1
    c.usb_on = 1
    c.batt_out = 1
    c.bal_mask = 0b100101
    for k, v in kw.items():
        setattr(c, k, v)
    return c


def _run_open(doc, seconds, cmds):
    sc = load_doc(doc, DEMO.source)
    plant = Plant(sc)
    for _ in range(int(round(seconds / 0.05))):
        plant.step(cmds, 0.05)
    return plant.ledger()


def _check_books(led):
    for k in LEDGER_KEYS:
        assert k in led
    for k, v in led.items():
        if k.startswith("loss_"):
            assert v >= -1e-9, (k, v)  # losses are never negative
    assert led["usb_out_j"] >= 0 and led["loads_out_j"] >= 0


def test_open_loop_fixed_duties_balances():
    doc = copy.deepcopy(DEMO.doc)
    doc["profile"] = DEMO.profile_doc
    doc["duration_s"] = 300
    led = _run_open(doc, 300, _fixed())
    _check_books(led)
    assert led["drive_in_j"] > 10000
    for k in ("batt_stored_j", "cap_stored_j", "usb_out_j", "loss_dump_j", "loss_conv_j",
              "loss_diodes_j", "loss_winding_j", "loss_friction_j", "loss_gear_j"):
        assert abs(led[k]) > 1.0, k  # every path of this run carries energy
    assert abs(led["balance_error_pct"]) < 0.5


def test_balance_error_is_integration_error():
    # A smooth run (rider spins up, bus starts near the battery so the bus capacitor's backward
    # Euler step sees no jump): the error is the rotor's first-order coupling error and must
    # fall roughly in proportion to the sub-step.
    doc = copy.deepcopy(DEMO.doc)
    doc["profile"] = DEMO.profile_doc
    doc["bus"]["initial_v"] = 11.9
    errs = []
    for h_ms in (25, 5, 1):
        d = copy.deepcopy(doc)
        d["solver"] = {"max_substep_ms": h_ms}
        errs.append(abs(_run_open(d, 60, _fixed())["balance_error_j"]))
    assert errs[1] < errs[0] / 2.5
    assert errs[2] < errs[0] / 10


def test_stores_feeding_the_port_balance():
    # nobody turns the drive: the battery and the bank feed the phones through their diodes
    doc = copy.deepcopy(DEMO.doc)
    doc["profile"] = DEMO.profile_doc
    doc["drive"] = {"kind": "scripted", "mode": "torque", "points": [[0, 0.0]]}
    doc["supercap"]["v0_per_cell"] = 2.3
    doc["usb"]["devices"] = [{"arrive_s": 0, "soc0": 0.1}]
    led = _run_open(doc, 120, _fixed(batt_duty=0, cap_duty=0, dump_duty=0))
    assert led["drive_in_j"] == 0.0
    assert led["usb_out_j"] > 500
    assert led["batt_stored_j"] < 0 and led["cap_stored_j"] < 0
    assert abs(led["balance_error_pct"]) < 0.5


@pytest.mark.parametrize("name", builtin_names())
def test_builtin_closed_loop_balances(name):
    sc = load_scenario(name)
    plant = Plant(sc)
    sup = Supervisor(sc.profile)
    dt = sc.profile.period_ms / 1000.0
    now_ms = 0
    for _ in range(int(round(sc.duration_s / dt))):
        plant.measure(sup.m)
        sup.tick(now_ms)
        plant.step(sup.c, dt)
        now_ms += sc.profile.period_ms
    led = plant.ledger()
    _check_books(led)
    assert led["drive_in_j"] > 1000
    assert abs(led["balance_error_pct"]) < 0.5, led
