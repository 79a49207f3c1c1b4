# Closed-loop runs of many scenarios at once: one BatchPlant (host_sim/plant/batch.py) per
# worker process advances its share of the scenarios together, one Supervisor per scenario
# ticks in a Python loop (the controller is per-scenario integer logic), and every scenario is
# judged by the same oracle as a single run (host_sim/limitcheck.py) on the same snapshots.
# The batch is split across processes (host_sim/distrib.py's pool) so both cores are used.
#
# A scenario's result does not depend on the other scenarios in its batch or on the number of
# workers (tests/plant/test_batch.py), and on a given machine it equals runner.run's.
import copy
import time

import numpy as np

from controller.compat import TICKS_MASK
from controller.supervisor import Supervisor
from host_sim import distrib
from host_sim.limitcheck import LimitChecker
from host_sim.plant.batch import BatchPlant
from host_sim.runner import CLOCK_START_MS, COLUMN_NAMES, RunResult, _row


def _scenario(x, duration_s):
    """A Scenario from a Scenario, a built-in name or path, or a scenario document."""
    from host_sim.scenario import Scenario, load_doc, load_scenario
    if isinstance(x, Scenario):
        sc = x
    elif isinstance(x, dict):
        sc = load_doc(x, "<batch>")
    else:
        sc = load_scenario(x)
    if duration_s is not None and duration_s != sc.duration_s:
        # the resolved document is not re-validated (derived fields are filled in): the same
        # scenario with another length, as the plant reads it (events later than the end
        # never fire)
        sc = copy.copy(sc)
        sc.doc = dict(sc.doc, duration_s=float(duration_s))
        sc.duration_s = float(duration_s)
    return sc


def run_local(scenarios, every=None):
    """Run Scenario objects together in this process; a RunResult each, in order. every: keep
    one time-series row in `every` periods (None: no rows). wall_s of a result is the batch's
    wall time shared out by the scenarios' periods."""
    n = len(scenarios)
    bp = BatchPlant(scenarios)
    sups = [Supervisor(sc.profile) for sc in scenarios]
    per_ms = [sc.profile.period_ms for sc in scenarios]
    dts = [ms / 1000.0 for ms in per_ms]
    n_per = [int(round(sc.duration_s * 1000.0 / ms)) for sc, ms in zip(scenarios, per_ms)]
    checkers = [LimitChecker.for_scenario(sc) for sc in scenarios]  # from the profile document
    plants = bp.plants
    snaps = [p.snapshot() for p in plants]
    rows = [[] for _ in range(n)]
    now = [CLOCK_START_MS] * n
    order = sorted(range(n), key=lambda i: n_per[i])  # scenarios leave the batch in this order
    gone = 0
    alive = list(range(n))
    t0 = time.perf_counter()
    for k in range(max(n_per, default=0)):
        while gone < n and n_per[order[gone]] <= k:
            gone += 1
            alive = sorted(order[gone:])
        cmds = []
        for i in alive:
            sup = sups[i]
            plants[i].measure(sup.m)
            sup.tick(now[i])
            c = sup.c
            checkers[i].check_usb(k * dts[i], snaps[i]["usb_vbus_v"], c.usb_on)
            cmds.append(c)
        bp.step(cmds, [dts[i] for i in alive], alive)
        for i, c in zip(alive, cmds):
            s = plants[i].snapshot()
            snaps[i] = s
            checkers[i].check((k + 1) * dts[i], s, c, c.stage)
            if every is not None and k % every == 0:
                rows[i].append(_row(s, c, checkers[i].doc))
            now[i] = (now[i] + per_ms[i]) & TICKS_MASK
    wall = time.perf_counter() - t0
    total = max(1, sum(n_per))
    out = []
    for i, sc in enumerate(scenarios):
        led = plants[i].ledger()
        limits = checkers[i].finish(n_per[i] * dts[i], led["balance_error_pct"])
        series = {name: np.array([r[j] for r in rows[i]], dtype=float)
                  for j, name in enumerate(COLUMN_NAMES)}
        out.append(RunResult(sc, series, limits, led, n_per[i], wall * n_per[i] / total))
    return out


def _run_chunk(ctx, task):
    """Worker side: one batch of scenarios by index."""
    _, idx = task
    return run_local([ctx["scenarios"][i] for i in idx], ctx["every"])


def split(n_periods, workers):
    """Indices in `workers` groups of about equal work (longest first, to the lightest)."""
    groups = [[] for _ in range(workers)]
    load = [0] * workers
    for i in sorted(range(len(n_periods)), key=lambda i: -n_periods[i]):
        g = load.index(min(load))
        groups[g].append(i)
        load[g] += n_periods[i]
    return [sorted(g) for g in groups if g]


def run_batch(scenarios, duration_s=None, workers=2, every=None):
    """Run scenarios (Scenario objects, built-in names, paths or documents) in closed loop,
    vectorised across scenarios, split over `workers` processes. duration_s: run each for this
    long instead of its own duration. A runner.RunResult per scenario, in order (limits judged
    by limitcheck, ledger, worst values; series only if every is given)."""
    scs = [_scenario(x, duration_s) for x in scenarios]
    if not scs:
        return []
    work = [sc.duration_s * 1000.0 / sc.profile.period_ms for sc in scs]
    groups = split(work, max(1, min(int(workers), len(scs))))
    if len(groups) == 1:
        return run_local(scs, every)
    ctx = {"scenarios": scs, "every": every}
    out = [None] * len(scs)
    with distrib.Pool(len(groups)) as pool:
        for (_, idx), res in pool.imap(_run_chunk, ctx, list(enumerate(groups))):
            for i, r in zip(idx, res):
                out[i] = r
    return out
