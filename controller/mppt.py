# Maximum power point tracking for wind and hydro drives: hill climbing (perturb and observe)
# on the bus setpoint. The converters already back off below their bus floor, so moving the
# floor moves the operating point along the machine's curve: a higher bus means a faster,
# less loaded rotor. Every interval the mean input power is compared with the last interval's;
# if it rose, keep stepping the same way, else turn round.
# Above overspeed_mv the dump load ramps in (storage full or a gust the storage cannot take);
# the overvoltage guard stays the hard backstop.
from array import array

from controller.compat import MICROPYTHON, const, micropython

if not MICROPYTHON:  # on a board the viper compiler reads ptr32() itself
    from controller.compat import ptr32, state_names

_DUTY_MAX = const(10000)  # signals.DUTY_MAX as a const (a machine int in viper)

_DUMP_RAMP_MV = const(1000)  # dump duty goes 0 -> full over this much bus above overspeed
# Fast attack, slow release: the dump follows a rising bus at once but falls by at most this
# much per period (full to off in 20 periods). A dump load that tracked the bus alone would
# make a limit cycle with the one-period delay: full dump drops the bus below overspeed, the
# dump lets go, the unloaded rotor lifts the bus past the trip within the next period.
_DUMP_RELEASE = const(500)
# Between attacks the dump integrates the bus error (a duty step of 1 per 4 mV per period), so a
# source with more power than the stores take settles at overspeed_mv under a steady dump. One
# that only attacked and let go by _DUMP_RELEASE sawed the bus by a quarter volt every few
# periods; each saw moved the battery converter's output (duty x bus, over 0.15 ohm) by about
# an amp, into its cut, and a micro-hydro's gel battery averaged 0.51 A in bulk against 1.2 A.
# (1 per mV sawed the bus too, slower: a 0.75 s swing with the rotor's speed)
_DUMP_KI_SHIFT = const(2)
# Power is summed in 10 mW units from 10 mV x 10 mA readings: at the sensors' largest full
# scales (100 V, 100 A) one tick adds at most 10**6, and an interval ends after at most
# _MAX_TICKS ticks, so the sum stays inside +-2**30 (a small int on a 32-bit board).
_MAX_TICKS = const(1000)


# state slots of HillClimb.st (array('i')); the host names them (end of file)
_SET_MV = const(0)  # set_mv: bus setpoint, mV
_DIR = const(1)  # dir: +1 raise the setpoint, -1 lower it (signed slot)
_N = const(2)  # n: ticks summed
_LAST_CW = const(3)  # last_cw: mean input power of the previous interval, 10 mW (signed slot)
_ELAPSED_MS = const(4)  # elapsed_ms: time in this interval, ms
_DUMP = const(5)  # dump: overspeed dump duty of the last period (0..DUTY_MAX)
_TOP_MV = const(6)  # top_mv: the setpoint stays below overspeed, mV
# profile slots of HillClimb.cfg (array('i'))
_C_FLOOR_MV = const(0)
_C_STEP_MV = const(1)  # mppt_step_mv
_C_INTERVAL_MS = const(2)  # mppt_interval_ms
_C_OVERSPEED_MV = const(3)  # 0: no overspeed dump
_S_HALF = const(0x20000000)  # sign restore of a ptr32 load (compat.py, viper state)
_S_MASK = const(0x3FFFFFFF)


class HillClimb:
    def __init__(self, p):
        self.p = p
        hi = p.overspeed_mv if p.overspeed_mv else p.ovp_recover_mv
        self.st = array("i", [p.floor_mv + 2 * p.mppt_step_mv, 1, 0, 0, 0, 0,
                              hi - p.mppt_step_mv])  # the state, slots above
        self.cfg = array("i", [p.floor_mv, p.mppt_step_mv, p.mppt_interval_ms, p.overspeed_mv])
        # input power summed over this interval, 10 mW x ticks: an attribute, not a slot,
        # because it may reach 10**9, past the +/-2**29 a signed slot reads back on a 64-bit
        # port (compat.py)
        self.acc_cw = 0

    @micropython.viper
    def update(self, bus_mv: int, in_ma: int, dt_ms: int) -> int:
        """Returns the bus setpoint (mV) for the converters' floor."""
        s = ptr32(self.st)
        cfg = ptr32(self.cfg)
        acc = int(self.acc_cw) + ((bus_mv // 10) * (in_ma // 10)) // 100
        n = s[_N] + 1
        elapsed = s[_ELAPSED_MS] + dt_ms
        self.acc_cw = acc
        s[_N] = n
        s[_ELAPSED_MS] = elapsed
        if elapsed >= cfg[_C_INTERVAL_MS] or n >= _MAX_TICKS:
            mean = acc // n
            direction = ((s[_DIR] + _S_HALF) & _S_MASK) - _S_HALF  # signed slot
            if mean < ((s[_LAST_CW] + _S_HALF) & _S_MASK) - _S_HALF:  # signed slot
                direction = -direction
            s[_LAST_CW] = mean
            self.acc_cw = 0
            s[_N] = 0
            s[_ELAPSED_MS] = 0
            set_mv = s[_SET_MV] + direction * cfg[_C_STEP_MV]
            if set_mv > s[_TOP_MV]:
                set_mv = s[_TOP_MV]
                direction = -1
            elif set_mv < cfg[_C_FLOOR_MV]:
                set_mv = cfg[_C_FLOOR_MV]
                direction = 1
            s[_DIR] = direction
            s[_SET_MV] = set_mv
        return s[_SET_MV]

    @micropython.viper
    def dump_duty(self, bus_mv: int) -> int:
        """Overspeed dump duty for this period (0 when overspeed is not set). Once in, it
        integrates the bus error over overspeed_mv (err >> _DUMP_KI_SHIFT per period, falling by
        at most _DUMP_RELEASE), and it never sits below the proportional attack: the bus above
        overspeed_mv over _DUMP_RAMP_MV."""
        o = ptr32(self.cfg)[_C_OVERSPEED_MV]
        if o == 0:
            return 0
        s = ptr32(self.st)
        err = bus_mv - o  # within +-2**17 (a bus full scale of at most 100 V)
        d = 0
        if err > 0:
            d = (err * _DUTY_MAX) // _DUMP_RAMP_MV
            if d > _DUTY_MAX:
                d = _DUTY_MAX
        held = s[_DUMP]
        if held:  # the integral, once the dump is in
            step = err >> _DUMP_KI_SHIFT
            if step < -_DUMP_RELEASE:
                step = -_DUMP_RELEASE
            held += step
            if held > _DUTY_MAX:
                held = _DUTY_MAX
        if d < held:
            d = held
        s[_DUMP] = d
        return d


if not MICROPYTHON:
    state_names(HillClimb, "st", set_mv=_SET_MV, dir=_DIR, n=_N, last_cw=_LAST_CW,
                elapsed_ms=_ELAPSED_MS, dump=_DUMP, top_mv=_TOP_MV)
