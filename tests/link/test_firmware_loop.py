# The firmware's loop (boards/main.py) in-process on CPython with a fake clock: the link
# silence timeout, lock-step ticking, exceptions and Ctrl-C. The clock starts just below the
# 30-bit wrap, so every schedule here crosses it.
import random

import pytest

from controller import link as L
from controller.compat import TICKS_MASK, ticks_add, ticks_diff
from controller.signals import DUTY_MAX, F_FIRMWARE, F_LINK, F_OVP
from controller.supervisor import Supervisor
from host_sim.seriallink import CmdFrame, Hello, Telemetry

from .fakes import OUTPUTS, SENSOR_VALUES, charging_measurements, make

START_MS = TICKS_MASK - 700  # wraps 0.7 s into each run
PASS_MS = 5  # fake time between loop passes


def run_for(fw, host, now, ms, feed=None):
    """Loop passes for ms of fake time; feed: Measurements sent realtime every 50 ms."""
    msgs = []
    next_feed = now
    end = ticks_add(now, ms)
    while ticks_diff(end, now) > 0:
        if feed is not None and ticks_diff(now, next_feed) >= 0:
            host.send_meas(feed)
            next_feed = ticks_add(next_feed, 50)
        fw.step(now)
        msgs += host.poll(0)
        now = ticks_add(now, PASS_MS)
    return now, msgs


def safe(c):
    return (c.batt_duty, c.cap_duty, c.usb_conv, c.usb_on, c.usb_probe, c.batt_out) == (0,) * 6


def test_link_silence_puts_outputs_safe_and_recovery_follows():
    p, fw, hal, host = make()
    m = charging_measurements()
    now, msgs = run_for(fw, host, START_MS, 1500, feed=m)
    cmds = [x for x in msgs if isinstance(x, CmdFrame)]
    assert len(cmds) >= 25
    last = cmds[-1].c
    assert not last.fault & F_LINK and last.batt_duty > 0 and last.batt_out == 1
    assert hal.applied[-1]["batt_duty"] > 0

    silent_from = now  # no MEAS from here on (the last went out up to 50 ms before)
    now, msgs = run_for(fw, host, now, 800)
    cmds = [x for x in msgs if isinstance(x, CmdFrame)]
    lost = [x for x in cmds if x.c.fault & F_LINK]
    assert lost, "no F_LINK after 800 ms of silence"
    first = lost[0]
    since = ticks_diff(first.now_ms, silent_from)
    assert 500 - 50 < since <= 500 + p.period_ms + PASS_MS  # timeout 500 ms after the last MEAS
    assert all(x.c.fault & F_LINK and safe(x.c) for x in cmds[cmds.index(first):])
    assert safe_dict(hal.applied[-1]) and hal.applied[-1]["fault"] & F_LINK
    assert fw.link.losses == 1

    resume = now
    now, msgs = run_for(fw, host, now, 1000, feed=m)
    cmds = [x for x in msgs if isinstance(x, CmdFrame)]
    back = [x for x in cmds if not x.c.fault & F_LINK]
    # RECOVER_FRAMES fresh frames (one per 50 ms feed) end the fault, then the next tick
    assert back and 0 <= ticks_diff(back[0].now_ms, resume) <= (L.RECOVER_FRAMES + 1) * 50
    assert cmds[-1].c.batt_out == 1 and cmds[-1].c.batt_duty > 0
    tele = [x for x in msgs if isinstance(x, Telemetry)]
    assert tele and tele[-1]["link_losses"] == 1 and tele[-1]["rx_crc"] == 0


def safe_dict(d):
    return all(d[k] == 0 for k in OUTPUTS if k != "dump_duty")


def test_link_mode_starts_safe_until_the_first_measurement():
    p, fw, hal, host = make()
    now, msgs = run_for(fw, host, START_MS, 300)
    cmds = [x for x in msgs if isinstance(x, CmdFrame)]
    assert cmds and all(x.c.fault & F_LINK and safe(x.c) for x in cmds)


def test_lockstep_matches_the_supervisor_in_process():
    p, fw, hal, host = make()
    ref = Supervisor(p)
    rng = random.Random(7)
    t_ms = TICKS_MASK - 2000
    now = 1000
    m = charging_measurements()
    for i in range(300):
        m.bus_mv = rng.choice([15000, 16000, 23000, 25000, 8000, 40500])
        m.batt_mv = rng.randrange(11000, 15000)
        m.batt_ma = rng.randrange(-2000, 3000)
        m.usb_vbus_mv = rng.choice([0, 5000, 4500])
        m.reset_req = 1 if i % 97 == 0 else 0
        for k in range(L.RECOVER_FRAMES if i == 0 else 1):
            # the board starts in the link fault: the first frames are answered safe, untaken
            host.send_meas(m, t_ms, step=True)
            fw.step(now)
            while fw.stream.inbox:  # as on the board: input waiting means another pass at once
                fw.step(now)
            reply = [x for x in host.poll(0) if isinstance(x, CmdFrame) and x.now_ms == t_ms]
            assert len(reply) == 1
            if i == 0 and k < L.RECOVER_FRAMES - 1:
                assert reply[0].c.fault & F_LINK and safe(reply[0].c) and reply[0].ticks == 0
        ref.m.copy_from(m)
        ref.tick(t_ms)
        assert reply[0].c.__dict__ == ref.c.__dict__, i
        assert reply[0].ticks == ref.ticks
        t_ms = ticks_add(t_ms, 50)
        now += 1  # board clock barely moves: ticks come from the frames, not the schedule


