# USB side of the plant: data-line levels per scheme, the probe, assembly faults, and what a
# device draws for each signalling. Levels: BC1.2 (USB Battery Charging Specification Rev.
# 1.2), chapter 5 "Parameter Values", and the divider arithmetic (derived); device currents:
# the data-line schemes of common practice (host_sim/plant/usb.py says why DCP is 1.5 A).
import numpy as np
import pytest

from host_sim.plant.usb import ALLOWED_A, Device, Network, device_reads
from host_sim.scenario import load_doc


def _net(scheme, faults=(), tol_pct=0.0, **kw):
    n = dict(load_doc({"drive": {"kind": "pedal"}}).doc["usb"]["network"])
    n.update(scheme=scheme, tol_pct=tol_pct, faults=[_fault(f) for f in faults], **kw)
    return Network(n, np.random.default_rng(1))


def _fault(f):
    base = {"kind": None, "resistor": "dp_top", "line": "dp", "ohm": None}
    base.update(f)
    return base


@pytest.mark.parametrize("scheme,dp,dm", [
    # divider arithmetic (derived, E96): 75k/49.9k -> 1.998 V, 43k/49.9k -> 2.686 V,
    # 100k/31.6k -> 1.201 V, all from 5.00 V
    ("div_2v0_2v7", 1.998, 2.686),
    ("div_2v7_2v0", 2.686, 1.998),
    ("div_2v7_2v7", 2.686, 2.686),
    ("short_1v2", 1.201, 1.201),
])
def test_divider_levels_at_5v(scheme, dp, dm):
    n = _net(scheme)
    vp, vm = n.lines(5.0, 0)
    # each line also leaks 10 Mohm to ground (ADC input, ESD parts): at most 1 % lower
    assert vp == pytest.approx(dp, rel=0.01)
    assert vm == pytest.approx(dm, rel=0.01)


def test_dividers_track_vbus():
    # derived: a divider tracks VBUS, so VBUS at its +/-5 % limits moves the line voltage by
    # +/-5 %
    n = _net("div_2v7_2v0")
    a = n.lines(5.0, 0)[0]
    assert n.lines(5.25, 0)[0] == pytest.approx(1.05 * a, rel=1e-9)


def test_dcp_probe_reads_v_dp_src_on_both_lines():
    # BC1.2 1.4.7: a DCP shorts D+ to D- (R_DCP_DAT 0-200 ohm, ch. 5 resistances table); with
    # the probe sourcing V_DP_SRC (0.5-0.7 V) D- follows D+ and sits above V_DAT_REF's top
    # 0.4 V (both ch. 5, DC electrical characteristics).
    for r in (0.0, 200.0):
        n = _net("dcp", dcp_short_ohm=r)
        vp, vm = n.lines(5.0, 1)
        assert 0.5 <= vp <= 0.7 and 0.5 <= vm <= 0.7 and vm > 0.4
        assert abs(vp - vm) < 0.01
        vp0, vm0 = n.lines(5.0, 0)
        assert vp0 < 0.01 and vm0 < 0.01  # probe off: nothing drives the lines


def test_dcp_short_drawn_within_bc12_range():
    # BC1.2 ch. 5 resistances table: R_DCP_DAT 0-200 ohm; drawn per seed when the scenario
    # leaves it out
    rs = [Network(dict(load_doc({"drive": {"kind": "pedal"}}).doc["usb"]["network"]),
                  np.random.default_rng(s)).r["between"] for s in range(50)]
    assert 0.0 <= min(rs) and max(rs) <= 200.0 and max(rs) - min(rs) > 50


def test_faults_change_the_lines():
    ok = _net("div_2v0_2v7").lines(5.0, 0)
    sw = _net("div_2v0_2v7", [{"kind": "swapped"}]).lines(5.0, 0)
    assert sw[0] == pytest.approx(ok[1]) and sw[1] == pytest.approx(ok[0])
    op = _net("div_2v0_2v7", [{"kind": "open", "resistor": "dp_bottom"}]).lines(5.0, 0)
    assert op[0] > 4.5  # D+ pulled to VBUS through its top resistor
    sg = _net("div_2v7_2v7", [{"kind": "short_to_ground", "line": "dm"}]).lines(5.0, 0)
    assert sg[1] < 0.01 and sg[0] == pytest.approx(ok[1], rel=0.01)
    ls = _net("div_2v7_2v0", [{"kind": "lines_shorted"}]).lines(5.0, 0)
    assert abs(ls[0] - ls[1]) < 0.01 and 2.0 < ls[0] < 2.7
    dec = _net("div_2v7_2v7", [{"kind": "decade_up", "resistor": "dp_top"}]).lines(5.0, 0)
    assert dec[0] < 1.0


@pytest.mark.parametrize("scheme,amps", [
    # DCP 1.5 A: the common phone on a DCP (common practice; BC1.2 allows I_DCP 0.5-5 A, 1.5 A
    # was BC1.1's limit); divider 2.0/2.7 -> 1 A, 2.7/2.0 -> 2.1 A, 2.7/2.7 -> 2.4 A, shorted
    # 1.2 V -> about 2 A (common practice); anything else 0.5 A
    ("dcp", 1.5), ("div_2v0_2v7", 1.0), ("div_2v7_2v0", 2.1), ("div_2v7_2v7", 2.4),
    ("short_1v2", 2.0),
])
def test_device_draws_what_the_signalling_allows(scheme, amps):
    n = _net(scheme, tol_pct=1.0)
    dp, dm = n.lines(5.0, 0)
    assert device_reads(dp, dm, 5.0) == scheme
    d = Device(dict(load_doc({"drive": {"kind": "pedal"}, "usb": {"devices": [
        {"max_a": 5.0, "soc0": 0.2}]}}).doc["usb"]["devices"][0]))
    assert d.update(0.0, True, 5.0, dp, dm) == pytest.approx(amps)
    assert ALLOWED_A[None] == 0.5


def test_device_drops_out_and_reattaches():
    doc = load_doc({"drive": {"kind": "pedal"}, "usb": {"devices": [
        {"min_vbus_v": 4.4, "reattach_s": 3.0}]}}).doc
    d = Device(doc["usb"]["devices"][0])
    assert d.update(0.0, True, 5.0, 0.0, 0.0) > 0
    assert d.update(1.0, True, 4.3, 0.0, 0.0) == 0.0 and d.dropouts == 1
    assert d.update(2.0, True, 5.0, 0.0, 0.0) == 0.0  # waits reattach_s
    assert d.update(4.1, True, 5.0, 0.0, 0.0) > 0


def test_device_tapers_when_nearly_full():
    doc = load_doc({"drive": {"kind": "pedal"}, "usb": {"devices": [
        {"soc0": 0.9, "taper_soc": 0.8, "max_a": 2.0}]}}).doc
    d = Device(doc["usb"]["devices"][0])
    assert d.update(0.0, True, 5.0, 0.0, 0.0) == pytest.approx(1.5 * 0.5)
