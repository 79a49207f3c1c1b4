"""Tests written for mutants that survived the mutation run (docs/mutation.md,
python -m host_sim.mutation). Each test names the invariant it proves; a mutant survived
because no test stated it. Where a number comes from outside the controller, its source is
beside it."""
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from ctl_bench import Bench, build, doc_with
from ctl_props import Limits

from controller.buckloop import BuckLoop
from controller.leadacid import ceiling_mv
from controller.leadacid import LeadAcidCharger
from controller.mppt import HillClimb
from controller.signals import (
    F_BATT_ABSENT,
    F_BATT_REVERSED,
    F_BATT_SENSOR,
    F_BUS_SENSOR,
    F_CAP_SENSOR,
    F_TEMP_WINDOW,
    F_USB_SENSOR,
    Measurements,
    ST_ABSORPTION,
    ST_BULK,
    ST_FLOAT,
)
from controller.supercap import CapClamp
from controller.usbport import M_DCP, M_DIV_2V7_2V7

NEG_MV = -500  # docs/profile.md (sensors): readings plausible from -0.5 V up to full scale


def running(**kw):
    """Every output running: battery and supercap charging, USB port on (2.7/2.7 divider)."""
    kw.setdefault("usb__debounce_ms", 50)
    p = build(doc_with(usb__scheme="div_2v7_2v7", supercap__cell_taps=True, **kw))
    b = Bench(p, bus_mv=15000, batt_mv=12800, batt_ma=1000, cap_mv=10000, cap_ma=500,
              usb_vbus_mv=5000, usb_dp_mv=2686, usb_dm_mv=2686, n_taps=6)
    for i in range(6):
        b.sup.m.cell_mv[i] = 1667
    c = b.run(10 + p.usb_debounce_ms // p.period_ms)
    assert c.batt_duty > 0 and c.cap_duty > 0 and c.usb_on == 1 and c.fault == 0
    return b


# --- supervisor: plausibility is two-sided -----------------------------------------------------
def _edges(p):
    """(field, value, fault bit): every reading at the edge of its plausible range
    (docs/profile.md sensors: [-0.5 V, full scale], currents [-full, +full], cell taps up to
    twice the cell rating per supervisor.py)."""
    fs_ma = p.batt_fs_ma
    return [("bus_mv", NEG_MV, F_BUS_SENSOR), ("bus_mv", p.bus_fs_mv, F_BUS_SENSOR),
            ("src_ma", -fs_ma, F_BUS_SENSOR), ("src_ma", fs_ma, F_BUS_SENSOR),
            ("batt_mv", -p.batt_fs_mv, F_BATT_SENSOR), ("batt_mv", p.batt_fs_mv, F_BATT_SENSOR),
            ("batt_ma", -fs_ma, F_BATT_SENSOR), ("batt_ma", fs_ma, F_BATT_SENSOR),
            ("cap_mv", NEG_MV, F_CAP_SENSOR), ("cap_mv", p.cap_fs_mv, F_CAP_SENSOR),
            ("cap_ma", -fs_ma, F_CAP_SENSOR), ("cap_ma", fs_ma, F_CAP_SENSOR),
            ("usb_vbus_mv", NEG_MV, F_USB_SENSOR), ("usb_vbus_mv", p.vbus_fs_mv, F_USB_SENSOR),
            ("usb_dp_mv", NEG_MV, F_USB_SENSOR), ("usb_dp_mv", p.line_fs_mv, F_USB_SENSOR),
            ("usb_dm_mv", NEG_MV, F_USB_SENSOR), ("usb_dm_mv", p.line_fs_mv, F_USB_SENSOR),
            ("tap", NEG_MV, F_CAP_SENSOR), ("tap", 2 * p.cap_cell_rating_mv, F_CAP_SENSOR)]


@pytest.mark.parametrize("k", range(20))
def test_a_reading_at_the_edge_of_its_range_is_plausible(k):
    """Invariant: plausibility is two-sided. The property I6 checks that an implausible
    reading gives the safe state; this checks the converse at the edges: a reading exactly at
    -0.5 V or at full scale (docs/profile.md, sensors) raises no sensor fault, and one step
    past it does."""
    b = running()
    b.run(1, batt_ma=0, cap_ma=0)  # no current into a store: the bus cross-check stays quiet
    field, value, bit = _edges(b.p)[k]
    for v, bad in ((value, False), (value + (-1 if value <= 0 else 1), True)):
        if field == "tap":
            b.sup.m.cell_mv[2] = v
        else:
            b.set(**{field: v})
        c = b.run(1)
        assert bool(c.fault & bit) == bad, (field, v, c.fault)
        b = running()
        b.run(1, batt_ma=0, cap_ma=0)


def test_time_starts_at_the_first_tick():
    """Invariant (supervisor.py): the first tick counts no elapsed time, whatever the clock
    reads: the USB port's debounce (250 ms at 50 ms periods) needs its whole time from there."""
    p = build(doc_with(usb__scheme="div_2v7_2v7", usb__debounce_ms=250))
    b = Bench(p, start_ms=100000, bus_mv=15000, usb_vbus_mv=5000, usb_dp_mv=2686,
              usb_dm_mv=2686)
    ons = [b.run(1).usb_on for _ in range(8)]
    assert ons.index(1) == 250 // p.period_ms  # 0, 50, ... 250 ms: the sixth tick


# --- supervisor: the bus cross-check ---------------------------------------------------------
def test_a_bus_below_a_charging_battery_is_a_bus_sensor_fault():
    """Invariant (supervisor.py, _bus_contradicted): a buck cannot push current into a store
    that sits above its input. A bus reading more than 0.3 V under the battery while its
    converter runs and more than 0.2 A flows in is a sensor fault: safe state."""
    b = running()
    c = b.run(1, bus_mv=12800 - 301, cap_ma=0)  # battery at 12.8 V, 1 A flowing in
    assert c.fault & F_BUS_SENSOR and c.batt_duty == 0 and c.cap_duty == 0 and c.usb_on == 0
    c = b.run(3)  # the latch holds while the reading stays under the battery
    assert c.fault & F_BUS_SENSOR
    c = b.run(1, bus_mv=15000)  # reads above both stores again: released
    assert not c.fault & F_BUS_SENSOR


@pytest.mark.parametrize("bus_mv, batt_ma, lie", [
    (12800 - 300, 1000, False),  # 0.3 V of sensor error allowed (_XCHK_MV)
    (12800 - 301, 1000, True),
    (9000, 200, False),  # 0.2 A or less is no current (_XCHK_MA): nothing contradicted
    (9000, 201, True)])
def test_the_bus_cross_check_edges(bus_mv, batt_ma, lie):
    """Invariant (supervisor.py): the cross-check fires only beyond its margins, 0.3 V under
    the battery and more than 0.2 A into it; inside them a bus reading is trusted."""
    b = running()
    c = b.run(1, bus_mv=bus_mv, batt_ma=batt_ma, cap_ma=0)
    assert bool(c.fault & F_BUS_SENSOR) == lie


def test_the_supercap_yields_first():
    """Invariant (supervisor.py, header): the supercap's converter backs off at a bus floor
    0.5 V above the battery's, so as the drive slows it yields first. With the bus held
    0.25 V over the battery's floor, the battery's duty rises while the bank's falls."""
    b = running(bus__floor_v=14.0)  # 14.0 V floor: the bench's 14.25 V bus sits just over it
    b.run(1, bus_mv=14250, batt_ma=100, cap_ma=100)
    c = b.run(1)
    batt0, cap0 = c.batt_duty, c.cap_duty
    c = b.run(20)
    assert c.batt_duty > batt0 and c.cap_duty < cap0


def test_a_bus_below_a_charging_bank_is_a_bus_sensor_fault():
    """Invariant: as above, for the supercap converter alone (no battery current)."""
    b = running()
    b.run(1, batt_ma=0)
    c = b.run(1, bus_mv=10000 - 301, batt_ma=0, batt_mv=9000)  # bank at 10 V, 0.5 A into it
    assert c.fault & F_BUS_SENSOR and c.cap_duty == 0


def test_the_bus_latch_releases_when_no_current_flows():
    """Invariant (supervisor.py): once no current flows into either store (and the reading
    has moved: a stuck sensor repeats its value), a low bus reading contradicts nothing and
    the latch releases."""
    b = running()
    assert b.run(1, bus_mv=12000, cap_ma=0).fault & F_BUS_SENSOR
    c = b.run(1, bus_mv=12100, batt_ma=0, cap_ma=0)
    assert not c.fault & F_BUS_SENSOR


# --- supervisor: restart after a fault --------------------------------------------------------
def test_after_a_trip_the_port_debounces_again():
    """Invariant (usbport.py): the port closes only after VBUS and the lines have matched for
    the debounce time. A trip opens it (safe state); after the latch clears it must wait the
    whole debounce again, not close on the time counted before the trip."""
    b = running(usb__debounce_ms=500)
    c = b.run(20)
    assert c.usb_on == 1
    b.run(1, bus_mv=26000)
    c = b.run(int(b.p.ovp_hold_ms // b.p.period_ms) + 1, bus_mv=15000)
    assert c.fault == 0
    assert c.usb_on == 0  # released this tick: the 500 ms start again


def test_after_a_fault_the_converters_restart_from_the_output():
    """Invariant (buckloop.py): a stopped converter starts at the zero-current point, u = the
    output voltage. A fault stops both converters; afterwards their first duties are the ones
    a fresh start gives, not the duties they had ramped to before."""
    b = running()
    c = b.run(40, batt_ma=100, cap_ma=100)  # under the limits: both ramped up
    before = (c.batt_duty, c.cap_duty)
    b.run(1, bus_mv=-3000)  # a bus reading glitch: the safe state for one tick
    c = b.run(1, bus_mv=15000)
    after = (c.batt_duty, c.cap_duty)
    c = Bench(b.p, bus_mv=15000, batt_mv=12800, batt_ma=100, cap_mv=10000, cap_ma=100).run(1)
    fresh = (c.batt_duty, c.cap_duty)
    assert after == fresh
    assert fresh[0] < before[0] and fresh[1] < before[1]


# --- supervisor: USB commands reported ---------------------------------------------------------
def test_the_commands_carry_the_probe_and_the_match():
    """Invariant: the probe the port asks for and the scheme the lines match reach the
    Commands. A dedicated charging port (BC1.2 1.4.7, D+ shorted to D-) is checked with the
    board's D+ probe on (V_DP_SRC 0.5-0.7 V; D- follows above V_DAT_REF's top, 0.4 V: BC1.2
    ch. 5, DC electrical characteristics), so the probe command must be on before the port
    closes; a 2.7 V / 2.7 V divider port (common practice) reports its match code."""
    b = Bench(build(doc_with(usb__scheme="dcp", usb__debounce_ms=100)), usb_vbus_mv=5000,
              usb_dp_mv=600, usb_dm_mv=600)
    c = b.run(1)
    assert c.usb_conv == 1 and c.usb_probe == 1 and c.usb_on == 0
    c = b.run(5)
    assert c.usb_on == 1 and c.usb_match == M_DCP and c.usb_probe == 0
    assert running().c.usb_match == M_DIV_2V7_2V7


# --- leadacid: the compensated ceiling outside the window ------------------------------------
@pytest.mark.parametrize("stage", [ST_BULK, ST_ABSORPTION, ST_FLOAT])
def test_the_ceiling_outside_the_window_is_the_ceiling_at_its_edge(stage):
    """Invariant (docs/profile.md; leadacid.comp_mv): the temperature is clamped to the
    charging window before compensation. The tick never asks outside the window (it blocks
    first), but ceiling_mv is public (host_sim.limits prints it); the oracle ctl_props.Limits
    computes it from the profile document's numbers."""
    doc = doc_with(battery__temp_coeff_mv_per_c_per_cell=-1.0)  # stays under the hard caps
    p, lim = build(doc), Limits(doc)
    for t_dc, edge in ((lim.tmin_dc - 300, lim.tmin_dc), (lim.tmin_dc - 1, lim.tmin_dc),
                       (lim.tmax_dc + 1, lim.tmax_dc), (lim.tmax_dc + 300, lim.tmax_dc)):
        assert ceiling_mv(p, stage, t_dc) == lim.ceiling_mv(stage, edge)


def test_charging_resumes_only_a_degree_inside_the_window():
    """Invariant (leadacid.py _TEMP_HYST_DC, _TEMP_HYST_LSB, _TEMP_BACK_MS): after leaving the
    charging window, charging resumes only 1.0 C (or 3 LSB of the sensor, if more) back inside
    it, held there for 5 s, so a noisy sensor at the edge does not switch the charger (and the
    load on the drive) on and off every tick."""
    p = build(doc_with())
    ch = LeadAcidCharger(p)
    m = Measurements()
    m.bus_mv, m.batt_mv, m.batt_ma = 15000, 12800, 500
    for t_dc, n, blocked in ((250, 1, False), (p.temp_max_dc + 1, 1, True),
                             (p.temp_max_dc - 5, 200, True), (p.temp_max_dc - 10, 99, True),
                             (p.temp_max_dc - 10, 1, False), (p.temp_min_dc - 1, 1, True),
                             (p.temp_min_dc + 9, 200, True), (p.temp_min_dc + 10, 99, True),
                             (p.temp_min_dc + 9, 1, True), (p.temp_min_dc + 10, 99, True),
                             (p.temp_min_dc + 10, 1, False)):
        m.batt_temp_dc = t_dc
        for _ in range(n):
            ch.update(m, 50, 9000)
        assert bool(ch.fault & F_TEMP_WINDOW) == blocked == bool(ch.blocked), t_dc
    p = build(doc_with(sensors__temp_lsb_c=0.5))  # 3 LSB = 1.5 C
    ch = LeadAcidCharger(p)
    for t_dc, n, blocked in ((p.temp_min_dc - 1, 1, True), (p.temp_min_dc + 14, 200, True),
                             (p.temp_min_dc + 15, 99, True), (p.temp_min_dc + 15, 1, False)):
        m.batt_temp_dc = t_dc
        for _ in range(n):
            ch.update(m, 50, 9000)
        assert bool(ch.blocked) == blocked, t_dc


# --- supercap: the regulator's target ------------------------------------------------------
def test_the_bank_regulator_aims_under_the_clamp():
    """Invariant (supercap.py): the regulator aims half the hysteresis below the clamp, so the
    current tapers before the hard stop. A bank between that target and the clamp is not
    pushed higher: its converter's u does not rise."""
    p = build(doc_with())
    k = CapClamp(p)
    m = Measurements()
    m.bus_mv, m.cap_ma = p.cap_clamp_mv + 5000, 0  # headroom for the buck
    m.cap_mv = p.cap_clamp_mv - (p.cap_hyst_mv >> 2)  # above the target, under the clamp
    k.update(m, 9000)
    u0 = k.loop.u_mv
    for _ in range(5):
        k.update(m, 9000)
    assert 0 < k.loop.u_mv <= u0


# --- buckloop: the fall rate ------------------------------------------------------------------
def test_u_falls_at_most_two_volts_a_period():
    """Invariant (buckloop.py _STEP_DN_MV): quick to fall, but by at most 2 V a period, and at
    or above the ceiling it never rises."""
    loop = BuckLoop()
    # a settled state: last period's duty makes u from this bus (6667 x 30 V = 20.0 V)
    loop.u_mv, loop.duty, loop.bus_last_mv = 20000, 6667, 30000
    loop.update(15000, 10000, 0, 1000, 30000, 9000, 100000)
    assert loop.u_mv == 18000
    loop.u_mv, loop.duty = 16000, 5334  # 5334 x 30 V = 16.0 V
    loop.update(15000, 14000, 0, 1000, 30000, 9000, 100000)  # above the ceiling by 1 V
    assert loop.u_mv == 15500


def test_an_overcurrent_cut_puts_u_below_the_output():
    """Invariant (buckloop.py): more than 3 % over the current limit, u goes below the
    zero-current point (the output voltage) at once, and the duty falls by a quarter at least."""
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 13000, 8000, 15000
    d = loop.update(12800, 14400, 1100, 1000, 15000, 9000, 100000)  # 10 % over the limit
    assert loop.u_mv < 12800 and d <= 6000


def _settled(loop):
    """A settled loop: last period's duty makes u from this bus exactly (5000 x 30 V = 15 V)."""
    loop.u_mv, loop.duty, loop.bus_last_mv = 15000, 5000, 30000
    return loop


def test_over_its_aim_u_falls_by_a_quarter_of_the_excess():
    """Invariant (buckloop.py _KI_OVER_DIV, 'made'): between the current aim (lim - lim/32) and
    the cut, u steps down by a quarter of the excess over the aim, from what last period's duty
    makes from this bus; at or over the limit no current headroom is added to that. Limit
    1000 mA, reading 1020 mA: excess 51 mA, step floor(-51 / 4) = -13 mV."""
    loop = _settled(BuckLoop())
    loop.update(13000, 14400, 1020, 1000, 30000, 9000, 100000)
    assert loop.u_mv == 15000 - 13


@pytest.mark.parametrize("out_ma, cut", [(1031, False), (1032, True)])
def test_the_cut_starts_over_a_32nd_of_the_limit(out_ma, cut):
    """Invariant (buckloop.py): the overcurrent cut acts when the reading is more than lim/32
    over the limit (31 mA on 1000 mA), not at it; then u goes 0.5 V below the output at once."""
    loop = _settled(BuckLoop())
    loop.update(13000, 14400, out_ma, 1000, 30000, 9000, 100000)
    assert loop.u_mv == (12500 if cut else 15000 + (969 - out_ma) // 4)


@pytest.mark.parametrize("bus_mv, starts", [(18300, True), (18301, False), (17700, True),
                                            (17699, False)])
def test_a_stopped_loop_starts_on_a_bus_that_moved_no_more_than_0v3(bus_mv, starts):
    """Invariant (buckloop.py _SETTLE_MV): a stopped converter starts only on a bus that moved
    no more than 0.3 V since the period it stopped in (exactly 0.3 V starts it)."""
    loop = BuckLoop()
    loop.update(12000, 14400, 500, 1000, 18000, 9000, 100000)  # running
    assert loop.update(12000, 14400, 1600, 1000, 18000, 9000, 100000) == 0  # 60 % over: off
    d = loop.update(12000, 14400, 0, 1000, bus_mv, 9000, 100000)
    assert (d > 0) == starts


@pytest.mark.parametrize("batt_mv, fault", [(-200, F_BATT_ABSENT), (-201, F_BATT_REVERSED)])
def test_a_battery_is_reversed_only_below_minus_0v2(batt_mv, fault):
    """Invariant (leadacid.py _REVERSED_MV): a battery reading further negative than -0.2 V is
    connected backwards; -0.2 V itself reads as absent (no block, or an open lead)."""
    p = build(doc_with())
    ch = LeadAcidCharger(p)
    m = Measurements()
    m.batt_mv, m.batt_ma, m.batt_temp_dc, m.bus_mv = batt_mv, 0, 250, 18000
    assert ch.update(m, p.period_ms, p.floor_mv) == 0
    assert ch.fault & (F_BATT_ABSENT | F_BATT_REVERSED) == fault


# --- mppt --------------------------------------------------------------------------------------
def hill(**kw):
    kw.setdefault("control__mppt_interval_ms", 100)
    p = build(doc_with(control__mppt=True, control__mppt_step_v=0.5, **kw))
    return p, HillClimb(p)


def test_the_climber_compares_interval_means():
    """Invariant (mppt.py): every tick's power counts in its interval's mean, not only the
    last one. Interval 1: 1.0 A, 1.0 A; interval 2: 3.0 A, 0.5 A (mean 1.75 A, more power):
    keep climbing. A climber that saw only the last tick would turn round."""
    _, h = hill()
    h.update(12000, 1000, 50)
    assert h.update(12000, 1000, 50) == 10500
    h.update(12000, 3000, 50)
    assert h.update(12000, 500, 50) == 11000


def test_the_first_interval_counts_its_own_ticks_against_zero():
    """Invariant: the first interval is an interval like the others: its mean is over its own
    ticks, compared with no power before. 1.0 A then 0.9 A: the second mean is lower, so the
    climber turns round (10.0 -> 10.5 -> 10.0 V)."""
    _, h = hill()
    h.update(12000, 1000, 50)
    assert h.update(12000, 1000, 50) == 10500
    h.update(12000, 900, 50)
    assert h.update(12000, 900, 50) == 10000
    _, h = hill()  # with no power at all the first interval did not fall: keeps going up
    h.update(12000, 0, 50)
    assert h.update(12000, 0, 50) == 10500


def test_the_first_interval_is_as_long_as_the_others():
    """Invariant: an interval ends when mppt_interval_ms have passed, the first and the next
    alike: 33 ms ticks, a 100 ms interval: 3 ticks (99 ms) do not end it, the 4th does."""
    _, h = hill()
    assert [h.update(12000, 1000, 33) for _ in range(8)] == [10000] * 3 + [10500] * 4 + [11000]


def test_turned_back_at_the_top_and_at_the_floor():
    """Invariant (mppt.py): the setpoint stays between the floor and one step under
    overspeed (or recovery), moves one step an interval, and is turned round at either end,
    even while the power keeps rising (the climber must keep probing)."""
    p, h = hill(control__overspeed_bus_v=12)
    top = 12000 - 500
    sets = [h.update(15000, 1000 + 10 * k, 50) for k in range(40)][1::2]  # power always rising
    assert max(sets) == top
    i = sets.index(top)
    assert top - 500 in sets[i + 1:i + 3]  # turned back (after one refused step at most)
    for a, b2 in zip([10000] + sets, sets):
        assert abs(a - b2) <= 500
    _, h = hill()
    amps = [1000, 900] + [1000 + 10 * k for k in range(20)]  # one fall, then always rising
    sets = [h.update(15000, a, 50) for a in amps for _ in range(2)][1::2]
    assert min(sets) == p.floor_mv and all(s >= p.floor_mv for s in sets)
    j = sets.index(p.floor_mv)
    assert p.floor_mv + 500 in sets[j + 1:j + 3]  # turned back up at the floor


def test_overspeed_caps_the_setpoint_below_it():
    """Invariant (mppt.py): with an overspeed level the setpoint's top is one step under it
    (not under the recovery level, which sits higher)."""
    p, h = hill(control__overspeed_bus_v=14)
    assert p.ovp_recover_mv > 14000
    sets = [h.update(15000, 1000 + 10 * k, 50) for k in range(60)]
    assert max(sets) == 14000 - 500


# --- signals ------------------------------------------------------------------------------------
def test_copy_from_copies_every_reading():
    """Invariant (signals.py): Measurements.copy_from copies every reading the board or the
    link filled in, the used cell taps included, so a copied set ticks like the original."""
    src = Measurements()
    names = [k for k, v in vars(src).items() if isinstance(v, int)]
    for i, k in enumerate(names):
        setattr(src, k, 1000 + i)
    src.n_taps = 3
    src.cell_mv[:3] = [2001, 2002, 2003]
    dst = Measurements()
    dst.copy_from(src)
    assert [getattr(dst, k) for k in names] == [getattr(src, k) for k in names]
    assert dst.cell_mv[:3] == [2001, 2002, 2003]


# === second round (sample at f53f562): survivors of the current controller =====================
from controller import leadacid as leadacid_mod  # noqa: E402
from controller.compat import TICKS_MASK  # noqa: E402
from controller.profile_fields import SCHEMES as SCHEME_NAMES  # noqa: E402
from controller.signals import (  # noqa: E402
    DUTY_MAX,
    F_BATT_ABSENT,
    F_BATT_OVER,
    F_CAP_CELL,
    F_TEMP_SENSOR,
    F_USB_LINES,
    ST_EQUALIZE,
)
from controller.usbport import MATCH_NAMES, M_NONE, M_SHORT_1V2, UsbPort, classify  # noqa: E402

SMALL_INT = 2 ** 30  # DEVELOPERS.md: every value in the tick stays within +/-2**30


# --- supervisor ----------------------------------------------------------------------------------
def test_while_the_bus_reading_is_held_false_the_dump_load_holds_the_bus():
    """Invariant (supervisor.py, and commit 040711f): while the cross-check holds the bus
    reading false, the safe state takes every load off the source, so the dump load takes it
    (full duty) instead of leaving an unloaded generator to rise to its clamp."""
    b = running()
    c = b.run(1, bus_mv=12000, cap_ma=0)  # 0.8 V under a battery taking 1 A: a lie
    assert c.fault & F_BUS_SENSOR and c.dump_duty == DUTY_MAX
    c = b.run(1, bus_mv=15000)  # reads above both stores again: released, no dump
    assert c.fault == 0 and c.dump_duty == 0


def test_the_bus_latch_needs_the_bus_above_the_stores_while_current_flows():
    """Invariant (supervisor._bus_contradicted): while current still flows into a store the
    latch holds until the bus reads above both stores again; a reading that rose to within the
    0.3 V sensor allowance under the battery (no new contradiction) does not release it."""
    b = running()
    assert b.run(1, bus_mv=12000, cap_ma=0).fault & F_BUS_SENSOR
    c = b.run(3, bus_mv=12800 - 200, batt_ma=1000, cap_ma=0)  # under the battery, 1 A flowing
    assert c.fault & F_BUS_SENSOR
    c = b.run(1, bus_mv=15000)
    assert not c.fault & F_BUS_SENSOR


def test_a_port_line_fault_reaches_the_commands():
    """Invariant (signals.F_USB_LINES, usbport.py): once the 5 V converter has run the
    debounce time with lines that match no configured scheme, the port check has failed and
    the tick reports F_USB_LINES (the port stays open)."""
    b = running()
    c = b.run(1 + b.p.usb_debounce_ms // b.p.period_ms, usb_dp_mv=600, usb_dm_mv=600)
    assert c.fault & F_USB_LINES and c.usb_on == 0 and c.usb_conv == 1
    c = b.run(1, usb_dp_mv=2686, usb_dm_mv=2686)  # matching again: no fault in that tick
    assert c.fault == 0


def test_the_safe_state_reports_no_line_match():
    """Invariant (usbport.block, supervisor fault path): a fault blocks the port, whose match is
    then none; the Commands report that, not the match of the tick before the fault."""
    b = running()
    assert b.c.usb_match == M_DIV_2V7_2V7
    c = b.run(1, bus_mv=-3000)  # an implausible bus reading: the safe state
    assert c.fault & F_BUS_SENSOR and c.usb_match == M_NONE


def test_the_tick_counter_never_leaves_the_small_int_range():
    """Invariant (supervisor.py ticks, DEVELOPERS.md): the tick counter stays under 2**30 at every
    tick, the tick of the wrap included (not only after it)."""
    b = running()
    b.sup.ticks = TICKS_MASK - 3  # white box: 2**30 ticks is too many to run
    for _ in range(8):
        b.run(1)
        assert 0 < b.sup.ticks < SMALL_INT


def test_the_first_tick_counts_no_time_at_one_ms_resolution():
    """Invariant (supervisor.py): the first tick counts no elapsed time whatever the clock
    reads. With a 10 ms debounce (the profile's least) and ticks 1 ms apart, the port closes
    on the tick 10 ms after the first, not a tick earlier."""
    p = build(doc_with(usb__scheme="div_2v7_2v7", usb__debounce_ms=10, control__period_ms=5))
    b = Bench(p, start_ms=123457, bus_mv=15000, usb_vbus_mv=5000, usb_dp_mv=2686,
              usb_dm_mv=2686)
    ons = [b.run(1, dt_ms=1).usb_on for _ in range(14)]
    assert ons.index(1) == 10


# --- USB classifier: scheme codes and window edges ----------------------------------------------
def _scheme_lines(name, vbus_mv=5000):
    """A port's data lines (divider arithmetic, derived from E96 values, or the DCP probe
    level, V_DP_SRC in BC1.2 ch. 5), at vbus_mv."""
    div = {"div_2v0_2v7": (LEVEL_20_DIV, LEVEL_27_DIV), "div_2v7_2v0": (LEVEL_27_DIV, LEVEL_20_DIV),
           "div_2v7_2v7": (LEVEL_27_DIV, LEVEL_27_DIV), "short_1v2": (LEVEL_12_DIV, LEVEL_12_DIV)}
    if name == "dcp":
        return 600, 580
    (t1, b1), (t2, b2) = div[name]
    return round(vbus_mv * b1 / (t1 + b1)), round(vbus_mv * b2 / (t2 + b2))


LEVEL_20_DIV = (75, 49.9)  # divider arithmetic (derived): 1.998 V at 5.00 V
LEVEL_27_DIV = (43, 49.9)  # 2.686 V
LEVEL_12_DIV = (100, 31.6)  # 1.201 V


@pytest.mark.parametrize("scheme", SCHEME_NAMES)
def test_a_port_built_for_each_scheme_closes_on_its_own_lines(scheme):
    """Invariant (usbport.py, docs/profile.md usb.scheme): a port configured for a scheme
    closes on that scheme's lines after the debounce, and reports the scheme by its name
    (the match code names the scheme the profile asked for)."""
    p = build(doc_with(usb__scheme=scheme, usb__debounce_ms=100))
    dp, dm = _scheme_lines(scheme)
    b = Bench(p, bus_mv=15000, usb_vbus_mv=5000, usb_dp_mv=dp, usb_dm_mv=dm)
    c = b.run(1 + 100 // p.period_ms + 1)
    if scheme == "dcp":  # the probe is off once the port is on: the lines fall to 0 V
        c = b.run(2, usb_dp_mv=0, usb_dm_mv=0)
    assert c.usb_on == 1 and MATCH_NAMES[c.usb_match] == scheme and c.fault == 0


# (scheme, which line, level mV at 5.00 V): every window the classifier checks
_WINDOWS = [("div_2v0_2v7", 0, 2000), ("div_2v0_2v7", 1, 2700),
            ("div_2v7_2v0", 0, 2700), ("div_2v7_2v0", 1, 2000),
            ("div_2v7_2v7", 0, 2700), ("div_2v7_2v7", 1, 2700),
            ("short_1v2", 0, 1200), ("short_1v2", 1, 1200)]


@pytest.mark.parametrize("scheme, line, level_mv", _WINDOWS)
@pytest.mark.parametrize("tol_pct", [8, 14])
def test_every_level_window_is_closed_at_both_ends(scheme, line, level_mv, tol_pct):
    """Invariant (usbport.classify docstring; docs/profile.md line_tolerance_pct): a level L
    matches within L x tol_pct / 100 around L at VBUS 5.00 V, ends included, on either line of
    every scheme; one mV outside either end it does not. Levels 2.0, 2.7, 1.2 V: data-line
    schemes of common practice."""
    want = SCHEME_NAMES.index(scheme) + 1
    nominal = {"div_2v0_2v7": (2000, 2700), "div_2v7_2v0": (2700, 2000),
               "div_2v7_2v7": (2700, 2700), "short_1v2": (1200, 1200)}[scheme]
    w = level_mv * tol_pct // 100
    for v, inside in ((level_mv - w, True), (level_mv + w, True),
                      (level_mv - w - 1, False), (level_mv + w + 1, False)):
        lines = list(nominal)
        lines[line] = v
        got = classify(lines[0], lines[1], 5000, 0, tol_pct, 300)  # short_1v2: 300 mV shorted
        assert (got == want) == inside, (v, got)


@pytest.mark.parametrize("short_mv", [10, 100, 300])
def test_lines_count_as_shorted_up_to_the_tolerance_either_way(short_mv):
    """Invariant (docs/profile.md short_tolerance_mv: the largest D+/D- difference that still
    counts as shorted): a difference of exactly +-short_tolerance is shorted whichever line is
    higher, one mV more is not. Checked on the DCP probe (BC1.2 §1.4.7: D+ shorted to D-;
    V_DP_SRC 0.5-0.7 V, D- above V_DAT_REF's 0.4 V top: BC1.2 ch. 5 DC table)."""
    dp = 650 if short_mv < 200 else 700
    for d, shorted in ((short_mv, True), (-short_mv, True), (short_mv + 1, False),
                       (-short_mv - 1, False)):
        dm = dp - d
        if dm <= 400:
            continue  # D- must stay above V_DAT_REF's top for a DCP whatever the short
        assert (classify(dp, dm, 5000, 1, 8, short_mv) == M_DCP) == shorted, (d, dm)
    # the 1.2 V biased short, probe off: both lines in the 1.2 V window
    for d, shorted in ((short_mv, True), (-short_mv, True), (short_mv + 1, False),
                       (-short_mv - 1, False)):
        got = classify(1200 + d // 2, 1200 + d // 2 - d, 5000, 0, 14, short_mv)
        assert (got == M_SHORT_1V2) == shorted, d


def test_the_probe_is_never_sourced_with_the_converter_off():
    """Invariant (usbport.py: probe = want DCP, converter running, port not yet on): the D+
    probe is part of the port check of a running converter. When an implausible line reading
    blocks the port (converter off), the probe command goes off in the same tick."""
    b = Bench(build(doc_with(usb__scheme="dcp", usb__debounce_ms=100)), usb_vbus_mv=5000,
              usb_dp_mv=600, usb_dm_mv=600)
    c = b.run(1)
    assert c.usb_probe == 1 and c.usb_conv == 1
    c = b.run(1, usb_dp_mv=b.p.line_fs_mv + 1)  # D+ above the line's full scale
    assert c.fault & F_USB_SENSOR and c.usb_conv == 0 and c.usb_probe == 0


def test_the_line_fault_waits_the_debounce_from_the_converter_start():
    """Invariant (usbport.py): a line fault only once the converter has run the debounce time
    (not while it starts), timed from its start: with 1 ms steps and a 250 ms debounce, no
    fault before 250 ms of running are counted, a fault at 250 ms (the starting tick counts its
    1 ms like every tick); a converter stopped (by a low bus, or blocked by a fault) and
    started again times from its new start."""
    port = UsbPort(build(doc_with(usb__scheme="div_2v7_2v7")))
    m = Measurements()
    m.usb_vbus_mv, m.usb_dp_mv, m.usb_dm_mv = 5000, 600, 600  # lines match nothing
    for stop in ("bus", "block", "bus", "block"):
        if stop == "bus":
            m.bus_mv = 3000  # converter off
            port.update(m, 1)
            assert port.conv == 0 and port.fault == 0
        else:
            port.block()  # the supervisor's fault path
        m.bus_mv = 15000
        faults = []
        for _ in range(252):
            port.update(m, 1)
            faults.append(port.fault)
        assert faults.index(F_USB_LINES) == 249  # the 250th tick since the start: 250 ms


def test_after_a_fault_the_port_restarts_as_after_a_stop():
    """Invariant (usbport.block): a fault leaves the port as a stopped converter does. After
    a bus-sensor glitch the port closes on the same tick, counted from the restart, as after
    the converter was stopped by a low bus (both: the lines matched throughout)."""
    def closes_after(stop):
        b = running(usb__debounce_ms=500)
        assert b.run(20).usb_on == 1
        c = b.run(1, batt_ma=0, cap_ma=0, **stop)  # no current: no cross-check
        assert c.usb_conv == 0 and bool(c.fault) == (stop["bus_mv"] < 0)
        return [b.run(1, bus_mv=15000).usb_on for _ in range(14)].index(1)

    low = closes_after({"bus_mv": 3000})  # under usb bus_min - hysteresis: converter off
    glitch = closes_after({"bus_mv": -3000})  # implausible: the safe state
    assert low == glitch == 500 // 50 - 1  # the restart tick counts its period


def test_the_converter_run_time_stays_a_small_int():
    """Invariant (usbport.py conv_ms: capped at the debounce time; DEVELOPERS.md: small ints): the
    converter's run time stops counting at the debounce time, so after 2**30 ms of running
    (12.4 days) it is still a small int."""
    p = build(doc_with(usb__scheme="div_2v7_2v7", control__period_ms=1000))
    port = UsbPort(p)
    m = Measurements()
    m.bus_mv, m.usb_vbus_mv, m.usb_dp_mv, m.usb_dm_mv = 15000, 5000, 600, 600  # unmatched
    dt_ms = 4 * p.period_ms  # the largest step the supervisor passes
    for _ in range(SMALL_INT // dt_ms + 10):
        port.update(m, dt_ms)
    assert port.conv == 1 and port.fault == F_USB_LINES and 0 <= port.conv_ms < SMALL_INT


# --- leadacid: stage timers, restart, edges -----------------------------------------------------
def charger(**kw):
    """A LeadAcidCharger on its own, its Measurements at 25 C with a bus of 18 V."""
    p = build(doc_with(**kw))
    m = Measurements()
    m.bus_mv, m.batt_temp_dc = 18000, 250
    return p, LeadAcidCharger(p), m


def tick(ch, m, dt_ms, n=1, **fields):
    for k, v in fields.items():
        setattr(m, k, v)
    for _ in range(n):
        ch.update(m, dt_ms, 9000)
    return ch.stage


def test_each_stage_hold_is_timed_from_zero_every_time_the_stage_is_entered():
    """Invariant (docs/profile.md battery: tail_hold_s "held this long at voltage",
    rebulk_hold_s "for this long"): a hold of 1 s is not over after 999 ms, on the first pass
    through the stages and on the second (a timer left over from the last visit, or started
    at 1 ms, would end it early); the re-bulk hold restarts when the voltage recovers.
    AGM default: absorption 14.52 V, tail 0.24 A, re-bulk below 12.60 V."""
    p, ch, m = charger(battery__tail_hold_s=1, battery__rebulk_hold_s=1)
    for _ in range(2):
        assert tick(ch, m, 333, batt_mv=14500, batt_ma=1000) == ST_ABSORPTION  # at voltage
        assert tick(ch, m, 333, 3, batt_ma=200) == ST_ABSORPTION  # 999 ms at the tail
        assert tick(ch, m, 333, batt_ma=200) == ST_FLOAT
        assert tick(ch, m, 333, 2, batt_mv=12500, batt_ma=0) == ST_FLOAT  # 666 ms under
        assert tick(ch, m, 333, batt_mv=13000) == ST_FLOAT  # recovered: the hold restarts
        assert tick(ch, m, 333, 3, batt_mv=12500) == ST_FLOAT  # 999 ms under
        assert tick(ch, m, 333) == ST_BULK


def test_after_a_lost_battery_the_charger_restarts_at_bulk_once():
    """Invariant (leadacid.py lost: "restart at bulk"): after an absent battery the charger
    restarts at bulk once and then runs its stages: absorption ends on the held tail current
    as usual (a restart repeated every tick would reset the absorption timers for ever)."""
    p, ch, m = charger(battery__tail_hold_s=1)
    tick(ch, m, 50, batt_mv=p.absent_mv - 1000)
    assert ch.fault & F_BATT_ABSENT
    assert tick(ch, m, 50, batt_mv=14500, batt_ma=1000) == ST_ABSORPTION  # bulk, at voltage
    assert tick(ch, m, 50, 19, batt_ma=200) == ST_ABSORPTION  # 0.95 s at the tail ...
    assert tick(ch, m, 50) == ST_FLOAT  # ... 1 s held: float


def test_a_battery_at_the_absent_threshold_counts_as_present():
    """Invariant (docs/profile.md absent_v_per_cell: "below it the battery counts as absent
    or open"): at exactly the threshold the battery is present: it is charged, and (with the
    threshold above the disconnect level, as the allowed ranges permit) its discharge switch
    closes; one mV below, it is absent."""
    p, ch, m = charger(battery__absent_v_per_cell=1.75, battery__disconnect_v_per_cell=1.60)
    assert p.absent_mv > p.lvd_mv
    for v, absent in ((p.absent_mv, False), (p.absent_mv - 1, True), (p.absent_mv, False)):
        tick(ch, m, 50, batt_mv=v)
        assert bool(ch.fault & F_BATT_ABSENT) == absent
        assert ch.discharge(v) == (0 if absent else 1)


def test_after_the_over_voltage_stop_the_converter_restarts_from_the_output():
    """Invariant (docs/profile.md: a 0.1 V/block margin above the ceiling turns the battery
    converter off; buckloop.py: a stopped converter starts at the zero-current point): after
    an over-ceiling tick the next duty is a fresh converter's first duty, not the ramped one."""
    p, ch, m = charger()
    tick(ch, m, 50, 40, batt_mv=13000, batt_ma=500)
    ramped = ch.loop.duty
    m.batt_mv = 14520 + p.over_margin_mv + 1  # AGM default absorption 14.52 V + margin + 1 mV
    assert ch.update(m, 50, 9000) == 0 and ch.fault & F_BATT_OVER
    tick(ch, m, 50, batt_mv=13000)
    after = ch.loop.duty
    p2, fresh, m2 = charger()
    tick(fresh, m2, 50, batt_mv=13000, batt_ma=500)
    assert after == fresh.loop.duty < ramped


@pytest.mark.parametrize("t_dc, sensor_fault", [(-400, False), (-401, True), (850, False),
                                                (851, True)])
def test_the_plausible_temperature_range_is_closed(t_dc, sensor_fault):
    """Invariant (leadacid.py: an open NTC reads colder than -40.0 C, a shorted one hotter than
    85.0 C): readings at -40.0 C and 85.0 C are plausible (outside the charging window: no
    charging, F_TEMP_WINDOW); one tenth of a degree beyond is a sensor fault. The host's
    published names (host_sim's sensor events use them) carry the same range."""
    assert (leadacid_mod.TEMP_MIN_PLAUSIBLE_DC, leadacid_mod.TEMP_MAX_PLAUSIBLE_DC) == (-400, 850)
    p, ch, m = charger()
    tick(ch, m, 50, batt_mv=12800, batt_temp_dc=t_dc)
    assert ch.fault == (F_TEMP_SENSOR if sensor_fault else F_TEMP_WINDOW)


def test_once_resumed_the_window_edges_are_inside_again():
    """Invariant (leadacid.py too_hot_cold: set on leaving the window, "until 1 C back
    inside"): once charging has resumed, the window is the window again: its edges are inside
    (docs/profile.md charge_temp_max_c), no hysteresis left over."""
    p, ch, m = charger()
    for t_dc, n, blocked in ((p.temp_max_dc + 1, 1, True), (p.temp_max_dc - 10, 100, False),
                             (p.temp_max_dc, 1, False), (p.temp_min_dc, 1, False)):
        tick(ch, m, 50, n, batt_mv=12800, batt_ma=500, batt_temp_dc=t_dc)
        assert bool(ch.blocked) == blocked, t_dc


def test_absorption_time_counts_only_with_current_into_the_battery():
    """Invariant (docs/profile.md absorption_max_minutes: "counts charging time only"):
    time with the converter running but no current into the battery (0 mA) does not count;
    time with current in (+ into the battery, signals.py) does, down to 1 mA."""
    p, ch, m = charger(battery__absorption_max_minutes=10)
    tick(ch, m, 50, batt_mv=14500, batt_ma=1000)
    assert tick(ch, m, 50, 3, batt_mv=14400) == ST_ABSORPTION  # under the band: no tail
    assert ch.loop.duty > 0
    assert tick(ch, m, p.abs_max_ms, batt_ma=0) == ST_ABSORPTION
    assert tick(ch, m, 50, batt_ma=1) == ST_ABSORPTION
    assert tick(ch, m, p.abs_max_ms - 50, batt_ma=1) == ST_FLOAT


def test_equalize_time_counts_only_while_its_converter_runs():
    """Invariant (docs/profile.md equalize_minutes: "time limit, charging time only"): time
    with the converter off (a bus with no headroom) does not count, even with current read
    into the battery, nor time with it running and no current in (0 mA); time with it running
    and current in (+ into the battery, signals.py), down to 1 mA, does."""
    p, ch, m = charger(battery__chemistry="flooded", battery__capacity_ah=100,
                       battery__absorption_v_per_cell=2.45, battery__float_v_per_cell=2.23,
                       battery__equalize_v_per_cell=2.58, battery__equalize_minutes=10,
                       battery__temp_coeff_mv_per_c_per_cell=-5.0,
                       battery__charge_limit_a=12.5, battery__tail_current_a=2.0)
    assert tick(ch, m, 50, batt_mv=14700, batt_ma=5000) == ST_ABSORPTION
    assert tick(ch, m, 50, eq_req=1) == ST_EQUALIZE
    assert tick(ch, m, 50, bus_mv=12000, batt_ma=500) == ST_EQUALIZE  # no headroom: off
    assert ch.loop.duty == 0
    assert tick(ch, m, p.eq_ms) == ST_EQUALIZE
    assert tick(ch, m, 50, 2, bus_mv=18000) == ST_EQUALIZE  # starts on a settled bus
    assert ch.loop.duty > 0
    assert tick(ch, m, p.eq_ms, batt_ma=0) == ST_EQUALIZE  # running, but nothing flows in
    # counted so far: the 50 ms of the tick that found the bus low (last period's duty ran,
    # 0.5 A flowing in); now 1 mA in with the converter running counts
    assert tick(ch, m, p.eq_ms - 51, batt_ma=1) == ST_EQUALIZE
    assert tick(ch, m, 1) == ST_FLOAT


# --- supercap ------------------------------------------------------------------------------------
def clamp_bench(**kw):
    p = build(doc_with(**kw))
    m = Measurements()
    m.bus_mv = 20000
    return p, CapClamp(p), m


def test_a_fresh_bank_inside_the_band_is_charged_to_the_aim():
    """Invariant (supercap.py): the bank stops at the clamp and restarts only below clamp -
    hysteresis after it was reached; one that never reached the clamp, sitting under the aim
    (half the hysteresis below the clamp), is charged: its converter's u rises above it."""
    p, k, m = clamp_bench()
    m.cap_mv = p.cap_clamp_mv - (3 * p.cap_hyst_mv) // 4  # in the band, under the aim
    duties = [k.update(m, 9500) for _ in range(5)]
    assert all(d > 0 for d in duties) and k.loop.u_mv > m.cap_mv


def test_after_the_clamp_stop_the_converter_restarts_from_the_bank():
    """Invariant (supercap.py stop at the clamp; buckloop.py: a stopped converter starts at the
    zero-current point): below the band again, the first duty is a fresh converter's."""
    p, k, m = clamp_bench()
    m.cap_mv = p.cap_clamp_mv - 1000
    for _ in range(30):
        ramped = k.update(m, 9500)
    m.cap_mv = p.cap_clamp_mv
    assert k.update(m, 9500) == 0
    m.cap_mv = p.cap_clamp_mv - p.cap_hyst_mv - 1
    after = k.update(m, 9500)
    _, fresh, m2 = clamp_bench()
    m2.cap_mv = m.cap_mv
    assert ramped > 0 and after == fresh.update(m2, 9500)


def test_no_taps_sensed_no_bleeder_on():
    """Invariant (supercap.py: a cell above the mean by the threshold gets its bleeder): the
    bleeders follow this tick's tap readings; with no taps sensed none is on."""
    p, k, m = clamp_bench(supercap__cell_taps=True)
    m.cap_mv, m.n_taps = 12160, 6
    m.cell_mv[:6] = [2000, 2100, 2000, 2000, 2000, 2060]
    k.update(m, 9500)
    assert k.bal_mask
    m.n_taps = 0
    k.update(m, 9500)
    assert k.bal_mask == 0


def test_a_one_cell_bank_at_its_rating_stops_on_its_tap():
    """Invariant (supercap.py: any cell at or above its rating stops charging, F_CAP_CELL): a
    one-cell bank (docs/profile.md supercap.cells 1-16) whose tap reads the rating stops even
    when the bank reading sits under the clamp."""
    p, k, m = clamp_bench(supercap__cells=1, supercap__cell_taps=True)
    m.cap_mv, m.n_taps = p.cap_clamp_mv - 200, 1
    m.cell_mv[0] = p.cap_cell_rating_mv - 1
    assert k.update(m, 9500) > 0 and k.fault == 0
    m.cell_mv[0] = p.cap_cell_rating_mv
    assert k.update(m, 9500) == 0 and k.fault == F_CAP_CELL


# --- overvolt ------------------------------------------------------------------------------------
from controller.compat import TICKS_PERIOD  # noqa: E402
from controller.overvolt import OverVoltGuard  # noqa: E402


def test_two_trips_a_clock_period_apart_are_not_within_the_window():
    """Invariant (docs/profile.md bus.trip_window_s, lockout_trips; overvolt.py: a trip that
    left the window is forgotten before its time aliases): with two trips locking out, a trip
    2**30 ms (one clock period, 12.4 days) plus 5 s after the first is the only one in its
    window and does not lock the outputs off."""
    p = build(doc_with(bus__lockout_trips=2, bus__trip_window_s=60))
    g = OverVoltGuard(p)
    t_ms = 1000
    g.update(p.ovp_trip_mv, 50, t_ms, 0)
    for _ in range(3):  # latch cleared after the 2 s hold
        t_ms += 1000
        g.update(p.ovp_recover_mv - 1000, 1000, t_ms, 0)
    assert g.tripped == 0
    step_ms = 1000000  # the guard takes any step; a quiet bus for one clock period
    while t_ms + step_ms < 1000 + TICKS_PERIOD:
        t_ms += step_ms
        g.update(p.ovp_recover_mv - 1000, step_ms, t_ms & TICKS_MASK, 0)
    t_ms = 1000 + TICKS_PERIOD + 5000
    g.update(p.ovp_trip_mv, 50, t_ms & TICKS_MASK, 0)
    assert g.tripped == 1 and g.locked == 0


def test_the_hold_restarts_from_zero_when_the_bus_comes_back_over_recovery():
    """Invariant (docs/profile.md ovp_recover_v: the latch clears after the bus stays below it
    for the hold time): the hold must be one unbroken stretch; after the bus came back to the
    recovery level, 1999 ms below it do not clear a 2 s hold, 2000 ms do."""
    p = build(doc_with())
    g = OverVoltGuard(p)
    g.update(p.ovp_trip_mv, 50, 0, 0)
    g.update(p.ovp_recover_mv - 1000, 1500, 1500, 0)
    g.update(p.ovp_recover_mv, 50, 1550, 0)  # at recovery: not below it
    g.update(p.ovp_recover_mv - 1000, p.ovp_hold_ms - 1, 3549, 0)
    assert g.tripped == 1
    g.update(p.ovp_recover_mv - 1000, 1, 3550, 0)
    assert g.tripped == 0


def test_the_soft_zone_dump_is_in_proportion_from_the_first_mv():
    """Invariant (docs/profile.md ovp_recover_v, DEVELOPERS.md): on a steady bus the dump load
    comes in in proportion over the zone's top eighth (none at its bottom, full at the trip),
    at once: 1 mV into it already asks for its share; on a bus running up (more than 1/64 of
    itself in a period) the whole zone reads where twice that rise would take it."""
    p = build(doc_with())  # recovery 21 V, trip 24 V
    top_mv = (p.ovp_trip_mv - p.ovp_recover_mv) >> 3
    for over_mv in (0, 1, top_mv // 2, top_mv - 1):
        g = OverVoltGuard(p)
        g.update(p.ovp_trip_mv - top_mv + over_mv, 50, 0, 0)
        assert g.dump == over_mv * DUTY_MAX // top_mv and g.tripped == 0
    span_mv = p.ovp_trip_mv - p.ovp_recover_mv
    for over_mv in (0, 1, span_mv // 2, span_mv - 1):
        g = OverVoltGuard(p)
        bus_mv = p.ovp_recover_mv - 1000
        g.update(bus_mv, 50, 0, 0)
        rise_mv = (over_mv + 1000) // 3  # bus + 2 x rise = recovery + over (to 1 mV)
        g.update(bus_mv + rise_mv, 50, 50, 0)
        ahead = bus_mv + 3 * rise_mv - p.ovp_recover_mv
        assert g.dump == max(0, ahead) * DUTY_MAX // span_mv and g.tripped == 0


# --- buckloop ------------------------------------------------------------------------------------
def test_a_converter_from_off_at_its_ceiling_delivers_nothing():
    """Invariant (buckloop.py: at or above the ceiling the output never rises; the duty must
    not rise either): a converter that is off (fresh, or switched off for want of headroom)
    and finds its store at the ceiling stays at duty 0."""
    loop = BuckLoop()
    assert loop.update(14400, 14400, 0, 1000, 20000, 9000, 100000) == 0
    loop = BuckLoop()
    for _ in range(10):
        loop.update(13000, 14400, 0, 1000, 20000, 9000, 100000)
    assert loop.duty > 0
    assert loop.update(13000, 14400, 0, 1000, 13000, 9000, 100000) == 0  # no headroom: off
    assert loop.update(14400, 14400, 0, 1000, 13000, 9000, 100000) == 0  # bus settled, at ceiling
    assert loop.update(14400, 14400, 0, 1000, 20000, 9000, 100000) == 0  # a bus jump: waits
    assert loop.update(14400, 14400, 0, 1000, 20000, 9000, 100000) == 0  # settled: still 0


def test_an_overcurrent_cut_puts_u_below_the_output_from_a_high_duty():
    """Invariant (DEVELOPERS.md, buckloop.py): 3 % over the current limit u drops below the
    zero-current point (the output voltage) at once, also when last period's duty made more
    than the output from this bus (9000 x 15 V = 13.5 V over a 12.8 V store)."""
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 13500, 9000, 15000
    d = loop.update(12800, 14400, 1100, 1000, 15000, 9000, 100000)  # 10 % over the limit
    assert loop.u_mv < 12800 and d <= 6750


def test_after_an_off_for_no_headroom_the_start_waits_for_a_settled_bus():
    """Invariant (DEVELOPERS.md buck loop: the converter is off when even the top duty cannot
    reach the store, and it starts only on a bus that held still over the last period): a bus
    that jumps back up (a surge) does not start it in the same period; the next one, the bus
    held, does, from the zero-current point (u = the store's voltage)."""
    loop = BuckLoop()
    for _ in range(10):
        loop.update(13000, 14400, 0, 1000, 20000, 9000, 100000)
    assert loop.update(13000, 14400, 0, 1000, 13000, 9000, 100000) == 0  # no headroom: off
    assert loop.update(13000, 14400, 0, 1000, 20000, 9000, 100000) == 0  # jumped 7 V: waits
    assert loop.update(13000, 14400, 0, 1000, 20000, 9000, 100000) > 0  # held: starts
    assert 13000 <= loop.u_mv <= 13000 + 60  # from the output, one soft-start step at most


def test_the_current_loop_pulls_down_harder_than_it_raises():
    """Invariant (buckloop.py _KI_DIV / _KI_OVER_DIV: current error / 16 under the limit, / 4
    above it, so an overcurrent is cut within a period while the rise stays soft): for the same
    60 mA error about the aim (3 % under a 1 A limit), inside the 3 % cut band, u falls several
    times as far as it rises."""
    def u_step(out_ma):
        loop = BuckLoop()
        loop.u_mv, loop.duty, loop.bus_last_mv = 13000, 6500, 20000  # settled: 6500 x 20 V
        loop.update(12800, 16000, out_ma, 1000, 20000, 9000, 100000)
        return loop.u_mv - 13000

    aim_ma = 1000 - (1000 >> 5)
    rise, fall = u_step(aim_ma - 60), -u_step(aim_ma + 60)
    assert 0 < rise and 2 * rise < fall


def test_after_a_cut_no_current_even_if_the_bus_rises_twelve_percent():
    """Invariant (buckloop.py: after a cut the duty is set for no current even if the bus
    rises 12 % within the period): the cut's duty times a bus 12 % higher makes no more than
    the store's voltage, also when the quarter-duty cut alone would allow more."""
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 19000, 9500, 20000  # a store reconnected under a high u
    d = loop.update(12800, 14400, 1100, 1000, 20000, 9000, 100000)  # 10 % over: a cut
    assert d * (20000 * 112 // 100) // DUTY_MAX <= 12800


@pytest.mark.parametrize("over_pct10, cut", [(0, False), (20, False), (30, False), (32, True),
                                             (100, True)])
def test_the_cut_starts_three_percent_over_the_limit(over_pct10, cut):
    """Invariant (DEVELOPERS.md: 3 % over the current limit it drops below the zero-current
    point at once; below that the loop regulates and u stays within 0.3 V under the output,
    buckloop.py _UNDER_MV). over_pct10: the current over a 2 A limit, in 0.1 %."""
    lim_ma = 2000
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 13000, 6500, 20000
    loop.update(12800, 14400, lim_ma + lim_ma * over_pct10 // 1000, lim_ma, 20000, 9000, 100000)
    assert (loop.u_mv < 12800 - 300) == cut


@pytest.mark.parametrize("over_pct, off", [(40, False), (50, False), (51, True), (80, True)])
def test_half_again_over_the_limit_the_converter_is_off(over_pct, off):
    """Invariant (buckloop.py: half again over the limit is not a loop error but a source or
    store that moved: off, duty 0, and a start only once the bus has settled); below that it is
    a cut (duty down by a quarter), not off."""
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 13000, 6500, 20000
    d = loop.update(12800, 14400, 1000 + 10 * over_pct, 1000, 20000, 9000, 100000)
    assert (d == 0 and loop.u_mv == 0) == off
    assert d <= 6500 - 6500 // 4


# --- signals and the USB logic bound -----------------------------------------------------------
def test_d_plus_at_the_bottom_of_v_lgc_is_no_dcp():
    """Invariant (usbport.py, docs/profile.md dcp check): while the port is on the lines must
    stay below V_LGC's bottom, 0.8 V (V_LGC 0.8-2.0 V, BC1.2 ch. 5 DC table), on
    either line: D+ at 0.8 V with D- under it is no DCP."""
    assert classify(800, 799, 5000, 0, 8, 100) == M_NONE
    assert classify(799, 800, 5000, 0, 8, 100) == M_NONE
    assert classify(799, 799, 5000, 0, 8, 100) == M_DCP


def test_each_fault_is_its_own_bit_named_in_order():
    """Invariant (signals.py / signals_host.FAULT_NAMES: index i names fault bit 1 << i):
    every F_* code is one bit, the i-th, so several faults set at once stay apart and the
    names the host prints (replay, reports) are the right ones."""
    from controller import signals
    for i, name in enumerate(signals.FAULT_NAMES):
        assert getattr(signals, "F_" + name.upper()) == 1 << i, name
    b = running()  # and a tick's fault word decodes to the fault it met, alone
    b.sup.m.cell_mv[2] = b.p.cap_cell_rating_mv  # a cell at its rating
    c = b.run(1)
    assert [n for i, n in enumerate(signals.FAULT_NAMES) if c.fault >> i & 1] == ["cap_cell"]


def test_the_readings_hold_exactly_the_taps_a_profile_may_ask_for():
    """Invariant (profile_system.py: at most 12 cells with cell_taps, "the board senses 12
    taps"): Measurements hold 12 tap readings (signals.MAX_CELL_TAPS), no fewer and no more; a
    13-cell tapped bank is refused at load."""
    from controller import signals
    from controller.compat import ConfigError
    assert signals.MAX_CELL_TAPS == len(Measurements().cell_mv) == 12
    small = dict(supercap__cell_taps=True, supercap__cell_rating_v=2.3,  # clamp under 21 V
                 supercap__clamp_derate_pct=30, sensors__cap_full_scale_v=30)
    build(doc_with(supercap__cells=12, **small))
    with pytest.raises(ConfigError, match="cell_taps"):
        build(doc_with(supercap__cells=13, **small))


def test_the_soft_zone_dump_is_full_at_the_trip_however_narrow_the_zone():
    """Invariant (docs/profile.md ovp_recover_v: in the soft zone the dump comes in in
    proportion, "none here, full at the trip", and lets go by at most 5 % of full per period):
    with recovery only 1 mV under the trip (the profile allows any recovery below the trip),
    the bus at the trip asks for the full soft dump, so one period after a 50 ms latch clears
    the dump is still at 95 %."""
    p = build(doc_with(bus__ovp_trip_v=24.0, bus__ovp_recover_v=23.999, bus__ovp_hold_ms=50))
    assert p.ovp_trip_mv - p.ovp_recover_mv == 1
    g = OverVoltGuard(p)
    g.update(p.ovp_trip_mv, 50, 0, 0)
    assert g.tripped == 1 and g.dump == DUTY_MAX
    g.update(20000, 50, 50, 0)  # 50 ms below recovery: the latch clears
    assert g.tripped == 0 and g.dump == DUTY_MAX - DUTY_MAX // 20


def test_a_stopped_converter_restarts_at_its_ceiling_with_no_duty():
    """Invariant (buckloop.stop: a stopped converter is idle, duty 0; at or above the ceiling
    the duty never rises): after stop() (the supervisor's fault path) a store found at its
    ceiling gets no duty, whatever the duty was before the stop."""
    loop = BuckLoop()
    for _ in range(20):
        loop.update(13000, 14400, 0, 1000, 20000, 9000, 100000)
    assert loop.duty > 0
    loop.stop()
    assert loop.update(14400, 14400, 0, 1000, 20000, 9000, 100000) == 0


def test_a_stopped_converter_starts_on_a_bus_that_moved_less_than_settle():
    """Invariant (buckloop.py _SETTLE_MV: a stopped converter starts only on a bus that moved
    less than 0.3 V over the last period): a bus that moved 0.2 V has settled; it starts."""
    loop = BuckLoop()
    for _ in range(10):
        loop.update(13000, 14400, 0, 1000, 20000, 9000, 100000)
    assert loop.update(13000, 14400, 0, 1000, 13000, 9000, 100000) == 0  # no headroom: off
    assert loop.update(13000, 14400, 0, 1000, 19800, 9000, 100000) == 0  # jumped: waits
    assert loop.update(13000, 14400, 0, 1000, 20000, 9000, 100000) > 0  # moved 0.2 V: starts


def test_at_the_top_duty_u_is_no_higher_than_the_bus_can_make():
    """Invariant (buckloop.py anti-windup: at the top duty u is no higher than this bus can
    make, so a bus that jumps later restarts from the output instead of from a wound-up u):
    a store that keeps asking for more from a 15 V bus never winds u past 95 % of it."""
    loop = BuckLoop()
    top_mv = 15000 * 9500 // DUTY_MAX  # buckloop _DUTY_TOP: a buck cannot run at 100 %
    for _ in range(40):
        loop.update(13900, 14400, 0, 1000, 15000, 9000, 100000)
        assert loop.u_mv <= top_mv
    assert loop.duty == 9500


def test_on_a_rising_bus_the_duty_is_set_for_where_the_bus_is_going():
    """Invariant (DEVELOPERS.md: duty = u / bus, with one period's rise ahead when the bus is
    rising, so a bus freed of a load does not surge the output): after a 1 V rise the duty,
    applied to a bus another 1 V higher, makes no more than u."""
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 13000, 8667, 15000  # settled: 8667 x 15 V
    d = loop.update(12800, 14400, 500, 1000, 16000, 9000, 100000)
    assert d * 17000 // DUTY_MAX <= loop.u_mv
    assert d * 16000 // DUTY_MAX < loop.u_mv  # (and so less than u from today's bus)


def test_the_current_loop_aims_three_percent_under_the_limit():
    """Invariant (buckloop.py: aim 3 % under the limit, room for noise): a current 2 % under
    the limit is above the aim, so with voltage and bus out of the way u does not rise: it
    falls."""
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 13000, 6500, 20000  # settled: 6500 x 20 V
    loop.update(12800, 16000, 1960, 2000, 20000, 9000, 100000)
    assert loop.u_mv < 13000


# --- buckloop coast (fe7547e) --------------------------------------------------------------------
def _coasting_loop():
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 14000, 9000, 16000  # running
    return loop


def test_coast_holds_the_top_duty_up_to_the_limit_and_u_is_what_it_makes():
    """Invariant (buckloop.update coast: a running converter that runs out of headroom holds
    the top duty while it still carries current within its limit): at exactly the limit it
    still coasts, and u is then what the top duty makes from this bus (95 % of 15.5 V), as
    everywhere at the top duty (anti-windup)."""
    top_mv = 15500 * 9500 // DUTY_MAX  # 14725: under 14.5 V + 0.3 V of headroom
    for out_ma in (1000, 2000):
        loop = _coasting_loop()
        assert loop.update(14500, 16000, out_ma, 2000, 15500, 9000, 100000, 1) == 9500
        assert loop.u_mv == top_mv


def test_with_headroom_there_is_no_coast():
    """Invariant (buckloop.py _HEAD_MV: the top duty's output below output + 0.3 V is no
    headroom): with exactly 0.3 V of headroom (95 % of 16 V = 15.2 V over a 14.9 V store) the
    converter regulates as usual instead of coasting at the top duty."""
    loop = _coasting_loop()
    assert loop.update(14900, 16000, 1000, 2000, 16000, 9000, 100000, 1) < 9500


@pytest.mark.parametrize("store", ["cap_mv", "batt_mv"])
@pytest.mark.parametrize("store_mv, released", [(14700, False), (14699, True)])
def test_the_bus_latch_needs_the_bus_above_both_stores(store, store_mv, released):
    """Invariant (supervisor.py, the cross-check's release): while current flows the latch
    releases only on a bus reading more than 0.3 V above the bank and the battery alike
    (15.0 V: either store at 14.7 V keeps it, at 14.699 V lets it go)."""
    b = running()
    assert b.run(1, bus_mv=12000, cap_ma=0).fault & F_BUS_SENSOR
    c = b.run(1, bus_mv=15000, batt_ma=1000, cap_ma=0, **{store: store_mv})
    assert bool(c.fault & F_BUS_SENSOR) != released


@pytest.mark.parametrize("cap_ma, released", [(200, True), (201, False)])
def test_the_bus_latch_no_current_edge(cap_ma, released):
    """Invariant (supervisor.py, the cross-check's release): 'no current' is 0.2 A or less into
    each store (the cross-check's own threshold): with the reading moved from where it lied,
    0.2 A into the bank lets the latch go, 0.201 A keeps it."""
    b = running()
    assert b.run(1, bus_mv=12000, cap_ma=0).fault & F_BUS_SENSOR
    c = b.run(1, bus_mv=12500, batt_ma=200, cap_ma=cap_ma)
    assert bool(c.fault & F_BUS_SENSOR) != released


def test_the_bus_latch_holds_on_a_stuck_reading_below_0v():
    """Invariant (supervisor.py, the cross-check's release, its signed slot): a bus sensor
    stuck at a reading below 0 V keeps the latch even once no current flows, as a stuck
    reading above 0 V does (the reading has not moved from where it lied)."""
    b = running()
    assert b.run(1, bus_mv=-200, cap_ma=0).fault & F_BUS_SENSOR
    c = b.run(3, bus_mv=-200, batt_ma=0, cap_ma=0)
    assert c.fault & F_BUS_SENSOR
    c = b.run(1, bus_mv=-100, batt_ma=0, cap_ma=0)  # moved, no current: released
    assert not c.fault & F_BUS_SENSOR


# --- kills of the 2026-12-02 afternoon sample (another phase of --sample 4) -----------------
def test_the_tick_counter_counts_every_tick():
    """Invariant (supervisor.py: ticks, the telemetry count of ticks run, wrapping at 2**30
    back to 1): seven ticks count seven."""
    b = Bench(build(doc_with()), bus_mv=15000)
    n0 = b.sup.ticks
    b.run(7)
    assert b.sup.ticks == n0 + 7


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.integers(-1000, 16000), st.integers(12000, 15000),
                          st.integers(-3000, 4000), st.integers(-1000, 30000),
                          st.integers(0, 1), st.booleans()), min_size=1, max_size=40))
def test_the_loop_remembers_the_duty_and_bus_it_acted_on(steps):
    """Invariant (buckloop.py: the next period's limits, the feedforward's rise, the duty a
    cut lowers by a quarter, what last period's duty makes, are worked from the duty the loop
    last returned and the bus it last read): after every update the duty slot holds the duty
    returned and the bus slot the bus given; after stop() the loop is idle, u 0, duty 0."""
    loop = BuckLoop()
    for out_mv, ceil_mv, out_ma, bus_mv, coast, stop in steps:
        if stop:
            loop.stop()
            assert (loop.u_mv, loop.duty, loop.bus_last_mv) == (0, 0, 0)
            continue
        d = loop.update(out_mv, ceil_mv, out_ma, 2000, bus_mv, 9000, 100000, coast)
        assert loop.duty == d and loop.bus_last_mv == bus_mv


def test_every_absorption_gets_its_full_time():
    """Invariant (leadacid.py: entering a stage starts its timers from zero): after an
    absorption that ended on its maximum time, float, and a re-bulk, the next absorption runs
    its full time again (a timer carried over would end it at once)."""
    p = build(doc_with(battery__absorption_max_minutes=10, battery__tail_current_a=0.1))
    ch = LeadAcidCharger(p)
    m = Measurements()
    m.bus_mv, m.batt_ma, m.batt_temp_dc = 20000, 1000, p.ref_temp_dc
    at_v = ceiling_mv(p, ST_ABSORPTION, p.ref_temp_dc)

    def absorb_s():
        m.batt_mv = at_v
        ch.update(m, 1000, 9000)
        assert ch.stage == ST_ABSORPTION
        n = 1
        while ch.stage == ST_ABSORPTION:
            ch.update(m, 1000, 9000)
            n += 1
        assert ch.stage == ST_FLOAT
        return n

    m.batt_mv = 12600
    ch.update(m, 1000, 9000)
    assert ch.stage == ST_BULK
    first = absorb_s()
    assert first >= 600  # 10 minutes in 1 s ticks
    m.batt_mv = 12000  # under re-bulk, held: back to bulk
    while ch.stage != ST_BULK:
        ch.update(m, 1000, 9000)
    assert absorb_s() == first


def test_the_taper_at_the_aim_keeps_to_the_top_duty():
    """Invariants (buckloop.py, the coast's taper at or over the aim): the drive over the
    output halves each period, the duty slot holds the duty returned, and a wound-up u never
    takes the duty past the top duty (95 %): u is capped at what the top duty makes."""
    top_mv = 15500 * 9500 // DUTY_MAX  # 14725
    loop = _coasting_loop()  # u 14000
    d = loop.update(14500, 14400, 500, 2000, 15500, 9000, 100000, 1)
    assert loop.u_mv == (14000 + 14500) >> 1 and d == loop.u_mv * DUTY_MAX // 15500
    assert loop.duty == d
    loop = _coasting_loop()
    loop.u_mv = 16000  # wound up: half-way to the output is still over the top
    d = loop.update(14500, 14400, 500, 2000, 15500, 9000, 100000, 1)
    assert loop.u_mv == top_mv and d == 9500 and loop.duty == d


@pytest.mark.parametrize("out_ma, coasts", [(200, False), (250, False), (251, True)])
def test_under_its_aim_a_converter_coasts_only_above_an_eighth_of_its_limit(out_ma, coasts):
    """Invariant (buckloop.py, the coast: under the aim it needs more than lim / 8 of current,
    at or over the aim more than lim / 32): with no headroom left, a converter under its aim
    carrying 0.25 A of a 2 A limit or less stops; at 0.251 A it holds the top duty."""
    loop = _coasting_loop()
    d = loop.update(14500, 16000, out_ma, 2000, 15500, 9000, 100000, 1)
    assert (d == 9500) == coasts and (d == 0) != coasts


def test_a_cold_battery_at_its_capped_ceiling_leaves_bulk():
    """Invariant (leadacid.py: bulk ends 'at voltage', judged against the ceiling the charger
    regulates to, the compensated ceiling within its hard cap): at 5 C a 2.45 V/cell setpoint
    compensated by -5 mV/C/cell asks 15.30 V of six cells, over the 2.50 V/cell cap (15.00 V,
    docs/profile.md); a block held at 15.00 V is at voltage and goes to absorption (judged
    against the uncapped 15.30 V it would stay in bulk for ever)."""
    p = build(doc_with(battery__absorption_v_per_cell=2.45,
                       battery__temp_coeff_mv_per_c_per_cell=-5.0))
    ch = LeadAcidCharger(p)
    m = Measurements()
    m.bus_mv, m.batt_ma, m.batt_temp_dc = 20000, 1000, 50
    assert ceiling_mv(p, ST_ABSORPTION, 50) == 6 * 2500
    m.batt_mv = 6 * 2500
    ch.update(m, 50, 9000)
    assert ch.stage == ST_ABSORPTION


def _idle(loop):
    return (loop.u_mv, loop.duty, loop.bus_last_mv) == (0, 0, 0)


def _charging_battery():
    p = build(doc_with())
    ch = LeadAcidCharger(p)
    m = Measurements()
    m.bus_mv, m.batt_mv, m.batt_ma, m.batt_temp_dc = 20000, 12800, 1000, 250
    for _ in range(5):
        ch.update(m, 50, 9000)
    assert not _idle(ch.loop)
    return p, ch, m


def _charging_bank():
    p, k, m = clamp_bench()
    m.cap_mv, m.cap_ma = 10000, 500
    for _ in range(5):
        k.update(m, 9000)
    assert not _idle(k.loop)
    return p, k, m


def test_every_stop_leaves_the_converter_idle():
    """Invariant (buckloop.stop, written out wherever a charger stops its converter: 'loop.stop()
    written out'): a stopped converter is idle, u 0, duty 0, no bus remembered, so its restart
    starts at the zero-current point with a settled-bus check of its own. Checked for each
    stop: the battery charger's block(), a battery fault, the battery over its ceiling; the
    bank's block(), the bank at its clamp."""
    _, ch, _ = _charging_battery()
    ch.block()
    assert _idle(ch.loop)
    _, ch, m = _charging_battery()
    m.batt_temp_dc = -600  # an open thermistor: a fault
    ch.update(m, 50, 9000)
    assert ch.fault and _idle(ch.loop)
    p, ch, m = _charging_battery()
    m.batt_mv = ceiling_mv(p, ST_BULK, 250) + p.over_margin_mv + 1
    ch.update(m, 50, 9000)
    assert _idle(ch.loop)
    _, k, _ = _charging_bank()
    k.block()
    assert _idle(k.loop)
    p, k, m = _charging_bank()
    m.cap_mv = p.cap_clamp_mv
    k.update(m, 9000)
    assert _idle(k.loop)


def test_u_winds_at_most_0v3_below_the_output():
    """Invariant (buckloop.py _UNDER_MV: u never winds further below the output than 0.3 V while
    the current is within its limit): a ceiling far under the store asks the steepest fall,
    and u stops 0.3 V under the output."""
    loop = BuckLoop()
    loop.update(13000, 14400, 500, 2000, 20000, 9000, 100000)
    for _ in range(3):
        loop.update(13000, 8000, 500, 2000, 20000, 9000, 100000)
    assert loop.u_mv == 13000 - 300


def test_after_a_cut_the_duty_allows_for_a_bus_12_percent_higher():
    """Invariant (buckloop.py, the cut: u drops 0.5 V under the output, and the duty is worked
    for a bus 12.5 % higher, so no current flows even if the bus rises that much; the cut also
    lowers the duty by a quarter at least): from the top duty the feedforward is the lower:
    (13.0 - 0.5 V) / (16 V x 1.125) = 6,944."""
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 13500, 9500, 16000
    d = loop.update(13000, 14400, 2200, 2000, 16000, 9000, 100000)  # 10 % over: a cut
    assert d == 12500 * DUTY_MAX // (16000 + (16000 >> 3)) == 6944


def test_a_rise_from_a_bus_of_1mv_counts():
    """Invariant (overvolt.py: the soft zone judges a rising bus twice its last rise ahead;
    only a reading at or below 0 V is 'none'): a bus read at 1 mV and then at 20 V has risen
    20 V in a period; 60 V ahead, the soft zone puts the dump load fully on."""
    p = build(doc_with())
    g = OverVoltGuard(p)
    g.update(1, 50, 0, 0)
    g.update(20000, 50, 50, 0)
    assert g.dump == DUTY_MAX
