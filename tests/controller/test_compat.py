"""compat: the wrapping millisecond clock, const, to_int rounding."""
import pytest

from controller import compat
from controller.compat import TICKS_MASK, TICKS_PERIOD, ticks_add, ticks_diff, to_int


def test_period_is_the_32_bit_small_int_range():
    # DEVELOPERS.md: boards wrap ticks_ms() at 2**30, the small-int range on 32-bit ports
    assert TICKS_PERIOD == 2 ** 30
    assert TICKS_MASK == 2 ** 30 - 1


@pytest.mark.parametrize("a_ms, b_ms, want_ms", [
    (5, 3, 2),
    (3, 5, -2),
    (0, TICKS_MASK, 1),  # one ms across the wrap
    (TICKS_MASK, 0, -1),
    (100, TICKS_PERIOD - 900, 1000),  # a second across the wrap
    (TICKS_PERIOD - 900, 100, -1000),
    (2 ** 29 - 1, 0, 2 ** 29 - 1),  # the largest forward difference
    (0, 2 ** 29, -2 ** 29),  # half the period reads as the largest backward difference
])
def test_ticks_diff_signed_across_the_wrap(a_ms, b_ms, want_ms):
    assert ticks_diff(a_ms, b_ms) == want_ms


def test_ticks_diff_matches_unwrapped_time_everywhere_near_the_wrap():
    # any two times less than 2**29 ms apart, masked to the clock, give their true difference
    for t0 in (0, 1, TICKS_PERIOD - 5000, TICKS_PERIOD - 1, 2 ** 29, 3 * 2 ** 28):
        for delta in (0, 1, 49, 50, 999, 4000, 86_400_000, 2 ** 29 - 1):
            a = (t0 + delta) & TICKS_MASK
            b = t0 & TICKS_MASK
            assert ticks_diff(a, b) == delta
            assert ticks_diff(b, a) == -delta


def test_ticks_add_wraps():
    assert ticks_add(TICKS_MASK, 1) == 0
    assert ticks_add(TICKS_PERIOD - 10, 25) == 15
    assert ticks_add(5, -10) == TICKS_PERIOD - 5
    assert ticks_diff(ticks_add(TICKS_PERIOD - 3, 7), TICKS_PERIOD - 3) == 7


def test_const_is_identity_on_cpython():
    assert compat.const(12345) == 12345
    assert compat.MICROPYTHON is False


@pytest.mark.parametrize("value, scale, want", [
    (2.42, 1000, 2420),
    (2.27, 1000, 2270),
    (-4.0, 100, -400),
    (0.0005, 1000, 1),  # half rounds away from zero ...
    (-0.0005, 1000, -1),  # ... on both sides
    (0.0004, 1000, 0),
    (13.4, 1000, 13400),
    (0.1, 10, 1),
])
def test_to_int_rounds_half_away_from_zero(value, scale, want):
    assert to_int(value, scale) == want


def test_config_error_is_a_value_error():
    assert issubclass(compat.ConfigError, ValueError)


# --- viper state: consts repeated across modules, and the host's slot names --------------------
def _repeated_consts():
    """(module, private name, the value it repeats) for every const a tick module repeats from
    another module (viper code sees a const as a machine int, an imported name as an object)."""
    from controller import (buckloop, leadacid, mppt, overvolt, signals, supercap, supervisor,
                            usbport)
    out = []
    for mod in (buckloop, leadacid, mppt, overvolt, supercap, supervisor, usbport):
        for name in ("DUTY_MAX", "ST_BLOCKED", "ST_BULK", "ST_ABSORPTION", "ST_FLOAT",
                     "ST_EQUALIZE", "F_OVP", "F_OVP_LOCKOUT", "F_BUS_SENSOR", "F_BATT_SENSOR",
                     "F_TEMP_SENSOR", "F_CAP_SENSOR", "F_USB_SENSOR", "F_BATT_ABSENT",
                     "F_BATT_REVERSED", "F_TEMP_WINDOW", "F_BATT_OVER", "F_CAP_CELL",
                     "F_USB_LINES"):
            if hasattr(mod, "_" + name):
                out.append((mod.__name__, "_" + name, getattr(signals, name)))
    for mod in (leadacid, supercap):  # the buck loop's slots, written out where it is stopped
        out += [(mod.__name__, "_L_U", buckloop._U), (mod.__name__, "_L_DUTY", buckloop._DUTY),
                (mod.__name__, "_L_BUS_LAST", buckloop._BUS_LAST)]
    out.append(("controller.supervisor", "_L_DUTY", buckloop._DUTY))  # the battery's loop
    parts = {"_OVP_": overvolt, "_USB_": usbport, "_CH_": leadacid, "_CAP_": supercap,
             "_MPPT_": mppt}
    for name in dir(supervisor):
        for prefix, mod in parts.items():
            if name.startswith(prefix) and name != "_CAP_FLOOR_MV":
                out.append(("controller.supervisor", name, getattr(mod, "_" + name[len(prefix):])))
    out.append(("controller.supervisor", "_TICKS_MASK", compat.TICKS_MASK))
    out.append(("controller.overvolt", "_TICKS_MASK", compat.TICKS_MASK))
    return out


@pytest.mark.parametrize("module, name, value", _repeated_consts())
def test_every_repeated_const_equals_its_source(module, name, value):
    import importlib
    assert getattr(importlib.import_module(module), name) == value


@pytest.mark.parametrize("value", [-(2 ** 29), -123456, -1, 0, 1, 2 ** 29 - 1])
def test_the_sign_restore_idiom_reads_back_a_zero_extended_slot(value):
    # a ptr32 load on a 64-bit port zero-extends; the idiom restores the sign (compat.py)
    half, mask = 0x20000000, 0x3FFFFFFF
    for loaded in (value, value & 0xFFFFFFFF):  # a 32-bit board's load, a 64-bit port's
        assert ((loaded + half) & mask) - half == value


def test_each_named_state_slot_has_its_own_place():
    """Invariant (compat.state_names, the viper slots): within one array no two names share a
    slot, so no part's state overwrites another's (a slot constant moved by one would)."""
    from controller import (buckloop, leadacid, mppt, overvolt, supercap,  # noqa: F401
                            supervisor, usbport)
    from controller.compat import SLOT_NAMES
    assert len(SLOT_NAMES) >= 8
    for (cls, buf), slots in SLOT_NAMES.items():
        where = sorted(slots.values())
        assert len(set(where)) == len(where) and where[0] >= 0, (cls, buf, slots)
