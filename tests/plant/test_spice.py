# Outside check with ngspice (reference circuit simulator, Debian package ngspice, batch mode):
# generator EMF + R_a + L_a at a fixed speed, a diode bridge with the plant's own diode curve
# (SPICE IS, N, RS), the bus capacitor and a resistive load. Mean bus voltage and mean machine
# current must agree with our Plant's (host_sim/spice.py builds both). The limits fit what was
# seen: at a fixed speed the two agree to about 1e-4 % (bus 5e-6 %, current 1e-4 %), so the DC
# cases allow 0.05 %; the speed ramp (a transient from rest) was seen at 0.36 %
# (bus) and 0.35 % (current) and allows 1 %.
import os

import pytest

from host_sim import spice

pytestmark = pytest.mark.ngspice


@pytest.fixture(scope="module", autouse=True)
def _need_ngspice():
    if spice.ngspice_path() is None:
        why = ("ngspice NOT FOUND (/usr/bin/ngspice; Debian package ngspice): the plant's "
               "generator/bridge/bus path is NOT checked against an outside simulator")
        if os.environ.get("CI"):  # on CI the outside check must run: ./run.sh test installs it
            pytest.fail(why)
        pytest.skip(why)


@pytest.mark.parametrize("kw, tol_pct", [
    # the demo's pedal generator at its working speed into 10 ohm, fixed speed
    (dict(scenario="demo", r_load_ohm=10.0), 0.05),
    # the same into a heavier 3.3 ohm load (more current: the diode's RS and log term matter)
    (dict(scenario="demo", r_load_ohm=3.3, rpm=900.0), 0.05),
    # the hut's wind machine, speed ramping up from rest: the bridge starts to conduct part
    # way, L_a and the bus capacitor see a transient; means over the whole run
    (dict(scenario="hut_wind", r_load_ohm=3.0, rpm=400.0, ramp_s=0.3), 1.0),
])
def test_generator_bridge_bus_matches_ngspice(kw, tol_pct):
    r = spice.compare(seconds=0.4, **kw)
    ours, ref = r["ours"], r["ngspice"]
    assert ref["points"] > 1000  # ngspice really ran a transient
    assert ours["bus_v_mean"] == pytest.approx(ref["bus_v_mean"], rel=tol_pct / 100)
    assert ours["src_a_mean"] == pytest.approx(ref["src_a_mean"], rel=tol_pct / 100)
    assert abs(r["bus_diff_pct"]) < tol_pct and abs(r["src_diff_pct"]) < tol_pct


def test_netlist_carries_the_same_parameters():
    sc_doc = __import__("host_sim.scenario", fromlist=["load_scenario"]).load_scenario("demo").doc
    prm = spice.circuit_params(sc_doc, 1000.0, 10.0)
    text = spice.netlist(prm, 0.1, "/tmp/x.txt")
    assert ".model DBR D(IS=1e-06 N=1.05 RS=0.06)" in text
    assert "RA m1 m3 0.5" in text and "CBUS busp 0 0.001" in text
    # EMF = K_e x speed: 18 V per 1000 rpm at 1000 rpm
    assert "VE m1 m2 DC 18" in text
