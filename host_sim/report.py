# report.png: one page a practitioner reads at a glance. The verdict in the title; on a shared
# time axis the drive (wind, flow or speed) and power, the bus, the battery's voltage, current,
# temperature and state of charge, the supercap bank and its highest cell, the USB port, and
# the fault bits by name; every judged limit drawn (host_sim/limitcheck.py), crossings marked;
# and where the energy went, in Wh. write_reports() also writes report.html around it
# (host_sim/report_html.py). Documented in docs/simulate.md ("report.png and report.html").
#
# Built on matplotlib's object API (no pyplot state). Traces are drawn from a min/max envelope
# of about ENVELOPE_BINS bins: every peak survives and a long run draws in well under a second.
import io
import math

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.transforms import blended_transform_factory

from controller.signals import FAULT_NAMES, STAGE_NAMES
from host_sim.fileio import atomic_open
from host_sim.limitcheck import BATT_A_TOL, CAP_TOL, CHARGING_A, DocLimits

ENVELOPE_BINS = 1500
DPI = 80
# Robust axes: a trace's axis spans the 0.5th to 99.5th percentile of its values (the judged
# limit always included); values beyond that by more than the span itself are clipped and
# marked at the edge, so a glitch shorter than 0.5 % of the run cannot squash the trace (ours).
PCT_LO, PCT_HI = 0.5, 99.5

# Colours: matplotlib's default cycle for traces; limits red; our own light fills.
LIMIT = "#d62728"  # a judged limit
LEVEL = "#ff7f0e"  # a controller level (trip, recovery, clamp setpoint)
_STAGE_FILL = {"bulk": "#fde2b8", "absorption": "#f7b7a3", "float": "#cfe8cf",
               "equalize": "#d9c8f0", "blocked": "#d0d0d0"}
_GROUP_COLOR = {"in": "#7f7f7f", "stored": "#2ca02c", "delivered": "#1f77b4", "lost": "#d62728"}
VERDICT_TEXT = {
    "held": "HELD: every limit held and the system did its job",
    "crossed": "CROSSED: a limit was crossed",
    "not_doing_its_job": "NOT DOING ITS JOB: every limit held, but service warnings",
}
VERDICT_COLOR = {"held": "#1a7f37", "crossed": "#c62828", "not_doing_its_job": "#b35c00"}

# Energy groups from the plant's ledger (J): (group, label, [ledger keys])
ENERGY_ROWS = (
    ("in", "drive", ["drive_in_j"]),
    ("in", "bus surges", ["surge_in_j"]),
    ("stored", "battery", ["batt_stored_j"]),
    ("stored", "supercap", ["cap_stored_j"]),
    ("stored", "rotor, bus cap", ["rotor_stored_j", "buscap_stored_j"]),
    ("delivered", "USB", ["usb_out_j"]),
    ("delivered", "loads", ["loads_out_j"]),
    ("lost", "dump load", ["loss_dump_j"]),
    ("lost", "converters", ["loss_conv_j"]),
    ("lost", "bridge diodes", ["loss_diodes_j"]),
    ("lost", "machine", ["loss_winding_j", "loss_friction_j", "loss_gear_j"]),
    ("lost", "battery, supercap", ["loss_batt_j", "loss_cap_j"]),
    ("lost", "clamp, bleed, other", ["loss_clamp_j", "loss_bleed_j", "loss_bus_step_j"]),
)

# the panel titles, in drawing order (tests check the figure has them)
PANELS = ("drive", "bus", "battery voltage", "battery current", "battery temperature and SOC",
          "supercap bank", "supercap cells", "USB port", "faults and crossings", "energy")


def energy_rows(led):
    """[(group, label, Wh)] from the ledger, in ENERGY_ROWS order."""
    out = []
    for g, label, keys in ENERGY_ROWS:
        j = 0.0
        for k in keys:
            v = led.get(k, 0.0)
            if v is not None and math.isfinite(v):
                j += v
        out.append((g, label, j / 3600.0))
    return out


def verdict_line(verdict, limits, warnings):
    """The verdict in words, with the crossed limits and the warning codes. limits: name ->
    limitcheck.Limit or its summary.json dictionary."""
    txt = VERDICT_TEXT.get(verdict, verdict)
    crossed = [k for k, x in limits.items() if not _held(x)]
    codes = sorted({w["code"] for w in warnings or ()})
    if verdict == "crossed" and crossed:
        txt = "CROSSED: %s" % ", ".join(crossed)
        if codes:
            txt += "; service warnings too: %s" % ", ".join(codes)
    elif verdict == "not_doing_its_job" and codes:
        txt += ": %s" % ", ".join(codes)
    return txt


