# Maximum power point tracking for wind and hydro drives: hill climbing (perturb and observe)
# on the bus setpoint. The converters already back off below their bus floor, so moving the
# floor moves the operating point along the machine's curve: a higher bus means a faster,
# less loaded rotor. Every interval the mean input power is compared with the last interval's;
# if it rose, keep stepping the same way, else turn round.
# Above overspeed_mv the dump load ramps in (storage full or a gust the storage cannot take);
# the overvoltage guard stays the hard backstop.
from controller.compat import const, micropython
from controller.signals import DUTY_MAX

_DUMP_RAMP_MV = const(1000)  # dump duty goes 0 -> full over this much bus above overspeed
# Fast attack, slow release: the dump follows a rising bus at once but falls by at most this
# much per period (full to off in 20 periods). A dump load that tracked the bus alone would
# make a limit cycle with the one-period delay: full dump drops the bus below overspeed, the
# dump lets go, the unloaded rotor lifts the bus past the trip within the next period.
_DUMP_RELEASE = const(500)
# Power is summed in 10 mW units from 10 mV x 10 mA readings: at the sensors' largest full
# scales (100 V, 100 A) one tick adds at most 10**6, and an interval ends after at most
# _MAX_TICKS ticks, so the sum stays inside +-2**30 (a small int on a 32-bit board).
_MAX_TICKS = const(1000)


class HillClimb:
    def __init__(self, p):
        self.p = p
        self.set_mv = p.floor_mv + 2 * p.mppt_step_mv  # bus setpoint, mV
        self.dir = 1  # +1 raise the setpoint, -1 lower it
        self.acc_cw = 0  # input power summed over this interval, 10 mW x ticks
        self.n = 0  # ticks summed
        self.last_cw = 0  # mean input power of the previous interval, 10 mW
        self.elapsed_ms = 0  # time in this interval, ms
        self.dump = 0  # overspeed dump duty of the last period (0..DUTY_MAX)
        hi = p.overspeed_mv if p.overspeed_mv else p.ovp_recover_mv
        self.top_mv = hi - p.mppt_step_mv  # the setpoint stays below overspeed

    @micropython.native
    def update(self, bus_mv, in_ma, dt_ms):
        """Returns the bus setpoint (mV) for the converters' floor."""
        p = self.p
        acc = self.acc_cw + ((bus_mv // 10) * (in_ma // 10)) // 100
        n = self.n + 1
        elapsed = self.elapsed_ms + dt_ms
        self.acc_cw = acc
        self.n = n
        self.elapsed_ms = elapsed
        if elapsed >= p.mppt_interval_ms or n >= _MAX_TICKS:
            mean = acc // n
            if mean < self.last_cw:
                self.dir = -self.dir
            self.last_cw = mean
            self.acc_cw = 0
            self.n = 0
            self.elapsed_ms = 0
            s = self.set_mv + self.dir * p.mppt_step_mv
            if s > self.top_mv:
                s = self.top_mv
                self.dir = -1
            elif s < p.floor_mv:
                s = p.floor_mv
                self.dir = 1
            self.set_mv = s
        return self.set_mv

    @micropython.native
    def dump_duty(self, bus_mv):
        """Overspeed dump duty for this period (0 when overspeed is not set): in proportion to
        the bus above overspeed_mv over _DUMP_RAMP_MV, and never below last period's less
        _DUMP_RELEASE."""
        o = self.p.overspeed_mv
        if o == 0:
            return 0
        d = 0
        if bus_mv > o:
            d = ((bus_mv - o) * DUTY_MAX) // _DUMP_RAMP_MV
            if d > DUTY_MAX:
                d = DUTY_MAX
        held = self.dump - _DUMP_RELEASE
        if d < held:
            d = held
        self.dump = d
        return d
