"""buckloop: the regulator shared by the two buck converters."""
import pytest

from controller import buckloop
from controller.buckloop import BuckLoop
from controller.signals import DUTY_MAX

BIG_MV = 100000
STEP_UP_MV = buckloop._STEP_UP_MV  # the soft-start step per tick (module constant)


def out_mv(duty, bus_mv):
    """Open-circuit converter output for a duty (averaged buck: duty x input)."""
    return duty * bus_mv // DUTY_MAX


def quantum_mv(bus_mv):
    """Output change that duty rounding alone can make: two duty steps at this bus, mV."""
    return 2 * bus_mv // DUTY_MAX + 1


def test_starts_at_the_zero_current_point_and_rises_softly():
    b = BuckLoop()
    d = b.update(12000, 14400, 0, 2000, 18000, 9000, BIG_MV)
    assert abs(out_mv(d, 18000) - 12000 - STEP_UP_MV) <= 2
    last = out_mv(d, 18000)
    for _ in range(20):
        now = out_mv(b.update(12000, 14400, 0, 2000, 18000, 9000, BIG_MV), 18000)
        assert 0 < now - last <= STEP_UP_MV + quantum_mv(18000)
        last = now


def test_never_rises_at_or_above_the_ceiling():
    b = BuckLoop()
    for _ in range(30):
        b.update(13000, 14400, 500, 2000, 18000, 9000, BIG_MV)
    last = b.duty
    for bus_mv in (18000, 17000, 15000, 22000, 14500):  # a falling bus must not raise it either
        d = b.update(14400, 14400, 500, 2000, bus_mv, 9000, BIG_MV)
        assert d <= last
        last = d


def running_loop():
    b = BuckLoop()
    for _ in range(30):
        b.update(13000, 14400, 500, 2000, 18000, 9000, BIG_MV)
    assert b.duty > 0
    return b


def test_current_over_the_limit_pulls_down():
    b = running_loop()
    u0, d0 = b.u_mv, b.duty
    d = b.update(13000, 14400, 2400, 2000, 18000, 9000, BIG_MV)  # 20 % over the limit
    assert b.u_mv < u0 and d < d0


def test_bus_under_the_floor_pulls_down():
    """A bus under its floor pulls u down and never lets it rise, to the floor under the
    output (_UNDER_MV) at most."""
    b = running_loop()
    u0 = b.u_mv
    b.update(13000, 14400, 500, 2000, 15000, 16000, BIG_MV)  # the generator sags
    assert b.u_mv < u0
    for _ in range(3):
        u0 = b.u_mv
        b.update(13000, 14400, 500, 2000, 15000, 16000, BIG_MV)
        assert 13000 - buckloop._UNDER_MV <= b.u_mv <= u0


def test_u_follows_what_a_falling_bus_delivered():
    """Regression (closed loop, a crank whose bus stopped falling): on a falling bus the duty
    delivers less than u; u may stay above what last period's duty makes from this bus by no
    more than the current headroom over an 0.125 ohm path, so a bus that stops falling cannot
    hand the battery a wound-up u (it took it 11 % over its limit for two periods)."""
    b = running_loop()
    for bus_mv in range(18000, 15000, -200):  # falling 0.2 V a period, current near the limit
        d_prev = b.duty
        b.update(13000, 14400, 1900, 2000, bus_mv, 9000, BIG_MV)
        made = d_prev * bus_mv // DUTY_MAX
        assert b.u_mv <= made + (2000 - 1900) // 8 + STEP_UP_MV


def test_never_winds_far_below_the_output_within_the_current_limit():
    # a bus under its floor (14 V against a 15 V floor) pulls u down, but within the current
    # limit never further than _UNDER_MV below the output, so the converter resumes near the
    # zero-current point
    b = BuckLoop()
    b.update(13000, 14400, 500, 2000, 18000, 15000, BIG_MV)
    for _ in range(200):
        d = b.update(13000, 14400, 500, 2000, 14000, 15000, BIG_MV)
    assert b.u_mv == 13000 - buckloop._UNDER_MV
    assert out_mv(d, 14000) >= 13000 - buckloop._UNDER_MV - quantum_mv(14000)


