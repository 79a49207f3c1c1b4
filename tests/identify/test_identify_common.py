"""Bench-log reading: every bad log gives a UserError naming the file, the line and the column;
the 95 % t factor; fragments written whole and merged, never clobbering foreign files."""
import json
import os

import pytest

from host_sim.errors import UserError
from host_sim.identify.common import read_log, t975, write_fragment

UNITS = {"t_s": "s", "v": "V", "i_a": "A"}
GOOD = "t_s,v,i_a\n0,12.0,0\n1,12.1,0.5\n2,12.2,1.0\n"


def read(path, **kw):
    kw.setdefault("min_rows", 2)
    return read_log(str(path), ("t_s", "v", "i_a"), UNITS, time_col="t_s", **kw)


def test_reads_columns_lines_and_skips_comments(write_log):
    p = write_log("ok.csv", "# bench, 2 Dec\n\nt_s, v ,i_a,note\n0,12.0,0,rest\n# pause\n"
                            "1,12.1,0.5,x\n")
    log = read(p)
    assert list(log.col["v"]) == [12.0, 12.1]
    assert list(log.line) == [4, 6]  # file lines, comments and blanks counted
    assert "note" in log.names and not log.has("note")  # unused text columns are not checked


@pytest.mark.parametrize("text, line, column, what", [
    ("t_s,v\n0,1\n1,2\n", 1, "i_a", "missing column"),
    ("t_s,v,i_a\n0,12,0\n1,abc,0\n", 3, "v", "'abc'"),
    ("t_s,v,i_a\n0,12,0\n1,,0\n", 3, "v", "''"),
    ("t_s,v,i_a\n0,12,0\n1,nan,0\n", 3, "v", "finite"),
    ("t_s,v,i_a\n0,12,0\n1,12,inf\n", 3, "i_a", "finite"),
    ("t_s,v,i_a\n0,12,0\n2,12,0\n1.5,12,0\n", 4, "t_s", "time must increase"),
    ("t_s,v,i_a\n0,12,0\n0,12,0\n", 3, "t_s", "time must increase"),
])
def test_bad_cells_name_file_line_and_column(write_log, text, line, column, what):
    p = write_log("bad.csv", text)
    with pytest.raises(UserError) as e:
        read(p)
    msg = str(e.value)
    assert msg.startswith("%s:%d:" % (p, line)), msg
    assert "'%s'" % column in msg and what in msg, msg


def test_short_row_and_duplicate_header(write_log):
    p = write_log("short.csv", "t_s,v,i_a\n0,12,0\n1,12\n")
    with pytest.raises(UserError, match=r"short\.csv:3: 2 cells, the header has 3 columns"):
        read(p)
    p = write_log("dup.csv", "t_s,v,v,i_a\n0,1,1,0\n")
    with pytest.raises(UserError, match=r"dup\.csv:1: column 'v' appears twice"):
        read(p)


def test_too_few_rows_and_empty_and_missing_file(write_log, tmp_path):
    p = write_log("few.csv", GOOD)
    with pytest.raises(UserError, match=r"few\.csv: 3 data rows; .* at least 5"):
        read(p, min_rows=5)
    p = write_log("empty.csv", "# nothing\n\n")
    with pytest.raises(UserError, match=r"empty\.csv: no header line"):
        read(p)
    with pytest.raises(UserError, match=r"nope\.csv: cannot read"):
        read(tmp_path / "nope.csv")


def test_pattern_columns_are_checked(write_log):
    p = write_log("cells.csv", "t_s,v,i_a,cell1,cell2\n0,5,0,2.5,2.5\n1,5,1,2.5,x\n")
    with pytest.raises(UserError, match=r"cells\.csv:3: column 'cell2' = 'x'"):
        read(p, pattern=r"cell[0-9]+")


def test_t975_against_tables():
    # two-sided 95 % Student t, any statistics table: 12.706 (1), 2.571 (5), 2.228 (10),
    # 2.042 (30), 1.984 (100)
    for dof, t in ((1, 12.706), (5, 2.571), (10, 2.228), (30, 2.042), (100, 1.984)):
        assert t975(dof) == pytest.approx(t, abs=6e-4)


def test_t975_against_scipy():
    stats = pytest.importorskip("scipy.stats")
    for dof in range(1, 200):
        assert t975(dof) == pytest.approx(stats.t.ppf(0.975, dof), rel=2e-4)


def test_fragment_merges_sections_and_fields(tmp_path):
    p = tmp_path / "site.json"
    p.write_text(json.dumps({"drive": {"kind": "wind"}, "battery": {"chemistry": "flooded",
                                                                     "soc0": 0.2}}))
    write_fragment(str(p), "battery", {"soc0": 0.6, "r0_mohm_ah": 250.0})
    write_fragment(str(p), "machine", {"ra_ohm": 1.5})
    doc = json.loads(p.read_text())
    assert doc == {"drive": {"kind": "wind"}, "machine": {"ra_ohm": 1.5},
                   "battery": {"chemistry": "flooded", "soc0": 0.6, "r0_mohm_ah": 250.0}}
    assert sorted(os.listdir(tmp_path)) == ["site.json"]  # no temporary file left behind


def test_fragment_refuses_foreign_files(tmp_path):
    p = tmp_path / "notes.json"
    p.write_text("not json")
    with pytest.raises(UserError, match="not overwritten"):
        write_fragment(str(p), "machine", {"ra_ohm": 1.5})
    assert p.read_text() == "not json"
    p.write_text("[1, 2]")
    with pytest.raises(UserError, match="not a JSON object"):
        write_fragment(str(p), "machine", {"ra_ohm": 1.5})
