# sweep's flags and sweep_values.png (host_sim/sweep.py, host_sim/sweep_plots.py): a sample is
# flagged blocked when its battery stage was blocked for half the run or more, never_charged
# when it raised no_charge; the flags agree between sweep.csv, sweep_summary.json and the
# table, follow the physics (a battery colder than its charging window is blocked and never
# charges), and sweep_values.png has a panel per (figure, varied field).
import contextlib
import csv
import io
import json

import pytest

from host_sim import cli, scenario_gen, sweep, sweep_plots
from host_sim.scenario import load_doc
from report_cases import builtin

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948, section 5.2)
VARY = ["battery.ambient_c=uniform(-30,40)", "usb.network.tol_pct=choice(1,5)"]
SAMPLES = 8


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    path = tmp_path_factory.mktemp("sweep") / "demo20.json"
    doc = builtin("demo", 20)
    doc["name"] = "demo20"
    path.write_text(json.dumps(doc))
    return path


@pytest.fixture(scope="module")
def ran(base, tmp_path_factory):
    out = tmp_path_factory.mktemp("sweep_out")
    argv = ["sweep", str(base), "--samples", str(SAMPLES), "--seed", "1", "--workers", "1",
            "--out", str(out), "--quiet"]
    for v in VARY:
        argv += ["--vary", v]
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        rc = cli.main(argv)
    return rc, out, buf.getvalue()


def test_flags_agree_everywhere_and_follow_the_temperature_window(ran, base):
    rc, out, table = ran
    assert rc == 0
    rows = list(csv.DictReader((out / "sweep.csv").open()))
    assert len(rows) == SAMPLES
    summ = json.loads((out / "sweep_summary.json").read_text())
    p = load_doc(json.loads(base.read_text()), str(base)).profile
    t_min = p.temp_min_dc / 10.0
    for r in rows:
        fl = r["flags"].split()
        assert ("blocked" in fl) == (float(r["blocked_share"]) >= sweep.BLOCKED_SHARE)
        codes = r["service_warnings"].split()
        assert ("never_charged" in fl) == any(c in codes for c in sweep.NEVER_CHARGED_CODES)
        i = int(r["sample"])
        for f in sweep.FLAGS:
            assert (i in summ["flags"][f]) == (f in fl)
        # a battery well below its charging window is blocked all run and gains nothing;
        # one well inside it is never blocked (a 20 s run barely warms it)
        amb = float(r["battery.ambient_c"])
        if amb < t_min - 2.0:
            assert fl == ["blocked", "never_charged"], r
        elif amb > t_min + 2.0:
            assert fl == [] and float(r["blocked_share"]) == 0.0, r
    colder = [r for r in rows if float(r["battery.ambient_c"]) < t_min - 2.0]
    warmer = [r for r in rows if float(r["battery.ambient_c"]) > t_min + 2.0]
    assert colder and warmer  # the draw covers both sides of the window's edge
    assert summ["flags"]["blocked_share_at_least"] == sweep.BLOCKED_SHARE
    line = [ln for ln in table.splitlines() if ln.startswith("flagged:")]
    assert len(line) == 1
    ids = summ["flags"]["blocked"]
    assert "%d of %d (samples %s)" % (len(ids), SAMPLES, ", ".join(map(str, ids))) in line[0]


def test_sweep_values_png_has_a_panel_per_figure_and_field(ran, base):
    rc, out, _ = ran
    assert (out / "sweep_values.png").read_bytes()[:8] == PNG_MAGIC
    sw = sweep.sweep(scenario_gen.load_base(str(base)), VARY, 3, 1, 1, progress=False)
    fig = sweep_plots.figure(sw)
    titles = sweep_plots.panel_titles(fig)
    names = ["%s margin" % k for k in sw.limit_names()] + [k for k, _ in sweep_plots.SERVICE]
    assert len(titles) == len(names) * len(VARY)
    for n in names:
        assert sum(t.split(" (")[0].split(",")[0] == n for t in titles) == len(VARY), n
    labels = [a.get_xlabel() for a in fig.axes if a.get_visible()]
    assert sorted(set(labels)) == sorted(v.split("=")[0] for v in VARY)
    # a margin panel draws the limit at margin 0
    ax = next(a for a in fig.axes if a.get_title().startswith("bus margin"))
    assert any(list(ln.get_ydata()) == [0.0, 0.0] for ln in ax.get_lines())
