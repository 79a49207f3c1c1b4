"""identify battery: ohmic jump, one polarisation time constant and state of charge from logs
the plant battery (host_sim/plant/battery.py) writes with noise; the BCI open-circuit table
(Battery Council International: flooded 12 V block, rested, 26.7 C); the fragment feeds the
plant back."""
import json

import numpy as np
import pytest

from host_sim import scenario
from host_sim.errors import UserError
from host_sim.identify import benchgen
from host_sim.identify.battery import identify, soc_from_ocv
from host_sim.identify.common import read_log


# a 12 Ah block at 60 % (the demo block of benchgen is the hut's 100 Ah one)
SMALL = dict(benchgen.BATTERY, capacity_ah=12.0, soc0=0.6)


def to_log(tmp_path, name, t, v, i):
    p = tmp_path / name
    benchgen.write_csv(p, ("t_s", "v", "i_a"), (t, v, i), ("%.2f", "%.5f", "%.4f"))
    return p


def load(p):
    return read_log(str(p), ("t_s", "v", "i_a"), {}, min_rows=10, time_col="t_s")


@pytest.mark.parametrize("ocv_v, soc", [(12.65, 100), (12.45, 75), (12.24, 50), (12.06, 25),
                                        (11.89, 0), (12.345, 62.5), (12.15, 37.5)])
def test_bci_table_and_interpolation(ocv_v, soc):
    # open-circuit voltage vs state of charge (BCI table, flooded, 26.7 C):
    # the table points exactly, and straight-line interpolation halfway between two of them
    assert soc_from_ocv(ocv_v)[0] == pytest.approx(soc, abs=1e-9)


def test_table_scales_per_cell():
    # a 24 V bank of 12 cells and a single 2 V cell read the same state as the 12 V block
    assert soc_from_ocv(24.48, cells=12)[0] == pytest.approx(50.0)
    assert soc_from_ocv(12.45 / 6, cells=1)[0] == pytest.approx(75.0)
    assert soc_from_ocv(12.9) == (100.0, False) and soc_from_ocv(11.5) == (0.0, False)


def test_step_into_discharge_from_rest(tmp_path):
    rng = np.random.default_rng(31)
    b, truth, t, v, i = benchgen.battery_log(rng)
    fit = identify(load(to_log(tmp_path, "b.csv", t, v, i)))
    # tolerances: R_0 3 % (1 mV noise on a 69 mV jump, 0.5 s rows against a 32 s tau),
    # R_p and tau 5 % (one exponential fitted to the plant's one RC branch)
    assert fit.r0_ohm == pytest.approx(truth["r0_ohm"], rel=0.03)
    assert fit.rp_ohm == pytest.approx(truth["rp_ohm"], rel=0.05)
    assert fit.tau_s == pytest.approx(truth["tau_s"], rel=0.05)
    # state of charge from the rested voltage before the step: the plant's OCV curve is a cubic
    # through the same BCI table, within 1 point of its straight-line interpolation
    assert fit.soc_pct == pytest.approx(100 * truth["soc0"], abs=2.0)
    assert "rested voltage before the step" in fit.ocv_source
    assert fit.drift and fit.discharge_side()


def test_relaxation_after_discharge(tmp_path):
    # discharge, then the current stops: the relaxation gives R_p and tau, its end value the
    # open-circuit voltage for the state of charge at the end
    rng = np.random.default_rng(32)
    b, truth, t, v, i = benchgen.battery_log(rng, SMALL, steps=((0.0, -3.0), (299.75, 0.0)),
                                             end_s=600.0)
    fit = identify(load(to_log(tmp_path, "relax.csv", t, v, i)))
    assert fit.i_post_a == pytest.approx(0.0, abs=0.01) and not fit.drift
    assert fit.r0_ohm == pytest.approx(truth["r0_ohm"], rel=0.03)
    assert fit.rp_ohm == pytest.approx(truth["rp_ohm"], rel=0.05)
    assert fit.tau_s == pytest.approx(truth["tau_s"], rel=0.05)
    assert fit.soc_pct == pytest.approx(100 * b.soc, abs=2.0)
    assert "end value of the relaxation" in fit.ocv_source and fit.discharge_side()


