# `spinrail simulate SCENARIO --out DIR` and `spinrail demo`: the main job. Runs the controller
# against the plant in closed loop and writes timeseries.csv, summary.json, report.png and
# report.html.
# Exit status: 0 every limit held and the system did its job, 1 a limit was crossed (which,
# when, by how much; wins over 3), 2 bad input, 3 every limit held but a service warning was
# raised (host_sim/service.py: it did not do its job).
import sys

import numpy as np

from controller.signals import FAULT_NAMES, STAGE_NAMES
from host_sim import report, runner
from host_sim.common import caution
from host_sim.errors import UserError
from host_sim.fileio import OutputSet, atomic_open, write_json
from host_sim.plantcheck import numerical_failure

DEMO = "demo"


def load(name_or_path):
    from host_sim.scenario import ScenarioError, load_scenario
    try:
        return load_scenario(name_or_path)
    except ScenarioError as e:
        raise UserError(str(e))


EXIT_CROSSED = 1
EXIT_SERVICE = 3

_INT_COLS = ("usb_conv", "usb_on", "dump_on", "batt_duty", "cap_duty", "dump_duty", "fault")


def _column_text(name, v):
    if name == "stage":
        return np.array(STAGE_NAMES)[v.astype(int)]
    if name in _INT_COLS:
        return np.char.mod("%d", v.astype(np.int64))
    txt = np.char.mod("%.4f", v)
    big = np.abs(v) >= 1e5
    if big.any():
        txt[big] = np.char.mod("%.6g", v[big])
    txt[np.isnan(v)] = ""
    return txt


_CSV_CHUNK_ROWS = 10000  # rows formatted at a time: the text of a long run never sits whole


def write_timeseries(result, path):
    """timeseries.csv, one row per kept control period (columns: runner.COLUMNS)."""
    s = result.series
    cols = runner.COLUMN_NAMES
    n = len(s["t_s"])
    with atomic_open(path) as f:
        f.write(",".join(cols) + "\n")
        for a in range(0, n, _CSV_CHUNK_ROWS):
            text = [_column_text(name, s[name][a:a + _CSV_CHUNK_ROWS]) for name in cols]
            for row in zip(*text):
                f.write(",".join(row))
                f.write("\n")


def summary(result):
    sc = result.scenario
    faults = 0
    for f in result.series["fault"]:
        faults |= int(f)
    stages = result.series["stage"].astype(int)
    dt = sc.profile.period_ms / 1000.0
    return {
        "scenario": sc.name,
        "source": str(sc.source),
        "duration_s": sc.duration_s,
        "seed": sc.seed,
        "ticks": result.ticks,
        "series_every": result.every,  # one timeseries row per this many control periods
        "wall_s": round(result.wall_s, 3),
        "sim_speedup": round(result.speedup(), 1),
        "all_held": result.all_held,
        "limits": {k: v.as_dict() for k, v in result.limits.items()},
        "energy_j": {k: (round(v, 3) if isinstance(v, float) else v)
                     for k, v in result.ledger.items() if k != "balance_error_pct"},
        "balance_error_pct": round(result.ledger["balance_error_pct"], 5),
        "stage_time_s": {STAGE_NAMES[i]: round(float((stages == i).sum()) * dt * _every(result), 2)
                         for i in range(len(STAGE_NAMES))},
        "faults_seen": [FAULT_NAMES[i] for i in range(len(FAULT_NAMES)) if faults >> i & 1],
        "final": {"batt_soc": round(float(result.series["batt_soc"][-1]), 4),
                  "batt_v": round(float(result.series["batt_v"][-1]), 3),
                  "cap_v": round(float(result.series["cap_v"][-1]), 3)},
        "service": result.service,
        "verdict": verdict(result.all_held, (result.service or {}).get("warnings")),
    }


def verdict(all_held, warnings):
    """One word for the run: held, crossed (a limit), or not_doing_its_job (service warnings,
    every limit held)."""
    if not all_held:
        return "crossed"
    return "not_doing_its_job" if warnings else "held"


def _every(result):
    return result.every


