# `python -m host_sim.mem_bench [--hours H ...]`: the peak memory (RSS) of `spinrail simulate`
# (the run and its timeseries.csv, summary.json and report) over long runs, each in a fresh
# process. The demo scenario is stretched to each length (its rider keeps pedalling at the
# tired power), with the series decimated as simulate does by default (host_sim/runner.py
# MAX_ROWS). The kept series is a known size (rows x columns x 8 B, capped); what else grows
# per simulated hour is fitted, and a 7-day run is estimated from both. Prints the figures;
# the goal for a 7-day run is 300 MB or less (docs/performance.md).
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


def main(argv=None):
    ap = argparse.ArgumentParser(prog="python -m host_sim.mem_bench", description=__doc__)
    ap.add_argument("--hours", type=float, nargs="+", default=[0.5, 2.0, 6.0],
                    help="simulated lengths, h (default: 0.5 2 6)")
    args = ap.parse_args(argv)
    rows = [measure(h) for h in args.hours]
    for r in rows:
        print("%6.1f h: %7d ticks in %6.1f s, %6d rows (one in %d), peak RSS %6.1f MB, ledger "
              "%+.3f %%" % (r["hours"], r["ticks"], r["wall_s"], r["rows"], r["every"],
                            r["rss_mb"], r["ledger_pct"]))
    from host_sim.runner import COLUMN_NAMES, auto_every
    ncol = len(COLUMN_NAMES)

    def series_mb(n_rows):
        return n_rows * ncol * 8 / 1048576.0

    other = [r["rss_mb"] - series_mb(r["rows"]) for r in rows]  # all but the kept series
    a, b = 0, len(rows) - 1
    slope = (other[b] - other[a]) / (rows[b]["hours"] - rows[a]["hours"]) if b > a else 0.0
    week_ticks = rows[b]["ticks"] * 168.0 / rows[b]["hours"]
    week_rows = -(-int(week_ticks) // auto_every(int(week_ticks)))
    week = other[b] + slope * (168.0 - rows[b]["hours"]) + series_mb(week_rows)
    print("beside the kept series (%.1f MB at most), memory grew %.2f MB per simulated hour "
          "between %.1f and %.1f h; a 7-day run estimates at %.0f MB (goal 300 MB)"
          % (series_mb(week_rows), slope, rows[a]["hours"], rows[b]["hours"], week))
    print(json.dumps({"rss_mb": {str(r["hours"]): r["rss_mb"] for r in rows},
                      "rss_other_growth_mb_per_h": round(slope, 3),
                      "rss_7day_mb_est": round(week)}))


if __name__ == "__main__":
    main()
