# `spinrail fuzz [SCENARIO ...]`: closed-loop campaigns over random scenarios, judged against
# every limit (host_sim/limitcheck.py). Example i is generated from (seed, i) alone
# (scenario_gen.py), so a campaign gives the same verdicts and margins on one core, on all of
# them (the default) or on a Dask cluster (--scheduler). A failing example is shrunk in its
# worker, written to --out as a scenario file, and the command that replays it is printed.
# Exit status: 0 no limit crossed, 1 a limit crossed (or a run raised), 2 bad input,
# 4 the campaign could not finish (distrib.EXIT_LOST, as an internal error). Service warnings (host_sim/service.py)
# are counted and reported apart: a randomly drawn site that does not do its job (a weak
# rider, a cold battery) is not a limit crossing and does not fail the campaign.
# Guide: docs/fuzz.md.
import argparse
import csv
import io
import math
import sys
import threading
import time
from contextlib import contextmanager
from pathlib import Path

from host_sim import distrib, scenario_gen, service
from host_sim.errors import UserError
from host_sim.fileio import atomic_open, write_json

EVERY = 1 << 30  # keep one time-series row: a campaign needs the verdicts, not the series
ERROR = "error"  # failure key of a run that raised instead of finishing
MAX_REPLAY_LINES = 20


# ---- deliberate breakage, for demonstrations and for the tests that show fuzz catches it ------

def _no_cap_clamp():
    from controller import supercap
    orig = supercap.CapClamp.update

    def update(self, m, floor_mv):
        cfg = self.cfg  # the profile numbers the tick reads (array slots)
        saved = cfg[supercap._C_CLAMP_MV]
        # the clamp ignored: charge on to the sensor's full scale
        cfg[supercap._C_CLAMP_MV] = self.p.cap_fs_mv
        try:
            return orig(self, m, floor_mv)
        finally:
            cfg[supercap._C_CLAMP_MV] = saved

    supercap.CapClamp.update = update
    return lambda: setattr(supercap.CapClamp, "update", orig)


def _raised_ceiling():
    from controller import leadacid as la
    orig = la.ceiling_mv
    orig_update = la.LeadAcidCharger.update
    # the tick's ceiling is min(setpoint + compensation, cap) from the profile slots: raising
    # both by the same step raises the ceiling by it, as ceiling_mv() + step does
    slots = (la._C_ABS_MV, la._C_FLOAT_MV, la._C_EQ_MV, la._C_ABS_TOP_MV, la._C_FLOAT_TOP_MV,
             la._C_EQ_TOP_MV)

    def ceiling_mv(p, stage, temp_dc):
        return orig(p, stage, temp_dc) + 250 * p.cells  # +1.5 V per 12 V block

    def update(self, m, dt_ms, floor_mv):
        cfg = self.cfg
        saved = [cfg[i] for i in slots]
        for i in slots:
            if i != la._C_EQ_MV or cfg[i]:  # (0: equalize not allowed, and stays so)
                cfg[i] += 250 * self.p.cells
        try:
            return orig_update(self, m, dt_ms, floor_mv)
        finally:
            for i, v in zip(slots, saved):
                cfg[i] = v

    def undo():
        la.ceiling_mv = orig
        la.LeadAcidCharger.update = orig_update

    la.ceiling_mv = ceiling_mv
    la.LeadAcidCharger.update = update
    return undo


def _no_ovp():
    from controller import overvolt
    orig = overvolt.OverVoltGuard.update

    def update(self, bus_mv, dt_ms, now_ms, reset_req):
        return orig(self, 0, dt_ms, now_ms, reset_req)  # the guard is shown 0 V: never trips

    overvolt.OverVoltGuard.update = update
    return lambda: setattr(overvolt.OverVoltGuard, "update", orig)