def test_duty_limits():
    b = BuckLoop()
    for _ in range(200):
        d = b.update(13000, 30000, 0, 2000, 13500, 0, BIG_MV)
        assert 0 <= d <= buckloop._DUTY_TOP  # a buck keeps its switch's off-time
    assert b.update(13000, 14400, 0, 2000, 0, 9000, BIG_MV) == 0
    assert b.update(13000, 14400, 0, 2000, -300, 9000, BIG_MV) == 0


def test_u_cap_holds_the_output_near_the_load():
    b = BuckLoop()
    for _ in range(100):
        d = b.update(0, 14000, 0, 2000, 20000, 9000, 500)
        assert out_mv(d, 20000) <= 500


def test_a_bus_jump_after_a_weak_stretch_does_not_jump_the_output():
    """Regression (integrator wind-up): with the bus barely above the battery the duty sits at
    its top and u kept climbing (to 74.5 V after 100 s). When the bus then jumped with a gust
    the converter went straight to 95 % duty, 19 V open-circuit into a 12.5 V battery, and the
    current error took over a second to pull it back. The module promises the opposite: 'a bus
    that jumps with a gust ... does not jump the charge current'. After the jump the output
    may drive current into the battery only as the soft start allows: k ticks after the jump
    its open-circuit output is at most (k + 1) soft-start steps above the battery."""
    b = BuckLoop()
    for _ in range(2000):  # 100 s at 50 ms: bus 12.9 V, battery 12.5 V, no current flows
        b.update(12500, 14520, 0, 2400, 12900, 9000, BIG_MV)
    # 95 % of 12.9 V cannot reach the battery: no headroom, so the converter is off rather
    # than parked at its top duty (buckloop._HEAD_MV)
    assert b.duty == 0
    for k in range(12):
        d = b.update(12500, 14520, 0, 2400, 20000, 9000, BIG_MV)
        assert out_mv(d, 20000) <= 12500 + (k + 1) * STEP_UP_MV + quantum_mv(20000)


def test_a_bus_jump_after_saturating_with_headroom_does_not_jump_the_output():
    """Regression (integrator wind-up, the case the headroom stop leaves): the bus has headroom
    (95 % of 14 V is 13.3 V, over the 12.5 V battery) but the current reading stays at 0 (a
    battery that will not take charge, a sensor stuck low), so the duty sits at its top for
    100 s. When the bus jumps to 20 V the output may rise from what the converter was giving
    before the jump only as the soft start allows, not to 95 % of the new bus."""
    b = BuckLoop()
    for _ in range(2000):
        b.update(12500, 14520, 0, 2400, 14000, 9000, BIG_MV)
    assert b.duty == buckloop._DUTY_TOP
    before_mv = out_mv(b.duty, 14000)
    for k in range(12):
        d = b.update(12500, 14520, 0, 2400, 20000, 9000, BIG_MV)
        assert out_mv(d, 20000) <= before_mv + (k + 1) * STEP_UP_MV + quantum_mv(20000)


def test_a_supercap_loop_out_of_headroom_coasts_at_the_top_duty():
    """Invariant (buckloop.py, coast): a running supercap converter whose bus sags below its
    headroom while it still carries current holds the top duty, so its current falls with the
    bus instead of stepping off (a load step lifts a soft source's bus within a period); it
    stops once the bus cannot make the store's voltage. The battery's converter (coast 0)
    stops at once: its current limit is a safety limit."""
    for coast, want in ((1, buckloop._DUTY_TOP), (0, 0)):
        b = BuckLoop()
        for _ in range(40):
            b.update(13000, 14400, 1500, 2000, 18000, 9000, BIG_MV, coast)
        assert b.duty > 0
        # bus 13.9 V: top duty makes 13.2 V, under the store + 0.3 V headroom, current 1.2 A
        assert b.update(13000, 14400, 1200, 2000, 13900, 9000, BIG_MV, coast) == want
    b = BuckLoop()
    for _ in range(40):
        b.update(13000, 14400, 1500, 2000, 18000, 9000, BIG_MV, 1)
    assert b.update(13000, 14400, 1200, 2000, 13500, 9000, BIG_MV, 1) == 0  # 12.8 V < store
    assert b.update(13000, 14400, 100, 2000, 13900, 9000, BIG_MV, 1) == 0  # stopped: stays off


