# Overvoltage guard. At or above the trip: dump load on, USB off, storage converters off, all
# in the same tick. The latch holds until the bus has stayed below the recovery level for the
# hold time. A trip that comes back again and again means the dump load cannot hold the
# source (a jammed furl, a wrong gear, a dump resistor gone open): after lockout_trips trips
# within trip_window the outputs stay off until reset_req (or a power cycle); the dump load
# keeps answering every trip meanwhile.
from array import array

from controller.compat import MICROPYTHON, const, micropython

if not MICROPYTHON:  # on a board the viper compiler reads ptr32() itself
    from controller.compat import ptr32, state_names

_DUTY_MAX = const(10000)  # signals.DUTY_MAX as a const (a machine int in viper)
_TICKS_HALF = const(0x20000000)  # compat.ticks_diff, written out
_TICKS_MASK = const(0x3FFFFFFF)

# When the latch clears the dump load steps down over ten periods instead of at once: a
# source that was held by the full dump would otherwise find an unloaded bus (the storage
# converters restart from zero) and overshoot the trip within one period.
_RELEASE_STEP = const(1000)
# Soft zone: between the recovery level and the trip the dump load comes in in proportion
# (none at recovery, full at the trip) at once, and lets go by at most _SOFT_RELEASE per period.
# A source the storage cannot take lifts the bus faster as the converters back off (a buck
# draws less input current from a higher bus: a negative resistance on a soft source); a strong
# rider took the bus from 19.5 V past the trip plus margin in two 20 ms periods. Loading it
# before the trip keeps the latch for what the soft zone cannot hold. On a rising bus the zone
# reads where the bus may be a period on (twice the last rise ahead, as the buck loop's
# feedforward does): a crank freed of its loads went 17.6 -> 21.0 -> 28.2 V, from the bottom
# of the zone past the trip plus margin in one period.
_SOFT_RELEASE = const(500)
# That reading ahead is for a bus running up: one that rose more than 1/64 of itself in a
# period. On a steady bus the zone is its top eighth only: a pedal rig whose EMF at cadence sat
# above recovery had the soft zone on through normal charging, taking 29 % of the rider's
# input that the rider need not have given (a human drive eases off on an unloaded bus).
_RISE_SHIFT = const(6)
# And not while the supervisor sets _NO_AHEAD (from the last period): (a) a battery in bulk
# under its limit with its converter running takes a rising bus itself. A wind machine's gusts
# lifted its bus 18 -> 20 V with the battery at 2-8 A of 12 A; the look-ahead dumped, the bus
# fell under the battery converter's duty and the battery lost its current: 8 % of the input
# went to the dump (keeping the look-ahead inside the zone still left 4.9 %). The zone's top
# eighth, the trip and the overspeed dump still hold such a bus. (b) The stores made the rise
# (the bus was not above them and the source gives no current): at power-up the stores lift
# the bus from 0 V, and the look-ahead read that as a run-up and drew 22 A from a battery
# through a 0.4 ohm dump for a second on a still day.


# state slots of OverVoltGuard.st (array('i'), all >= 0); the host names them (end of file)
_TRIPPED = const(0)  # tripped: 1 while latched after a trip
_LOCKED = const(1)  # locked: 1 after too many trips in the window, until reset
_BELOW_MS = const(2)  # below_ms: time the bus has stayed below the recovery level while
# latched, ms
_N_TRIPS = const(3)  # n_trips: valid entries in trip_at (up to lockout_trips)
_NEXT = const(4)  # next: ring index for the next trip
_LAST_MS = const(5)  # last_ms: now_ms of the newest trip in trip_at
_TRIPS_TOTAL = const(6)  # trips_total: trips since start (telemetry)
_RAMP = const(7)  # ramp: latch dump: full while latched, then stepping down by _RELEASE_STEP
_SOFT = const(8)  # soft: soft-zone dump duty of the last period (0..DUTY_MAX)
_DUMP = const(9)  # dump: dump duty the guard asks for: the larger of ramp and soft
_BUS_LAST = const(10)  # bus_last_mv: the bus given last period, mV (0 for one below 0 V)
_NO_AHEAD = const(11)  # no_ahead: 1 when this period's rise is not to be read ahead (set by
# the supervisor: a store has room for it, or the stores made it)
# profile slots of OverVoltGuard.cfg (array('i'))
_C_TRIP_MV = const(0)
_C_RECOVER_MV = const(1)
_C_HOLD_MS = const(2)
_C_WINDOW_MS = const(3)
_C_LOCKOUT_TRIPS = const(4)
_C_SOFT_SPAN_MV = const(5)  # soft_span_mv: recovery to trip, mV (at least 1)
_C_STEADY_SPAN_MV = const(6)  # steady_span_mv: the zone's top eighth, mV (at least 1)


