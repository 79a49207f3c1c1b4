# Energy ledger: what the drive puts in equals what is stored, delivered and lost (within 0.5 %
# over a run), open loop with fixed duties and in closed loop with the real controller.
# The error that remains is the integrator's, so it must shrink as the sub-step shrinks: a
# flow missing from the books would not.
import copy
from pathlib import Path

import pytest

from controller.signals import Commands
from controller.supervisor import Supervisor
from host_sim import runner
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


# ---- issue 3: short, low-energy closed-loop runs -------------------------------------------
# A 20 s run of the hut's micro-wind mast in 2 m/s wind puts in only 20-35 J, so the 0.15 J the
# bus capacitor's backward Euler step used to leave unbooked at the first period (the bus jumps
# from 0 V onto the supercap bank's discharge diode) was 0.44-0.85 % of the books. The step's
# 1/2 C dV^2 is now booked as loss_bus_step_j.
HUT = load_scenario("hut_wind")


def _short_hut(seed, v0_per_cell, events):
    doc = copy.deepcopy(HUT.doc)
    doc["profile"] = HUT.profile_doc
    doc["duration_s"] = 20
    doc["seed"] = seed
    doc["drive"]["wind_mean_ms"] = 2.0
    doc["supercap"]["v0_per_cell"] = v0_per_cell
    doc["events"] = events
    return load_doc(doc, HUT.source)


# before the fix: 0.739 % (seed 1, battery disconnected at 1 s) and 0.526 % (built-in seed,
# bank at 2.2 V/cell, no fault)
@pytest.mark.parametrize("seed,v0_per_cell,events", [
    (1, 2.0, [{"t_s": 1.0, "kind": "battery_disconnected"}]),
    (HUT.seed, 2.2, []),
])
def test_short_low_energy_closed_loop_balances(seed, v0_per_cell, events):
    res = runner.run(_short_hut(seed, v0_per_cell, events), progress=False)
    led = res.ledger
    _check_books(led)
    assert led["in_j"] < 60.0  # it is the low-energy case this test is about
    assert led["loss_bus_step_j"] > 0.1  # the jump onto the bank's diode happened
    assert abs(led["balance_error_pct"]) < 0.5, led
    assert res.limits["ledger"].held


def test_bus_jump_is_booked_within_one_period():
    # One period in which the bus jumps from 0 V to the bank (about 12 V) while the rotor
    # hardly turns: the books close to the solver's tolerance, not to 1/2 C dV^2 (0.15 J).
    # Physics (RC charging from a stiff source, exact): charging C through a resistance by dV
    # dissipates 1/2 C dV^2 in it whatever the resistance; here one sub-step does almost all
    # of the jump, so the booked step loss is within 5 % below 1/2 C V^2 (the sub-steps'
    # squares sum to less than the square of their sum).
    plant = Plant(_short_hut(1, 2.0, []))
    sup = Supervisor(plant.p)
    plant.measure(sup.m)
    sup.tick(0)
    plant.step(sup.c, plant.p.period_ms / 1000.0)
    led = plant.ledger()
    jump_j = 0.5 * plant.c_bus * plant.v * plant.v
    assert plant.v > 10.0 and jump_j > 0.1
    assert 0.95 * jump_j <= led["loss_bus_step_j"] <= jump_j
    assert abs(led["balance_error_j"]) < 1e-5 * jump_j, led


def test_light_geared_rotor_keeps_the_ledger():
    """Regression (found by the closed-loop property under the dev profile): a slow crank into
    an empty bank, 20 ms period, one 20 ms sub-step. The crank's rotor (J = 0.3 g m^2 at the
    machine) on the machine's electrical load has h K^2 / (R_a J) = 3.3 > 2, so the rotor step
    fell back to its damped first-order form, and a slight hunting at a steady 82 rad/s built
    about 27 mJ per period: -0.52 % after 58 s. Sub-steps are now held under 2 J R_a / K^2."""
    sc = load_scenario(str(Path(__file__).parent / "regressions" / "crank_rotor_hunting.json"))
    res = runner.run(sc, progress=False)
    err = res.ledger["balance_error_pct"]
    assert abs(err) < 0.1, "ledger error %.3f %% (issue 3 asks for 0.5 %%; this case " \
        "gave 0.52 %% before the fix, 0.04 %% after)" % err


