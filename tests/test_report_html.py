# report.html (host_sim/report_html.py): self-contained (no URL, no script, the panels inline
# and byte-equal to report.png), with the verdict, the crossed limits, the service warnings,
# the limits table, the service figures and the energy table; written by simulate beside
# report.png.
import base64
import json
import re
from html.parser import HTMLParser

import pytest

from host_sim import report, report_html, simulate
from report_cases import case, docs

PNG = b"\x89PNG\r\n\x1a\n" + b"\0" * 16  # stands in for report.png where only bytes matter


class Page(HTMLParser):
    """Tags, their attributes, the text of each element with an id, and the table cells."""

    def __init__(self, text):
        super().__init__()
        self.tags = []
        self.by_id = {}
        self.cells = []
        self._ids = []
        self._cell = None
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        self.tags.append((tag, a))
        if "id" in a:
            self._ids.append([a["id"], tag, ""])
        if tag in ("td", "th"):
            self._cell = ""

    def handle_endtag(self, tag):
        if self._ids and self._ids[-1][1] == tag:
            i, _, txt = self._ids.pop()
            self.by_id[i] = txt
        if tag in ("td", "th") and self._cell is not None:
            self.cells.append(self._cell.strip())
            self._cell = None

    def handle_data(self, data):
        for x in self._ids:
            x[2] += data
        if self._cell is not None:
            self._cell += data


def no_outside_reference(text):
    """Nothing the page would fetch or leave for: no URL, no absolute path as a source."""
    low = text.lower()
    return ("http://" not in low and "https://" not in low and 'src="/' not in low
            and "<script" not in low and "<link" not in low and "url(" not in low
            and "@import" not in low)


@pytest.mark.parametrize("name", ["held", "not_doing_its_job", "crossed"])
def test_the_page_holds_the_verdict_tables_and_figures(name):
    res, summ = case(name)
    text = report_html.page(summ, PNG)
    pg = Page(text)
    line = report.verdict_line(summ["verdict"], summ["limits"], summ["service"]["warnings"])
    assert pg.by_id["verdict"] == line
    assert ('div', {"id": "verdict", "class": "verdict %s" % summ["verdict"]}) in pg.tags
    for k, d in summ["limits"].items():
        i = pg.cells.index(k)  # the limits table row: name, held, worst, limit, margin, unit
        assert pg.cells[i + 1] == ("yes" if d["held"] else "NO")
        assert pg.cells[i + 4] == "%+.4g" % d["margin"]
        assert pg.cells[i + 5] == d["unit"]
    for w in summ["service"]["warnings"]:
        assert w["code"] in text and report_html.html.escape(w["message"]) in text
    if not summ["service"]["warnings"]:
        assert "none: the system did its job" in text
    crossed = [k for k, d in summ["limits"].items() if not d["held"]]
    assert ("Limits crossed" in text) == bool(crossed)
    for k in crossed:
        assert "%s</span> crossed at %.2f s" % (k, summ["limits"][k]["first_crossed_s"]) in text
    sv = summ["service"]
    for figure, value, _ in report_html.service_rows(sv):
        assert figure in pg.cells
    assert "%+.3f" % sv["battery_ah"]["net"] in pg.cells
    for g, label, wh in report.energy_rows(summ["energy_j"]):
        i = pg.cells.index(label, pg.cells.index("of the input"))
        assert pg.cells[i + 1] == "%.3f" % wh
    assert no_outside_reference(text)


def test_the_page_is_self_contained_and_carries_report_png_itself(tmp_path):
    doc = docs()["held"]
    path = tmp_path / "site.json"
    path.write_text(json.dumps(doc))
    out = tmp_path / "out"
    res, summ = simulate.simulate(str(path), out, progress=False)
    text = (out / "report.html").read_text(encoding="utf-8")
    assert no_outside_reference(text)
    imgs = [a for t, a in Page(text).tags if t == "img"]
    assert len(imgs) == 1
    m = re.fullmatch(r"data:image/png;base64,([A-Za-z0-9+/=]+)", imgs[0]["src"])
    assert m, imgs[0]["src"][:60]
    assert base64.b64decode(m.group(1)) == (out / "report.png").read_bytes()
    assert Page(text).by_id["verdict"].startswith("HELD")
    assert sorted(p.name for p in out.iterdir()) == ["report.html", "report.png",
                                                     "summary.json", "timeseries.csv"]


def test_text_from_the_scenario_is_escaped():
    res, summ = case("held")
    s = dict(summ, scenario="<b>site & co</b>", source='"/etc/x"')
    text = report_html.page(s, PNG)
    assert "<b>site" not in text and "&lt;b&gt;site &amp; co&lt;/b&gt;" in text
    assert no_outside_reference(text)


def test_the_hil_link_figures_are_listed():
    res, summ = case("held")
    s = dict(summ, link={"board": "virtual", "frames_resent": 0, "rtt_median_ms": 0.4})
    text = report_html.page(s, PNG)
    assert "link (hil)" in text and "board virtual" in text and "rtt_median_ms 0.4" in text


def test_hil_writes_report_html_beside_report_png(tmp_path, monkeypatch):
    """The hil command's own file writing, with the board's run stood in by the held case."""
    import argparse

    from host_sim import hil
    res, summ = case("held")
    figures = {"board": "virtual", "firmware": "f", "profile": "p", "frames_sent": res.ticks,
               "frames_resent": 0, "ticks": res.ticks, "rtt_median_ms": 0.4,
               "rtt_p95_ms": 0.6, "rtt_max_ms": 0.9}
    monkeypatch.setattr(hil, "run_hil", lambda sc, port, progress, every: (res, figures, None))
    path = tmp_path / "site.json"
    path.write_text(json.dumps(docs()["held"]))
    out = tmp_path / "hil"
    rc = hil.cmd_hil(argparse.Namespace(scenario=str(path), port="virtual", out=str(out),
                                        every=1, quiet=True))
    assert rc == 0
    text = (out / "report.html").read_text(encoding="utf-8")
    assert "board virtual" in text and Page(text).by_id["verdict"].startswith("HELD")
    assert (out / "report.png").exists() and no_outside_reference(text)
