# The plant side of `spinrail bench`: simulation speed, the same circuit against ngspice, and
# scenarios per second over both cores. Medians of repeated runs, printed, never asserted.
import os
import statistics
import time

from host_sim import runner
from host_sim.scenario import load_scenario


def sim_speedup(repeats=3):
    """Simulated seconds per wall second for the demo scenario (controller included)."""
    sc = load_scenario("demo")
    rates = []
    for _ in range(repeats):
        res = runner.run(sc, progress=False, every=20)
        rates.append(sc.duration_s / res.wall_s)
    return statistics.median(rates)


def vs_ngspice(repeats=3, seconds=5.0, ramp_s=0.8):
    """ngspice wall time / ours on the generator-bridge-bus-load circuit over the same
    simulated time (a speed ramp, so both integrate a transient), and the difference in mean
    bus voltage in %."""
    from host_sim import spice
    ratios, errs = [], []
    for _ in range(repeats):
        r = spice.compare(seconds=seconds, ramp_s=ramp_s)
        ratios.append(r["wall_ratio"])
        errs.append(abs(r["bus_diff_pct"]))
    return statistics.median(ratios), statistics.median(errs)


def batch_scenarios_per_s(examples=24, workers=None):
    """Fuzz-style scenarios (30 s simulated each) per wall second on a local process pool over
    all cores. The plant is not vectorised across scenarios yet: this is the pool's figure."""
    from host_sim import fuzz
    workers = workers or os.cpu_count() or 1
    bases = fuzz.load_bases(["demo", "crank_relief"])
    t0 = time.perf_counter()
    camp = fuzz.campaign(bases, seed=3, examples=examples, workers=workers,
                         max_duration_s=30.0, shrink_runs=0, progress=False)
    wall = time.perf_counter() - t0
    return len(camp.records) / wall, workers


def collect(quick=False, log=print):
    res = {}
    log("bench: simulation speed (demo) ...")
    res["sim_speedup"] = round(sim_speedup(2 if quick else 3), 1)
    log("bench: against ngspice ...")
    try:
        ratio, err = vs_ngspice(1 if quick else 3)
        res["vs_ngspice"] = round(ratio, 1)
        res["vs_ngspice_error_pct"] = round(err, 4)
    except Exception as e:  # ngspice missing or failing: say so in the figures
        res["vs_ngspice"] = None
        res["vs_ngspice_error_pct"] = None
        log("bench: ngspice comparison unavailable: %s" % e)
    log("bench: batch scenarios on a process pool ...")
    rate, workers = batch_scenarios_per_s(8 if quick else 24)
    res["batch_scenarios_per_s"] = round(rate, 2)
    res["batch_workers"] = workers
    return res
