"""compat: the wrapping millisecond clock, const, to_int rounding."""
import pytest

from controller import compat
from controller.compat import TICKS_MASK, TICKS_PERIOD, ticks_add, ticks_diff, to_int


def test_period_is_the_32_bit_small_int_range():
    # GUIDE §2: boards wrap ticks_ms() at 2**30, the small-int range on 32-bit ports
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