def test_hello_is_answered_and_standalone_ignores_measurements():
    p, fw, hal, host = make(mode=L.MODE_STANDALONE, values=SENSOR_VALUES)
    host.send_meas(charging_measurements())  # standalone: not applied, counted
    now, _ = run_for(fw, host, START_MS, 20)
    host.nonce = 41
    host.send(L.T_HELLO, bytes([L.PROTO, 42, 0]))
    now, msgs = run_for(fw, host, now, 20)
    hello = [x for x in msgs if isinstance(x, Hello)]
    assert len(hello) == 1 and hello[0].nonce == 42 and hello[0].board == "fake"
    assert hello[0].mode_name == "standalone" and hello[0].fw_hash == "11" * 8
    assert fw.link.rx_ignored == 1
    now, msgs = run_for(fw, host, now, 1000)
    tele = [x for x in msgs if isinstance(x, Telemetry)]
    assert len(tele) == 2  # every 500 ms
    assert tele[-1]["bus_mv"] == 15000 and not tele[-1]["fault"] & F_LINK


def test_exception_goes_safe_latches_f_firmware_and_keeps_the_guards(tmp_path):
    log = tmp_path / "fault.log"
    p, fw, hal, host = make(mode=L.MODE_STANDALONE, values=SENSOR_VALUES, log_path=str(log))
    now, _ = run_for(fw, host, START_MS, 1000)
    assert hal.applied[-1]["batt_duty"] > 0 and hal.applied[-1]["fault"] == 0

    hal.fail_read = ValueError("sensor bus stuck")
    now, _ = run_for(fw, host, now, 200)
    assert fw.exceptions >= 1 and "sensor bus stuck" in log.read_text()
    a = hal.applied[-1]
    assert safe_dict(a) and a["fault"] & F_FIRMWARE and a["dump_duty"] == 0  # bus below trip

    hal.values["bus_mv"] = p.ovp_trip_mv + 500  # the bus rises while the sensors fail
    now, _ = run_for(fw, host, now, 100)
    assert hal.applied[-1]["dump_duty"] == DUTY_MAX  # dump on: the bus reads above the trip

    hal.fail_read = None  # sensors back, bus still high: the guard trips, outputs stay safe
    now, msgs = run_for(fw, host, now, 600)
    a = hal.applied[-1]
    assert a["fault"] & F_OVP and a["fault"] & F_FIRMWARE and a["dump_duty"] == DUTY_MAX
    hal.values["bus_mv"] = 15000
    now, msgs = run_for(fw, host, now, 3000)
    a = hal.applied[-1]
    assert a["fault"] == F_FIRMWARE and safe_dict(a)  # latched until a reset request
    tele = [x for x in msgs if isinstance(x, Telemetry)]
    assert tele[-1]["exceptions"] == fw.exceptions and tele[-1]["fault"] & F_FIRMWARE

    hal.values["reset_req"] = 1
    now, _ = run_for(fw, host, now, 100)
    hal.values["reset_req"] = 0
    now, _ = run_for(fw, host, now, 500)
    a = hal.applied[-1]
    assert a["fault"] == 0 and a["batt_duty"] > 0


def test_ctrl_c_is_not_swallowed():
    p, fw, hal, host = make(mode=L.MODE_STANDALONE, values=SENSOR_VALUES)
    hal.fail_read = KeyboardInterrupt()
    with pytest.raises(KeyboardInterrupt):
        run_for(fw, host, START_MS, 100)


def test_a_stalled_loop_counts_late_ticks_and_resynchronises():
    p, fw, hal, host = make(mode=L.MODE_STANDALONE, values=SENSOR_VALUES)
    fw.step(START_MS)
    ticks = fw.sup.ticks
    fw.step(ticks_add(START_MS, 10 * p.period_ms))  # ten periods late: one tick, not ten
    assert fw.sup.ticks == ticks + 1 and fw.late == 1
    assert fw.next_ms == ticks_add(START_MS, 11 * p.period_ms)
    fw.step(ticks_add(START_MS, 11 * p.period_ms))
    assert fw.sup.ticks == ticks + 2 and fw.late == 1
