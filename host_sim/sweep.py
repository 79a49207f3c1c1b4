# `spinrail sweep SCENARIO --vary FIELD=DIST ...`: Monte Carlo over component tolerances,
# temperatures and drive patterns. Sample i draws every varied field from numpy's Generator
# seeded with (seed, i) alone, so the same seed gives the same samples and results on one core,
# all of them or a Dask cluster. Every drawn scenario is validated before anything runs.
# Writes sweep.csv (one row per sample), sweep.png (histograms of the margins, the limit
# marked, and of the energy delivered), sweep_values.png (each worst margin and service figure
# against each varied value, flagged samples marked: host_sim/sweep_plots.py) and
# sweep_summary.json; prints the worst case per limit and the flagged samples (blocked for
# most of the run, never charged).
# Exit status: 0 every limit held in every sample, 1 a limit crossed, 2 bad input, 4 the sweep
# could not finish (distrib.EXIT_LOST, as an internal error). Service warnings
# (host_sim/service.py) are counted per code and reported
# beside the limits; they do not change the exit status. Grammar and examples: docs/fuzz.md.
import copy
import csv
import io
import json
import math
import re
import sys
import time
from pathlib import Path

import numpy as np

from host_sim import distrib, scenario_gen, service, sweep_plots
from host_sim.errors import UserError
from host_sim.fileio import atomic_open, atomic_path, write_json

ENERGY = (("batt_stored_j", "battery"), ("cap_stored_j", "supercap"), ("usb_out_j", "USB"))
ENERGY_COLS = ("drive_in_j", "batt_stored_j", "cap_stored_j", "usb_out_j", "loads_out_j")
DISTS = ("uniform(lo,hi)", "normal(mean,sd)", "pct(p)", "int(lo,hi)", "loguniform(lo,hi)",
         "choice(a,b,...)")


# ---- the DIST grammar ----------------------------------------------------------------------------

class Vary:
    """One --vary FIELD=DIST: the field's path and schema entry, the distribution and the
    base value (the scenario's resolved value, for pct)."""

    def __init__(self, text, field, parts, f, kind, args, base_v):
        self.text = text
        self.field = field
        self.parts = parts
        self.f = f
        self.kind = kind
        self.args = args
        self.base_v = base_v

    def draw(self, rng):
        k, a = self.kind, self.args
        if k == "uniform":
            x = rng.uniform(a[0], a[1])
        elif k == "normal":
            x = rng.normal(a[0], a[1])
        elif k == "pct":
            x = self.base_v * (1.0 + a[0] / 100.0 * rng.uniform(-1.0, 1.0))
        elif k == "loguniform":
            x = math.exp(rng.uniform(math.log(a[0]), math.log(a[1])))
        elif k == "int":
            return int(rng.integers(int(a[0]), int(a[1]) + 1))
        else:
            return a[int(rng.integers(len(a)))]
        return float("%.6g" % x)


def _bad(text, msg):
    return UserError("--vary %s: %s" % (text, msg))


def _range(f):
    return ("%g to %g %s" % (f.lo, f.hi, f.unit if f.unit != "1" else "")).strip()


def _token(s):
    s = s.strip()
    try:
        return json.loads(s)
    except ValueError:
        return s.strip("'\"")