def _held(x):
    return x["held"] if isinstance(x, dict) else x.held


def _spans(t, mask):
    """(start, end) times of the runs where mask is true."""
    m = np.asarray(mask, dtype=bool)
    if len(t) == 0 or not m.any():
        return []
    d = np.diff(np.concatenate(([0], m.astype(np.int8), [0])))
    starts = np.flatnonzero(d == 1)
    ends = np.flatnonzero(d == -1) - 1
    return [(t[a], t[b]) for a, b in zip(starts, ends)]


def envelope(t, y, bins=ENVELOPE_BINS):
    """A min/max envelope of y over about `bins` equal bins: (t, y) with two points a bin,
    the bin's least and largest value (NaN only where the whole bin is NaN). Short series
    come back as they are."""
    n = len(t)
    if n <= 2 * bins:
        return t, y
    step = int(math.ceil(n / bins))
    idx = np.arange(0, n, step)
    with np.errstate(invalid="ignore"):
        lo = np.fmin.reduceat(y, idx)
        hi = np.fmax.reduceat(y, idx)
    tt = np.repeat(t[idx], 2)
    yy = np.empty(2 * len(idx))
    yy[0::2] = lo
    yy[1::2] = hi
    return tt, yy


class Panel:
    """One axes: its traces (for the robust limits) and legend entries."""

    def __init__(self, ax, title, unit):
        self.ax = ax
        self.title = title
        self.unit = unit
        self.data = []  # arrays the axis must fit (robustly)
        self.levels = []  # values the axis must show whole (judged limits)
        self.handles = []

    def trace(self, t, y, label, robust=True, **kw):
        tt, yy = envelope(t, y)
        ln, = self.ax.plot(tt, yy, lw=kw.pop("lw", 0.8), label=label, **kw)
        if robust:
            self.data.append((tt, yy))
        self.handles.append(ln)
        return ln

    def level(self, v, label, judged=False, **kw):
        if v is None or not math.isfinite(v):
            return
        kw.setdefault("color", LIMIT if judged else LEVEL)
        kw.setdefault("ls", "-" if judged else "--")
        kw.setdefault("lw", 1.4 if judged else 0.9)
        self.handles.append(self.ax.axhline(v, label=label, **kw))
        if judged:
            self.levels.append(v)

    def fit(self, lo_floor=None, hi_ceil=None, min_span=None):
        """Robust y limits (PCT_LO..PCT_HI, extended to the extremes unless they lie more than
        the span beyond), every judged level kept in view; clipped points marked at the edge."""
        vals = [y[np.isfinite(y)] for _, y in self.data]
        vals = np.concatenate(vals) if vals else np.empty(0)
        if len(vals) == 0 and not self.levels:
            return
        if len(vals):
            p_lo, p_hi = np.percentile(vals, (PCT_LO, PCT_HI))
            v_lo, v_hi = float(vals.min()), float(vals.max())
            span = max(p_hi - p_lo, min_span or 0.0, 1e-6 + 0.02 * abs(p_hi))
            lo = v_lo if v_lo >= p_lo - span else p_lo - 0.1 * span
            hi = v_hi if v_hi <= p_hi + span else p_hi + 0.1 * span
        else:
            lo = hi = self.levels[0]
        for v in self.levels:
            lo, hi = min(lo, v), max(hi, v)
        if min_span and hi - lo < min_span:
            mid = 0.5 * (hi + lo)
            lo, hi = mid - 0.5 * min_span, mid + 0.5 * min_span
        pad = 0.06 * (hi - lo) if hi > lo else max(abs(hi) * 0.05, 0.5)
        lo, hi = lo - pad, hi + pad
        if lo_floor is not None:
            lo = max(lo, lo_floor)
        if hi_ceil is not None:
            hi = min(hi, hi_ceil)
        self.ax.set_ylim(lo, hi)
        above = below = 0
        top = bot = None
        for t, y in self.data:
            with np.errstate(invalid="ignore"):
                ma = y > hi
                mb = y < lo
            if ma.any():
                above += int(ma.sum())
                top = max(top if top is not None else -math.inf, float(np.nanmax(y[ma])))
                self.ax.plot(t[ma], np.full(int(ma.sum()), hi), ls="", marker=6, ms=6,
                             color="#444444", clip_on=False)
            if mb.any():
                below += int(mb.sum())
                bot = min(bot if bot is not None else math.inf, float(np.nanmin(y[mb])))
                self.ax.plot(t[mb], np.full(int(mb.sum()), lo), ls="", marker=7, ms=6,
                             color="#444444", clip_on=False)
        if above or below:
            parts = []
            if above:
                parts.append("above, to %.4g %s" % (top, self.unit))
            if below:
                parts.append("below, to %.4g %s" % (bot, self.unit))
            self.handles.append(Line2D([], [], ls="", marker=6, color="#444444",
                                       label="clipped: " + "; ".join(parts)))

    def finish(self, extra=()):
        """The legend above the plot, never on a trace, with the panel's title as its own."""
        finish_legend(self.ax, self.title, list(self.handles) + list(extra))
        self.ax.grid(alpha=0.3)


