# report.png (host_sim/report.py), checked on the figure the function builds, not on pixels:
# its panels, the verdict in the title, every judged limit drawn at its value and in view,
# crossings and fault bits marked by name, legends above their panels (off the traces), axes
# that one glitch cannot squash, and the energy in Wh on the bars.
import copy
import math
import struct

import numpy as np
import pytest
from matplotlib.lines import Line2D

from controller.signals import FAULT_NAMES
from host_sim import report
from host_sim.limitcheck import BATT_A_TOL, CAP_TOL
from host_sim.limitcheck import bus_limit_v
from report_cases import case

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948, section 5.2)


def panels(fig):
    """title -> axes, for the panels the report titles (report.panel_titles)."""
    return {a.get_label(): a for a in fig.axes if a.get_label() in report.panel_titles(fig)}


def panel(fig, start):
    got = [a for t, a in panels(fig).items() if t.startswith(start)]
    assert len(got) == 1, (start, list(panels(fig)))
    return got[0]


def hlines(ax):
    """y of every horizontal line drawn on ax (axhline and constant traces)."""
    out = []
    for ln in ax.get_lines():
        y = np.asarray(ln.get_ydata(), dtype=float)
        if len(y) and np.all(y == y[0]):
            out.append(float(y[0]))
    return out


def fig_texts(fig):
    return [t.get_text() for t in fig.texts]


@pytest.fixture(scope="module")
def held():
    res, summ = case("held")
    return res, summ, report.figure(res, summ["verdict"])


def test_the_figure_has_every_panel(held):
    _, _, fig = held
    titles = report.panel_titles(fig)
    for start in ("Drive", "Bus", "Battery voltage", "Battery current",
                  "Battery temperature and state of charge", "Supercap bank", "Supercap cells",
                  "USB port", "Faults", "Service figures", "Where the energy went"):
        assert sum(t.startswith(start) for t in titles) == 1, (start, titles)


@pytest.mark.parametrize("name", ["held", "not_doing_its_job", "crossed"])
def test_the_verdict_is_in_the_title_with_the_codes(name):
    res, summ = case(name)
    fig = report.figure(res, summ["verdict"])
    head = [t for t in fig_texts(fig) if t.startswith(("HELD", "CROSSED", "NOT DOING"))]
    assert len(head) == 1, fig_texts(fig)
    word = {"held": "HELD", "crossed": "CROSSED", "not_doing_its_job": "NOT DOING ITS JOB"}
    assert head[0].startswith(word[summ["verdict"]])
    for code in {w["code"] for w in summ["service"]["warnings"]}:
        assert code in head[0]
    for k, d in summ["limits"].items():
        assert (k in head[0]) == (not d["held"]), (k, head[0])


def test_every_judged_limit_is_drawn_at_its_value_and_in_view(held):
    res, _, fig = held
    p = res.scenario.profile
    want = {
        "Bus": [bus_limit_v(res.scenario.profile_doc, res.scenario.clamp_margin_v)],
        "Battery current": [p.chg_limit_ma / 1000 * BATT_A_TOL],
        "Supercap bank": [p.cap_clamp_mv / 1000 * CAP_TOL],
        "Supercap cells": [p.cap_cell_rating_mv / 1000],
    }
    for start, values in want.items():
        ax = panel(fig, start)
        lo, hi = ax.get_ylim()
        for v in values:
            assert any(math.isclose(y, v, rel_tol=1e-9) for y in hlines(ax)), (start, v)
            assert lo < v < hi, (start, v, lo, hi)
    # the battery ceiling: the active stage ceiling plus the margin, where it is defined
    ax = panel(fig, "Battery voltage")
    s = res.series
    judged = s["ceiling_v"] + p.over_margin_mv / 1000
    traces = [np.asarray(ln.get_ydata(), dtype=float) for ln in ax.get_lines()]
    fin = judged[np.isfinite(judged)]
    assert any(len(y) and np.nanmax(y) == pytest.approx(fin.max()) and
               np.nanmin(y) == pytest.approx(fin.min()) for y in traces)
    lo, hi = ax.get_ylim()
    assert lo < fin.min() and fin.max() < hi
    # the VBUS window is a band whose edges are in view
    ax = panel(fig, "USB port")
    lo, hi = ax.get_ylim()
    assert lo < p.vbus_min_mv / 1000 and p.vbus_max_mv / 1000 < hi
    # each judged limit's legend entry gives its worst margin from the checker
    labels = [t.get_text() for a in fig.axes if a.get_legend() for t in a.get_legend().texts]
    for k in ("bus", "batt_current", "cap_clamp", "cap_cell", "batt_ceiling"):
        m = res.limits[k].worst_margin
        assert any("worst margin %+.3g" % m in t for t in labels), (k, m)