def test_regression_crank_cap_out_of_headroom_holds_the_current_limit():
    """Regression (fuzz seed 23, example 486): a crank's supercap converter ran out of headroom
    and stepped off carrying current; the bus jumped 15 -> 26 V in two periods and the battery
    converter, set for the lower bus, went 3.08 A against a 2.64 A limit for two periods."""
    from pathlib import Path

    from host_sim import runner
    from host_sim.scenario import load_scenario
    path = Path(__file__).resolve().parents[1] / "plant" / "regressions" / \
        "crank_cap_runs_out_of_headroom.json"
    res = runner.run(load_scenario(str(path)), progress=False)
    assert res.limits["batt_current"].held, res.limits["batt_current"].as_dict()


def test_at_or_over_the_aim_out_of_headroom_it_tapers_then_stops():
    """Invariant (buckloop.py, coast): at or over the store's aim, out of headroom while it
    still carries current, the converter neither holds the top duty (that would run a bank
    into its clamp at full current) nor stops at once (a 0.5 A step lifted a soft source's bus
    5 V in a period): each period the drive over the output halves (u = (u + out) / 2, never
    above what the top duty makes), and it stops once the current is at most lim / 32."""
    b = BuckLoop()
    for _ in range(40):
        b.update(14300, 14400, 1500, 2000, 18000, 9000, BIG_MV, 1)
    bus_mv = 15300  # top duty makes 14.535 V: under the store 14.4 V + 0.3 V headroom
    top_mv = bus_mv * buckloop._DUTY_TOP // DUTY_MAX
    # just under the aim it coasts at the top duty
    assert b.update(14300, 14400, 1200, 2000, bus_mv, 9000, BIG_MV, 1) == buckloop._DUTY_TOP
    assert b.u_mv == top_mv
    d = buckloop._DUTY_TOP
    drive_mv = [top_mv - 14400]
    for ma in (1200, 600, 300, 120):
        u_want = (min(b.u_mv, top_mv) + 14400) // 2
        d_next = b.update(14400, 14400, ma, 2000, bus_mv, 9000, BIG_MV, 1)
        assert b.u_mv == u_want and d_next == u_want * DUTY_MAX // bus_mv
        assert d_next < d
        drive_mv.append(b.u_mv - 14400)
        d = d_next
    assert drive_mv == sorted(drive_mv, reverse=True) and drive_mv[-1] >= 0
    assert d < buckloop._DUTY_TOP
    # at lim / 32 (62 mA) or less it stops, and stays off
    assert b.update(14400, 14400, 2000 >> 5, 2000, bus_mv, 9000, BIG_MV, 1) == 0
    assert b.update(14400, 14400, 0, 2000, bus_mv, 9000, BIG_MV, 1) == 0
    # the battery's converter (coast 0) does not taper: it stops at once
    b = BuckLoop()
    for _ in range(40):
        b.update(13000, 14400, 1500, 2000, 18000, 9000, BIG_MV, 0)
    assert b.update(14400, 14400, 1200, 2000, bus_mv, 9000, BIG_MV, 0) == 0


def test_regression_crank_cap_at_its_aim_tapers_off():
    """Regression (fuzz seed 29, example 1842): a crank's supercap reached its aim with no
    headroom while carrying 0.5 A and stepped off at once; the bus rose 15.3 -> 20.5 V in a
    period and the battery went to 2.77 A against 2.64 A (the limit plus 10 %) for two
    periods. Invariant: with the taper the battery current holds its limit."""
    from pathlib import Path

    from host_sim import runner
    from host_sim.scenario import load_scenario
    path = Path(__file__).resolve().parents[1] / "plant" / "regressions" / \
        "crank_cap_steps_off_at_its_aim.json"
    res = runner.run(load_scenario(str(path)), progress=False)
    assert res.limits["batt_current"].held, res.limits["batt_current"].as_dict()