LEGEND_ROWS = 3  # the layout leaves room for this many legend rows above each panel
ROW_CHARS = 150  # legend characters a row holds at 7 pt across a panel (measured)


def ax_wide(a):
    return a.get_position().width > 0.6


def finish_legend(a, title, handles):
    """A left-aligned legend sitting on top of the axes, titled with the panel's title (so
    the title and the entries never overlap). ax.get_label() keeps the title for tests."""
    a.set_label(title)
    n = len(handles)
    width = max([len(h.get_label()) for h in handles] + [1]) + 6
    ncol = max(1, min(n, ROW_CHARS // width))
    if ax_wide(a):
        ncol = max(1, min(n, 2 * ROW_CHARS // width))
    while -(-n // ncol) > LEGEND_ROWS and ncol < n:
        ncol += 1
    a.legend(handles=handles, loc="lower left", bbox_to_anchor=(0.0, 1.0), fontsize=7,
             ncol=ncol, frameon=False, borderaxespad=0.15, borderpad=0.1, handlelength=1.6,
             columnspacing=1.2, title=title, alignment="left",
             title_fontproperties={"size": 10, "weight": "bold"})


class Ctx:
    """What every panel reads: the series, the time axis, the profile, the limits."""

    def __init__(self, result):
        self.result = result
        self.s = result.series
        self.sc = result.scenario
        self.p = self.sc.profile
        self.d = DocLimits(self.sc.profile_doc)  # the judged limits, as the limit check has them
        self.lim = result.limits
        self.sv = result.service or {}
        self.minutes = self.sc.duration_s > 600
        self.scale = 60.0 if self.minutes else 1.0
        self.t = self.s["t_s"] / self.scale
        self.marks = _crossing_marks(result, self.t)


# Layout in inches (a fixed layout: a layout engine would take longer than the drawing)
FIG_W, FIG_H = 16.0, 21.0
HEAD_IN = 1.0  # title and verdict
ROW_TOP_IN = 0.78  # a panel's legend and title
ROW_BOT_IN = 0.42  # its tick labels and time label
ENERGY_IN = 3.3
COLS = ((0.055, 0.41), (0.55, 0.405))  # (left, width) of the two columns, figure fractions


def _axes(fig, col, top_in, h_in, x0=None, w=None):
    x0 = COLS[col][0] if x0 is None else x0
    w = COLS[col][1] if w is None else w
    return fig.add_axes((x0, 1.0 - (top_in + h_in) / FIG_H, w, h_in / FIG_H))


def figure(result, verdict=None):
    """The report's Figure; each panel's title is its axes' label (panel_titles)."""
    c = Ctx(result)
    fig = Figure(figsize=(FIG_W, FIG_H), dpi=DPI)
    FigureCanvasAgg(fig)
    rows = 5
    avail = FIG_H - HEAD_IN - ROW_TOP_IN * 0.6 - ENERGY_IN - ROW_BOT_IN
    row_in = avail / rows
    h = row_in - ROW_TOP_IN - ROW_BOT_IN
    tops = [HEAD_IN + ROW_TOP_IN + i * row_in for i in range(rows)]
    left = [_axes(fig, 0, tp, h) for tp in tops]
    right = [_axes(fig, 1, tp, h) for tp in tops[:4]]
    for a in left[1:] + right:
        a.sharex(left[0])
    kax = _axes(fig, 1, tops[4] - 0.4, h + 0.4)
    eax = _axes(fig, 0, HEAD_IN + rows * row_in + 0.6 * ROW_TOP_IN, ENERGY_IN, x0=0.12,
                w=0.835)

    _title(fig, c, verdict)
    _drive(Panel(left[0], "Drive", ""), c)
    _bus(Panel(left[1], "Bus", "V"), c)
    _batt_v(Panel(left[2], "Battery voltage", "V"), c)
    _batt_a(Panel(left[3], "Battery current", "A"), c)
    _batt_temp(Panel(left[4], "Battery temperature and state of charge", "C"), c)
    _bank(Panel(right[0], "Supercap bank", "V"), c)
    _cells(Panel(right[1], "Supercap cells: the highest", "V"), c)
    _usb(Panel(right[2], "USB port", "V"), c)
    _faults(right[3], c)
    for a in left + right:
        a.set_xlim(0, c.sc.duration_s / c.scale)
        a.tick_params(labelsize=8)
        a.set_xlabel("time, %s" % ("minutes" if c.minutes else "s"), fontsize=8, labelpad=1)
    _key_figures(kax, c)
    _energy(eax, result.ledger)
    return fig


def panel_titles(fig):
    """The titles of the figure's panels, top to bottom, left column first."""
    return [a.get_label() for a in fig.axes if a.get_label() and a.get_label()[0] != "<"]


def png_bytes(fig):
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI)
    return buf.getvalue()


def write(result, path, verdict=None):
    """report.png at path (written whole); returns its bytes."""
    data = png_bytes(figure(result, verdict))
    with atomic_open(path, "wb") as f:
        f.write(data)
    return data


def write_reports(result, summ, out_dir):
    """report.png and report.html in out_dir, both written whole."""
    from pathlib import Path

    from host_sim import report_html
    out = Path(out_dir)
    data = write(result, out / "report.png", summ["verdict"])
    report_html.write(summ, data, out / "report.html")


# ---- the title and the key figures ------------------------------------------------------------

def _title(fig, c, verdict):
    sc = c.sc
    fig.text(0.01, 1.0 - 0.12 / FIG_H, "spinrail: %s  (%.0f s simulated, seed %s)%s" % (
        sc.name, sc.duration_s, sc.seed, "" if verdict else "; no verdict given"),
        fontsize=14, ha="left", va="top")
    if verdict:
        fig.text(0.01, 1.0 - 0.58 / FIG_H, verdict_line(verdict, c.lim, c.sv.get("warnings")),
                 fontsize=13, ha="left", va="top", color="white", fontweight="bold",
                 bbox=dict(boxstyle="round,pad=0.3", fc=VERDICT_COLOR.get(verdict, "#444444"),
                           ec="none"))


def key_lines(sv, soc0, soc1):
    """The service figures in a few lines of text (the PNG's key-figures cell)."""
    if not sv:
        return []
    e = sv["energy_wh"]
    h = sv["harvest"]
    u = sv["usb"]
    bl = sv["blocked"]
    out = [
        "battery %+.2f Wh, %+.3f Ah net; SOC %.1f %% -> %.1f %%" % (
            e["battery"], sv["battery_ah"]["net"], 100 * soc0, 100 * soc1),
        "harvest %s of the source's best; bulk acceptance %s" % (
            _fmt(h["ratio"], "%.2f"), _fmt(sv["acceptance"]["ratio"], "%.2f")),
        "dump share %s of the input (%s while a store had room)" % (
            _fmt(sv["dump_share"], "%.3f"), _fmt(sv["dump"]["while_store_had_room_share"],
                                                 "%.3f")),
        "absorption %s, float %s" % (_fmt(sv["time_to_absorption_s"], "at %.0f s", "never"),
                                     _fmt(sv["time_to_float_s"], "at %.0f s", "never")),
        "USB %.2f Wh, port on %.0f of %.0f s wanted" % (u["served_wh"], u["on_while_wanted_s"],
                                                         u["wanted_s"]),
        "blocked %.0f s%s" % (bl["total_s"], " (%s)" % ", ".join(
            "%s %.0f s" % kv for kv in bl["reasons_s"].items()) if bl["reasons_s"] else ""),
    ]
    return out


def _key_figures(ax, c):
    """The service figures and warnings as text in the free cell."""
    import textwrap
    ax.axis("off")
    ax.set_label("Service figures")
    s = c.s
    soc0 = c.sc.doc["battery"]["soc0"]
    soc1 = float(s["batt_soc"][-1]) if len(s["batt_soc"]) else soc0
    lines = ["Service figures (summary.json service)"]
    for ln in key_lines(c.sv, soc0, soc1):
        lines += textwrap.wrap(ln, 76, subsequent_indent="  ")
    warn = c.sv.get("warnings") or []
    lines.append("")
    lines.append("Service warnings: %s" % ("none" if not warn else len(warn)))
    for w in warn:
        lines += textwrap.wrap("%s: %s" % (w["code"], w["message"]), 76,
                               subsequent_indent="  ")
    if len(lines) > 17:
        lines = lines[:16] + ["... (all of them in report.html and summary.json)"]
    ax.text(0.0, 1.0, "\n".join(lines), fontsize=9.5, va="top", ha="left", family="monospace",
            transform=ax.transAxes)


def _fmt(x, fmt, none="-"):
    return none if x is None else fmt % x


# ---- crossings ----------------------------------------------------------------------------------

def _crossing_marks(result, t):
    """limit name -> (times, values) of the kept periods past the judged limit, from the
    series (a proxy of the checker's own test, which sees every period)."""
    s = result.series
    d = DocLimits(result.scenario.profile_doc)  # as the limit check judges them
    with np.errstate(invalid="ignore"):
        charging = s["batt_a"] > CHARGING_A
        judged = np.where(np.isnan(s["ceiling_v"]), 0.0, s["ceiling_v"] + d.margin_v)
        lim_a = d.chg_limit_a * BATT_A_TOL
        lo, hi = d.vbus_min_v, d.vbus_max_v
        m = {
            "batt_ceiling": (charging & (s["batt_v"] > judged), s["batt_v"]),
            "batt_current": (s["batt_a"] > lim_a, s["batt_a"]),
            "cap_clamp": (s["cap_v"] > d.cap_clamp_v * CAP_TOL, s["cap_v"]),
            "cap_cell": (s["cell_v_max"] > d.cap_cell_rating_v, s["cell_v_max"]),
            "usb_vbus": ((s["usb_on"] > 0) & ((s["usb_vbus_v"] < lo) | (s["usb_vbus_v"] > hi)),
                         s["usb_vbus_v"]),
            "bus": (s["bus_v"] > _bus_limit_v(result.scenario), s["bus_v"]),
        }
    return {k: (t[mask], y[mask]) for k, (mask, y) in m.items()}


MAX_MARKS = 400  # crosses drawn per limit (more would hide the trace, and take long)


def _mark(panel, name, c):
    """Where a crossed limit was crossed: the kept periods past it as red crosses, the first
    crossing as a red line. Nothing for a limit that held: the series is a proxy of the
    checker's own test (cap_clamp is judged behind the bank's ESR, batt_current excepts
    one-period transients), and only the checker's verdict counts."""
    x = c.lim.get(name)
    if x is None or x.held:
        return
    a = panel.ax
    tt, yy = c.marks.get(name, ((), ()))
    if len(tt):
        k = -(-len(tt) // MAX_MARKS)
        a.plot(tt[::k], yy[::k], ls="", marker="x", ms=3, mew=0.8, color=LIMIT, zorder=5)
        panel.handles.append(Line2D([], [], ls="", marker="x", color=LIMIT,
                                    label="past the limit (%d kept periods)" % len(tt)))
    if x.crossed_at_s is not None:
        a.axvline(x.crossed_at_s / c.scale, color=LIMIT, lw=1.2, ls=(0, (4, 2)), zorder=4)
        panel.handles.append(Line2D([], [], color=LIMIT, lw=1.2, ls=(0, (4, 2)),
                                    label="%s CROSSED at %.1f s" % (name, x.crossed_at_s)))


def _judged_label(name, what, c, unit):
    x = c.lim.get(name)
    if x is None or x.worst is None:
        return "%s (judged; not exercised)" % what
    return "%s (judged; worst margin %+.3g %s)" % (what, x.worst_margin, unit)


# ---- the panels -------------------------------------------------------------------------------

def _drive(pn, c):
    s, t, a = c.s, c.t, pn.ax
    kind = c.sc.doc["drive"]["kind"]
    if kind == "wind" and np.isfinite(s["wind_ms"]).any():
        pn.title, pn.unit = "Drive: wind speed and power", "m/s"
        pn.trace(t, s["wind_ms"], "wind speed (m/s)", color="#17becf")
        a.set_ylabel("wind, m/s", fontsize=8)
    elif kind == "hydro" and np.isfinite(s["flow_lps"]).any():
        pn.title, pn.unit = "Drive: water flow and power", "l/s"
        pn.trace(t, s["flow_lps"], "flow (l/s)", color="#17becf")
        a.set_ylabel("flow, l/s", fontsize=8)
    else:
        pn.title, pn.unit = "Drive: speed and power (%s)" % kind, "rpm"
        pn.trace(t, s["drive_rpm"], "drive speed (rpm)", color="#555555")
        a.set_ylabel("drive, rpm", fontsize=8)
    pn.levels.append(0.0)  # magnitudes: zero in view (a start-up is not a glitch)
    pn.fit(min_span=1.0)
    a2 = a.twinx()
    pw = Panel(a2, "", "W")
    pw.trace(t, s["p_in_w"], "power in (W)", color="#1f77b4", lw=0.7)
    pw.trace(t, s["p_elec_w"], "electrical out (W)", color="#2ca02c", lw=0.7)
    best = s["p_best_w"] if np.isfinite(s["p_best_w"]).any() else s["p_ideal_w"]
    if np.isfinite(best).any():
        pw.trace(t, best, "source's best (W)", color="#9467bd", lw=0.8, ls="--")
    pw.levels.append(0.0)
    pw.fit(min_span=10.0)
    a2.set_ylabel("W", fontsize=8)
    a2.tick_params(labelsize=8)
    pn.finish(pw.handles)


def _bus_limit_v(sc):
    """The bus limit as the limit check judges it (limitcheck: from the profile document)."""
    from host_sim.limitcheck import bus_limit_v
    return bus_limit_v(sc.profile_doc, sc.clamp_margin_v)


def _bus(pn, c):
    s, t, p, a = c.s, c.t, c.p, pn.ax
    for x0, x1 in _spans(t, s["dump_on"] > 0):
        a.axvspan(x0, x1, color="#ffbb78", alpha=0.6, lw=0)
    pn.trace(t, s["bus_v"], "bus", color="#333333", lw=0.7)
    pn.level(_bus_limit_v(c.sc), _judged_label("bus", "trip + clamp margin", c, "V"),
             judged=True)
    pn.level(p.ovp_trip_mv / 1000, "overvoltage trip")
    pn.level(p.ovp_recover_mv / 1000, "recovery", ls=":")
    pn.handles.append(Patch(color="#ffbb78", label="dump load on"))
    _mark(pn, "bus", c)
    pn.levels.append(0.0)
    pn.fit(lo_floor=0.0)
    a.set_ylabel("V", fontsize=8)
    pn.finish()


def _stage_shading(a, c):
    stage = c.s["stage"].astype(int)
    seen = []
    for code, name in enumerate(STAGE_NAMES):
        sp = _spans(c.t, stage == code)
        for x0, x1 in sp:
            a.axvspan(x0, x1, color=_STAGE_FILL[name], lw=0, zorder=0)
        if sp:
            seen.append(Patch(color=_STAGE_FILL[name], label=name))
    return seen


def _no_battery(pn, c):
    if not c.sc.doc["battery"]["present"]:
        pn.title += ": no battery in this scenario"


def _batt_v(pn, c):
    s, t, a = c.s, c.t, pn.ax
    _no_battery(pn, c)
    shade = _stage_shading(a, c)
    margin = c.d.margin_v
    pn.trace(t, s["batt_v"], "battery V", color="#000000")
    with np.errstate(invalid="ignore"):
        judged = s["ceiling_v"] + margin
    pn.trace(t, s["ceiling_v"], "stage ceiling", color=LEVEL, ls="--", lw=0.9, robust=False)
    ln = pn.trace(t, judged, _judged_label("batt_ceiling", "ceiling + %.2f V" % margin, c, "V"),
                  color=LIMIT, lw=1.4, robust=False)
    fin = judged[np.isfinite(judged)]
    if len(fin):
        pn.levels += [float(fin.min()), float(fin.max())]
    pn.handles.remove(ln)
    pn.handles.insert(1, ln)
    _mark(pn, "batt_ceiling", c)
    pn.fit(lo_floor=0.0, min_span=0.5)
    a.set_ylabel("V", fontsize=8)
    pn.finish(shade)


def _batt_a(pn, c):
    s, t, a = c.s, c.t, pn.ax
    _no_battery(pn, c)
    lim_a = c.d.chg_limit_a
    a.axhspan(lim_a, lim_a * BATT_A_TOL, color="#f4c7c3", lw=0, zorder=0)
    pn.trace(t, s["batt_a"], "battery A (+ charging)", color="#1f77b4", lw=0.7)
    pn.level(lim_a * BATT_A_TOL, _judged_label("batt_current", "limit x %.2f" % BATT_A_TOL, c,
                                               "A"), judged=True)
    pn.level(lim_a, "charge limit %.2f A" % lim_a)
    a.axhline(0.0, color="#888888", lw=0.6)
    x = c.lim.get("batt_current")
    if x is not None and x.peak is not None and x.peak > lim_a * BATT_A_TOL and x.held:
        a.plot([x.t_peak_s / c.scale], [x.peak], ls="", marker="o", mfc="none", ms=7,
               color=LEVEL, zorder=5)
        pn.handles.append(Line2D([], [], ls="", marker="o", mfc="none", color=LEVEL,
                                 label="peak %.2f A at %.1f s: one period, excepted by the rule"
                                 % (x.peak, x.t_peak_s)))
    _mark(pn, "batt_current", c)
    pn.levels.append(0.0)  # charging or discharging: zero in view
    pn.fit(min_span=0.5)
    a.set_ylabel("A", fontsize=8)
    pn.finish()


def _batt_temp(pn, c):
    s, t, p, a = c.s, c.t, c.p, pn.ax
    _no_battery(pn, c)
    t_lo, t_hi = p.temp_min_dc / 10, p.temp_max_dc / 10
    pn.trace(t, s["batt_temp_c"], "battery temperature (C)", color="#d62728", lw=0.9)
    pn.fit(min_span=4.0)
    lo, hi = a.get_ylim()
    # the charging window, shaded where it is in view (it is the controller's, not judged)
    a.axhspan(max(lo, t_lo), min(hi, t_hi), color="#e5f2e5", lw=0, zorder=0)
    pn.handles.append(Patch(color="#e5f2e5", label="charging window %g..%g C" % (t_lo, t_hi)))
    a.set_ylim(lo, hi)
    a.set_ylabel("C", fontsize=8)
    a2 = a.twinx()
    ps = Panel(a2, "", "%")
    ps.trace(t, 100 * s["batt_soc"], "state of charge (%)", color="#2ca02c", lw=0.9)
    ps.fit(lo_floor=0.0, hi_ceil=100.5, min_span=4.0)
    a2.set_ylabel("SOC, %", fontsize=8)
    a2.tick_params(labelsize=8)
    pn.finish(ps.handles)


def _bank(pn, c):
    s, t, p, a = c.s, c.t, c.p, pn.ax
    if not c.sc.doc["supercap"]["present"]:
        pn.title = "Supercap bank: none in this scenario"
        a.text(0.5, 0.5, "no supercap bank", ha="center", va="center", transform=a.transAxes)
        pn.finish()
        return
    pn.trace(t, s["cap_v"], "bank V", color="#8c564b")
    clamp = c.d.cap_clamp_v
    pn.level(clamp * CAP_TOL, _judged_label("cap_clamp", "clamp x %.2f" % CAP_TOL, c, "V"),
             judged=True)
    pn.level(clamp, "clamp %.2f V" % clamp)
    pn.level(p.cap_cells * p.cap_cell_rating_mv / 1000, "bank rating", ls=":", color="#7f7f7f")
    _mark(pn, "cap_clamp", c)
    pn.fit(lo_floor=0.0)
    a.set_ylabel("V", fontsize=8)
    pn.finish()


def _cells(pn, c):
    s, t, a = c.s, c.t, pn.ax
    if not c.sc.doc["supercap"]["present"]:
        pn.title = "Supercap cells: no bank"
        pn.finish()
        return
    pn.trace(t, s["cell_v_max"], "highest cell V", color="#8c564b")
    pn.level(c.d.cap_cell_rating_v, _judged_label("cap_cell", "cell rating", c, "V"),
             judged=True)
    _mark(pn, "cap_cell", c)
    pn.fit(lo_floor=0.0, min_span=0.2)
    a.set_ylabel("V", fontsize=8)
    pn.finish()


def _usb(pn, c):
    s, t, a = c.s, c.t, pn.ax
    lo, hi = c.d.vbus_min_v, c.d.vbus_max_v
    a.axhspan(lo, hi, color="#c7e9c0", alpha=0.7, lw=0, zorder=0)
    vbus = np.where(s["usb_conv"] > 0, s["usb_vbus_v"], np.nan)  # the converter's, when on
    pn.trace(t, vbus, "VBUS (converter on)", color="#17becf")
    pn.levels += [lo, hi]
    pn.handles.append(Patch(color="#c7e9c0", label=_judged_label(
        "usb_vbus", "VBUS window %.2f..%.2f V while the port is on" % (lo, hi), c, "V")))
    _mark(pn, "usb_vbus", c)
    pn.fit(lo_floor=0.0, min_span=1.0)
    y0, y1 = a.get_ylim()
    for x0, x1 in _spans(t, s["usb_on"] > 0):
        a.axvspan(x0, x1, ymin=0, ymax=0.05, color="#2ca02c", lw=0)
    pn.handles.append(Patch(color="#2ca02c", label="port on"))
    a.set_ylabel("V", fontsize=8)
    a2 = a.twinx()
    pa = Panel(a2, "", "A")
    pa.trace(t, s["usb_a"], "USB A", color="#e377c2", lw=0.8)
    pa.levels.append(0.0)
    pa.fit(min_span=0.5)
    a2.set_ylabel("A", fontsize=8)
    a2.tick_params(labelsize=8)
    pn.finish(pa.handles)


def _faults(a, c):
    """One row per fault bit seen (by name), spans where it was set; a row per crossed limit."""
    s, t = c.s, c.t
    f = s["fault"].astype(np.int64)
    rows = []
    for i, name in enumerate(FAULT_NAMES):
        sp = _spans(t, (f >> i) & 1)
        if sp:
            rows.append((name, sp, "#9467bd"))
    for k, x in c.lim.items():
        if not x.held and x.crossed_at_s is not None:
            tt = c.marks.get(k, ((), ()))[0]
            sp = [(v, v) for v in tt] or [(x.crossed_at_s / c.scale,) * 2]
            rows.append(("%s CROSSED" % k, sp, LIMIT))
    tick = (c.sc.duration_s / c.scale) / 400.0  # a one-period fault still shows
    for j, (name, sp, col) in enumerate(rows):
        a.broken_barh([(x0, max(x1 - x0, tick)) for x0, x1 in sp], (j - 0.35, 0.7), color=col)
    a.set_yticks(range(len(rows)), [r[0] for r in rows], fontsize=8)
    a.set_ylim(len(rows) - 0.5 if rows else 0.5, -0.5)
    if not rows:
        a.text(0.5, 0.5, "no fault bit set, no limit crossed", ha="center", va="center",
               transform=a.transAxes, fontsize=10, color="#1a7f37")
        a.set_yticks([])
    finish_legend(a, "Faults (controller fault bits, by name) and limit crossings",
                  [Patch(color="#9467bd", label="fault bit set"),
                   Patch(color=LIMIT, label="limit crossed (kept periods past it)")])
    a.grid(alpha=0.3, axis="x")


def _energy(a, led):
    rows = energy_rows(led)
    y, labels, vals, cols = [], [], [], []
    pos = 0.0
    last = None
    groups = {}
    for g, label, wh in rows:
        if last is not None and g != last:
            pos += 0.6  # a gap between groups
        last = g
        y.append(pos)
        labels.append(label)
        vals.append(wh)
        cols.append(_GROUP_COLOR[g])
        groups.setdefault(g, []).append(pos)
        pos += 1.0
    a.barh(y, vals, color=cols, height=0.8)
    a.set_yticks(y, labels, fontsize=8)
    a.invert_yaxis()
    top = max([abs(v) for v in vals] + [1e-3])
    lo = min(min(vals), 0.0)
    a.set_xlim(lo - 0.12 * top if lo < 0 else 0.0, max(max(vals), 0.0) + 0.14 * top)
    nd = 2 if top >= 1.0 else (3 if top >= 0.1 else 4)  # a short run's Wh still read
    for yy, v in zip(y, vals):
        v_txt = 0.0 if abs(v) < 0.5 * 10 ** -nd else v  # no "-0.00"
        a.text(v + (0.005 * top if v >= 0 else -0.005 * top), yy, " %.*f Wh " % (nd, v_txt),
               va="center", ha="left" if v >= 0 else "right", fontsize=8)
    tr = blended_transform_factory(a.transAxes, a.transData)
    for g, ys in groups.items():
        a.text(-0.085, 0.5 * (ys[0] + ys[-1]), g, transform=tr, ha="right", va="center",
               fontsize=10, fontweight="bold", color=_GROUP_COLOR[g])
    a.axvline(0.0, color="#444444", lw=0.8)
    sums = {g: sum(v for gg, _, v in rows if gg == g) for g in _GROUP_COLOR}
    finish_legend(a, "Where the energy went, Wh: in %.2f = stored %.2f + delivered %.2f + lost "
                  "%.2f; balance error %.3f %%" % (
                      sums["in"], sums["stored"], sums["delivered"], sums["lost"],
                      led.get("balance_error_pct", float("nan"))), [])
    a.set_xlabel("Wh", fontsize=8)
    a.tick_params(labelsize=8)
    a.grid(alpha=0.3, axis="x")