def print_table(summ, out=None):
    out = out or sys.stdout  # bound at call time (a default bound at import goes stale in tests)
    e = summ["energy_j"]
    print("scenario %s: %.0f s simulated in %.2f s (x%.0f)" % (
        summ["scenario"], summ["duration_s"], summ["wall_s"], summ["sim_speedup"]), file=out)
    print("%-14s %-5s %10s %10s %9s  %s" % ("limit", "held", "worst", "limit", "at s", "unit"),
          file=out)
    for name, d in summ["limits"].items():
        if d["worst"] is None:
            print("%-14s %-5s %10s %10s %9s  %s" % (name, "yes", "-", "-", "-", "(not exercised)"),
                  file=out)
            continue
        print("%-14s %-5s %10.3f %10.3f %9.1f  %s" % (
            name, "yes" if d["held"] else "NO", d["worst"], d["limit"], d["t_worst_s"], d["unit"]),
            file=out)
    for name, d in summ["limits"].items():  # the currents whose rule lets one period pass
        if d.get("peak") is not None and d.get("limit") is not None and d["peak"] > d["limit"]:
            print("%s: peak %.3f %s at %.1f s, above the band for one period only (the rule "
                  "excepts such transients)" % (name, d["peak"], d["unit"], d["t_peak_s"]),
                  file=out)
    sv = summ.get("service")
    if sv:
        print_energy_wh(sv, summ["balance_error_pct"], out)
    else:
        print("energy: in %.1f kJ; battery %+.1f kJ, supercap %+.1f kJ, USB %.1f kJ, loads %.1f "
              "kJ; balance error %.3f %%" % (
                  e.get("drive_in_j", 0) / 1e3, e.get("batt_stored_j", 0) / 1e3,
                  e.get("cap_stored_j", 0) / 1e3, e.get("usb_out_j", 0) / 1e3,
                  e.get("loads_out_j", 0) / 1e3, summ["balance_error_pct"]), file=out)
    st = ", ".join("%s %.0f s" % (k, v) for k, v in summ["stage_time_s"].items() if v > 0)
    print("battery stages: %s; final SOC %.1f %%" % (st, 100 * summ["final"]["batt_soc"]), file=out)
    if summ["faults_seen"]:
        print("faults seen: %s" % ", ".join(summ["faults_seen"]), file=out)
    if summ.get("service"):
        print_service(summ["service"], out)


def _f(x, fmt, none="-"):
    return none if x is None else fmt % x


def print_energy_wh(sv, balance_error_pct, out=sys.stdout):
    """Where the energy went, in Wh (kJ for the input), and the battery's charge in Ah."""
    e = sv["energy_wh"]
    each = "".join(" (%s)" % ", ".join("%s %.2f" % kv for kv in e["loads_each"].items())
                   if len(e["loads_each"]) > 1 else "")
    w_in = e["drive_in"] + e["surge_in"]
    print("energy: in %.2f Wh (%.1f kJ); battery %+.2f Wh (%+.3f Ah net, %.3f Ah in), supercap "
          "%+.2f Wh, USB %.2f Wh, loads %.2f Wh%s, dump %.2f Wh, losses %.2f Wh; balance error "
          "%.3f %%" % (w_in, w_in * 3.6, e["battery"], sv["battery_ah"]["net"],
                       sv["battery_ah"]["in"], e["supercap"], e["usb"], e["loads"], each,
                       e["dump"], e["losses"], balance_error_pct), file=out)


def print_service(sv, out=sys.stdout):
    """The service figures (docs/simulate.md); the energy in Wh is print_energy_wh's line."""
    h = sv["harvest"]
    a = sv["acceptance"]
    print("service: harvest %s of the source's best (%s Wh offered)%s; dump share %s of the "
          "input" % (
        _f(h["ratio"], "%.3f"), _f(h["offered_wh"], "%.2f"),
        " [%s]" % h["null_reason"] if h["null_reason"] else "",
        _f(sv["dump_share"], "%.3f")), file=out)
    print("  bulk acceptance %s (mean %s A of a possible %s A over %.0f s in bulk)%s" % (
        _f(a["ratio"], "%.3f"), _f(a["mean_a"], "%.3f"), _f(a["possible_a"], "%.3f"),
        a["bulk_s"], " [%s]" % a["null_reason"] if a["null_reason"] else ""), file=out)
    u = sv["usb"]
    bl = sv["blocked"]
    print("  absorption %s, float %s; USB %.2f Wh, port on %.0f of %.0f s wanted; "
          "blocked %.0f s%s" % (
              _f(sv["time_to_absorption_s"], "at %.1f s", "never"),
              _f(sv["time_to_float_s"], "at %.1f s", "never"), u["served_wh"], u["on_while_wanted_s"],
              u["wanted_s"], bl["total_s"], " (%s)" % ", ".join(
                  "%s %.0f s" % kv for kv in bl["reasons_s"].items()) if bl["reasons_s"] else ""),
          file=out)