def test_a_load_that_steps_every_few_periods_keeps_the_ledger():
    """Regression (closed-loop property, a crank with the supercap reading stuck and the battery
    off: the bus cross-check switched the dump load in and out every few periods): the
    rotor's linearised coupling carried one period's slope across each load step, and the
    ledger drifted to -2.6 % in 20 s. A period whose loads step is now taken in finer
    sub-steps (-0.3 % here; -0.06 % at 5 ms sub-steps throughout)."""
    sc = load_scenario(str(Path(__file__).parent / "regressions" / "crank_dump_toggling.json"))
    res = runner.run(sc, progress=False)
    err = res.ledger["balance_error_pct"]
    assert abs(err) < 0.5, "ledger error %.3f %%" % err


def test_a_weak_crank_hunting_for_minutes_keeps_the_ledger():
    """Regression (fuzz seed 89, example 1192): a weak crank turning backwards at 45 rpm for
    three minutes, both converters near the top duty and the rotor hunting by 1-2 rad/s a
    period. At sub-steps of 2 J R_a / K^2 (11 ms here) the midpoint rotor step's error, second
    order in h, built -0.56 % against the 0.5 % the ledger allows; the rotor sub-step is now
    J R_a / K^2 (-0.13 %)."""
    sc = load_scenario(str(Path(__file__).parent / "regressions" / "crank_weak_hunting_ledger.json"))
    res = runner.run(sc, progress=False)
    err = res.ledger["balance_error_pct"]
    assert abs(err) < 0.25, "ledger error %.3f %% (0.56 %% before the fix)" % err


# ---- a full battery held on charge ------------------------------------------------------------
# Regression (issue: the ledger at SOC 1.0): the current a full plate cannot store was booked as
# gassing heat at OCV + v_p after the polarisation branch had already been advanced with it, so
# its v_p share was counted twice. Driving the demo's block alone at 1.5 A from full put the
# books 4.1 % above the input after 10 min (0.67 % after an hour); below full, 0.00 %.
def _battery_on_charge(soc0, i_a, seconds, h=0.025):
    from host_sim.plant.battery import Battery
    b = copy.deepcopy(DEMO.doc["battery"])
    b["soc0"] = soc0
    bat = Battery(b)
    e_in_j = 0.0
    v_max = 0.0
    for _ in range(int(round(seconds / 0.05))):
        for _ in range(2):
            v = bat.terminal_v(i_a)
            v_max = max(v_max, v)
            e_in_j += v * i_a * h
            bat.substep(i_a, h)
        bat.end_period(0.05)
    return bat, e_in_j, v_max


@pytest.mark.parametrize("soc0", [0.999, 1.0])
def test_full_battery_held_on_charge_keeps_its_books(soc0):
    bat, e_in_j, v_max = _battery_on_charge(soc0, 1.5, 600.0)
    books_j = bat.stored_total_j() + bat.loss_j
    assert e_in_j > 10000.0
    assert bat.soc > 0.999  # it stayed full: the current went to the side reaction
    # a full cell on charge rises to where the gassing takes the current (2.4 V/cell onset)
    assert v_max / bat.cells > DEMO.doc["battery"]["gas_onset_v_per_cell"]
    # the error left is the sub-step's (the RC branch's exact step against a constant I)
    assert abs(books_j - e_in_j) < 1e-4 * e_in_j, (books_j, e_in_j)


def _full_doc(seconds):
    doc = copy.deepcopy(DEMO.doc)
    doc["profile"] = DEMO.profile_doc
    doc["battery"]["soc0"] = 1.0
    doc["usb"]["devices"] = []
    doc["duration_s"] = seconds
    return doc


def test_full_battery_on_fixed_duty_keeps_the_plants_books():
    # the whole plant, scalar and batch (the batch calls the same Battery.substep): the rider
    # charges a full block through a fixed battery-converter duty for five minutes
    from host_sim.plant.batch import BatchPlant
    sc = load_doc(_full_doc(300), DEMO.source)
    cmds = _fixed(cap_duty=0, dump_duty=0, usb_conv=0, usb_on=0)
    scalar = Plant(sc)
    batch = BatchPlant([sc])
    for _ in range(int(round(300 / 0.05))):
        scalar.step(cmds, 0.05)
        batch.step([cmds], 0.05)
    for plant, led in ((scalar, scalar.ledger()), (batch.plants[0], batch.ledger(0))):
        _check_books(led)
        assert plant.batt.soc > 0.999  # it stayed full ...
        assert led["loss_batt_j"] > 2000.0  # ... and the charge went to the side reaction
        assert abs(led["balance_error_pct"]) < 0.5, led
