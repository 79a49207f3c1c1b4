# Outside checks of the plant's parts, each against the source named beside it ("derived":
# worked out here from the formula named; "physics": a law, exact).
import math

import numpy as np
import pytest

from host_sim.plant.battery import Battery, ocv_block
from host_sim.plant.diode import Diode
from host_sim.plant.machine import Machine, ke_si
from host_sim.plant.supercap import Bank
from host_sim.scenario import load_doc


def _doc(**sections):
    d = {"drive": {"kind": "pedal"}}
    d.update(sections)
    return load_doc(d).doc


# ---- permanent-magnet DC machine -----------------------------------------------------------

def test_machine_matched_load_worked_example():
    # PM DC machine, E = K_e w and V = E - I R_a (any electric machines text); worked example
    # (derived): K_e = 12 V per 1000 rpm (0.1146 V s/rad), R_a = 1.5 ohm, 1000 rpm, matched
    # load (R_L = R_a): 4 A, 6 V, 24 W out, about 48 W in.
    m = Machine(ke_v_per_krpm=12.0, ra_ohm=1.5)
    assert m.k == pytest.approx(0.1146, abs=5e-5)
    w = 1000.0 * 2.0 * math.pi / 60.0
    i, v, p_out, p_conv = m.into_resistor(w, 1.5)
    assert i == pytest.approx(4.0, rel=1e-9)
    assert v == pytest.approx(6.0, rel=1e-9)
    assert p_out == pytest.approx(24.0, rel=1e-9)
    assert p_conv == pytest.approx(48.0, rel=1e-9)


def test_matched_load_is_the_power_maximum():
    # derived (maximum power transfer): into a resistor, power peaks at R_L = R_a, E^2 / (4 R_a).
    m = Machine(ke_v_per_krpm=12.0, ra_ohm=1.5)
    w = 1000.0 * 2.0 * math.pi / 60.0
    loads = np.linspace(0.2, 6.0, 300)
    p = [m.into_resistor(w, r)[2] for r in loads]
    assert loads[int(np.argmax(p))] == pytest.approx(1.5, abs=0.02)
    assert max(p) == pytest.approx(12.0 ** 2 / (4 * 1.5), rel=1e-3)


def test_ke_units():
    # K_e in V s/rad from V per 1000 rpm: 1000 rpm = 104.72 rad/s (physics, exact)
    assert ke_si(104.72) == pytest.approx(1.0, rel=1e-4)


# ---- bridge diodes -------------------------------------------------------------------------

@pytest.mark.parametrize("i_a,vf_max", [(1.0, 0.60), (3.0, 0.90)])
def test_default_diode_under_schottky_datasheet_max(i_a, vf_max):
    # 1N5817/1N5818/1N5819 max V_F at 25 C: 0.45/0.55/0.60 V at 1 A and 0.75/0.875/0.90 V at
    # 3 A (JEDEC 1N5817-1N5819 series datasheets). The default rectifier is a 40 V part of that
    # family (the bus reaches about 30 V in a surge), so it must stay under the 1N5819 limits.
    # The 0.25 V floor is common practice, not a datasheet figure: no silicon Schottky of this
    # class drops less than about 0.25 V at 1 A, so a curve below it is a bad fit.
    r = _doc()["rectifier"]
    d = Diode.from_doc(r)
    assert r["temp_c"] == 25
    assert 0.25 < d.vf(i_a) <= vf_max
    # the bridge puts two of them in series
    assert d.bridge_drop(i_a) == pytest.approx(2 * d.vf(i_a))
    assert d.bridge_drop(i_a) <= 2 * vf_max


def test_diode_spice_model_is_the_same_curve():
    # the SPICE diode DC equation (ngspice manual, diode model: I = IS (exp(V / (N Vt)) - 1)
    # with RS in series); our vf() inverts it.
    d = Diode(is_a=2e-6, n=1.1, rs_ohm=0.05, temp_c=25.0)
    for i in (0.01, 0.5, 2.0, 5.0):
        vj = d.vf(i) - i * d.rs_ohm
        assert d.is_a * (math.exp(vj / d.nvt) - 1.0) == pytest.approx(i, rel=1e-9)
    assert ".model DBR D(IS=2e-06 N=1.1 RS=0.05)" == d.spice_model()


# ---- lead-acid battery ---------------------------------------------------------------------

# Battery Council International open-circuit voltage table (flooded, rested, 26.7 C) as
# commonly reproduced: state of charge -> 12 V block volts. The fitted cubic was seen within
# 0.005 V of every row; the check allows 0.01 V (the table's own resolution).
BCI_TABLE = [(1.00, 12.65), (0.75, 12.45), (0.50, 12.24), (0.25, 12.06), (0.00, 11.89)]


