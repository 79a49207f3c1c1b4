"""design usb-network: E-series tables, divider arithmetic (E96 values, derived), the worst
case over tolerance and the VBUS window, and the controller's own classifier accepting every
legal build and rejecting the usual mistakes."""
import json
import math

import numpy as np
import pytest

from controller import profile
from controller.usbport import classify
from host_sim import usbdesign as ud
from host_sim.plant import usb


# --- tables and arithmetic ---------------------------------------------------------------------

def test_e_series_tables():
    # IEC 60063: E96 is 10^(k/96) rounded to three figures; E24 is 10^(k/24) rounded to two
    # except eight historical values (27 30 33 36 39 43 47 82), kept by the standard
    assert list(ud.E96) == [round(100 * 10 ** (k / 96)) for k in range(96)]
    rounded = [round(10 * 10 ** (k / 24)) for k in range(24)]
    assert [v for v, r in zip(ud.E24, rounded) if v != r] == [27, 30, 33, 36, 39, 43, 47, 82]
    vals = ud.series_values("E24", 1e3, 1e6)
    assert vals[0] == 1e3 and vals[-1] == 1e6 and len(vals) == 3 * 24 + 1
    assert 49.9e3 in ud.series_values("E96") and 43e3 in ud.series_values("E24")


@pytest.mark.parametrize("top, bot, level", [(100e3, 31.6e3, 1.201), (75e3, 49.9e3, 1.998),
                                             (43e3, 49.9e3, 2.686)])
def test_divider_arithmetic(top, bot, level):
    # divider arithmetic (derived, V = 5 R_bottom / (R_top + R_bottom)): from 5.00 V, to 1 mV
    assert ud.divider_v(5.0, top, bot) == pytest.approx(level, abs=5e-4)
    # the network solver agrees with the formula for an unloaded divider
    dp, dm = ud.lines_v({"dp_top": top, "dp_bottom": bot}, 5.0, leak_ohm=1e15)
    assert float(dp) == pytest.approx(ud.divider_v(5.0, top, bot), rel=1e-9) and float(dm) == 0


def test_divider_tracks_vbus():
    # derived: a divider tracks VBUS, so VBUS at +/-5 % moves the line by +/-5 %
    for vbus in (4.75, 5.25):
        assert ud.divider_v(vbus, 75e3, 49.9e3) / ud.divider_v(5.0, 75e3, 49.9e3) == \
            pytest.approx(vbus / 5.0)


def test_solver_with_leak_and_link():
    # Thevenin by hand: 100k over 31.6k tied to a second line, each line 1 Mohm to ground
    top, bot, leak = 100e3, 31.6e3, 1e6
    load = 1 / (1 / bot + 2 / leak)
    dp, dm = ud.lines_v({"dp_top": top, "dp_bottom": bot, "between": 0.0}, 5.0, leak_ohm=leak)
    assert float(dp) == pytest.approx(5.0 * load / (top + load), rel=1e-5)
    assert float(dm) == pytest.approx(float(dp), abs=1e-5)


@pytest.mark.parametrize("scheme", ud.SCHEMES)
def test_solver_agrees_with_the_plant_network(scheme):
    # the designer's vectorised solve and the plant's data-line model (host_sim/plant/usb.py)
    # see the same voltages for the designed network and for a broken one
    plant = usb.Network({"scheme": scheme, "tol_pct": 0.0, "dcp_short_ohm": 0.0,
                         "leak_ohm": ud.LEAK_OHM, "probe_v": ud.PROBE_V,
                         "probe_ohm": ud.PROBE_OHM, "faults": []}, np.random.default_rng(0))
    for net in (ud.design(scheme), dict(ud.design(scheme), dp_top=math.inf)):
        for name in usb.NAMES:
            r = net.get(name, math.inf)
            plant.set_resistor(name, 0.0 if r == 0 else r)  # the plant's short is 50 mohm
        for vbus in (4.75, 5.25):
            for probe in ((0, 1) if scheme == "dcp" else (0,)):
                want = plant.lines(vbus, probe)
                got = ud.Checker(scheme, 1.0, (4.75, 5.25), 8, 100, 1).lines(
                    net, vbus, "board" if probe else None)
                assert [float(x) for x in got] == pytest.approx(want, abs=2e-3)