def parse_vary(text, raw, resolved, drive_kind):
    """Parse and check one --vary against the base scenario. UserError on anything wrong."""
    if "=" not in text:
        raise _bad(text, "expected FIELD=DIST, e.g. battery.ambient_c=uniform(-10,50)")
    field, dist = (x.strip() for x in text.split("=", 1))
    try:
        parts = scenario_gen.parse_path(field)
        f = scenario_gen.schema_field(parts, drive_kind)
    except KeyError as e:
        raise _bad(text, "%s: no such scenario field (%s); fields and ranges: docs/scenario.md"
                   % (field, e.args[0]))
    for j, p in enumerate(parts):
        if isinstance(p, int):
            lst = scenario_gen.get_path(raw, parts[:j])
            n = len(lst) if isinstance(lst, list) else 0
            if p >= n:
                raise _bad(text, "%s: the scenario has %d item(s) in %s (allowed index 0 to %d)"
                           % (field, n, scenario_gen.path_text(parts[:j]), n - 1))
    if f.kind not in ("N", "I", "B", "C", "S"):
        raise _bad(text, "%s cannot be varied: it is %s; vary a number, a switch or a choice "
                   "inside it" % (field, {"L": "a list", "O": "a section", "P": "the profile",
                                          "PTS": "a list of points", "SPANS": "a list of spans",
                                          "TIMES": "a list of times"}.get(f.kind, f.kind)))
    m = re.fullmatch(r"\s*([a-z]+)\s*\((.*)\)\s*", dist)
    if not m:
        raise _bad(text, "'%s' is not a distribution; allowed: %s" % (dist, ", ".join(DISTS)))
    kind, body = m.group(1), m.group(2)
    toks = [t for t in (x.strip() for x in body.split(",")) if t != ""] if body.strip() else []
    base_v = scenario_gen.get_path(resolved, parts)
    if kind == "choice":
        if not toks:
            raise _bad(text, "choice() needs at least one value")
        args = [_token(t) for t in toks]
        for v in args:
            _check_value(text, field, f, v)
        return Vary(text, field, parts, f, kind, args, base_v)
    nums = {"uniform": 2, "normal": 2, "pct": 1, "int": 2, "loguniform": 2}
    if kind not in nums:
        raise _bad(text, "unknown distribution '%s'; allowed: %s" % (kind, ", ".join(DISTS)))
    try:
        args = [float(t) for t in toks]
    except ValueError:
        raise _bad(text, "%s() takes numbers, got (%s)" % (kind, body))
    if len(args) != nums[kind] or not all(math.isfinite(a) for a in args):
        raise _bad(text, "%s() takes %d finite number(s), got (%s)" % (kind, nums[kind], body))
    if f.kind in ("B", "C", "S"):
        raise _bad(text, "%s takes one of a set of values: use choice(...) (allowed: %s)" % (
            field, "true, false" if f.kind == "B" else ", ".join(f.choices or ()) or "strings"))
    if f.kind == "I" and kind != "int":
        raise _bad(text, "%s is a whole number: use int(lo,hi) or choice(...) (allowed %s)"
                   % (field, _range(f)))
    v = Vary(text, field, parts, f, kind, args, base_v)
    if kind in ("uniform", "int", "loguniform"):
        lo, hi = args
        if lo > hi:
            raise _bad(text, "%s(lo, hi) needs lo <= hi" % kind)
        if kind == "loguniform" and lo <= 0:
            raise _bad(text, "loguniform(lo, hi) needs lo > 0")
        for x in (lo, hi):
            _check_value(text, field, f, x)
    elif kind == "normal":
        if args[1] < 0:
            raise _bad(text, "normal(mean, sd) needs sd >= 0")
        _check_value(text, field, f, args[0])
    elif kind == "pct":
        if not (isinstance(base_v, (int, float)) and not isinstance(base_v, bool)):
            raise _bad(text, "pct() varies around the base value, and %s has none in the "
                       "scenario (it is %s): use uniform(lo,hi)" % (field, json.dumps(base_v)))
        if not 0 <= args[0] <= 100:
            raise _bad(text, "pct(p) needs p from 0 to 100")
        for s in (-1.0, 1.0):
            _check_value(text, field, f, base_v * (1.0 + s * args[0] / 100.0),
                         "pct(%g) around the base %g" % (args[0], base_v))
    return v