def _no_dump():
    from controller import mppt
    undo_ovp = _no_ovp()
    orig = mppt.HillClimb.dump_duty
    mppt.HillClimb.dump_duty = lambda self, bus_mv: 0  # no overspeed dump either

    def undo():
        mppt.HillClimb.dump_duty = orig
        undo_ovp()
    return undo


MUTATIONS = {
    "no_cap_clamp": (_no_cap_clamp, "the supercap clamp is ignored (charges to full scale)"),
    "raised_ceiling": (_raised_ceiling, "every battery ceiling raised by 1.5 V per 12 V block"),
    "no_ovp": (_no_ovp, "the overvoltage guard never trips"),
    "no_dump": (_no_dump, "the dump load never engages (no guard trip, no overspeed dump)"),
}
_mut_lock = threading.Lock()
_mut = {"name": None, "count": 0, "undo": None}


@contextmanager
def mutation(name):
    """Install a named controller mutation in this process for the duration (reference-counted,
    so threads of one Dask worker share it; undone when the last task using it ends)."""
    if not name:
        yield
        return
    with _mut_lock:
        if _mut["count"] and _mut["name"] != name:
            raise RuntimeError("mutation %s requested while %s is installed" % (name, _mut["name"]))
        if _mut["count"] == 0:
            _mut["undo"] = MUTATIONS[name][0]()
            _mut["name"] = name
        _mut["count"] += 1
    try:
        yield
    finally:
        with _mut_lock:
            _mut["count"] -= 1
            if _mut["count"] == 0:
                _mut["undo"]()
                _mut["name"] = _mut["undo"] = None


# ---- one example (runs in a worker) ------------------------------------------------------------

def run_doc(doc, src="<fuzz>"):
    """Validate and run a scenario document; the RunResult."""
    from host_sim import runner
    from host_sim.scenario import load_doc
    return runner.run(load_doc(doc, src), progress=False, every=EVERY)


def _first_crossed(limits):
    crossed = [(v.crossed_at_s, j, k) for j, (k, v) in enumerate(limits.items()) if not v.held]
    return min(crossed)[2] if crossed else None


def _predicate(key, src):
    """fails(doc) for the shrinker: the same limit still crossed (or the same exception)."""
    from host_sim.scenario import ScenarioError

    def fails(doc):
        try:
            res = run_doc(doc, src)
        except ScenarioError:
            return False, None  # a step that made the scenario invalid is not kept
        except Exception as e:
            return (key == ERROR + ":" + type(e).__name__), None
        if key.startswith(ERROR):
            return False, None
        lim = res.limits[key]
        return (not lim.held), lim.crossed_at_s
    return fails


def example(ctx, i):
    """Generate, run and (on a failure) shrink example i. A JSON-able record."""
    bases = ctx["bases"]
    doc, bi = scenario_gen.generate(bases, ctx["seed"], i, ctx["max_duration_s"])
    src = "<fuzz example %d>" % i
    rec = {"i": i, "base": bases[bi]["name"], "seed": doc["seed"],
           "duration_s": doc["duration_s"], "events": len(doc.get("events", [])),
           "limits": None, "failed": None, "error": None, "shrunk": None, "shrink": None,
           "service": None}
    t_cross = None
    try:
        res = run_doc(doc, src)
    except Exception as e:  # the plant or the controller raised: a failure of its own kind
        rec["failed"] = ERROR + ":" + type(e).__name__
        rec["error"] = "%s: %s" % (type(e).__name__, e)
    else:
        rec["limits"] = {k: _lim(v) for k, v in res.limits.items()}
        rec["service"] = service.brief(res.service)
        rec["failed"] = _first_crossed(res.limits)
        if rec["failed"]:
            t_cross = res.limits[rec["failed"]].crossed_at_s
    if rec["failed"]:
        sh = scenario_gen.Shrinker(_predicate(rec["failed"], src), bases[bi],
                                   ctx["shrink_runs"])
        small = sh.shrink(doc, t_cross)
        info = {"runs": sh.runs, "duration_s": small["duration_s"],
                "events": len(small.get("events", [])),
                "fields": scenario_gen.changed_fields(small, bases[bi])}
        if not rec["failed"].startswith(ERROR):
            lim = run_doc(small, src).limits[rec["failed"]]
            info.update(_lim(lim))
        rec["shrunk"] = small
        rec["shrink"] = info
    return rec