def test_pairs_beat_or_match_the_reference_pairs():
    # with no load, the chosen E96 pairs are at least as close as the reference pairs above
    # (100k/31.6k, 75k/49.9k, 43k/49.9k: the test_divider_arithmetic pairs)
    for level, ref in ((1.2, 1.201), (2.0, 1.998), (2.7, 2.686)):
        top, bot = ud.choose_pair(level, "E96")
        assert 50e3 <= top + bot <= 200e3
        assert abs(ud.divider_v(5.0, top, bot) - level) <= abs(ref - level)


# --- the check ---------------------------------------------------------------------------------

P = profile.load(profile.default_path())
WIN = dict(line_tol_pct=P.line_tol_pct, short_mv=P.short_tol_mv)


@pytest.mark.parametrize("scheme", ud.SCHEMES)
def test_every_scheme_passes_with_e96_one_percent(scheme):
    res = ud.evaluate(scheme, "E96", samples=3000, **WIN)
    assert res["ok"], res["failures"]
    for ph in res["phases"]:
        assert ph["corners_rejected"] == ph["samples_rejected"] == 0
        # Monte Carlo stays inside the corner range (interval analysis bounds it)
        if ph["dp_mc_v"]:
            lo, hi = ph["dp_v"]
            assert lo - 1e-4 <= ph["dp_mc_v"][0] <= ph["dp_mc_v"][1] <= hi + 1e-4
    kinds = " ".join(m["mistake"] for m in res["mistakes"])
    if scheme != "dcp":
        for word in ("decade off", "swapped", "open", "shorted"):
            assert word in kinds
    # every mistake the lines can show is rejected
    assert all(m["result"] in ("rejected", "invisible (same line levels)")
               for m in res["mistakes"])


def test_levels_and_worst_case_by_hand():
    res = ud.evaluate("div_2v0_2v7", "E96", samples=0, **WIN)
    net = res["network_ohm"]
    d = res["levels"][0]
    assert (d["upper_ohm"], d["lower_ohm"]) == (net["dp_top"], net["dp_bottom"])
    assert d["nominal_v"] == pytest.approx(2.0, abs=0.01)
    # worst case by hand: upper +1 %, lower -1 % (and the reverse) at the VBUS ends, with the
    # 1 Mohm leak in parallel with the lower resistor
    def level(vbus, t, b):
        b = b * ud.LEAK_OHM / (b + ud.LEAK_OHM)
        return vbus * b / (t + b)
    lo = level(4.75, net["dp_top"] * 1.01, net["dp_bottom"] * 0.99)
    hi = level(5.25, net["dp_top"] * 0.99, net["dp_bottom"] * 1.01)
    assert res["phases"][0]["dp_v"] == pytest.approx([lo, hi], abs=1e-4)


def test_each_corner_is_what_the_classifier_says():
    # the designer's verdicts are the controller's: recompute one phase's codes directly
    chk = ud.Checker("short_1v2", 1.0, (4.75, 5.25), seed=1, **WIN)
    net = ud.design("short_1v2")
    ph = chk.run(net, 50)[0]
    for dp, dm, vb, code in zip(ph["dp_v"], ph["dm_v"], ph["vbus_v"], ph["codes"]):
        assert code == classify(int(round(dp * 1000)), int(round(dm * 1000)), int(round(vb * 1000)),
                                0, P.line_tol_pct, P.short_tol_mv)


def test_monte_carlo_is_seeded():
    a = ud.evaluate("div_2v7_2v0", "E24", samples=500, seed=7, **WIN)
    b = ud.evaluate("div_2v7_2v0", "E24", samples=500, seed=7, **WIN)
    c = ud.evaluate("div_2v7_2v0", "E24", samples=500, seed=8, **WIN)
    assert a == b and a["phases"][0]["dp_mc_v"] != c["phases"][0]["dp_mc_v"]