def _check_value(text, field, f, v, how=""):
    why = " (%s)" % how if how else ""
    if f.kind in ("N", "I"):
        if v is None and f.nullable:
            return
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise _bad(text, "%s = %s: allowed a number from %s" % (field, json.dumps(v),
                                                                     _range(f)))
        if f.kind == "I" and v != int(v):
            raise _bad(text, "%s = %g: allowed a whole number from %s" % (field, v, _range(f)))
        if not f.lo <= v <= f.hi:
            raise _bad(text, "%s = %g%s: allowed %s" % (field, v, why, _range(f)))
    elif f.kind == "B":
        if not isinstance(v, bool):
            raise _bad(text, "%s = %s: allowed true or false" % (field, json.dumps(v)))
    elif f.kind == "C":
        if v not in f.choices and not (v is None and f.nullable):
            raise _bad(text, "%s = %s: allowed one of %s" % (field, json.dumps(v),
                                                              ", ".join(f.choices)))
    elif f.kind == "S" and not isinstance(v, str):
        raise _bad(text, "%s = %s: allowed a string" % (field, json.dumps(v)))


# ---- samples ---------------------------------------------------------------------------------------

def draw(varies, seed, i):
    """The drawn values of sample i: from (seed, i) alone, one draw per --vary in order."""
    rng = np.random.default_rng([int(seed), int(i)])
    return [v.draw(rng) for v in varies]


def sample_doc(raw, paths, values, i):
    doc = copy.deepcopy(raw)
    for parts, x in zip(paths, values):
        scenario_gen.set_path(doc, parts, x)
    doc["name"] = "%s_sample%d" % (raw.get("name", "sweep"), i)
    return doc


def run_chunk(ctx, task):
    """Runs in a worker: samples [i0, i1) with their drawn values."""
    from host_sim import runner
    from host_sim.scenario import load_doc
    i0, i1, vals = task
    out = []
    for i, values in zip(range(i0, i1), vals):
        doc = sample_doc(ctx["raw"], ctx["paths"], values, i)
        rec = {"i": i, "values": values, "limits": None, "energy": None, "error": None,
               "service": None, "blocked_share": None, "flags": []}
        try:
            res = runner.run(load_doc(doc, "<sweep sample %d>" % i), progress=False, every=1 << 30)
        except Exception as e:
            rec["error"] = "%s: %s" % (type(e).__name__, e)
        else:
            rec["limits"] = {k: {"held": d["held"], "margin": d["margin"], "worst": d["worst"],
                                 "limit": d["limit"], "unit": d["unit"]}
                             for k, d in ((k, v.as_dict()) for k, v in res.limits.items())}
            rec["energy"] = {k: round(res.ledger.get(k, 0.0), 3) for k in ENERGY_COLS}
            rec["energy"]["balance_error_pct"] = round(res.ledger["balance_error_pct"], 5)
            rec["service"] = service.brief(res.service)
            rec["blocked_share"] = blocked_share(res.service, res.scenario.duration_s)
            rec["flags"] = flags(rec)
        out.append(rec)
    return out


# ---- flagged samples ---------------------------------------------------------------------------
# A sample is flagged "blocked" when the controller reported the battery stage blocked for at
# least this share of the run (most of it: a trip or a short fault is not what a sweep is
# looking for; ours), and "never_charged" when it raised a service warning that the battery
# gained no charge although the source turned, whatever the cause (host_sim/service.py: a
# controller failure, a protective block, loads above the source, a machine too weak).
BLOCKED_SHARE = 0.5
FLAGS = ("blocked", "never_charged")
NEVER_CHARGED_CODES = ("no_charge", "charge_blocked", "loads_exceed_source",
                       "source_below_battery")


def blocked_share(sv, duration_s):
    if not sv or not duration_s:
        return None
    return round(sv["blocked"]["total_s"] / duration_s, 4)


def flags(rec):
    out = []
    b = rec.get("blocked_share")
    if b is not None and b >= BLOCKED_SHARE:
        out.append("blocked")
    codes = (rec.get("service") or {}).get("warnings", ())
    if any(c in codes for c in NEVER_CHARGED_CODES):
        out.append("never_charged")
    return out


