# The batch plant (host_sim/plant/batch.py) and its runner (host_sim/batch_runner.py) against
# the scalar closed loop (host_sim/runner.py), scenario by scenario.
#
# Tolerance: 1e-9 relative (1e-12 absolute near zero) on every compared value. The batch does
# the same floating-point operations in the same order as the scalar plant (numpy's elementwise
# + - * / are IEEE-exact like Python's, and numpy's log1p/exp/pow agree with the C library's
# on this project's machines), so a scenario's floats come out the same and the controller sees
# the same readings; 1e-9 only leaves room for printing. A wrong formula, a term booked in
# another order or a state leaking between scenarios shows as a difference many orders larger
# (a single flipped ADC count changes the controller's duties and the trajectory from there).
# On a numpy build whose SIMD log1p/exp/pow differ from the C library's by an ulp this test is
# the first to say so: the message names the scenario, the quantity and the first time.
import math

import numpy as np

from host_sim import batch_runner, runner, scenario_gen
from host_sim.plant.batch import BatchPlant
from host_sim.scenario import load_scenario

REL = 1e-9
ABS = 1e-12
SERIES = ("bus_v", "src_a", "batt_v", "batt_a", "cap_v", "cap_a", "usb_vbus_v", "machine_rpm",
          "batt_duty", "cap_duty", "dump_duty", "stage", "fault")
ENERGY = ("drive_in_j", "batt_stored_j", "cap_stored_j", "buscap_stored_j", "rotor_stored_j",
          "usb_out_j", "loads_out_j", "loss_diodes_j", "loss_conv_j", "loss_dump_j",
          "loss_bus_step_j", "balance_error_pct")


def _short(name, seconds):
    return batch_runner._scenario(load_scenario(name), seconds)


def _generated(i, seconds):
    bases = [scenario_gen.load_base(n) for n in ("demo", "crank_relief", "hut_wind",
                                                 "fault_parade")]
    doc, _ = scenario_gen.generate(bases, 11, i, 60.0)
    return batch_runner._scenario(doc, seconds)


def _close(a, b):
    return abs(a - b) <= ABS + REL * max(abs(a), abs(b))


def _same(ref, got, label):
    for name in SERIES:
        x, y = ref.series[name], got.series[name]
        assert len(x) == len(y), (label, name)
        bad = np.flatnonzero(np.abs(x - y) > ABS + REL * np.maximum(np.abs(x), np.abs(y)))
        assert bad.size == 0, "%s: %s differs first at t = %.2f s (%r vs %r)" % (
            label, name, ref.series["t_s"][bad[0]], x[bad[0]], y[bad[0]])
    for k in ENERGY:
        assert _close(ref.ledger[k], got.ledger[k]), (label, k, ref.ledger[k], got.ledger[k])
    for k, lim in ref.limits.items():
        a, b = lim.as_dict(), got.limits[k].as_dict()
        assert a["held"] == b["held"], (label, k)
        if a["worst"] is not None:
            assert _close(a["worst"], b["worst"]), (label, k, a, b)
    assert ref.ticks == got.ticks


# Four kinds of drive (pedal, crank at a 20 ms period, wind, a fault parade with surges and a
# disconnected battery) and two generated scenarios: mixed periods, mixed sub-step counts (the
# spin-ups take the scalar path), conducting and blocking bridges in one batch.
def _mix(parade_s):
    return [_short("demo", 20.0), _short("crank_relief", 12.0), _short("hut_wind", 20.0),
            _short("fault_parade", parade_s), _generated(0, 15.0), _generated(5, 15.0)]


def test_batch_reproduces_scalar_runs():
    scs = _mix(150.0)
    got = batch_runner.run_local(scs, every=1)
    for sc, g in zip(scs, got):
        ref = runner.run(sc, progress=False)
        _same(ref, g, sc.name)
        assert abs(g.ledger["balance_error_pct"]) < 0.5
    # the fault parade's events did happen in the batch (battery out at 20 s, the bus surge at
    # 140 s)
    fp = got[3]
    assert fp.ledger["surge_in_j"] > 0.0
    assert np.any(fp.series["fault"] != 0)


def test_scenario_result_does_not_depend_on_its_batch():
    scs = _mix(30.0)  # the battery goes at 20 s
    together = batch_runner.run_local(scs, every=1)
    for i in (0, 1, 3):  # alone, and in a batch of other scenarios in another order
        alone = batch_runner.run_local([scs[i]], every=1)[0]
        _same(alone, together[i], scs[i].name + " alone")
    others = [scs[4], scs[2], scs[0], scs[5]]
    shuffled = batch_runner.run_local(others, every=1)
    for sc, r in zip(others, shuffled):
        _same(together[scs.index(sc)], r, sc.name + " reordered")


def test_run_batch_on_two_processes_equals_one():
    names = ["demo", "hut_wind", "crank_relief", "fault_parade"]
    two = batch_runner.run_batch(names, duration_s=8.0, workers=2, every=1)
    one = batch_runner.run_batch(names, duration_s=8.0, workers=1, every=1)
    assert [r.scenario.name for r in two] == names
    for a, b in zip(one, two):
        _same(a, b, a.scenario.name)
        assert a.scenario.duration_s == 8.0
        assert a.ticks == int(round(8.0 * 1000 / a.scenario.profile.period_ms))


def test_split_balances_work():
    work = [100, 90, 10, 10, 5, 80]
    groups = batch_runner.split(work, 2)
    assert sorted(i for g in groups for i in g) == list(range(6))
    heaviest = max(sum(work[i] for i in g) for g in groups)
    # the best two-way split, by enumeration of every subset
    best = min(max(sum(w for i, w in enumerate(work) if m >> i & 1),
                   sum(w for i, w in enumerate(work) if not m >> i & 1))
               for m in range(1 << len(work)))
    assert heaviest == best
    assert batch_runner.split([5], 2) == [[0]]


def test_batch_plant_open_loop_state_arrays():
    # no controller: fixed commands for every scenario; the batch's states equal scalar plants'
    from controller.signals import Commands
    from host_sim.plant.plant import Plant
    scs = [_short("demo", 5.0), _short("hut_wind", 5.0)]
    c = Commands()
    c.batt_duty = 7000
    c.cap_duty = 6000
    c.usb_conv = 1
    bp = BatchPlant(scs)
    ref = [Plant(sc) for sc in scs]
    for _ in range(100):
        bp.step([c, c], 0.05)
        for p in ref:
            p.step(c, 0.05)
    v = bp.state("v")
    assert v.shape == (2,)
    for i, p in enumerate(ref):
        assert v[i] == p.v and bp.state("w")[i] == p.w
        assert bp.ledger(i)["drive_in_j"] == p.ledger()["drive_in_j"] > 0.0
        assert math.isfinite(bp.snapshot(i)["batt_v"])