class OverVoltGuard:
    def __init__(self, p):
        self.p = p
        self.st = array("i", [0] * 12)  # the state, slots above
        self.trip_at = array("i", [0] * p.lockout_trips)  # ring of recent trip times (now_ms)
        self.cfg = array("i", [p.ovp_trip_mv, p.ovp_recover_mv, p.ovp_hold_ms, p.trip_window_ms,
                               p.lockout_trips, max(1, p.ovp_trip_mv - p.ovp_recover_mv),
                               max(1, (p.ovp_trip_mv - p.ovp_recover_mv) >> 3)])

    @micropython.viper
    def update(self, bus_mv: int, dt_ms: int, now_ms: int, reset_req: int):
        s = ptr32(self.st)
        cfg = ptr32(self.cfg)
        if s[_N_TRIPS]:
            since_ms = ((now_ms - s[_LAST_MS] + _TICKS_HALF) & _TICKS_MASK) - _TICKS_HALF
            if since_ms >= cfg[_C_WINDOW_MS]:
                # the newest trip left the window, so did the older ones: forget them now,
                # before they age past ticks_diff's 2**29 ms and read as recent again
                s[_N_TRIPS] = 0
        tripped = s[_TRIPPED]
        if bus_mv >= cfg[_C_TRIP_MV]:
            s[_BELOW_MS] = 0
            if not tripped:
                tripped = 1
                s[_TRIPPED] = 1
                s[_TRIPS_TOTAL] += 1
                self._record(now_ms)
        elif tripped:
            if bus_mv < cfg[_C_RECOVER_MV]:
                below = s[_BELOW_MS] + dt_ms
                s[_BELOW_MS] = below
                if below >= cfg[_C_HOLD_MS]:
                    tripped = 0
                    s[_TRIPPED] = 0
                    s[_BELOW_MS] = 0
            else:
                s[_BELOW_MS] = 0
        if reset_req and s[_LOCKED] and not tripped:
            s[_LOCKED] = 0
            s[_N_TRIPS] = 0
        ramp = s[_RAMP]
        if tripped:
            ramp = _DUTY_MAX
        elif ramp > _RELEASE_STEP:
            ramp -= _RELEASE_STEP
        else:
            ramp = 0
        s[_RAMP] = ramp
        soft = 0
        last = s[_BUS_LAST]
        s[_BUS_LAST] = bus_mv if bus_mv > 0 else 0
        if last and bus_mv - last > bus_mv >> _RISE_SHIFT and not s[_NO_AHEAD]:
            # running up: where the bus may be a period on, over the whole zone
            span = cfg[_C_SOFT_SPAN_MV]
            over = bus_mv + ((bus_mv - last) << 1) - cfg[_C_RECOVER_MV]
        else:
            # steady: only the zone's top (a bus parked under the trip is a source the stores
            # and loads are full of; the dump would load it for nothing)
            span = cfg[_C_STEADY_SPAN_MV]
            over = bus_mv - cfg[_C_TRIP_MV] + span
        if over >= span:
            soft = _DUTY_MAX
        elif over > 0:
            soft = (over * _DUTY_MAX) // span  # over < span < 60 V: stays a small int
        held = s[_SOFT] - _SOFT_RELEASE
        if soft < held:
            soft = held
        s[_SOFT] = soft
        s[_DUMP] = ramp if ramp > soft else soft

    @micropython.viper
    def forget_rise(self):
        """Read no rise into or out of this period's bus value: the supervisor calls it around
        update() when that value is a stand-in for a suspect reading (only then, so the
        common tick pays nothing for it)."""
        s = ptr32(self.st)
        s[_BUS_LAST] = 0

    @micropython.viper
    def _record(self, now_ms: int):
        s = ptr32(self.st)
        cfg = ptr32(self.cfg)
        trip_at = ptr32(self.trip_at)
        n_max = cfg[_C_LOCKOUT_TRIPS]
        # times are read modulo the clock period only: masked, a caller's unmasked clock fits
        trip_at[s[_NEXT]] = now_ms & _TICKS_MASK
        s[_LAST_MS] = now_ms & _TICKS_MASK
        s[_NEXT] += 1
        if s[_NEXT] >= n_max:
            s[_NEXT] = 0
        if s[_N_TRIPS] < n_max:
            s[_N_TRIPS] += 1
        if s[_N_TRIPS] < n_max:
            return
        recent = 0
        window = cfg[_C_WINDOW_MS]
        for i in range(n_max):
            if ((now_ms - trip_at[i] + _TICKS_HALF) & _TICKS_MASK) - _TICKS_HALF < window:
                recent += 1
        if recent >= n_max:
            s[_LOCKED] = 1


if not MICROPYTHON:
    state_names(OverVoltGuard, "st", tripped=_TRIPPED, locked=_LOCKED, below_ms=_BELOW_MS,
                n_trips=_N_TRIPS, next=_NEXT, last_ms=_LAST_MS, trips_total=_TRIPS_TOTAL,
                ramp=_RAMP, soft=_SOFT, dump=_DUMP, bus_last_mv=_BUS_LAST, no_ahead=_NO_AHEAD)
    state_names(OverVoltGuard, "cfg", soft_span_mv=_C_SOFT_SPAN_MV,
                steady_span_mv=_C_STEADY_SPAN_MV)