@pytest.mark.parametrize("soc,v", BCI_TABLE)
def test_ocv_matches_bci_table(soc, v):
    assert abs(ocv_block(soc) - v) <= 0.01


def test_ocv_monotonic_and_scales_with_cells():
    s = np.linspace(0, 1, 101)
    v = [ocv_block(x) for x in s]
    assert all(b > a for a, b in zip(v, v[1:]))
    b6 = Battery(_doc()["battery"])
    b3 = Battery(_doc(battery={"cells": 3})["battery"])
    assert b3.ocv == pytest.approx(b6.ocv / 2)


def _absorption_run(temp_c, hours=7.0):
    """Bulk at 0.2 C until 2.40 V/cell, then hold 14.40 V at a fixed temperature."""
    b = dict(_doc()["battery"])
    b.update(soc0=0.6, temp0_c=temp_c)
    bt = Battery(b)
    while bt.terminal_v(2.4) < 14.4:
        bt.substep(2.4, 1.0)
        bt.refresh()
    i = []
    for _ in range(int(hours * 3600)):
        i.append(bt.hold_voltage(14.4, 1.0))
    return np.array(i), bt


def test_gassing_makes_absorption_current_taper():
    # At a held absorption voltage the current falls as the plates fill and settles at the
    # gassing current: makers' charging notes put the end of absorption (tail current) at
    # 0.01-0.02 C, so the taper must
    # pass below 0.02 C and settle under 0.01 C, but not at zero (gassing goes on).
    i, bt = _absorption_run(25.0)
    per_min = i[59::60]
    assert np.all(np.diff(per_min) <= 1e-9)  # monotonic fall, minute by minute
    c = 12.0
    assert per_min[0] > 0.1 * c
    assert per_min[-1] < 0.01 * c
    assert per_min[-1] > 0.001 * c
    assert bt.soc > 0.99
    assert per_min[-1] == pytest.approx(bt.i_gas, rel=0.2)  # what is left is the side reaction


def test_gassing_grows_with_temperature():
    # gassing (and so the end current at a fixed voltage) grows with temperature; the
    # uncompensated float/absorption at 40 C is why makers ask for -5 mV/C/cell (battery
    # makers' charging manuals; Battery University BU-403 uses -3 mV/C/cell).
    i25, b25 = _absorption_run(25.0)
    i40, b40 = _absorption_run(40.0)
    assert i40[-1] > 1.5 * i25[-1]
    assert b40.i_gas > 1.5 * b25.i_gas


def test_gassing_grows_with_voltage():
    b = dict(_doc()["battery"])
    b.update(soc0=1.0)
    bt = Battery(b)
    g = []
    for v_cell in (2.30, 2.35, 2.40, 2.45):
        bt.vp = 6 * v_cell - bt.ocv
        bt.refresh()
        g.append(bt.i_gas)
    assert all(b_ > 1.5 * a for a, b_ in zip(g, g[1:]))


# ---- supercap bank -------------------------------------------------------------------------

def _bank(cell_f=100.0, cells=6, esr_mohm=20.0):
    s = dict(_doc()["supercap"])
    s.update(cells=cells, cell_f=cell_f, cap_spread_pct=0.0, leak_ua=0.0, balance_ohm=1e9,
             esr_mohm=esr_mohm, v0_per_cell=0.0)
    return Bank(s, np.random.default_rng(0), 2.7)


def test_six_100f_cells_series():
    # worked example (physics, E = C V^2 / 2; series C = C_cell / n): six 100 F / 2.7 V cells
    # in series: 16.67 F, 2187 J at 16.2 V, 1640 J usable down to 8.1 V.
    b = _bank()
    assert b.c_bank == pytest.approx(16.67, abs=0.005)
    b.v = [2.7] * 6
    assert b.energy_j() == pytest.approx(2187, abs=0.5)
    e_full = b.energy_j()
    b.v = [1.35] * 6
    assert e_full - b.energy_j() == pytest.approx(1640, abs=0.5)


def test_constant_current_charge_matches_closed_form():
    # physics (exact): constant-current drop/rise dV = I ESR + I t / C.
    b = _bank()
    i_a, t_s, h = 2.0, 30.0, 0.025
    v_start = b.v_sum
    for _ in range(int(t_s / h)):
        b.substep(i_a, h)
    b.end_period(t_s, 0)
    v_term = b.v_sum + i_a * b.esr
    assert v_term - v_start == pytest.approx(i_a * b.esr + i_a * t_s / b.c_bank, rel=1e-6)


def test_bleeder_pulls_one_cell_down():
    b = _bank(cell_f=10.0)
    b.v = [2.5] * 6
    b.end_period(60.0, 0b000100)
    assert b.v[2] < b.v[0] - 0.1
    assert b.v[0] == pytest.approx(2.5, abs=1e-3)
