"""identify machine: K_e and R_a (and a brush drop when the data carry one) from logs the plant
machine (host_sim/plant/machine.py) writes with noise; warnings when the data cannot separate
the parameters; the command line with its plot and fragment."""
import json
import math

import numpy as np
import pytest

from host_sim.errors import UserError
from host_sim.identify import benchgen
from host_sim.identify.machine import RAD_S_PER_RPM, fit_machine
from host_sim.plant.machine import Machine, ke_si

PLANT = dict(benchgen.MACHINE, ke_v_per_krpm=12.0, ra_ohm=1.5)
KE = ke_si(12.0)  # 0.1146 V s/rad (12 V per 1000 rpm)


def mlog(rng, plant=PLANT, **kw):
    """A bench log of the 12 V/krpm test machine at its own speeds and loads."""
    kw = dict({"speeds_rpm": (400, 700, 1000, 1300), "loads_ohm": (None, 12, 6, 3)}, **kw)
    return benchgen.machine_log(rng, plant, **kw)


def test_worked_example_exact():
    # K_e = 12 V per 1000 rpm (0.1146 V s/rad), R_a = 1.5 ohm,
    # 1000 rpm into a matched 1.5 ohm load: 4 A at 6 V. With 12 V open circuit at 1000 rpm, and
    # at 500 rpm 6 V open and 2 A at 3 V into the same load, the fit returns those exactly.
    fit = fit_machine([1000, 1000, 500, 500], [12.0, 6.0, 6.0, 3.0], [0.0, 4.0, 0.0, 2.0],
                      brush="none")
    assert fit.value["ke"] == pytest.approx(0.1146, abs=5e-5)
    assert fit.value["ke"] * 1000 * RAD_S_PER_RPM == pytest.approx(12.0, rel=1e-9)
    assert fit.value["ra"] == pytest.approx(1.5, rel=1e-9)


def test_recovers_plant_machine_with_noise():
    rng = np.random.default_rng(11)
    rpm, v, i = mlog(rng)
    fit = fit_machine(rpm, v, i)
    # tolerances: 1 % on K_e, 3 % on R_a with 20 mV / 5 mA / 2 rpm noise on 16 rows
    assert fit.value["ke"] == pytest.approx(KE, rel=0.01)
    assert fit.value["ra"] == pytest.approx(1.5, rel=0.03)
    # the 95 % intervals are honest: truth inside twice the half-width, and not absurdly wide
    # (the HC3 covariance is wider than the equal-variance one it replaced, which ran 1.3-1.5
    # times too narrow on meter noise that grows with the reading: 2 % on K_e, 10 % on R_a)
    assert abs(fit.value["ke"] - KE) <= 2 * fit.ci95["ke"] < 0.02 * KE
    assert abs(fit.value["ra"] - 1.5) <= 2 * fit.ci95["ra"] < 0.10 * 1.5
    assert "vb" not in fit.value  # the plant has no brush drop and the fit does not invent one
    assert fit.warnings == []


def test_brush_drop_found_when_present():
    # the plant folds the brushes into R_a; a constant 0.8 V drop added by the log writer stands
    # for a brush pair or a series diode (closed-form, benchgen.machine_log drop_v)
    rng = np.random.default_rng(12)
    rpm, v, i = mlog(rng, loads_ohm=(None, 20, 10, 5, 3, 2),
                                     drop_v=0.8)
    fit = fit_machine(rpm, v, i)
    assert fit.value["vb"] == pytest.approx(0.8, abs=0.1)
    assert fit.value["ra"] == pytest.approx(1.5, rel=0.05)
    assert fit.value["ke"] == pytest.approx(KE, rel=0.01)
    # fitting without the drop biases R_a upward: the reason the term exists
    assert fit_machine(rpm, v, i, brush="none").value["ra"] > 1.55


def test_no_loaded_rows_leaves_ra_out_and_says_so():
    rng = np.random.default_rng(13)
    rpm, v, i = mlog(rng, loads_ohm=(None,))
    fit = fit_machine(rpm, v, i)
    assert "ra" not in fit.value and fit.value["ke"] == pytest.approx(KE, rel=0.01)
    assert any("no loaded rows" in w and "R_a" in w for w in fit.warnings)


def test_one_speed_warns_about_ke():
    rng = np.random.default_rng(14)
    rpm, v, i = mlog(rng, speeds_rpm=(900,) * 3,
                                     loads_ohm=(None, 12, 6, 3))
    fit = fit_machine(rpm, v, i)
    assert any("one speed" in w and "K_e" in w for w in fit.warnings)
    assert fit.value["ra"] == pytest.approx(1.5, rel=0.05)


def test_one_speed_without_open_circuit_cannot_split_ke_and_brush():
    rng = np.random.default_rng(15)
    rpm, v, i = mlog(rng, speeds_rpm=(900,) * 3, loads_ohm=(12, 6, 3))
    fit = fit_machine(rpm, v, i, brush="fit")
    assert "vb" not in fit.value
    assert any("K_e and the brush drop cannot be separated" in w for w in fit.warnings)


def test_one_load_current_cannot_split_ra_and_brush():
    # one load resistor at one speed plus open circuit at several: every loaded row carries
    # the same current
    rng = np.random.default_rng(16)
    rpm = np.array([400, 700, 1000, 1300, 1000, 1000, 1000], dtype=float)
    m = Machine.from_doc(PLANT)
    i = np.array([0, 0, 0, 0, 2.0, 2.0, 2.0])
    v = m.emf(rpm / (60 / (2 * math.pi))) - 1.5 * i + rng.normal(0, 0.01, len(i))
    fit = fit_machine(rpm, v, i, brush="fit")
    assert "vb" not in fit.value
    assert any("one current" in w for w in fit.warnings)


def test_nothing_separable_is_an_error():
    with pytest.raises(UserError, match="K_e and R_a cannot be separated"):
        fit_machine([1000] * 4, [6.0, 6.01, 5.99, 6.0], [4.0, 4.0, 4.0, 4.0])
    with pytest.raises(UserError, match="rpm = 0"):
        fit_machine([0, 0, 0, 0], [0, 0, 0, 0], [0, 0, 0, 0])


def test_command_line_table_plot_and_fragment(spinrail, tmp_path):
    rng = np.random.default_rng(17)
    rpm, v, i = mlog(rng)
    log = tmp_path / "m.csv"
    benchgen.write_csv(log, ("rpm", "v_term", "i_a"), (rpm, v, i), ("%.1f", "%.3f", "%.3f"))
    png, frag = tmp_path / "m.png", tmp_path / "site.json"
    rc, out, err = spinrail("identify", "machine", log, "--plot", png, "--write", frag)
    assert rc == 0, err
    assert "K_e" in out and "R_a" in out and "95 % CI" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    doc = json.loads(frag.read_text())
    # scenario field names (host_sim/scenario.py machine section)
    assert set(doc) == {"machine"} and set(doc["machine"]) == {"ke_v_per_krpm", "ra_ohm"}
    assert doc["machine"]["ke_v_per_krpm"] == pytest.approx(12.0, rel=0.01)
    assert doc["machine"]["ra_ohm"] == pytest.approx(1.5, rel=0.03)


def test_command_line_bad_log_names_file_line_column(spinrail, write_log):
    p = write_log("m.csv", "rpm,v_term,i_a\n400,4.8,0\n700,eight,0\n1000,12,0\n")
    rc, out, err = spinrail("identify", "machine", p)
    assert rc == 2 and out == ""
    assert "%s:3: column 'v_term' = 'eight'" % p in err
