"""Coverage of the identifiers' 95 % intervals on logs with known truths (tests/identify/loggen.py:
textbook models, apart from the fitting code, with reading-proportional meter noise,
quantisation, meter gain errors inside the stated tolerance and steps inside row gaps).

Invariant scored: over many seeds and varied parts, at least 90 % of the truths of each scored
quantity fall inside its printed 95 % interval (a right interval gives 95 %; 90 % leaves room for
the spread of a 24-seed sample: below 90 % happens by chance about 1 time in 8 at 95 % true
coverage, so the fast run uses 30 seeds and the slow run 200).
Info only (printed, not scored): a saturating brush drop and two RC pairs, which the models do
not have. What is asserted for them and for bad logs (clipped, held, unrested): the warning
that names the problem fires.

    python tests/identify/test_coverage.py [SEEDS [GAIN_TOL_PCT]]   prints the table
"""
import argparse
import json
import sys
import zlib
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
import loggen  # noqa: E402

from host_sim.errors import UserError  # noqa: E402
from host_sim.identify import cli as identify_cli  # noqa: E402

FAST_SEEDS = 60
SLOW_SEEDS = 200
SCORED = {"machine": ("ke_v_per_krpm", "ra_ohm", "v_brush_v"),
          "supercap": ("capacitance_f", "esr_ohm"),
          "battery": ("r0_ohm", "rp_ohm", "tau_s", "ocv_v", "soc_pct")}


def _run(argv, capsys=None):
    ap = argparse.ArgumentParser(prog="spinrail")
    identify_cli.register(ap.add_subparsers(dest="cmd", required=True))
    args = ap.parse_args([str(a) for a in argv] + EXTRA)
    import contextlib
    import io
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            args.func(args)
        except UserError as e:
            return None, str(e)
    return json.loads(out.getvalue()), err.getvalue()


def _csv(path, names, cols):
    with open(path, "w") as f:
        f.write(",".join(names) + "\n")
        for row in zip(*cols):
            f.write(",".join("%.6g" % x if abs(x) >= 1 else "%.6f" % x for x in row) + "\n")
    return path


EXTRA = []  # further options for every command (main: --gain-tol-pct for a noise-only run)


def case(part, seed, folder, kind="clean"):
    """Run one generated log through its command; returns (result JSON, truth, stderr)."""
    rng = np.random.default_rng([seed, zlib.crc32((part + kind).encode())])
    p = Path(folder) / ("%s-%s-%d.csv" % (part, kind, seed))
    if part == "machine":
        drop = {"clean": ("none", "constant")[seed % 2], "saturating": "saturating",
                "clipped": "none"}[kind]
        (rpm, v, i), truth = loggen.machine(rng, drop, clip=kind == "clipped")
        res, err = _run(["identify", "machine", _csv(p, ("rpm", "v_term", "i_a"), (rpm, v, i)),
                         "--json"])
    elif part == "supercap":
        (t, v, i), truth = loggen.supercap(rng, clip_rest=kind == "held")
        res, err = _run(["identify", "supercap", _csv(p, ("t_s", "v", "i_a"), (t, v, i)),
                         "--json"])
    else:
        (t, v, i), truth, q = loggen.battery(rng, pairs=2 if kind == "two_rc" else 1,
                                             unrested=kind == "unrested")
        res, err = _run(["identify", "battery", _csv(p, ("t_s", "v", "i_a"), (t, v, i)),
                         "--json", "--capacity-ah", "%.3f" % q])
    return res, truth, err


def score(part, seeds, folder, kind="clean"):
    """{quantity: (inside, scored, rms z)}, the fraction of runs that warned, and the runs."""
    hits = {q: [0, 0, []] for q in SCORED[part]}
    warned = 0
    for seed in range(seeds):
        res, truth, err = case(part, seed, folder, kind)
        assert res is not None, "seed %d: %s" % (seed, err)
        warned += bool(res["warnings"])
        for q in SCORED[part]:
            if q not in truth:
                continue
            got = res["values"].get(q, {})
            hits[q][1] += 1
            if got.get("value") is None:
                continue  # not fitted: scored as a miss
            z = (got["value"] - truth[q]) / (got["ci95"] / 1.96)
            hits[q][2].append(z)
            hits[q][0] += abs(z) <= 1.96
    out = {q: (h[0], h[1], float(np.sqrt(np.mean(np.square(h[2])))) if h[2] else float("nan"))
           for q, h in hits.items() if h[1]}
    return out, warned / seeds


def _check(part, seeds, tmp_path):
    got, warn_rate = score(part, seeds, tmp_path)
    for q, (inside, n, rms_z) in got.items():
        assert inside >= 0.9 * n, "%s %s: %d of %d truths inside the 95 %% interval (rms z %.2f)" \
            % (part, q, inside, n, rms_z)
    # clean logs rarely warn (a warning that fires on every log is noise)
    assert warn_rate <= 0.25, "%s: %.0f %% of clean logs warned" % (part, 100 * warn_rate)


@pytest.mark.parametrize("part", sorted(SCORED))
def test_intervals_cover(part, tmp_path):
    _check(part, FAST_SEEDS, tmp_path)


@pytest.mark.slow
@pytest.mark.parametrize("part", sorted(SCORED))
def test_intervals_cover_deep(part, tmp_path):
    _check(part, SLOW_SEEDS, tmp_path)


@pytest.mark.parametrize("part, kind, words", [
    ("machine", "clipped", "full scale"),
    ("supercap", "held", "held reading"),
    ("battery", "unrested", "unrested start"),
    ("battery", "two_rc", "model mismatch"),
    ("machine", "saturating", "model mismatch"),
])
def test_bad_logs_warn(part, kind, words, tmp_path):
    seeds = 10
    fired = 0
    for seed in range(seeds):
        res, _, err = case(part, seed, tmp_path, kind)
        fired += any(words in w for w in res["warnings"])
    # clipped, held and unrested logs: every one; model mismatch: the residual checks are
    # statistical, so most (the info-only coverage below shows what slips through)
    need = seeds if kind in ("clipped", "held", "unrested") else int(0.5 * seeds)
    assert fired >= need, "%s %s: the warning fired on %d of %d logs" % (part, kind, fired, seeds)


def main():
    import tempfile
    seeds = int(sys.argv[1]) if len(sys.argv) > 1 else FAST_SEEDS
    if len(sys.argv) > 2:  # a meter gain tolerance, %, for the logs and the fits alike
        loggen.GAIN_TOL = float(sys.argv[2]) / 100
        EXTRA[:] = ["--gain-tol-pct", sys.argv[2]]
    with tempfile.TemporaryDirectory() as d:
        for part, kind in (("machine", "clean"), ("supercap", "clean"), ("battery", "clean"),
                           ("machine", "saturating"), ("battery", "two_rc"),
                           ("machine", "clipped"), ("supercap", "held"),
                           ("battery", "unrested")):
            got, warn_rate = score(part, seeds, d, kind)
            for q, (inside, n, rms_z) in got.items():
                print("%-9s %-10s %-14s %3d/%3d inside (%5.1f %%)  rms z %.2f  warned %3.0f %%"
                      % (part, kind, q, inside, n, 100.0 * inside / n, rms_z, 100 * warn_rate))


if __name__ == "__main__":
    main()