def _lim(v):
    d = v.as_dict()
    return {"held": d["held"], "margin": d["margin"], "worst": d["worst"], "limit": d["limit"],
            "t_worst_s": d["t_worst_s"], "first_crossed_s": d["first_crossed_s"],
            "unit": d["unit"], **({"peak": d["peak"]} if "peak" in d else {})}


def run_chunk(ctx, task):
    """A task: examples [i0, i1) with the context's mutation (if any) installed."""
    i0, i1 = task
    with mutation(ctx.get("mutation")):
        return [example(ctx, i) for i in range(i0, i1)]


# ---- the campaign ------------------------------------------------------------------------------

class Campaign:
    def __init__(self, records, wall_s, where, seed, bases, mutation_name=None):
        self.records = records  # sorted by i
        self.wall_s = wall_s
        self.where = where
        self.seed = seed
        self.bases = bases
        self.mutation = mutation_name

    @property
    def failures(self):
        return [r for r in self.records if r["failed"]]

    def limit_names(self):
        for r in self.records:
            if r["limits"]:
                return list(r["limits"])
        return []

    def worst(self):
        """limit -> (margin, record, limit dict) of the worst margin over the campaign."""
        out = {}
        for r in self.records:
            for k, d in (r["limits"] or {}).items():
                if d["margin"] is None:
                    continue
                if k not in out or d["margin"] < out[k][0]:
                    out[k] = (d["margin"], r, d)
        return out

    def peaks(self):
        """limit -> (peak, its example's limit, record) of the largest raw value over the
        campaign relative to its own example's limit (bases differ: a hut's 12.5 A against a
        crank's 2.4 A), for the limits whose rule lets short excursions pass (the battery
        current's one-period spikes)."""
        out = {}
        for r in self.records:
            for k, d in (r["limits"] or {}).items():
                pk, lim = d.get("peak"), d.get("limit")
                if pk is None or not lim:
                    continue
                if k not in out or pk / lim > out[k][0] / out[k][1]:
                    out[k] = (pk, lim, r)
        return out

    def crossed_counts(self):
        n = {}
        for r in self.records:
            if r["limits"] is None and r["failed"]:
                n[r["failed"]] = n.get(r["failed"], 0) + 1
            for k, d in (r["limits"] or {}).items():
                if not d["held"]:
                    n[k] = n.get(k, 0) + 1
        return n


def campaign(bases, seed=1, examples=None, minutes=None, workers=None, scheduler=None,
             max_duration_s=300.0, shrink_runs=40, mutation_name=None, progress=True):
    """Run a campaign over loaded bases (scenario_gen.load_base). examples or minutes."""
    ctx = {"bases": bases, "seed": int(seed), "max_duration_s": float(max_duration_s),
           "shrink_runs": int(shrink_runs), "mutation": mutation_name}
    recs = {}
    failed = 0
    with distrib.Pool(workers, scheduler) as pool:
        if progress:
            print("fuzz: seed %d over %s on %s" % (seed, ", ".join(b["name"] for b in bases),
                                                   pool.describe()), file=sys.stderr)
        bar = distrib.Bar("fuzz", examples, minutes * 60.0 if minutes else None, progress)
        t0 = time.monotonic()
        deadline = t0 + minutes * 60.0 if minutes else None
        size = distrib.chunk_size(examples, pool.slots)
        try:
            for _task, got in pool.imap(run_chunk, ctx, distrib.chunks(0, examples, size),
                                        deadline):
                for r in got:
                    recs[r["i"]] = r
                    failed += 1 if r["failed"] else 0
                bar.update(len(recs), failed)
        finally:
            bar.update(len(recs), failed, force=True)
            bar.close()
        wall = time.monotonic() - t0
        where = pool.describe()
    return Campaign([recs[i] for i in sorted(recs)], wall, where, seed, bases, mutation_name)


