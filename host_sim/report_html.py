# report.html: the run on one self-contained page, beside report.png. The verdict, the
# crossed limits and the service warnings first, then the limits table, the service figures,
# the energy table, the run's facts and the panels (report.png, inline as base64). No network:
# no script, no font, no link and no image outside the file, so it opens the same from a USB
# stick in a hut. Built from summary.json's dictionary alone (host_sim/simulate.summary).
import base64
import html

from host_sim import report
from host_sim.fileio import atomic_open

CSS = """
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; margin: 1.2em;
       color: #1b1b1b; max-width: 1400px; }
h1 { font-size: 1.5em; margin: 0 0 .3em 0; }
h2 { font-size: 1.15em; margin: 1.4em 0 .4em 0; border-bottom: 1px solid #ccc; }
.facts { color: #444; margin: 0 0 .8em 0; }
.verdict { font-size: 1.35em; font-weight: bold; color: #fff; padding: .45em .7em;
           border-radius: 6px; display: inline-block; }
.held { background: #1a7f37; } .crossed { background: #c62828; }
.not_doing_its_job { background: #b35c00; }
table { border-collapse: collapse; font-size: .92em; }
th, td { border: 1px solid #ccc; padding: .25em .55em; text-align: left; vertical-align: top; }
th { background: #f2f2f2; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr.no td { background: #fde0dc; }
td.no { color: #c62828; font-weight: bold; }
.warn li { margin: .25em 0; } .code { font-family: monospace; font-weight: bold; }
img.panels { width: 100%; max-width: 1280px; border: 1px solid #ddd; }
.group { font-weight: bold; }
.nav { font-size: .9em; color: #444; } .nav a { color: #0b5cad; }
"""


def _e(x):
    return html.escape("" if x is None else str(x))


def _num(x, fmt="%.4g"):
    if x is None:
        return "-"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, (int, float)):
        return fmt % x
    return _e(x)


def _table(head, rows, cls=None):
    """rows: lists of (text, css class or None) cells; cls: per-row class or None."""
    out = ["<table><thead><tr>%s</tr></thead><tbody>" % "".join("<th>%s</th>" % _e(h)
                                                              for h in head)]
    for i, r in enumerate(rows):
        rc = cls[i] if cls else None
        out.append("<tr%s>%s</tr>" % (' class="%s"' % rc if rc else "", "".join(
            "<td%s>%s</td>" % (' class="%s"' % c if c else "", t) for t, c in r)))
    out.append("</tbody></table>")
    return "\n".join(out)


def limits_table(limits):
    rows, cls = [], []
    for name, d in limits.items():
        held = d["held"]
        rows.append([(_e(name), None), ("yes" if held else "NO", None if held else "no"),
                     (_num(d["worst"]), "num"), (_num(d["limit"]), "num"),
                     (_num(d["margin"], "%+.4g"), "num"), (_e(d["unit"]), None),
                     (_num(d["t_worst_s"], "%.1f"), "num"),
                     (_num(d["first_crossed_s"], "%.2f"), "num"), (_e(d["what"]), None)])
        cls.append(None if held else "no")
    return _table(["limit", "held", "worst", "limit", "margin", "unit", "worst at, s",
                   "first crossed, s", "rule"], rows, cls)


