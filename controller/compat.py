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

MICROPYTHON = sys.implementation.name == "micropython"

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
