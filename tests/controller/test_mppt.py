"""mppt: hill climbing on the bus setpoint, and the overspeed dump ramp."""
from ctl_bench import build, doc_with

from controller.mppt import HillClimb
from controller.signals import DUTY_MAX


def hill(**kw):
    p = build(doc_with(control__mppt=True, control__mppt_step_v=0.5,
                       control__mppt_interval_ms=100, **kw))
    return p, HillClimb(p)


def interval(h, bus_mv, in_ma, n=2, dt_ms=50):
    s = None
    for _ in range(n):
        s = h.update(bus_mv, in_ma, dt_ms)
    return s


def test_starts_two_steps_above_the_floor_and_climbs_while_power_rises():
    _, h = hill()  # floor 9 V, step 0.5 V
    assert h.set_mv == 10000
    assert interval(h, 12000, 1000) == 10500  # more power than before (none): keep going up
    assert interval(h, 12000, 1100) == 11000
    assert interval(h, 12000, 1200) == 11500


def test_turns_round_when_power_falls():
    _, h = hill()
    interval(h, 12000, 1000)
    interval(h, 12000, 1100)  # 11.0 V
    assert interval(h, 12000, 900) == 10500  # less power: step back down
    assert interval(h, 12000, 800) == 11000  # less again: turn round again


def test_setpoint_stays_between_the_floor_and_below_recovery_or_overspeed():
    p, h = hill()
    for k in range(200):  # ever more power: climbs to the top and is turned back there
        s = interval(h, 15000, 1000 + 10 * k)
        assert p.floor_mv <= s <= p.ovp_recover_mv - p.mppt_step_mv
    p, h = hill(control__overspeed_bus_v=18)
    for k in range(200):
        s = interval(h, 15000, 1000 - 3 * k)  # ever less power: walks both ways, never out
        assert p.floor_mv <= s <= 18000 - 500


def test_overspeed_dump_ramp():
    # the dump load ramps in over 1 V above overspeed_bus_v (docs/profile.md, control)
    _, h = hill(control__overspeed_bus_v=20)
    assert h.dump_duty(20000) == 0
    assert h.dump_duty(20001) == DUTY_MAX // 1000  # 1 mV of the 1000 mV ramp
    assert h.dump_duty(20250) == DUTY_MAX // 4
    assert h.dump_duty(21000) == DUTY_MAX
    assert h.dump_duty(23000) == DUTY_MAX
    _, h = hill()
    assert h.dump_duty(23999) == 0  # no overspeed level: the guard alone
