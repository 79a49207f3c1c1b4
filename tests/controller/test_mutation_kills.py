"""Tests written for mutants that survived the mutation run (docs/mutation.md,
python -m host_sim.mutation). Each test names the invariant it proves; a mutant survived
because no test stated it. Where a number comes from outside the controller, its source is
beside it."""
import pytest
from ctl_bench import Bench, build, doc_with
from ctl_props import Limits

from controller.buckloop import BuckLoop
from controller.leadacid import ceiling_mv
from controller.leadacid import LeadAcidCharger
from controller.mppt import HillClimb
from controller.signals import (
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
    board's D+ probe on (V_DP_SRC 0.5-0.7 V, BC1.2 1.4.2; D- follows above V_DAT_REF's top,
    0.4 V, BC1.2 1.4.4; check-values.md), so the probe command must be on before the port
    closes; a 2.7 V / 2.7 V divider port (check-values.md) reports its match code."""
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
    """Invariant (leadacid.py _TEMP_HYST_DC): after leaving the charging window, charging
    resumes only 1.0 C back inside it, so a noisy sensor at the edge does not switch the
    charger (and the load on the drive) on and off every tick."""
    p = build(doc_with())
    ch = LeadAcidCharger(p)
    m = Measurements()
    m.bus_mv, m.batt_mv, m.batt_ma = 15000, 12800, 500
    for t_dc, blocked in ((250, False), (p.temp_max_dc + 1, True), (p.temp_max_dc - 5, True),
                          (p.temp_max_dc - 10, False), (p.temp_min_dc - 1, True),
                          (p.temp_min_dc + 9, True), (p.temp_min_dc + 10, False)):
        m.batt_temp_dc = t_dc
        ch.update(m, 50, 9000)
        assert bool(ch.fault & F_TEMP_WINDOW) == blocked == bool(ch.blocked), t_dc


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
