# The plant side of `spinrail bench`: simulation speed, the same circuit against ngspice, and
# scenarios per second over both cores (vectorised batches, and scalar runs on a process pool
# for comparison, on the same scenarios). Medians of repeated runs, printed, never asserted.
import statistics
import time

from host_sim import runner
from host_sim.scenario import load_scenario


def sim_speedup(repeats=3):
    """Simulated seconds per wall second for the demo scenario (controller included): the
    median, and every run's figure (a shared machine's speed moves by tens of percent over a
    day, so the spread is printed beside the median)."""
    sc = load_scenario("demo")
    rates = []
    for _ in range(repeats):
        res = runner.run(sc, progress=False, every=20)
        rates.append(sc.duration_s / res.wall_s)
    return statistics.median(rates), rates


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


BENCH_BASES = ("demo", "crank_relief")
BENCH_SEED = 3
BENCH_MAX_S = 30.0


def bench_docs(examples):
    """The fuzz generator's examples 0..examples-1 (seed 3, up to 30 s simulated each) over the
    demo and crank_relief bases: the scenarios both batch figures run."""
    from host_sim import scenario_gen
    bases = [scenario_gen.load_base(n) for n in BENCH_BASES]
    return [scenario_gen.generate(bases, BENCH_SEED, i, BENCH_MAX_S)[0] for i in range(examples)]


def batch_scenarios_per_s(examples=96, workers=2):
    """Scenarios per wall second with the plant vectorised across scenarios
    (batch_runner.run_batch: one batch per worker process, limits judged). Returns (rate,
    workers, simulated seconds per scenario on average)."""
    from host_sim import batch_runner
    docs = bench_docs(examples)
    t0 = time.perf_counter()
    res = batch_runner.run_batch(docs, workers=workers)
    wall = time.perf_counter() - t0
    return len(res) / wall, workers, statistics.mean(r.scenario.duration_s for r in res)


def pool_scenarios_per_s(examples=96, workers=2):
    """The same scenarios as batch_scenarios_per_s, one scalar closed-loop run each, on a
    local process pool (the fuzz campaign's machinery, no shrinking): the figure to compare."""
    from host_sim import fuzz
    bases = fuzz.load_bases(list(BENCH_BASES))
    t0 = time.perf_counter()
    camp = fuzz.campaign(bases, seed=BENCH_SEED, examples=examples, workers=workers,
                         max_duration_s=BENCH_MAX_S, shrink_runs=0, progress=False)
    wall = time.perf_counter() - t0
    return len(camp.records) / wall, workers


def collect(quick=False, log=print):
    res = {}
    log("bench: simulation speed (demo) ...")
    med, runs = sim_speedup(2 if quick else 5)
    res["sim_speedup"] = round(med, 1)
    res["sim_speedup_runs"] = [round(x, 1) for x in runs]
    log("bench: against ngspice ...")
    try:
        ratio, err = vs_ngspice(1 if quick else 3)
        res["vs_ngspice"] = round(ratio, 1)
        res["vs_ngspice_error_pct"] = round(err, 4)
    except Exception as e:  # ngspice missing or failing: say so in the figures
        res["vs_ngspice"] = None
        res["vs_ngspice_error_pct"] = None
        log("bench: ngspice comparison unavailable: %s" % e)
    examples = 16 if quick else 96
    log("bench: %d scenarios vectorised across scenarios, one batch per core ..." % examples)
    rate, workers, mean_s = batch_scenarios_per_s(examples)
    res["batch_scenarios_per_s"] = round(rate, 2)
    res["batch_workers"] = workers
    res["batch_examples"] = examples
    res["batch_mean_duration_s"] = round(mean_s, 1)
    log("bench: the same scenarios, scalar runs on a process pool ...")
    rate, _ = pool_scenarios_per_s(examples, workers)
    res["pool_scenarios_per_s"] = round(rate, 2)
    return res