def flagged(records):
    """flag -> [sample numbers]."""
    return {f: [r["i"] for r in records if f in (r.get("flags") or ())] for f in FLAGS}


class Sweep:
    def __init__(self, base, varies, seed, records, wall_s, where):
        self.base = base
        self.varies = varies
        self.seed = seed
        self.records = records
        self.wall_s = wall_s
        self.where = where

    def limit_names(self):
        for r in self.records:
            if r["limits"]:
                return list(r["limits"])
        return []

    def crossed(self):
        return [r for r in self.records if r["error"] or not all(
            d["held"] for d in r["limits"].values())]


def prepare(base, vary_texts, samples, seed):
    """Parse the --vary list and draw and validate every sample; [values per sample]."""
    from host_sim.scenario import ScenarioError, load_doc
    raw, res = base["raw"], base["resolved"]
    kind = base["facts"]["drive_kind"]
    if not vary_texts:
        raise UserError("--vary: give at least one FIELD=DIST, e.g. --vary "
                        "battery.ambient_c=uniform(-10,50)")
    varies = [parse_vary(t, raw, res, kind) for t in vary_texts]
    seen = {}
    for v in varies:
        key = scenario_gen.path_text(v.parts)
        if key in seen:
            raise _bad(v.text, "%s is already varied by --vary %s" % (key, seen[key]))
        seen[key] = v.text
    paths = [v.parts for v in varies]
    values = []
    for i in range(samples):
        vals = draw(varies, seed, i)
        for v, x in zip(varies, vals):  # an unbounded draw (normal) can leave the range
            if v.f.kind in ("N", "I") and x is not None and not v.f.lo <= x <= v.f.hi:
                raise _bad(v.text, "sample %d drew %s = %g: allowed %s (narrow the "
                           "distribution, or use uniform(lo,hi))" % (i, v.field, x, _range(v.f)))
        try:
            load_doc(sample_doc(raw, paths, vals, i), "sample %d of --vary %s" % (
                i, " ".join(vary_texts)))
        except ScenarioError as e:
            raise UserError(str(e))
        values.append(vals)
    return varies, values


def sweep(base, vary_texts, samples=64, seed=1, workers=None, scheduler=None, progress=True):
    varies, values = prepare(base, vary_texts, samples, seed)
    ctx = {"raw": base["raw"], "paths": [v.parts for v in varies]}
    recs = {}
    bad = 0
    with distrib.Pool(workers, scheduler) as pool:
        if progress:
            print("sweep: %d samples of %s on %s" % (samples, base["name"], pool.describe()),
                  file=sys.stderr)
        bar = distrib.Bar("sweep", samples, None, progress)
        size = distrib.chunk_size(samples, pool.slots)
        tasks = ((i, j, values[i:j]) for i, j in distrib.chunks(0, samples, size))
        t0 = time.monotonic()
        try:
            for _t, got in pool.imap(run_chunk, ctx, tasks):
                for r in got:
                    recs[r["i"]] = r
                    if r["error"] or not all(d["held"] for d in r["limits"].values()):
                        bad += 1
                bar.update(len(recs), bad)
        finally:
            bar.update(len(recs), bad, force=True)
            bar.close()
        wall = time.monotonic() - t0
        where = pool.describe()
    return Sweep(base, varies, seed, [recs[i] for i in sorted(recs)], wall, where)


# ---- outputs ---------------------------------------------------------------------------------------

