"""identify supercap: the IEC 62391-1 constant-current method (its 80 %/40 % points from memory)
against its worked example, against closed-form discharges and against the plant bank
(host_sim/plant/supercap.py)."""
import json

import numpy as np
import pytest

from host_sim.errors import UserError
from host_sim.identify import benchgen
from host_sim.identify.common import read_log
from host_sim.identify.supercap import (CELL_RX, COLUMNS, UNITS, capacitance_f, flag_cells,
                                        identify)


def ideal_log(path, c_f, esr_ohm, u_r, i_a, rest_s=2.0, dt_s=0.05, end_v=None, cells=None):
    """Closed-form constant-current discharge of ideal capacitors in series (no plant):
    v = U - I R - I (t - t0) / C after t0. The current starts at t0 = rest_s - dt_s / 2, in the
    row gap (as a real step does), so the first discharging row is the one at rest_s.
    cells: [(C, R, U)] per cell, the bank summing them."""
    cells = cells or [(c_f, esr_ohm, u_r)]
    end_v = 0.3 * u_r if end_v is None else end_v
    rows = []
    t = 0.0
    t0 = rest_s - dt_s / 2
    while True:
        i = i_a if t >= rest_s - 1e-9 else 0.0
        vc = [u - (i * r + i * (t - t0) / c if i else 0.0) for c, r, u in cells]
        rows.append((t, sum(vc), i, vc))
        if sum(vc) < end_v:
            break
        t += dt_s
    head = "t_s,v,i_a" + ("".join(",cell%d" % (k + 1) for k in range(len(cells)))
                          if len(cells) > 1 else "")
    with open(path, "w") as f:
        f.write(head + "\n")
        for t, v, i, vc in rows:
            f.write("%.4f,%.6f,%.4f%s\n" % (t, v, i, "".join(",%.6f" % x for x in vc)
                                            if len(cells) > 1 else ""))
    return path


def load(path):
    return read_log(str(path), COLUMNS, UNITS, pattern=CELL_RX, min_rows=5, time_col="t_s")


def test_worked_example_formula():
    # worked example: 0.1 A for 10 s taking 5.0 V to 4.2 V gives 1.25 F
    assert capacitance_f(0.1, 0.0, 10.0, 5.0, 4.2) == pytest.approx(1.25, rel=1e-12)


def test_worked_example_through_the_whole_method(tmp_path):
    # The same example end to end: U_R = 6.25 V with the points at 80 % (5.0 V) and 67.2 %
    # (4.2 V) of it, 1.25 F discharged at 0.1 A, 0.5 ohm ESR (closed-form log)
    p = ideal_log(tmp_path / "we.csv", 1.25, 0.5, 6.25, 0.1, dt_s=0.05)
    bank, cells, warnings = identify(load(p), upper=0.8, lower=0.672)
    assert (bank.u1_v, bank.u2_v) == pytest.approx((5.0, 4.2))
    assert bank.t2_s - bank.t1_s == pytest.approx(10.0, abs=1e-6)
    assert bank.c_f == pytest.approx(1.25, rel=1e-6)
    assert bank.esr_ohm == pytest.approx(0.5, rel=1e-4)
    # a noise-free rest cannot be told from a held reading: that is the only warning
    assert cells == [] and len(warnings) == 1 and "held reading" in warnings[0]


def test_plant_bank_and_cells_recovered():
    rng = np.random.default_rng(21)
    bank_plant, t, v, i, cells = benchgen.supercap_log(rng)
    log_cols = {"t_s": t, "v": v, "i_a": i}
    log_cols.update({"cell%d" % (k + 1): c for k, c in enumerate(cells)})

    class Log:  # the shape read_log returns, without a file round trip
        path = "plant"
        col = log_cols
        line = np.arange(len(t)) + 2
    bank, res, warnings = identify(Log)
    # tolerances: 1 % on C (2 mV noise, 0.1 s rows; leakage and balancing resistors bend the
    # line by well under that), 10 % on R (the start-time uncertainty of one row dominates)
    assert bank.c_f == pytest.approx(bank_plant.c_bank, rel=0.01)
    assert bank.esr_ohm == pytest.approx(bank_plant.esr, rel=0.10)
    assert abs(bank.c_f - bank_plant.c_bank) <= 2 * bank.c_ci
    assert len(res) == 6 and warnings == []
    for r, c_true in zip(res, bank_plant.c):
        assert r.c_f == pytest.approx(c_true, rel=0.015)
        assert r.esr_ohm == pytest.approx(benchgen.SUPERCAP["esr_mohm"] / 1000, rel=0.15)
        assert r.flags == []  # the plant draws a 3 % spread: nothing beyond 10 %


