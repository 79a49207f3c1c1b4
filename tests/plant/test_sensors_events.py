# Sensor models (ADC quantisation, clipping, faults) and each scenario event's effect on the
# plant as the controller would see it.
import copy

import pytest

from controller.leadacid import TEMP_MIN_PLAUSIBLE_DC
from controller.signals import DUTY_MAX, Commands, Measurements
from host_sim.plant.plant import Plant
from host_sim.plant.sensors import NTC_OPEN_DC
from host_sim.scenario import load_doc, load_scenario

DEMO = load_scenario("demo")


def _plant(events=(), quiet=True, **over):
    d = copy.deepcopy(DEMO.doc)
    d["profile"] = DEMO.profile_doc
    d["events"] = list(events)
    if quiet:  # ideal sensors: no noise, no gain error
        d["sensors"] = {k: {"noise_lsb": 0, "gain_tol_pct": 0} for k in (
            "bus_v", "src_a", "batt_v", "batt_a", "cap_v", "cap_a", "usb_vbus", "usb_dp",
            "usb_dm", "cell_v")}
        d["sensors"]["batt_temp"] = {"noise_c": 0}
    d.update(over)
    return Plant(load_doc(d, DEMO.source))


def _cmds():
    c = Commands()
    c.batt_duty = 8000
    c.usb_conv = 1
    c.batt_out = 1
    return c


def _ev(t, kind, **kw):
    e = {"t_s": t, "kind": kind}
    e.update(kw)
    return e


def test_readings_within_one_lsb():
    pl = _plant()
    c = _cmds()
    for _ in range(100):
        pl.step(c, 0.05)
    m = Measurements()
    pl.measure(m)
    s = pl.snapshot()
    assert abs(m.bus_mv - 1000 * s["bus_v"]) <= 40000 / 4096 + 1  # 12-bit over 40 V
    assert abs(m.batt_mv - 1000 * s["batt_v"]) <= 2 * 20000 / 4096 + 1  # bipolar +/-20 V
    assert abs(m.batt_ma - 1000 * s["batt_a"]) <= 2 * 30000 / 4096 + 1
    assert abs(m.batt_temp_dc - 10 * s["batt_temp_c"]) <= 1
    assert abs(m.usb_vbus_mv - 1000 * s["usb_vbus_v"]) <= 8000 / 4096 + 1
    assert m.n_taps == 0  # the default profile has no cell taps


def test_over_range_clips_at_full_scale():
    pl = _plant()
    ch = pl.sensors.ch["bus_v"]
    assert ch.read(55.0) == pytest.approx(40000, abs=10)
    assert pl.sensors.ch["bus_v"].read(-3.0) == 0


def test_noise_is_seeded():
    # the same seed repeats every reading of a running plant exactly
    a, b = _plant(quiet=False), _plant(quiet=False)
    ma, mb = Measurements(), Measurements()
    for _ in range(20):
        a.step(_cmds(), 0.05)
        b.step(_cmds(), 0.05)
        a.measure(ma)
        b.measure(mb)
        assert (ma.bus_mv, ma.batt_ma, ma.batt_temp_dc) == (mb.bus_mv, mb.batt_ma, mb.batt_temp_dc)


def _fixed_input_reads(seed, n=200):
    """n readings of one fixed true value (12 V on the bus channel, 25 C on the NTC), noise on
    (0.7 LSB rms, the default) and no gain error: whatever differs between seeds is noise."""
    sensors = {"bus_v": {"gain_tol_pct": 0}, "batt_temp": {"noise_c": 0.2}}
    pl = _plant(quiet=False, seed=seed, sensors=sensors)
    bus, temp = pl.sensors.ch["bus_v"], pl.sensors.temp
    return [bus.read(12.0) for _ in range(n)], [temp.read(25.0) for _ in range(n)]


def test_noise_same_seed_repeats_other_seed_differs():
    (bus1, temp1), (bus1b, temp1b), (bus2, temp2) = (
        _fixed_input_reads(1), _fixed_input_reads(1), _fixed_input_reads(2))
    assert bus1 == bus1b and temp1 == temp1b  # same seed: the same noise, sample for sample
    assert bus1 != bus2 and temp1 != temp2  # another seed: other noise
    # it is noise: one fixed input reads as several codes, centred on the true value
    assert len(set(bus1)) > 1 and len(set(temp1)) > 1
    lsb_mv = 40000 / 4096  # 12 bits over 40 V
    assert abs(sum(bus1) / len(bus1) - 12000) < lsb_mv