def test_fault_bits_are_rows_by_name_and_crossings_are_marked():
    res, summ = case("faults")
    fig = report.figure(res, summ["verdict"])
    ax = panel(fig, "Faults")
    f = 0
    for x in res.series["fault"]:
        f |= int(x)
    seen = [n for i, n in enumerate(FAULT_NAMES) if f >> i & 1]
    assert seen  # the fault parade sets some
    assert [t.get_text() for t in ax.get_yticklabels()] == seen
    res, summ = case("crossed")
    fig = report.figure(res, summ["verdict"])
    crossed = [k for k, d in summ["limits"].items() if not d["held"]]
    assert crossed == ["batt_ceiling"]
    rows = [t.get_text() for t in panel(fig, "Faults").get_yticklabels()]
    assert "batt_ceiling CROSSED" in rows
    ax = panel(fig, "Battery voltage")
    t0 = summ["limits"]["batt_ceiling"]["first_crossed_s"] / (60.0 if res.scenario.duration_s
                                                               > 600 else 1.0)
    vert = [ln for ln in ax.get_lines() if len(set(np.asarray(ln.get_xdata(), float))) == 1]
    assert any(float(ln.get_xdata()[0]) == pytest.approx(t0) for ln in vert)
    # a limit that held is not marked anywhere
    held_res, held_summ = case("held")
    fig = report.figure(held_res, held_summ["verdict"])
    assert not any("CROSSED" in t.get_text() for t in panel(fig, "Faults").get_yticklabels())
    assert not any("CROSSED" in t.get_text() for a in fig.axes if a.get_legend()
                   for t in a.get_legend().texts)


def test_legends_sit_above_their_panels(held):
    res, summ, fig = held
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    n = 0
    for a in fig.axes:
        leg = a.get_legend()
        if leg is None or not a.get_visible() or not a.axison:
            continue
        lb = leg.get_window_extent(r)
        ab = a.get_window_extent(r)
        assert lb.y0 >= ab.y1 - 1.0, a.get_label()  # above the plot area: off every trace
        n += 1
    assert n >= 10


@pytest.mark.parametrize("name, start, word", [("wind", "Drive: wind", "wind speed"),
                                               ("hydro", "Drive: water flow", "flow"),
                                               ("held", "Drive: speed", "drive speed")])
def test_the_drive_panel_shows_wind_or_flow_where_the_scenario_has_them(name, start, word):
    res, summ = case(name)
    fig = report.figure(res, summ["verdict"])
    ax = panel(fig, start)
    assert any(word in t.get_text() for t in ax.get_legend().texts)
    col = {"wind": "wind_ms", "hydro": "flow_lps"}.get(name)
    if col:
        assert np.isfinite(res.series[col]).all()