def write_csv(sw, path):
    names = sw.limit_names()
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    head = ["sample"] + [v.field for v in sw.varies] + ["all_held", "error"]
    for k in names:
        head += ["%s_held" % k, "%s_margin" % k, "%s_worst" % k]
    head += list(ENERGY_COLS) + ["balance_error_pct", "service_warnings"]
    head += [k for k, _ in service.FIGURES] + ["blocked_share", "flags"]
    w.writerow(head)
    for r in sw.records:
        row = [r["i"]] + [_cell(x) for x in r["values"]]
        lim = r["limits"] or {}
        row += [_cell(bool(lim) and all(d["held"] for d in lim.values())), r["error"] or ""]
        for k in names:
            d = lim.get(k)
            row += ["", "", ""] if d is None else [_cell(d["held"]), _cell(d["margin"]),
                                                   _cell(d["worst"])]
        e = r["energy"] or {}
        row += [_cell(e.get(k)) for k in ENERGY_COLS + ("balance_error_pct",)]
        sv = r.get("service") or {}
        row += [" ".join(sv.get("warnings", ()))] + [_cell(sv.get(k)) for k, _ in service.FIGURES]
        row += [_cell(r.get("blocked_share")), " ".join(r.get("flags") or ())]
        w.writerow(row)
    with atomic_open(path) as f:
        f.write(buf.getvalue())


def _cell(x):
    if x is None:
        return ""
    if isinstance(x, bool):
        return "1" if x else "0"
    return x