def service_rows(sv):
    """(figure, value text, unit) of the service section, in the order docs/simulate.md
    lists them."""
    h, a, u, bl = sv["harvest"], sv["acceptance"], sv["usb"], sv["blocked"]
    st, ab, src = sv["stage_changes"], sv["absorption"], sv["source"]
    rows = [
        ("battery charge gained (net)", _num(sv["battery_ah"]["net"], "%+.3f"), "Ah"),
        ("battery charge in at its terminals", _num(sv["battery_ah"]["in"], "%.3f"), "Ah"),
        ("harvest: delivered / source's best", _num(h["ratio"], "%.3f")
         + (" (%s)" % _e(h["null_reason"]) if h["null_reason"] else ""), "1"),
        ("delivered to stores and loads", _num(h["delivered_wh"], "%.3f"), "Wh"),
        ("source's best energy (basis: %s)" % (h["basis"] or "none"),
         _num(h["offered_wh"], "%.3f"), "Wh"),
        ("bulk acceptance", _num(a["ratio"], "%.3f")
         + (" (%s)" % _e(a["null_reason"]) if a["null_reason"] else ""), "1"),
        ("in bulk: time, mean current, possible, limit", "%s s, %s A, %s A, %s A" % (
            _num(a["bulk_s"], "%.0f"), _num(a["mean_a"], "%.3f"), _num(a["possible_a"], "%.3f"),
            _num(a["limit_a"], "%.2f")), ""),
        ("dump share of the input", _num(sv["dump_share"], "%.4f"), "1"),
        ("dump while a store had room", "%s Wh (%s of the input)" % (
            _num(sv["dump"]["while_store_had_room_wh"], "%.3f"),
            _num(sv["dump"]["while_store_had_room_share"], "%.4f")), ""),
        ("dump excused (trips, release ramp, overspeed)", _num(sv["dump"]["excused_wh"],
                                                               "%.3f"), "Wh"),
        ("time to absorption", _num(sv["time_to_absorption_s"], "%.1f")
         if sv["time_to_absorption_s"] is not None else "never", "s"),
        ("time to float", _num(sv["time_to_float_s"], "%.1f")
         if sv["time_to_float_s"] is not None else "never", "s"),
        ("USB energy served", _num(u["served_wh"], "%.3f"), "Wh"),
        ("USB: port on while a device wanted charge", "%s of %s" % (
            _num(u["on_while_wanted_s"], "%.0f"), _num(u["wanted_s"], "%.0f")), "s"),
        ("blocked", _num(bl["total_s"], "%.0f") + ("" if not bl["reasons_s"] else " (%s)" % (
            ", ".join("%s %s s" % (_e(k), _num(v, "%.0f")) for k, v in bl["reasons_s"].items()))),
         "s"),
        ("stage changes (most in 60 s)", "%d (%d)" % (st["count"], st["most_in_60_s"]), ""),
        ("temperature-window flips / edge crossings", "%d / %d" % (
            st["temp_window_flips"], st["temp_edge_crossings"]), ""),
        ("absorption spells; longest charging; longest tail met", "%d; %s s; %s s" % (
            ab["spells"], _num(ab["longest_charging_s"], "%.0f"),
            _num(ab["longest_tail_met_s"], "%.0f")), ""),
        ("machine's top speed and its EMF", "%s rpm, %s V" % (
            _num(src["machine_rpm_max"], "%.0f"), _num(src["emf_max_v"], "%.2f")), ""),
    ]
    return rows


def energy_table(energy_j, balance_error_pct):
    rows = report.energy_rows(energy_j)
    w_in = sum(wh for g, _, wh in rows if g == "in")
    out, last = [], None
    for g, label, wh in rows:
        share = "%.1f %%" % (100 * wh / w_in) if w_in > 0 else "-"
        out.append([(_e(g) if g != last else "", "group"), (_e(label), None),
                    ("%.3f" % wh, "num"), (share, "num")])
        last = g
    sums = {}
    for g, _, wh in rows:
        sums[g] = sums.get(g, 0.0) + wh
    out.append([("balance", "group"), ("in - stored - delivered - lost", None),
                ("%.3f" % (sums.get("in", 0) - sums.get("stored", 0) - sums.get("delivered", 0)
                           - sums.get("lost", 0)), "num"),
                ("%.3f %% (ledger)" % balance_error_pct, "num")])
    return _table(["group", "", "Wh", "of the input"], out)