def _run(pl, seconds, c=None, every=None):
    c = c or _cmds()
    m = Measurements()
    out = []
    for _ in range(int(round(seconds / 0.05))):
        pl.step(c, 0.05)
        pl.measure(m)
        out.append((pl.snapshot(), copy.copy(m.__dict__)))
    return out


def test_battery_disconnect_and_reconnect():
    pl = _plant([_ev(5, "battery_disconnected"), _ev(10, "battery_reconnected")])
    r = _run(pl, 15)
    s = r[150][0]  # t = 7.55 s
    assert s["batt_connected"] == 0 and s["batt_a"] == 0.0
    assert s["batt_v"] == pytest.approx(0.8 * s["bus_v"], rel=0.05)  # the output floats at d x bus
    s = r[-1][0]
    assert s["batt_connected"] == 1 and s["batt_a"] > 0.1


def test_ntc_open_reads_implausibly_cold():
    pl = _plant([_ev(1, "temp_sensor_open"), _ev(2, "temp_sensor_ok")])
    r = _run(pl, 3)
    assert r[30][1]["batt_temp_dc"] == NTC_OPEN_DC < TEMP_MIN_PLAUSIBLE_DC
    assert r[-1][1]["batt_temp_dc"] > 200


def test_sensor_stuck_and_open():
    pl = _plant([_ev(1, "sensor_stuck", sensor="bus_v", value=12.0),
                 _ev(2, "sensor_open", sensor="batt_a", reads="full"),
                 _ev(3, "sensor_ok", sensor="bus_v")])
    r = _run(pl, 4)
    assert r[30][1]["bus_mv"] == 12000
    assert r[50][1]["batt_ma"] > 29000
    assert r[-1][1]["bus_mv"] != 12000


def test_wrong_divider_resistor_scales_the_reading():
    # batt divider: 10 k bottom, top for 20 V full scale at 3.3 V; a top resistor ten times
    # too small makes the divider ratio ~6.4x, so the reading (firmware scales by the nominal
    # ratio) is several times too high and clips
    pl = _plant([_ev(1, "wrong_divider_resistor", resistor="batt_top", ohm=5060.6)])
    r = _run(pl, 2)
    assert r[10][1]["batt_mv"] == pytest.approx(1000 * r[10][0]["batt_v"], abs=10)
    assert r[-1][1]["batt_mv"] > 19000


def test_usb_network_resistor_event():
    # the D+/D- short left out (1 Gohm): with the probe on, D- no longer follows D+
    pl = _plant([_ev(1, "wrong_divider_resistor", resistor="between", ohm=1e9)])
    c = _cmds()
    c.usb_probe = 1
    r = _run(pl, 2, c)
    assert abs(r[15][1]["usb_dp_mv"] - r[15][1]["usb_dm_mv"]) < 20
    assert r[-1][1]["usb_dp_mv"] - r[-1][1]["usb_dm_mv"] > 300


def test_bus_surge_puts_energy_in():
    pl = _plant([_ev(5, "bus_surge", surge_v=40, surge_ohm=4.7, duration_s=0.3)])
    r = _run(pl, 6)
    led = pl.ledger()
    assert led["surge_in_j"] > 1.0
    assert max(s["bus_v"] for s, _ in r[100:110]) > max(s["bus_v"] for s, _ in r[80:100])


def test_drive_stop_start_and_requests():
    pl = _plant([_ev(2, "drive_stop"), _ev(6, "drive_start"),
                 _ev(7, "reset_request", duration_s=0.2),
                 _ev(8, "equalize_request", duration_s=1.0)])
    r = _run(pl, 10)
    assert r[60][0]["p_in_w"] == 0.0
    assert r[-1][0]["p_in_w"] > 10
    assert [m["reset_req"] for _, m in r[138:146]].count(1) >= 3
    assert r[165][1]["eq_req"] == 1 and r[-1][1]["eq_req"] == 0


def test_cell_taps_filled_when_profile_has_them():
    prof = copy.deepcopy(DEMO.profile_doc)
    prof["supercap"]["cell_taps"] = True
    d = copy.deepcopy(DEMO.doc)
    d["profile"] = prof
    d["supercap"]["v0_per_cell"] = 2.0
    pl = Plant(load_doc(d, DEMO.source))
    m = Measurements()
    pl.step(_cmds(), 0.05)
    pl.measure(m)
    assert m.n_taps == 6
    assert all(abs(m.cell_mv[i] - 2000) < 30 for i in range(6))


def test_dump_duty_averages_the_resistor():
    c = Commands()
    c.dump_duty = DUTY_MAX // 2
    pl = _plant()
    _run(pl, 5, c)
    s = pl.snapshot()
    assert s["dump_w"] == pytest.approx(0.5 * s["bus_v"] ** 2 / 4.7, rel=0.03)