def test_on_a_rising_bus_the_duty_is_set_for_twice_the_last_rise_ahead():
    """Invariant (buckloop.py, feedforward): on a bus that rose since the last period, a store at
    its current aim gets u over the bus plus twice that rise, so the output does not pass u
    unless the bus rises faster than it did; on a steady bus it is u over the bus."""
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 15000, 5000, 30000  # settled: 5000 x 30 V = 15 V
    d = loop.update(14000, 14400, 969, 1000, 30000, 9000, BIG_MV)  # steady bus, at its aim
    assert d == loop.u_mv * DUTY_MAX // 30000
    d = loop.update(14000, 14400, 969, 1000, 31000, 9000, BIG_MV)  # rose 1 V
    assert d == loop.u_mv * DUTY_MAX // 33000
    assert out_mv(d, 33000) <= loop.u_mv  # even if it rises 2 V more


def test_on_a_rising_bus_a_store_with_room_takes_the_rise_up_to_its_room():
    """Invariant (buckloop.py, feedforward): a store under its current aim (lim - lim/32) on a
    rising bus gets a duty whose output at twice the rise ahead is u plus its room over
    0.125 ohm ((aim - current) / 8 mV), never more than u over this bus: the current rises
    towards the limit instead of falling as the bus rises (a wind machine's bus ran
    15.9 -> 20.2 V in seven periods with its battery falling from 11.5 to 8.4 A of 12 A)."""
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 15000, 5000, 30000
    loop.update(14000, 14400, 500, 1000, 30000, 9000, BIG_MV)  # steady
    d = loop.update(14000, 14400, 500, 1000, 31000, 9000, BIG_MV)  # rose 1 V, room 58 mV
    room = (1000 - (1000 >> 5) - 500) >> 3
    assert d == min((loop.u_mv + room) * DUTY_MAX // 33000, loop.u_mv * DUTY_MAX // 31000)
    assert d > loop.u_mv * DUTY_MAX // 33000
    assert out_mv(d, 33000) <= loop.u_mv + room
    # a large room is capped at u over this bus
    loop.u_mv, loop.duty, loop.bus_last_mv = 15000, 5000, 30000
    d = loop.update(14000, 14400, 0, 30000, 30300, 9000, BIG_MV)
    assert d <= loop.u_mv * DUTY_MAX // 30300


def test_regression_crank_bus_runs_up_after_a_cut():
    """Regression (fuzz seed 43, example 489): after a trip a noise-triggered current cut took
    load off a strong crank; its bus ran up 14.1 -> 15.2 -> 17.7 -> 23.4 V, faster each period,
    and the battery's converter, set for one period's rise ahead, went 3.56 and 3.22 A against
    2.64 A (the limit plus 10 %) for two periods. Invariant: the battery current holds."""
    from pathlib import Path

    from host_sim import runner
    from host_sim.scenario import load_scenario
    path = Path(__file__).resolve().parents[1] / "plant" / "regressions" / \
        "crank_bus_runs_up_after_a_cut.json"
    res = runner.run(load_scenario(str(path)), progress=False)
    assert res.limits["batt_current"].held, res.limits["batt_current"].as_dict()


@pytest.mark.parametrize("bus_mv, off", [(30900, False), (31000, True)])
def test_over_the_limit_on_a_bus_running_up_the_converter_stops(bus_mv, off):
    """Invariant (buckloop.py, off): more than lim/32 over the current limit on a bus that rose
    more than 1/32 of itself in a period (a surge, a soft source freed of a load) the converter
    stops at once and waits for the bus to settle; on a slower rise it cuts as before."""
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 15000, 5000, 30000
    d = loop.update(13000, 14400, 1100, 1000, bus_mv, 9000, BIG_MV)  # 10 % over
    assert (d == 0) == off
    if not off:
        assert 0 < d <= 5000 - (5000 >> 2)  # the cut: a quarter off at least


def test_regression_a_surge_runs_a_weak_bus_up():
    """Regression (fuzz seed 47, example 2057; three more like it): a 27.5 V surge behind
    3 ohm on a weak source's 13.3 V bus; each cut of the battery's current let the bus run
    further (14.1 -> 18.6 -> 26.5 V) and the battery went 3.51 then 2.84 A against 2.64 A.
    Invariant: the battery current holds."""
    from pathlib import Path

    from host_sim import runner
    from host_sim.scenario import load_scenario
    path = Path(__file__).resolve().parents[1] / "plant" / "regressions" / \
        "surge_runs_a_weak_bus_up.json"
    res = runner.run(load_scenario(str(path)), progress=False)
    assert res.limits["batt_current"].held, res.limits["batt_current"].as_dict()


@pytest.mark.parametrize("bus_mv", [0, 1, -200, -480])
def test_a_bus_read_at_or_below_0v_stops_the_converter(bus_mv):
    """Invariant (buckloop.py, off): a bus read at or below 0 V (a stopped source, a sensor
    offset) has nothing to convert: duty 0, never negative, and no division by zero whatever
    the store reads (the golden check found a bank read at -0.4 V over a 0 mV bus dividing by
    zero, and a bus read below 0 V giving a negative duty)."""
    for cap_mv in (-500, -400, -300, 0, 1000):
        b = BuckLoop()
        for last_bus_mv in (bus_mv - 300, bus_mv, bus_mv + 300):
            b.update(cap_mv, 14400, 0, 1000, last_bus_mv, 9000, BIG_MV, 1)
        assert b.update(cap_mv, 14400, 900, 1000, bus_mv, 9000, BIG_MV, 1) == 0
        assert b.duty == 0


def test_the_tick_raises_nothing_on_a_dead_bus_under_a_bank_read_below_0v():
    """Regression (golden check, viper merge): a fresh supervisor reading a 0 mV bus and a
    bank at -0.4 V (inside its plausible range) raised ZeroDivisionError in the tick."""
    from ctl_bench import Bench, build, doc_with
    b = Bench(build(doc_with()), bus_mv=0, cap_mv=-400, cap_ma=0)
    c = b.run(3)
    assert c.cap_duty == 0 and c.batt_duty == 0


def test_a_cut_on_a_steady_bus_sets_the_duty_for_a_bus_an_eighth_higher_and_a_quarter_down():
    """Invariant (buckloop.py, the cut): more than lim/32 over the limit on a steady bus, u goes
    0.5 V under the output and the duty is u over the bus plus an eighth, and at least a
    quarter under last period's."""
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 15000, 5000, 30000
    d = loop.update(13000, 14400, 1100, 1000, 30000, 9000, BIG_MV)
    assert loop.u_mv == 12500
    assert d == min(12500 * DUTY_MAX // (30000 + 30000 // 8), 5000 - 5000 // 4)
    loop.u_mv, loop.duty, loop.bus_last_mv = 15000, 3000, 30000
    d = loop.update(13000, 14400, 1100, 1000, 30000, 9000, BIG_MV)
    assert d == 3000 - 3000 // 4  # 12.5 V over 33.75 V would be more: the quarter binds


@pytest.mark.parametrize("out_ma, bus_mv, off", [
    (1031, 31000, False),  # exactly lim/32 over, bus up 1 V: a cut, not off
    (1032, 30967, False),  # over, bus up by exactly 30967 / 32 (967 mV): a cut
    (1032, 30968, True),  # over, bus up by more than bus / 32: off
])
def test_the_running_up_edges(out_ma, bus_mv, off):
    """Invariant (buckloop.py, off): off needs both more than lim/32 over the limit and a bus
    that rose more than bus/32 (3.1 %) in the period."""
    loop = BuckLoop()
    loop.u_mv, loop.duty, loop.bus_last_mv = 15000, 5000, 30000
    d = loop.update(13000, 14400, out_ma, 1000, bus_mv, 9000, BIG_MV)
    assert (d == 0) == off
