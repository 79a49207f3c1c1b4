# sweep_values.png: what a sweep found, against what it varied. One panel per (figure, varied
# field): each limit's worst margin (the limit, margin 0, drawn) and each service figure
# against the value the sample drew, flagged samples marked (blocked for most of the run,
# never charged: host_sim/sweep.py flags), samples that crossed a limit in red. Written whole.
# Documented in docs/fuzz.md ("sweep_values.png").
import io
import json
import math

from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from host_sim.fileio import atomic_open

DPI = 80
MAX_FIELDS = 6  # more varied fields than this: the first six are plotted (the title says so)
PANEL_W, PANEL_H = 3.7, 2.7  # inches
# the service figures plotted, with their unit (the service section's keys: docs/simulate.md)
SERVICE = (("harvest_ratio", "1"), ("acceptance_ratio", "1"), ("dump_share", "1"),
           ("dump_room_share", "1"), ("batt_net_ah", "Ah"), ("blocked_share", "1"))
OK, CROSSED = "#1f77b4", "#d62728"


def figures(sw):
    """[(name, unit, value(record) or None)] plotted per varied field: each limit's margin,
    then the service figures."""
    out = []
    units = {}
    for r in sw.records:
        for k, d in (r["limits"] or {}).items():
            units.setdefault(k, d["unit"])
    for k in sw.limit_names():
        out.append(("%s margin" % k, units.get(k, ""),
                    lambda r, k=k: (r["limits"] or {}).get(k, {}).get("margin")))
    for k, unit in SERVICE:
        if k == "blocked_share":
            out.append((k, unit, lambda r: r.get("blocked_share")))
        else:
            out.append((k, unit, lambda r, k=k: (r.get("service") or {}).get(k)))
    return out


def _axis_values(sw, j):
    """The x positions of field j per record, and tick labels when the field is not a number
    (choice of strings, switches, null): (xs, ticks or None)."""
    vals = [r["values"][j] for r in sw.records]
    numeric = all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in vals)
    if numeric:
        return [float(v) for v in vals], None
    keys = sorted({json.dumps(v) for v in vals})
    pos = {k: i for i, k in enumerate(keys)}
    ticks = [k.strip('"') for k in keys]  # a string without its quotes; true, false, null
    return [float(pos[json.dumps(v)]) for v in vals], ticks


def panel_titles(fig):
    return [a.get_title() for a in fig.axes if a.get_visible() and a.get_title()]


def figure(sw):
    varies = sw.varies[:MAX_FIELDS]
    nf = max(1, len(varies))
    figs = figures(sw)
    per_row = max(1, 4 // nf)  # figures side by side, each with a panel per field
    cols = nf * per_row
    rows = -(-len(figs) // per_row)
    fig = Figure(figsize=(PANEL_W * cols, PANEL_H * rows + 1.0), dpi=DPI, layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(rows, cols, squeeze=False)
    xs = [_axis_values(sw, j) for j in range(len(varies))]
    crossed = [bool(r["error"]) or not all(d["held"] for d in (r["limits"] or {}).values())
               for r in sw.records]
    for fi, (name, unit, get) in enumerate(figs):
        ys = [get(r) for r in sw.records]
        for j, v in enumerate(varies):
            a = axes[fi // per_row][(fi % per_row) * nf + j]
            x, ticks = xs[j]
            nulls = 0
            groups = {}
            for r, xx, yy, bad in zip(sw.records, x, ys, crossed):
                if yy is None or (isinstance(yy, float) and not math.isfinite(yy)):
                    nulls += 1
                    continue
                key = (tuple(f for f in ("blocked", "never_charged") if f in (r.get("flags")
                                                                               or ())), bad)
                groups.setdefault(key, ([], []))
                groups[key][0].append(xx)
                groups[key][1].append(yy)
            for (fl, bad), (gx, gy) in sorted(groups.items()):
                col = CROSSED if bad else OK
                if not fl:
                    a.plot(gx, gy, ls="", marker="o", ms=3.5, color=col, alpha=0.8)
                if "blocked" in fl:
                    a.plot(gx, gy, ls="", marker="s", ms=7, mfc="none", mew=1.0, color=col)
                if "never_charged" in fl:
                    a.plot(gx, gy, ls="", marker="x", ms=5, mew=1.0, color=col)
            if name.endswith(" margin"):
                a.axhline(0.0, color=CROSSED, lw=1.2)
            if ticks is not None:
                a.set_xticks(range(len(ticks)), ticks, fontsize=7)
                a.set_xlim(-0.5, len(ticks) - 0.5)
            a.set_title("%s%s%s" % (name, " (%s)" % unit if unit and unit != "1" else "",
                                    ", %d null" % nulls if nulls else ""), fontsize=9)
            a.set_xlabel(v.field, fontsize=8)
            a.tick_params(labelsize=7)
            a.grid(alpha=0.3)
    for k in range(len(figs), rows * per_row):
        for j in range(nf):
            axes[k // per_row][(k % per_row) * nf + j].set_visible(False)
    more = len(sw.varies) - len(varies)
    fig.suptitle("spinrail sweep: %s, %d samples (seed %d): each figure against each varied "
                 "value%s" % (sw.base["name"], len(sw.records), sw.seed,
                              "; %d more varied field(s) not plotted" % more if more else ""),
                 fontsize=11)
    handles = [Line2D([], [], ls="", marker="o", color=OK, label="held every limit"),
               Line2D([], [], ls="", marker="o", color=CROSSED, label="crossed a limit"),
               Line2D([], [], ls="", marker="s", ms=7, mfc="none", color="#555555",
                      label="blocked for most of the run (square)"),
               Line2D([], [], ls="", marker="x", color="#555555", label="never charged (cross)"),
               Line2D([], [], color=CROSSED, lw=1.2, label="the limit (margin 0)")]
    fig.legend(handles=handles, loc="outside lower center", ncol=5, fontsize=9, frameon=False)
    return fig


def write_values_png(sw, path):
    """sweep_values.png at path, written whole."""
    fig = figure(sw)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI)
    with atomic_open(path, "wb") as f:
        f.write(buf.getvalue())