# ---- output ------------------------------------------------------------------------------------

def failure_files(camp, out_dir):
    """Write each failure's shrunk scenario; [(record, path)]."""
    out = []
    for r in camp.failures:
        key = r["failed"].replace(":", "_")
        path = Path(out_dir) / ("fuzz_s%d_i%d_%s.json" % (camp.seed, r["i"], key))
        write_json(path, r["shrunk"])
        out.append((r, path))
    return out


def write_csv(camp, path):
    names = camp.limit_names()
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["i", "base", "seed", "duration_s", "events", "failed"]
               + ["%s_margin" % k for k in names] + ["service_warnings"]
               + [k for k, _ in service.FIGURES])
    for r in camp.records:
        lim = r["limits"] or {}
        sv = r.get("service") or {}
        w.writerow([r["i"], r["base"], r["seed"], r["duration_s"], r["events"], r["failed"] or ""]
                   + ["" if k not in lim or lim[k]["margin"] is None else lim[k]["margin"]
                      for k in names] + [" ".join(sv.get("warnings", ()))]
                   + ["" if sv.get(k) is None else sv[k] for k, _ in service.FIGURES])
    with atomic_open(path) as f:
        f.write(buf.getvalue())


def summary_doc(camp, files):
    worst = camp.worst()
    sim_s = sum(r["duration_s"] for r in camp.records)
    return {
        "seed": camp.seed,
        "bases": [b["name"] for b in camp.bases],
        "where": camp.where,
        "mutation": camp.mutation,
        "examples": len(camp.records),
        "wall_s": round(camp.wall_s, 3),
        "examples_per_s": round(len(camp.records) / camp.wall_s, 3) if camp.wall_s > 0 else None,
        "simulated_s": round(sim_s, 1),
        "failures": len(camp.failures),
        "crossed": camp.crossed_counts(),
        "worst": {k: {"margin": m, "example": r["i"], "base": r["base"], "worst": d["worst"],
                      "limit": d["limit"], "t_worst_s": d["t_worst_s"], "unit": d["unit"]}
                  for k, (m, r, d) in worst.items()},
        "peak": {k: {"peak": pk, "limit": lim, "example": r["i"], "base": r["base"]}
                 for k, (pk, lim, r) in camp.peaks().items()},
        "service": {
            "examples_with_warnings": sum(1 for r in camp.records
                                          if (r.get("service") or {}).get("warnings")),
            "warnings": service.counts(camp.records),
            "worst": {k: {"value": x, "example": r["i"], "base": r["base"]}
                      for k, (x, r) in service.worst(camp.records).items()},
        },
        "failed_examples": [{"i": r["i"], "base": r["base"], "failed": r["failed"],
                             "error": r["error"], "file": str(p), "shrink": r.get("shrink")}
                            for r, p in files],
    }