def test_outlying_cells_are_flagged(tmp_path):
    # closed-form bank: cell 3 at 85 % of the others' capacitance, cell 5 with 3x their ESR
    cells = [(50.0, 0.015, 2.7)] * 6
    cells[2] = (42.5, 0.015, 2.7)
    cells[4] = (50.0, 0.045, 2.7)
    p = ideal_log(tmp_path / "bank.csv", None, None, 16.2, 2.0, dt_s=0.1, cells=cells)
    bank, res, _ = identify(load(p))
    flagged = {r.name: r.flags for r in res if r.flags}
    assert set(flagged) == {"cell3", "cell5"}
    assert "C -15.0 %" in flagged["cell3"][0]
    assert "ESR 3.0x" in flagged["cell5"][0]
    assert res[2].c_f == pytest.approx(42.5, rel=1e-3)


def test_flag_rule_threshold():
    class R:
        def __init__(self, c):
            self.c_f, self.esr_ohm, self.flags, self.name = c, 0.01, [], "c"
    cells = [R(c) for c in (100, 100, 100, 100, 89.9, 110.0)]
    flag_cells(cells, 10.0)
    assert [bool(c.flags) for c in cells] == [False] * 4 + [True, False]  # > 10 %, not = 10 %


def test_discharge_that_stops_short(tmp_path):
    p = ideal_log(tmp_path / "short.csv", 10.0, 0.05, 2.7, 1.0, end_v=1.5)
    with pytest.raises(UserError, match=r"short\.csv: bank: the discharge must fall through .* "
                                        r"U2 = 1\.080 V"):
        identify(load(p))


def test_log_without_rest_needs_rated_voltage(tmp_path):
    p = ideal_log(tmp_path / "norest.csv", 10.0, 0.0, 2.7, 1.0, rest_s=0.0)
    with pytest.raises(UserError, match="--rated-v"):
        identify(load(p))
    bank, _, _ = identify(load(p), rated_v=2.7)
    assert bank.c_f == pytest.approx(10.0, rel=1e-4)


def test_command_line(spinrail, tmp_path):
    cells = [(50.0, 0.015, 2.7)] * 6
    p = ideal_log(tmp_path / "bank.csv", None, None, 16.2, 2.0, dt_s=0.1, cells=cells)
    png, frag = tmp_path / "s.png", tmp_path / "site.json"
    rc, out, err = spinrail("identify", "supercap", p, "--plot", png, "--write", frag)
    assert rc == 0, err
    assert "from memory" in out and "capacitance" in out and "cell6" in out
    assert png.read_bytes()[:4] == b"\x89PNG"
    doc = json.loads(frag.read_text())["supercap"]
    # scenario field names (host_sim/scenario.py supercap section): per-cell figures
    assert doc == pytest.approx({"cells": 6, "cell_f": 50.0, "cap_spread_pct": 0.0,
                                 "esr_mohm": 15.0}, abs=0.02)
    # a bank-only log needs the cell count to give per-cell figures
    q = ideal_log(tmp_path / "bankonly.csv", 50.0 / 6, 0.09, 16.2, 2.0, dt_s=0.1)
    rc, out, err = spinrail("identify", "supercap", q, "--write", tmp_path / "b.json")
    assert rc == 2 and "--cells" in err
    rc, out, err = spinrail("identify", "supercap", q, "--write", tmp_path / "b.json",
                            "--cells", "6")
    doc = json.loads((tmp_path / "b.json").read_text())["supercap"]
    assert doc["cell_f"] == pytest.approx(50.0, rel=1e-3)
    assert doc["esr_mohm"] == pytest.approx(15.0, rel=1e-3)
    rc, out, err = spinrail("identify", "supercap", q, "--points", "0.4,0.8")
    assert rc == 2 and "lower < upper" in err