def test_one_glitch_does_not_squash_the_trace_and_is_marked_clipped():
    """Invariant: a spike at a single period leaves the axis where the rest of the trace and
    its judged limit put it, and the clipped point is marked with how far it went."""
    res, summ = case("held")
    clean = panel(report.figure(res, summ["verdict"]), "Bus").get_ylim()
    glitch = copy.copy(res)
    glitch.series = dict(res.series)
    bus = res.series["bus_v"].copy()
    bus[len(bus) // 2] = 400.0
    glitch.series["bus_v"] = bus
    ax = panel(report.figure(glitch, summ["verdict"]), "Bus")
    assert ax.get_ylim() == pytest.approx(clean)
    assert ax.get_ylim()[1] < 100.0
    labels = [t.get_text() for t in ax.get_legend().texts]
    assert any(t.startswith("clipped: above, to 400 V") for t in labels), labels
    marks = [ln for ln in ax.get_lines() if ln.get_marker() == 6 and len(ln.get_xdata())]
    assert marks and marks[0].get_ydata()[0] == pytest.approx(ax.get_ylim()[1])
    clean_labels = [t.get_text() for t in panel(report.figure(res, summ["verdict"]),
                                                "Bus").get_legend().texts]
    assert not any(t.startswith("clipped") for t in clean_labels)


def test_energy_bars_are_in_wh_with_their_values_and_groups(held):
    res, _, fig = held
    ax = panel(fig, "Where the energy went")
    led = res.ledger
    texts = [t.get_text() for t in ax.texts]
    values = [t for t in texts if t.endswith(" Wh ")]
    rows = report.energy_rows(led)
    assert len(values) == len(rows)
    for (_, label, wh), txt in zip(rows, values):  # the value on each bar, to its last digit
        nd = len(txt.split()[0].split(".")[1])
        assert float(txt.split()[0]) == pytest.approx(wh, abs=0.51 * 10 ** -nd), (label, txt)
        assert nd >= 2
    for g in ("in", "stored", "delivered", "lost"):
        assert g in texts
    ticks = [t.get_text() for t in ax.get_yticklabels()]
    assert ticks == [label for _, label, _ in report.ENERGY_ROWS]
    bars = [p.get_width() for p in ax.patches]
    assert bars == pytest.approx([wh for _, _, wh in rows])
    # every ledger entry is in one bar: in = stored + delivered + lost within the balance
    by = {}
    for g, _, wh in rows:
        by[g] = by.get(g, 0.0) + wh
    assert by["in"] - by["stored"] - by["delivered"] - by["lost"] == pytest.approx(
        led["balance_error_j"] / 3600.0, abs=1e-9)


def test_envelope_keeps_every_peak():
    rng = np.random.default_rng(3)
    t = np.arange(100000, dtype=float)
    y = rng.normal(size=t.size)
    y[12345] = 50.0
    y[777] = -40.0
    y[5000:5010] = np.nan
    tt, yy = report.envelope(t, y)
    assert len(tt) <= 2 * report.ENVELOPE_BINS + 2
    assert np.nanmax(yy) == 50.0 and np.nanmin(yy) == -40.0


def test_report_png_is_written_whole_at_its_size(tmp_path, held):
    res, summ, _ = held
    path = tmp_path / "report.png"
    data = report.write(res, path, summ["verdict"])
    raw = path.read_bytes()
    assert raw == data and raw[:8] == PNG_MAGIC
    w, h = struct.unpack(">II", raw[16:24])  # IHDR width and height
    assert (w, h) == (int(report.FIG_W * report.DPI), int(report.FIG_H * report.DPI))
    assert [p.name for p in tmp_path.iterdir()] == ["report.png"]  # no temporary left


def test_a_run_without_a_supercap_says_so():
    res, summ = case("held")
    res2 = copy.copy(res)
    sc = copy.copy(res.scenario)
    sc.doc = copy.deepcopy(res.scenario.doc)
    sc.doc["supercap"]["present"] = False
    res2.scenario = sc
    fig = report.figure(res2, summ["verdict"])
    assert "Supercap bank: none in this scenario" in report.panel_titles(fig)


def test_clipped_marker_legend_entry_is_a_line():
    # the clip marker's legend handle is a plain marker (no line across the legend)
    pn = report.Panel(report.Figure().add_subplot(), "x", "V")
    pn.trace(np.arange(1000.0), np.r_[np.zeros(999), 1e6], "y")
    pn.fit()
    h = [x for x in pn.handles if x.get_label().startswith("clipped")]
    assert len(h) == 1 and isinstance(h[0], Line2D) and h[0].get_linestyle() == "None"