def print_summary(camp, files, out_dir, out=None):
    out = out or sys.stdout
    n = len(camp.records)
    sim_s = sum(r["duration_s"] for r in camp.records)
    rate = n / camp.wall_s if camp.wall_s > 0 else math.inf
    print("fuzz: %d examples of seed %d over %s in %.1f s on %s: %.2f examples/s, "
          "%.0f simulated s per wall s" % (n, camp.seed, ", ".join(b["name"] for b in camp.bases),
                                           camp.wall_s, camp.where, rate,
                                           sim_s / camp.wall_s if camp.wall_s else 0), file=out)
    if camp.mutation:
        print("controller deliberately broken: %s (%s)" % (camp.mutation,
                                                          MUTATIONS[camp.mutation][1]), file=out)
    counts = camp.crossed_counts()
    worst = camp.worst()
    print("%-14s %8s %12s %-5s %s" % ("limit", "crossed", "worst margin", "unit",
                                      "where (example, base, at s)"), file=out)
    for k in camp.limit_names():
        if k in worst:
            m, r, d = worst[k]
            print("%-14s %8d %12.4g %-5s %d, %s, %.2f" % (k, counts.get(k, 0), m, d["unit"],
                                                          r["i"], r["base"], d["t_worst_s"]),
                  file=out)
        else:
            print("%-14s %8d %12s %-5s %s" % (k, counts.get(k, 0), "-", "", "(not exercised)"),
                  file=out)
    for k, (pk, lim, r) in camp.peaks().items():
        if pk > lim:
            print("%s: largest one-period spike %.4g against its band of %.4g %s (example %d, "
                  "%s), let pass by the rule" % (k, pk, lim, r["limits"][k]["unit"], r["i"],
                                                 r["base"]), file=out)
    errs = {k: v for k, v in counts.items() if k.startswith(ERROR)}
    for k, v in errs.items():
        print("%-14s %8d   (the run raised %s)" % (ERROR, v, k.split(":", 1)[1]), file=out)
    service.print_campaign(camp.records, "example", "i", out)
    fails = camp.failures
    if not fails:
        print("failures: none; every limit held in every example", file=out)
        return
    by = {}
    for r in fails:
        by[r["failed"]] = by.get(r["failed"], 0) + 1
    print("failures: %d of %d examples (%s); shrunk scenarios in %s:" % (
        len(fails), n, ", ".join("%s %d" % kv for kv in sorted(by.items())), out_dir), file=out)
    for r, path in files[:MAX_REPLAY_LINES]:
        s = r["shrink"]
        if r["failed"].startswith(ERROR):
            what = r["error"]
        else:
            what = "%s crossed at %.2f s: worst %.4g %s against %.4g" % (
                r["failed"], s["first_crossed_s"], s["worst"], s["unit"], s["limit"])
        print("  spinrail simulate %s --out %s\n      # example %d (%s): %s; %.0f s, %d events "
              "after shrinking from %.0f s, %d events in %d runs" % (
                  path, Path(out_dir) / ("replay_i%d" % r["i"]), r["i"], r["base"], what,
                  s["duration_s"], s["events"], r["duration_s"], r["events"], s["runs"]),
              file=out)
    if len(files) > MAX_REPLAY_LINES:
        print("  ... and %d more (fuzz_summary.json lists them all)"
              % (len(files) - MAX_REPLAY_LINES), file=out)
    if camp.mutation:
        print("  (these replay with the same deliberate breakage only: --break-controller %s)"
              % camp.mutation, file=out)


# ---- command line ------------------------------------------------------------------------------

def load_bases(names):
    from host_sim.scenario import ScenarioError, builtin_names
    names = list(names) or builtin_names()
    out = []
    for n in names:
        try:
            out.append(scenario_gen.load_base(n))
        except ScenarioError as e:
            raise UserError(str(e))
    return out


def check_args(args):
    if args.examples is not None and args.examples < 1:
        raise UserError("--examples = %d: allowed 1 or more" % args.examples)
    if args.minutes is not None and not (args.minutes > 0 and math.isfinite(args.minutes)):
        raise UserError("--minutes = %g: allowed more than 0" % args.minutes)
    if not 0 <= args.seed < 2**63:
        raise UserError("--seed = %d: allowed 0 to 2**63 - 1" % args.seed)
    if args.workers is not None and args.workers < 1:
        raise UserError("--workers = %d: allowed 1 or more" % args.workers)
    if not 1.0 <= args.max_duration <= 7 * 86400:
        raise UserError("--max-duration = %g s: allowed 1 to 604800 s" % args.max_duration)
    if args.shrink_runs < 0:
        raise UserError("--shrink-runs = %d: allowed 0 or more" % args.shrink_runs)
    if args.break_controller and args.break_controller not in MUTATIONS:
        raise UserError("--break-controller = %s: allowed one of %s"
                        % (args.break_controller, ", ".join(MUTATIONS)))