def test_short_relaxation_warns(tmp_path):
    rng = np.random.default_rng(33)
    b, truth, t, v, i = benchgen.battery_log(rng, end_s=90.0)
    fit = identify(load(to_log(tmp_path, "short.csv", t, v, i)))
    assert any("time constants" in w for w in fit.warnings)


def test_no_step_and_too_few_rows(tmp_path):
    t = np.arange(0, 30.0, 1.0)
    p = to_log(tmp_path, "flat.csv", t, 12.3 + 0 * t, 0 * t)
    with pytest.raises(UserError, match=r"flat\.csv: column 'i_a' has no current step"):
        identify(load(p))
    i = np.where(t >= 26, -2.0, 0.0)
    p = to_log(tmp_path, "late.csv", t, 12.3 + 0.02 * i, i)
    with pytest.raises(UserError, match=r"late\.csv: only 4 rows at the new current after the "
                                        r"step at line 28"):
        identify(load(p))


def test_fragment_feeds_the_plant_back(spinrail, tmp_path):
    # the demo block (benchgen.BATTERY: r0 250 mohm Ah, rp_dis 2.0 ohm Ah, cp 15 F/Ah, 35 %)
    # logged by the plant, identified, and written in the scenario's field names: the values
    # come back as the plant's own base values
    rng = np.random.default_rng(34)
    _, _, t, v, i = benchgen.battery_log(rng)
    p = to_log(tmp_path, "b.csv", t, v, i)
    frag, png = tmp_path / "site.json", tmp_path / "b.png"
    rc, out, err = spinrail("identify", "battery", p, "--capacity-ah",
                            benchgen.BATTERY["capacity_ah"], "--write", frag, "--plot", png)
    assert rc == 0, err
    assert "R_0" in out and "state of charge" in out and "BCI" in out
    assert png.read_bytes()[:4] == b"\x89PNG"
    doc = json.loads(frag.read_text())["battery"]
    assert set(doc) == {"cells", "capacity_ah", "r0_mohm_ah", "rp_dis_ohm_ah", "cp_f_per_ah",
                        "soc0"}
    ref = benchgen.BATTERY
    assert doc["r0_mohm_ah"] == pytest.approx(ref["r0_mohm_ah"], rel=0.03)
    assert doc["rp_dis_ohm_ah"] == pytest.approx(ref["rp_dis_ohm_ah"], rel=0.05)
    assert doc["cp_f_per_ah"] == pytest.approx(ref["cp_f_per_ah"], rel=0.05)
    assert doc["soc0"] == pytest.approx(ref["soc0"], abs=0.02)
    rc, out, err = spinrail("identify", "battery", p, "--write", frag)
    assert rc == 2 and "--capacity-ah" in err


def test_fragment_is_a_valid_scenario_section(spinrail, tmp_path):
    rng = np.random.default_rng(35)
    _, _, t, v, i = benchgen.battery_log(rng)
    frag = tmp_path / "site.json"
    frag.write_text(json.dumps({"drive": {"kind": "scripted", "points": [[0, 0]]}}))
    rc, out, err = spinrail("identify", "battery", to_log(tmp_path, "b.csv", t, v, i),
                            "--capacity-ah", 12, "--write", frag)
    assert rc == 0, err
    for part in ("machine", "supercap"):
        rc, out, err = spinrail("identify", part, benchgen.BENCH_DIR / (part + ".csv"),
                                "--write", frag)
        assert rc == 0, err
    sc = scenario.load_doc(json.loads(frag.read_text()))
    assert sc.doc["battery"]["capacity_ah"] == 12.0
    assert sc.doc["machine"]["ke_v_per_krpm"] == pytest.approx(
        benchgen.MACHINE["ke_v_per_krpm"], rel=0.01)
    assert sc.doc["supercap"]["cells"] == 6