def page(summ, png):
    """The whole page as a string. summ: summary.json's dictionary; png: report.png's bytes."""
    v = summ["verdict"]
    sv = summ.get("service") or {}
    warnings = sv.get("warnings") or []
    line = report.verdict_line(v, summ["limits"], warnings)
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             "<title>spinrail report: %s: %s</title>" % (_e(summ["scenario"]), _e(v)),
             "<style>%s</style></head><body>" % CSS,
             "<h1>spinrail: %s</h1>" % _e(summ["scenario"]),
             '<p class="facts">%s; %.0f s simulated, seed %s, %d control periods in %.2f s '
             "(x%.0f)</p>" % (_e(summ["source"]), summ["duration_s"], _e(summ["seed"]),
                              summ["ticks"], summ["wall_s"], summ["sim_speedup"]),
             '<div id="verdict" class="verdict %s">%s</div>' % (_e(v), _e(line)),
             '<p class="nav">On this page: <a href="#warnings">service warnings</a> · '
             '<a href="#limits">limits</a> · <a href="#service">service figures</a> · '
             '<a href="#energy">energy</a> · <a href="#run">the run</a> · '
             '<a href="#panels">panels</a></p>']
    crossed = [(k, d) for k, d in summ["limits"].items() if not d["held"]]
    if crossed:
        parts.append("<h2>Limits crossed</h2><ul>")
        for k, d in crossed:
            parts.append("<li><span class=\"code\">%s</span> crossed at %.2f s: worst %.4g %s "
                         "against %.4g %s (by %.4g %s)</li>" % (
                             _e(k), d["first_crossed_s"], d["worst"], _e(d["unit"]), d["limit"],
                             _e(d["unit"]), -d["margin"], _e(d["unit"])))
        parts.append("</ul>")
    parts.append('<h2 id="warnings">Service warnings</h2>')
    if warnings:
        parts.append('<ul class="warn">' + "".join(
            '<li><span class="code">%s</span>: %s</li>' % (_e(w["code"]), _e(w["message"]))
            for w in warnings) + "</ul>")
    else:
        parts.append("<p>none: the system did its job (docs/simulate.md, service warnings)</p>")
    parts.append('<h2 id="limits">Limits (judged on the plant\'s true values)</h2>')
    parts.append(limits_table(summ["limits"]))
    if sv:
        parts.append('<h2 id="service">Service figures</h2>')
        parts.append(_table(["figure", "value", "unit"],
                            [[(_e(f), None), (t, "num"), (_e(u), None)]
                             for f, t, u in service_rows(sv)]))
    parts.append('<h2 id="energy">Energy</h2>')
    parts.append(energy_table(summ["energy_j"], summ["balance_error_pct"]))
    parts.append('<h2 id="run">The run</h2>')
    st = ", ".join("%s %.0f s" % (k, x) for k, x in summ["stage_time_s"].items() if x > 0)
    fin = summ["final"]
    facts = [("battery stages", _e(st) or "-"),
             ("fault bits seen", _e(", ".join(summ["faults_seen"]) or "none")),
             ("at the end", "SOC %.1f %%, battery %.3f V, supercap %.3f V" % (
                 100 * fin["batt_soc"], fin["batt_v"], fin["cap_v"]))]
    link = summ.get("link")
    if link:
        facts.append(("link (hil)", _e(", ".join("%s %s" % kv for kv in link.items()))))
    parts.append(_table(["", ""], [[(_e(k), None), (x, None)] for k, x in facts]))
    parts.append('<h2 id="panels">Panels</h2>')
    parts.append('<img class="panels" alt="report panels: %s" src="data:image/png;base64,%s">'
                 % (_e(line), base64.b64encode(png).decode("ascii")))
    parts.append("<p class=\"facts\">The same panels are in report.png; every figure and key "
                 "is defined in docs/simulate.md.</p></body></html>")
    return "\n".join(parts) + "\n"


def write(summ, png, path):
    """report.html at path, written whole."""
    text = page(summ, png)
    with atomic_open(path, "w", encoding="utf-8") as f:
        f.write(text)