def cmd_fuzz(args):
    check_args(args)
    bases = load_bases(args.scenarios)
    out = Path(args.out)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise UserError("--out %s: cannot create the folder (%s)" % (out, e))
    if args.scheduler and args.scheduler != "local" and args.workers is not None:
        print("fuzz: --workers is ignored with --scheduler (the cluster's workers are used)",
              file=sys.stderr)
    n = None if args.minutes else (args.examples or 100)
    camp = campaign(bases, args.seed, n, args.minutes, args.workers, args.scheduler,
                    args.max_duration, args.shrink_runs, args.break_controller,
                    progress=not args.quiet)
    if not camp.records:
        raise UserError("no example finished in --minutes %g" % args.minutes)
    files = failure_files(camp, out)
    write_csv(camp, out / "fuzz.csv")
    write_json(out / "fuzz_summary.json", summary_doc(camp, files))
    print_summary(camp, files, out)
    print("wrote %s/{fuzz.csv, fuzz_summary.json}%s" % (
        out, " and %d scenario files" % len(files) if files else ""), file=sys.stderr)
    return 1 if camp.failures else 0


def register(sub):
    sp = sub.add_parser(
        "fuzz", help="closed-loop campaign over random scenarios, against every limit",
        description="Run the controller against the plant over random scenarios made from the "
                    "given scenarios (default: every built-in): drive, ambient -10 to 50 C, battery "
                    "state and aging, component tolerances, supercap state, USB network tolerances "
                    "and assembly faults, and timed faults a correct design must survive. Example "
                    "i depends on --seed and i alone, so results do not depend on --workers or "
                    "the cluster. A failure is shrunk, written to --out as a scenario file and "
                    "its replay command printed. Service warnings (a site that did not do its job: "
                    "no_charge, dump_waste ...) are counted and reported apart, with the worst "
                    "service figures; they are not limit crossings and do not change the exit "
                    "status. Exit 0: no limit crossed; 1: a limit crossed; 2: bad input; 4: the "
                    "campaign could not finish (a worker died, the cluster went away) or an "
                    "internal error. Guide: docs/fuzz.md.")
    sp.add_argument("scenarios", nargs="*", metavar="SCENARIO",
                    help="base scenario file or built-in name (default: all built-ins)")
    g = sp.add_mutually_exclusive_group()
    g.add_argument("--examples", type=int, default=None, metavar="N",
                   help="number of examples (default 100)")
    g.add_argument("--minutes", type=float, default=None, metavar="M",
                   help="run examples 0, 1, 2, ... for this long instead")
    sp.add_argument("--seed", type=int, default=1, metavar="S", help="campaign seed (default 1)")
    sp.add_argument("--workers", type=int, default=None, metavar="W",
                    help="local worker processes (default: every core; 1 runs in this process)")
    sp.add_argument("--scheduler", default=None, metavar="ADDRESS",
                    help="run on an existing Dask distributed cluster, e.g. tcp://host:8786, "
                         "or 'local' to start a Dask cluster on this machine for the run "
                         "(--workers worker processes, default one per core)")
    sp.add_argument("--out", default="spinrail-out/fuzz", metavar="DIR",
                    help="folder for fuzz.csv, fuzz_summary.json and the failing scenarios "
                         "(default: %(default)s)")
    sp.add_argument("--max-duration", type=float, default=300.0, metavar="S",
                    help="longest simulated time of an example, s (default %(default)g)")
    sp.add_argument("--shrink-runs", type=int, default=40, metavar="N",
                    help="simulation runs the shrinker may spend per failure (default "
                         "%(default)d; 0: keep failures as found)")
    sp.add_argument("--quiet", action="store_true", help="no progress on stderr")
    sp.add_argument("--break-controller", default=None, help=argparse.SUPPRESS)
    sp.set_defaults(func=cmd_fuzz)
