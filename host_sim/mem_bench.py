# `python -m host_sim.mem_bench`: the peak memory (RSS) of `spinrail simulate` (the run and its
# timeseries.csv, summary.json, report.png and report.html) over long runs, each in a fresh
# process. The demo scenario (50 ms period) is stretched; simulate keeps at most MAX_ROWS rows
# by default (host_sim/runner.py), so a 7-day run keeps about 198,000 rows. The two default
# runs keep that same number of rows (5.5 h, one row in 2; 11 h, one row in 4), so everything
# that scales with the rows (the series, the CSV text, the plots) is the week's, and what
# their RSS differs by is what grows with simulated time alone; the week is estimated from
# the longer run plus that growth. Prints the figures; the goal for a 7-day run is 300 MB or
# less (docs/performance.md).
import argparse
import json
import subprocess
import sys

_CHILD = r"""
import json, resource, sys, tempfile
from host_sim import runner, simulate
from host_sim.scenario import load_scenario
from host_sim.scenario import SCEN_DIR
doc = json.load(open(SCEN_DIR / "demo.json"))
doc["duration_s"] = float(sys.argv[1])
doc["name"] = "demo_long"
with tempfile.NamedTemporaryFile("w", suffix=".json", delete=False) as f:
    json.dump(doc, f)
sc = load_scenario(f.name)
res, s = simulate.simulate(f.name, tempfile.mkdtemp(), progress=False)
print(json.dumps({"hours": float(sys.argv[1]) / 3600, "rows": len(res.series["t_s"]),
                  "every": res.every, "ticks": res.ticks, "wall_s": round(res.wall_s, 1),
                  "rss_mb": round(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024, 1),
                  "ledger_pct": s["balance_error_pct"]}))
"""


def measure(hours):
    out = subprocess.run([sys.executable, "-c", _CHILD, str(hours * 3600.0)],
                         capture_output=True, text=True, check=True).stdout
    return json.loads(out.strip().splitlines()[-1])


def _week_rows(period_s=0.05):
    from host_sim.runner import auto_every
    n = int(7 * 86400 / period_s)
    return -(-n // auto_every(n))


def main(argv=None):
    rows_w = _week_rows()
    same = [round(k * rows_w * 0.05 / 3600.0, 3) for k in (2, 4)]  # hours keeping rows_w rows
    ap = argparse.ArgumentParser(prog="python -m host_sim.mem_bench", description=__doc__)
    ap.add_argument("--hours", type=float, nargs="+", default=same,
                    help="simulated lengths, h (default: %s, both keeping a week's %d rows)"
                         % (" ".join("%g" % h for h in same), rows_w))
    args = ap.parse_args(argv)
    rows = [measure(h) for h in args.hours]
    for r in rows:
        print("%6.2f h: %7d ticks in %6.1f s, %6d rows (one in %d), peak RSS %6.1f MB, ledger "
              "%+.3f %%" % (r["hours"], r["ticks"], r["wall_s"], r["rows"], r["every"],
                            r["rss_mb"], r["ledger_pct"]))
    a, b = rows[0], rows[-1]
    slope = (b["rss_mb"] - a["rss_mb"]) / (b["hours"] - a["hours"]) if len(rows) > 1 else 0.0
    week = b["rss_mb"] + max(slope, 0.0) * (168.0 - b["hours"])
    print("with a week's %d rows kept, memory grew %.2f MB per simulated hour between %.2f and "
          "%.2f h; a 7-day run estimates at %.0f MB (goal 300 MB)"
          % (rows_w, slope, a["hours"], b["hours"], week))
    print(json.dumps({"rss_mb": {str(r["hours"]): r["rss_mb"] for r in rows},
                      "rss_growth_mb_per_h": round(slope, 3), "rss_7day_mb_est": round(week)}))


if __name__ == "__main__":
    main()