def simulate(name_or_path, out_dir, every=None, progress=True):
    sc = load(name_or_path)
    with OutputSet(out_dir) as out:  # --out checked and locked before the long run
        result = runner.run(sc, progress=progress, every=every)
        numerical_failure(result)
        summ = summary(result)

        def fill(d):
            write_timeseries(result, d / "timeseries.csv")
            write_json(d / "summary.json", summ)
            report.write_reports(result, summ, d)  # report.png and report.html
        out.write(fill)  # the four files replace the folder's set as one
    return result, summ


def finish(result, summ, out_dir):
    print_table(summ)
    print("wrote %s/{timeseries.csv, summary.json, report.png, report.html}" % out_dir,
          file=sys.stderr)
    crossed = [(k, d) for k, d in summ["limits"].items() if not d["held"]]
    for k, d in crossed:
        print("spinrail: limit %s crossed at %.2f s: worst %.4g %s against %.4g %s (by %.4g)" % (
            k, d["first_crossed_s"], d["worst"], d["unit"], d["limit"], d["unit"],
            -d["margin"]), file=sys.stderr)
    warnings = (summ.get("service") or {}).get("warnings") or []
    for w in warnings:
        print("spinrail: service warning %s: %s" % (w["code"], w["message"]), file=sys.stderr)
    if crossed:
        return EXIT_CROSSED
    return EXIT_SERVICE if warnings else 0


def cmd_simulate(args):
    caution()
    if args.every is not None and args.every < 1:
        raise UserError("--every = %d: allowed 1 or more" % args.every)
    result, summ = simulate(args.scenario, args.out, every=args.every, progress=not args.quiet)
    return finish(result, summ, args.out)


def cmd_demo(args):
    caution()
    result, summ = simulate(DEMO, args.out, progress=not args.quiet)
    return finish(result, summ, args.out)


def register(sub):
    from host_sim.scenario import builtin_names
    names = ", ".join(builtin_names())
    sp = sub.add_parser(
        "simulate", help="run a scenario in closed loop and report every limit",
        description="Run the controller against the plant simulator in closed loop. Writes "
                    "timeseries.csv, summary.json, report.png and report.html to --out, prints a "
                    "summary table of every limit and the service figures (energy in Wh and Ah, "
                    "harvest, dump share, bulk acceptance, time to absorption and float, USB, "
                    "blocked time). "
                    "Exit status: 0 every limit held and the system did its job; 1 a limit was "
                    "crossed (saying which, when and by how much; wins over 3); 2 bad input; 3 "
                    "every limit held but a service warning was raised (no_charge, "
                    "loads_exceed_source, charge_blocked, source_below_battery, "
                    "dump_from_storage, profile_mismatch, dump_waste, stage_chatter, "
                    "absorption_stuck: printed on stderr and in summary.json service.warnings). "
                    "SCENARIO is a JSON file or a built-in name (%s). Formats: docs/scenario.md, "
                    "docs/simulate.md." % names)
    sp.add_argument("scenario", metavar="SCENARIO", help="scenario file or built-in name")
    sp.add_argument("--out", required=True, help="output folder (created if missing)")
    sp.add_argument("--every", type=int, default=None, metavar="N",
                    help="keep one timeseries row in N control periods (default: every period "
                         "up to %d rows, then evenly fewer, so a week-long run stays small; the "
                         "limits and service figures always see every period)" % runner.MAX_ROWS)
    sp.add_argument("--quiet", action="store_true", help="no progress on stderr")
    sp.set_defaults(func=cmd_simulate)
    dp = sub.add_parser(
        "demo", help="run the built-in demo scenario (a pedal charging point at a field clinic)",
        description="Run the built-in demo scenario: a pedal charging point at a field clinic, a "
                    "rider who tires over twenty minutes, a part-charged AGM battery in a warm room, a "
                    "supercap bank and two phones. Same outputs and exit status as simulate (0 every "
                    "limit held and the system did its job, 1 a limit crossed, 3 a service "
                    "warning).")
    dp.add_argument("--out", default="spinrail-out/demo", help="output folder (default: %(default)s)")
    dp.add_argument("--quiet", action="store_true", help="no progress on stderr")
    dp.set_defaults(func=cmd_demo)