def write_png(sw, path):
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    names = sw.limit_names()
    panels = len(names) + len(ENERGY)
    cols = 4
    rows = (panels + cols - 1) // cols
    fig, axes = plt.subplots(rows, cols, figsize=(4.2 * cols, 3.2 * rows), squeeze=False)
    fig.suptitle("spinrail sweep: %s, %d samples (seed %d)\n%s" % (
        sw.base["name"], len(sw.records), sw.seed,
        "; ".join(v.text for v in sw.varies))[:300], fontsize=10)
    flat = axes.ravel()
    for ax, k in zip(flat, names):
        m = [r["limits"][k]["margin"] for r in sw.records
             if r["limits"] and r["limits"][k]["margin"] is not None]
        unit = next((r["limits"][k]["unit"] for r in sw.records if r["limits"]), "")
        if m:
            ax.hist(m, bins=min(40, max(5, len(m) // 3)), color="#5b8db8")
            ax.axvline(0.0, color="#c0392b", lw=2, label="limit (margin 0)")
            ax.legend(fontsize=7, loc="upper right")
            lo = min(min(m), 0.0)
            hi = max(max(m), 0.0)
            pad = 0.05 * (hi - lo) if hi > lo else 1.0
            ax.set_xlim(lo - pad, hi + pad)
        else:
            ax.text(0.5, 0.5, "not exercised", ha="center", va="center", transform=ax.transAxes)
        ax.set_title("%s margin (%s)" % (k, unit), fontsize=9)
        ax.set_ylabel("samples", fontsize=8)
        ax.locator_params(axis="x", nbins=5)
    for ax, (col, label) in zip(flat[len(names):], ENERGY):
        e = [r["energy"][col] / 1e3 for r in sw.records if r["energy"]]
        if e:
            ax.hist(e, bins=min(40, max(5, len(e) // 3)), color="#6aa84f")
        ax.set_title("energy to %s (kJ)" % label, fontsize=9)
        ax.set_ylabel("samples", fontsize=8)
        ax.locator_params(axis="x", nbins=5)
    for ax in flat[panels:]:
        ax.axis("off")
    fig.tight_layout()
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=90)
    plt.close(fig)


def worst_by_limit(sw):
    out = {}
    for r in sw.records:
        for k, d in (r["limits"] or {}).items():
            if d["margin"] is not None and (k not in out or d["margin"] < out[k][0]):
                out[k] = (d["margin"], r, d)
    return out


def print_table(sw, out=None):
    out = out or sys.stdout
    n = len(sw.records)
    print("sweep %s: %d samples of seed %d in %.1f s on %s: %.2f samples/s" % (
        sw.base["name"], n, sw.seed, sw.wall_s, sw.where, n / sw.wall_s if sw.wall_s else 0),
        file=out)
    for v in sw.varies:
        print("  varied %s" % v.text, file=out)
    worst = worst_by_limit(sw)
    ok = [r for r in sw.records if r["limits"]]
    print("%-14s %9s %12s %12s %-5s %s" % ("limit", "held", "worst margin", "median", "unit",
                                           "worst at sample (drawn values)"), file=out)
    for k in sw.limit_names():
        held = sum(1 for r in ok if r["limits"][k]["held"])
        ms = [r["limits"][k]["margin"] for r in ok if r["limits"][k]["margin"] is not None]
        if k not in worst:
            print("%-14s %9s %12s %12s %-5s %s" % (k, "%d/%d" % (held, len(ok)), "-", "-", "",
                                                   "(not exercised)"), file=out)
            continue
        m, r, d = worst[k]
        print("%-14s %9s %12.4g %12.4g %-5s %d (%s)" % (
            k, "%d/%d" % (held, len(ok)), m, float(np.median(ms)), d["unit"], r["i"],
            ", ".join("%s=%s" % (v.field, _fmt(x)) for v, x in zip(sw.varies, r["values"]))),
            file=out)
    print("%-22s %10s %10s %10s" % ("energy delivered, kJ", "min", "median", "max"), file=out)
    for col, label in ENERGY:
        e = [r["energy"][col] / 1e3 for r in ok]
        if e:
            print("%-22s %10.3f %10.3f %10.3f" % ("to " + label, min(e), float(np.median(e)),
                                                   max(e)), file=out)
    service.print_campaign(sw.records, "sample", "i", out)
    print_flags(sw.records, out)
    errs = [r for r in sw.records if r["error"]]
    for r in errs[:5]:
        print("sample %d raised: %s" % (r["i"], r["error"]), file=out)


def print_flags(records, out):
    fl = flagged(records)
    n = len(records)

    def some(ids):
        return "%d of %d%s" % (len(ids), n, " (samples %s%s)" % (
            ", ".join(str(i) for i in ids[:12]), ", ..." if len(ids) > 12 else "") if ids else "")
    print("flagged: blocked for %.0f %% of the run or more: %s; never charged: %s"
          % (100 * BLOCKED_SHARE, some(fl["blocked"]), some(fl["never_charged"])), file=out)


def _fmt(x):
    return "%.4g" % x if isinstance(x, float) else json.dumps(x)


def write_failures(sw, out_dir):
    """The worst sample of each crossed limit as a scenario file; [(limit, sample, path)]."""
    picked = {}
    for k, (m, r, d) in worst_by_limit(sw).items():
        if not d["held"]:
            picked.setdefault(r["i"], []).append(k)
    for r in sw.records:
        if r["error"] and len(picked) < 20:
            picked.setdefault(r["i"], []).append("error")
    out = []
    paths = [v.parts for v in sw.varies]
    for i, ks in sorted(picked.items()):
        r = sw.records[i]
        path = Path(out_dir) / ("sweep_sample_%d.json" % i)
        write_json(path, sample_doc(sw.base["raw"], paths, r["values"], i))
        out.append((ks, i, path))
    return out


def cmd_sweep(args):
    if args.samples < 1:
        raise UserError("--samples = %d: allowed 1 or more" % args.samples)
    if not 0 <= args.seed < 2**63:
        raise UserError("--seed = %d: allowed 0 to 2**63 - 1" % args.seed)
    if args.workers is not None and args.workers < 1:
        raise UserError("--workers = %d: allowed 1 or more" % args.workers)
    from host_sim.scenario import ScenarioError
    try:
        base = scenario_gen.load_base(args.scenario)
    except ScenarioError as e:
        raise UserError(str(e))
    out = Path(args.out)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise UserError("--out %s: cannot create the folder (%s)" % (out, e))
    sw = sweep(base, args.vary or [], args.samples, args.seed, args.workers, args.scheduler,
               progress=not args.quiet)
    write_csv(sw, out / "sweep.csv")
    write_png(sw, out / "sweep.png")
    sweep_plots.write_values_png(sw, out / "sweep_values.png")
    files = write_failures(sw, out)
    worst = worst_by_limit(sw)
    write_json(out / "sweep_summary.json", {
        "scenario": base["name"], "seed": sw.seed, "samples": len(sw.records),
        "vary": [v.text for v in sw.varies], "where": sw.where, "wall_s": round(sw.wall_s, 3),
        "worst": {k: {"margin": m, "sample": r["i"], "worst": d["worst"], "limit": d["limit"],
                      "unit": d["unit"], "held": d["held"]} for k, (m, r, d) in worst.items()},
        "crossed_samples": len(sw.crossed()),
        "service": {
            "samples_with_warnings": sum(1 for r in sw.records
                                         if (r.get("service") or {}).get("warnings")),
            "warnings": service.counts(sw.records),
            "worst": {k: {"value": x, "sample": r["i"]}
                      for k, (x, r) in service.worst(sw.records).items()}},
        "flags": dict(flagged(sw.records), blocked_share_at_least=BLOCKED_SHARE),
        "files": [{"limits": ks, "sample": i, "file": str(p)} for ks, i, p in files]})
    print_table(sw)
    for ks, i, p in files:
        print("replay sample %d (%s): spinrail simulate %s --out %s" % (
            i, ", ".join(ks), p, out / ("replay_sample%d" % i)))
    print("wrote %s/{sweep.csv, sweep.png, sweep_values.png, sweep_summary.json}" % out,
          file=sys.stderr)
    return 1 if sw.crossed() else 0


def register(sub):
    sp = sub.add_parser(
        "sweep", help="Monte Carlo over tolerances, temperatures and drive patterns",
        description="Run SCENARIO many times with fields drawn from distributions and report the "
                    "worst-case margin of every limit and the energy delivered. FIELD is a dotted "
                    "scenario path (battery.ambient_c, machine.ra_ohm, drive.effort, "
                    "usb.devices[0].max_a; docs/scenario.md lists them); DIST is uniform(lo,hi), "
                    "normal(mean,sd), pct(p) (+/- p % uniform around the scenario's value), "
                    "int(lo,hi), loguniform(lo,hi) or choice(a,b,...). Sample i depends on --seed "
                    "and i alone. Writes sweep.csv, sweep.png, sweep_values.png (each worst "
                    "margin and service figure against each varied value) and sweep_summary.json "
                    "to --out. Service warnings (a sample that did not do its job) are counted per "
                    "code and reported with the worst service figures, and samples blocked for "
                    "most of the run or never charged are flagged; they do not change the exit "
                    "status. "
                    "Exit 0: every limit held; 1: a limit crossed; 2: bad input; 4: the sweep "
                    "could not finish (a worker died, the cluster went away) or an internal "
                    "error. Guide: docs/fuzz.md.")
    sp.add_argument("scenario", metavar="SCENARIO", help="scenario file or built-in name")
    sp.add_argument("--vary", action="append", metavar="FIELD=DIST",
                    help="a field and its distribution (repeat for more fields)")
    sp.add_argument("--samples", type=int, default=64, metavar="N",
                    help="number of samples (default %(default)d)")
    sp.add_argument("--seed", type=int, default=1, metavar="S", help="sweep seed (default 1)")
    sp.add_argument("--workers", type=int, default=None, metavar="W",
                    help="local worker processes (default: every core; 1 runs in this process)")
    sp.add_argument("--scheduler", default=None, metavar="ADDRESS",
                    help="run on an existing Dask distributed cluster, e.g. tcp://host:8786, "
                         "or 'local' to start a Dask cluster on this machine for the run "
                         "(--workers worker processes, default one per core)")
    sp.add_argument("--out", default="spinrail-out/sweep", metavar="DIR",
                    help="output folder (default: %(default)s)")
    sp.add_argument("--quiet", action="store_true", help="no progress on stderr")
    sp.set_defaults(func=cmd_sweep)
