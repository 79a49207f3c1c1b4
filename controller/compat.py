# The one place where CPython and MicroPython differ for the controller.
# Everything else imports const, ticks_diff and ConfigError from here.
import sys

try:
    import micropython  # the compiler reads @micropython.native itself; nothing runs at call
    from micropython import const
except ImportError:  # CPython: the code emitters are MicroPython's; here they change nothing
    def const(x):
        return x

    class micropython:  # noqa: N801 (stands in for the module of that name)
        @staticmethod
        def native(f):
            return f

        @staticmethod
        def viper(f):
            return f

    def ptr32(buf):
        """CPython stand-in for viper's ptr32(buf): the array itself (indexing is the same).
        On a board the viper compiler reads ptr32() itself, so modules import this name only
        on CPython."""
        return buf

MICROPYTHON = sys.implementation.name == "micropython"

# Viper state (DEVELOPERS.md: the cost model): the tick's objects keep their state and their profile
# numbers in array('i') buffers, read and written in @micropython.viper code through ptr32()
# as machine loads and stores instead of dictionary look-ups. On a 64-bit port a ptr32 load
# is zero-extended, so a slot that can hold a negative value is read back with the wrap
# idiom ((x + _S_HALF) & _S_MASK) - _S_HALF, exact for values within +/-2**29 on any word
# size (the constants are small ints: viper rejects larger literals). Viper ints are machine
# words: every intermediate stays within +/-2**30 anyway (DEVELOPERS.md), so a 32-bit board and
# CPython agree. Viper's // and % floor as Python's do (checked on the unix port).

# Millisecond clock period. Boards wrap ticks_ms() at 2**30 (the small-int range on 32-bit
# ports); the firmware entry and every host runner mask now_ms to this period so the same
# wrap-around is exercised everywhere.
TICKS_PERIOD = const(0x40000000)
TICKS_MASK = const(0x3FFFFFFF)
_TICKS_HALF = const(0x20000000)


@micropython.native
def ticks_add(t_ms, delta_ms):
    """now + delta on the wrapping clock (same rule as time.ticks_add)."""
    return (t_ms + delta_ms) & TICKS_MASK


@micropython.native
def ticks_diff(a_ms, b_ms):
    """Signed a - b on the wrapping clock, valid while |a - b| < 2**29 ms (about 6 days)."""
    return ((a_ms - b_ms + _TICKS_HALF) & TICKS_MASK) - _TICKS_HALF


class ConfigError(ValueError):
    """A profile or board file is wrong. The message names the field, the value and what is
    allowed; raised only at load time, never inside the tick."""


def to_int(value, scale):
    """Round a loaded float (volts, amps, seconds ...) to integer units (mV, mA, ms ...).
    Rounds half away from zero so single-precision boards and CPython agree."""
    x = value * scale
    if x >= 0:
        return int(x + 0.5)
    return -int(-x + 0.5)


if not MICROPYTHON:
    SLOT_NAMES = {}  # (class name, buffer) -> {name: slot}: what state_names gave (tests)

    def state_names(cls, buf, **slots):
        """Host only: make each named slot of the array attribute buf of cls readable and
        settable as an attribute of that name (the tests and host tools read the state by
        name; a board spends no RAM on the names)."""
        SLOT_NAMES.setdefault((cls.__name__, buf), {}).update(slots)
        for name, i in slots.items():
            setattr(cls, name, property(
                lambda self, i=i: getattr(self, buf)[i],
                lambda self, v, i=i: getattr(self, buf).__setitem__(i, v)))
