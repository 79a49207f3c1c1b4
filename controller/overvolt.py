# Overvoltage guard. At or above the trip: dump load on, USB off, storage converters off, all
# in the same tick. The latch holds until the bus has stayed below the recovery level for the
# hold time. A trip that comes back again and again means the dump load cannot hold the
# source (a jammed furl, a wrong gear, a dump resistor gone open): after lockout_trips trips
# within trip_window the outputs stay off until reset_req (or a power cycle); the dump load
# keeps answering every trip meanwhile.
from controller.compat import const, micropython, ticks_diff
from controller.signals import DUTY_MAX

# When the latch clears the dump load steps down over ten periods instead of at once: a
# source that was held by the full dump would otherwise find an unloaded bus (the storage
# converters restart from zero) and overshoot the trip within one period.
_RELEASE_STEP = const(1000)
# Soft zone: between the recovery level and the trip the dump load comes in in proportion
# (none at recovery, full at the trip) at once, and lets go by at most _SOFT_RELEASE per period.
# A source the storage cannot take lifts the bus faster as the converters back off (a buck
# draws less input current from a higher bus: a negative resistance on a soft source); a strong
# rider took the bus from 19.5 V past the trip plus margin in two 20 ms periods. Loading it
# before the trip keeps the latch for what the soft zone cannot hold.
_SOFT_RELEASE = const(500)


class OverVoltGuard:
    def __init__(self, p):
        self.p = p
        self.tripped = 0  # 1 while latched after a trip
        self.locked = 0  # 1 after too many trips in the window, until reset
        self.below_ms = 0  # time the bus has stayed below the recovery level while latched, ms
        self.trip_at = [0] * p.lockout_trips  # ring of recent trip times (now_ms)
        self.n_trips = 0  # valid entries in trip_at (up to lockout_trips)
        self.next = 0  # ring index for the next trip
        self.last_ms = 0  # now_ms of the newest trip in trip_at
        self.trips_total = 0  # trips since start (telemetry)
        self.ramp = 0  # latch dump: full while latched, then stepping down by _RELEASE_STEP
        self.soft = 0  # soft-zone dump duty of the last period (0..DUTY_MAX)
        self.soft_span_mv = max(1, p.ovp_trip_mv - p.ovp_recover_mv)  # recovery to trip, mV
        self.dump = 0  # dump duty the guard asks for: the larger of ramp and soft

    @micropython.native
    def update(self, bus_mv, dt_ms, now_ms, reset_req):
        p = self.p
        if self.n_trips and ticks_diff(now_ms, self.last_ms) >= p.trip_window_ms:
            # the newest trip left the window, so did the older ones: forget them now, before
            # they age past ticks_diff's 2**29 ms and read as recent again
            self.n_trips = 0
        if bus_mv >= p.ovp_trip_mv:
            self.below_ms = 0
            if not self.tripped:
                self.tripped = 1
                self.trips_total += 1
                self._record(now_ms)
        elif self.tripped:
            if bus_mv < p.ovp_recover_mv:
                self.below_ms += dt_ms
                if self.below_ms >= p.ovp_hold_ms:
                    self.tripped = 0
                    self.below_ms = 0
            else:
                self.below_ms = 0
        if reset_req and self.locked and not self.tripped:
            self.locked = 0
            self.n_trips = 0
        ramp = self.ramp
        if self.tripped:
            ramp = DUTY_MAX
        elif ramp > _RELEASE_STEP:
            ramp -= _RELEASE_STEP
        else:
            ramp = 0
        self.ramp = ramp
        soft = 0
        over = bus_mv - p.ovp_recover_mv
        span = self.soft_span_mv
        if over >= span:
            soft = DUTY_MAX
        elif over > 0:
            soft = (over * DUTY_MAX) // span  # over < span < 60 V: stays a small int
        held = self.soft - _SOFT_RELEASE
        if soft < held:
            soft = held
        self.soft = soft
        self.dump = ramp if ramp > soft else soft

    @micropython.native
    def _record(self, now_ms):
        p = self.p
        self.trip_at[self.next] = now_ms
        self.last_ms = now_ms
        self.next += 1
        if self.next >= p.lockout_trips:
            self.next = 0
        if self.n_trips < p.lockout_trips:
            self.n_trips += 1
        if self.n_trips < p.lockout_trips:
            return
        recent = 0
        for i in range(p.lockout_trips):
            if ticks_diff(now_ms, self.trip_at[i]) < p.trip_window_ms:
                recent += 1
        if recent >= p.lockout_trips:
            self.locked = 1