def test_five_percent_parts_fail_the_1v2_level():
    # E24 at 5 %: the 1.2 V divider's worst corner (upper +5 %, lower -5 %) lands 8.0 % low,
    # on the edge of the profile's +/-8 % window, so a legal build is rejected and the designer
    # must say so
    res = ud.evaluate("short_1v2", "E24", samples=0, **WIN)
    assert not res["ok"]
    assert any(f.startswith("legal combination rejected") for f in res["failures"])
    assert res["phases"][0]["dp_pct"][0] < -P.line_tol_pct + 0.01


def test_narrow_window_rejects_legal_builds():
    # the 2.0 V line spreads +/-1.2 % with 1 % parts (sensitivity 1 - 0.4 of the ratio error)
    res = ud.evaluate("div_2v0_2v7", "E96", samples=200, line_tol_pct=1, short_mv=100)
    assert not res["ok"] and res["phases"][0]["corners_rejected"] > 0


def test_stiff_probe_lets_a_wrong_network_through_on_dcp():
    # the dcp check while probing only asks that D- follow D+; a probe source that overrides
    # the lines (100 ohm) lets the 1.2 V tied network pass that phase, and the port pulses
    res = ud.evaluate("dcp", samples=200, probe_ohm=100.0, **WIN)
    assert not res["ok"]
    bad = [m for m in res["mistakes"] if m["result"].startswith("ACCEPTED")]
    assert [m["mistake"] for m in bad] == ["short_1v2 network fitted instead"]
    assert "pulses" in bad[0]["result"]


def test_weak_probe_voltage_fails_dcp():
    # V_DP_SRC at its 0.5 V floor (BC1.2 ch. 5) sags under the two 1 Mohm leaks through 10 kohm
    res = ud.evaluate("dcp", samples=0, probe_v=0.5, **WIN)
    assert not res["ok"] and "phase 'probe'" in res["failures"][0]


# --- command line ------------------------------------------------------------------------------

def test_command_line_pass_fail_and_json(spinrail):
    rc, out, err = spinrail("design", "usb-network", "--scheme", "div_2v7_2v0", "--samples", 500)
    assert rc == 0, err
    assert "PASS" in out and "decade off" in out and "D+" in out
    rc, out, err = spinrail("design", "usb-network", "--scheme", "short_1v2", "--series", "E24",
                            "--samples", 0)
    assert rc == 1 and "FAIL" in out and "legal combination rejected" in out
    rc, out, err = spinrail("design", "usb-network", "--scheme", "dcp", "--json", "--samples", 100)
    doc = json.loads(out)
    assert rc == 0 and doc["ok"] and doc["network_ohm"] == {"between": 0.0}
    rc, out, err = spinrail("design", "usb-network", "--samples", 0)  # the profile's scheme: dcp
    assert rc == 0 and "resistances table" in out and "0-200 ohm" in out


def test_command_line_bad_options(spinrail, tmp_path):
    rc, out, err = spinrail("design", "usb-network", "--tolerance", "40")
    assert rc == 2 and "--tolerance = 40" in err
    rc, out, err = spinrail("design", "usb-network", "--probe-v", "0.9")
    assert rc == 2 and "V_DP_SRC" in err
    rc, out, err = spinrail("design", "usb-network", "--profile", tmp_path / "none.json")
    assert rc == 2 and "none.json" in err


def test_profile_window_is_used(spinrail, tmp_path):
    doc = json.loads(open(profile.default_path()).read())
    doc["usb"]["line_tolerance_pct"] = 1
    p = tmp_path / "tight.json"
    p.write_text(json.dumps(doc))
    rc, out, err = spinrail("design", "usb-network", "--scheme", "div_2v0_2v7", "--samples", 0,
                            "--profile", p)
    assert rc == 1 and "+/- 1 %" in out
