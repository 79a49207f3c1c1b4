"""supercap: clamp with hysteresis, the headroom current limit, cell-tap balancing and the cell
rating."""
import pytest
from ctl_bench import build, doc_with

from controller.signals import DUTY_MAX, F_CAP_CELL, Measurements
from controller.supercap import CapClamp

FLOOR_MV = 9500


class Clamp:
    def __init__(self, **kw):
        self.p = build(doc_with(**kw))
        self.k = CapClamp(self.p)
        self.m = Measurements()
        self.m.bus_mv = 20000

    def step(self, n=1, **fields):
        for k, v in fields.items():
            setattr(self.m, k, v)
        d = 0
        for _ in range(n):
            d = self.k.update(self.m, FLOOR_MV)
            assert 0 <= d <= DUTY_MAX
        return d

    def taps(self, *cells_mv):
        self.m.n_taps = len(cells_mv)
        for i, v in enumerate(cells_mv):
            self.m.cell_mv[i] = v


def test_clamp_derated_below_the_bank_rating():
    # defaults: six 2.7 V cells (supercap makers' application notes: 2.7 V typical),
    # 10 % derate: 14.58 V
    c = Clamp()
    assert c.p.cap_clamp_mv == 14580 <= 6 * 2700
    assert build(doc_with(supercap__clamp_derate_pct=0)).cap_clamp_mv == 6 * 2700


def test_stops_at_the_clamp_and_restarts_below_the_hysteresis_band():
    c = Clamp()  # clamp 14.58 V, hysteresis 0.3 V
    assert c.step(5, cap_mv=14000) > 0
    assert c.step(cap_mv=14579) > 0
    assert c.step(cap_mv=14580) == 0 and c.k.full == 1
    for v in (14580, 14400, 14281, 14280, 14600, 14300):
        assert c.step(cap_mv=v) == 0  # within the band (and above it): stays off
    assert c.step(cap_mv=14279) > 0 and c.k.full == 0


def test_never_charges_at_or_above_the_clamp_whatever_the_history():
    c = Clamp()
    c.step(50, cap_mv=14200)
    for v in (14580, 15000, 19000):
        assert c.step(cap_mv=v) == 0


@pytest.mark.parametrize("bus_mv", [10500, 15000, 20000, 30000])
def test_headroom_limits_the_open_circuit_output_without_a_current_sensor(bus_mv):
    # a 0 V bank is a short circuit (README caution): with no current sensor (cap_ma 0) the
    # converter's output is held within limit x path resistance = 2 A x 0.25 ohm = 0.5 V of
    # the bank, so at most 2 A flows through the path (I = dV / R)
    c = Clamp()
    c.m.bus_mv = bus_mv
    v = 0
    for _ in range(400):
        d = c.step(cap_mv=v, cap_ma=0)
        out_mv = d * bus_mv // DUTY_MAX
        assert out_mv <= v + 500
        v += 25  # the bank charges
        if v >= 14000:
            break


def test_current_sensor_pulls_the_duty_down():
    c = Clamp()
    c.step(30, cap_mv=8000, cap_ma=500)
    d0 = c.step()
    assert c.step(3, cap_ma=3000) < d0  # limit 2 A


def test_bank_taps_ignored_without_cell_taps():
    c = Clamp()
    c.taps(2800, 2000, 2000, 2000, 2000, 2000)
    assert c.step(cap_mv=12000) > 0 and c.k.bal_mask == 0 and c.k.fault == 0


def test_balancing_bleeds_the_cells_above_the_mean():
    c = Clamp(supercap__cell_taps=True)  # threshold 40 mV
    c.taps(2000, 2041, 2000, 2000, 1990, 2100)  # mean 2021
    c.step(cap_mv=12131)
    assert c.k.bal_mask == (1 << 5)  # 2041 is 20 mV over the mean: no; 2100 is 79 mV: yes
    c.taps(2000, 2070, 2000, 2000, 1990, 2100)  # mean 2026: 2070 is 44 over
    c.step(cap_mv=12160)
    assert c.k.bal_mask == (1 << 1) | (1 << 5)
    c.taps(*[2200] * 6)
    c.step(cap_mv=13200)
    assert c.k.bal_mask == 0


def test_a_cell_at_its_rating_stops_charging():
    # a series bank can hold one cell over its rating while the bank is under its clamp
    # (supercap makers' balancing application notes)
    c = Clamp(supercap__cell_taps=True)
    c.taps(2699, 2300, 2300, 2300, 2300, 2300)
    assert c.step(cap_mv=14199) > 0 and c.k.fault == 0
    c.taps(2700, 2300, 2300, 2300, 2300, 2300)
    assert c.step(cap_mv=14200) == 0 and c.k.fault == F_CAP_CELL
    assert c.k.bal_mask & 1  # and its bleeder is on
    c.taps(2650, 2300, 2300, 2300, 2300, 2300)
    assert c.step(cap_mv=14150) > 0 and c.k.fault == 0


def test_block_turns_bleeders_off():
    c = Clamp(supercap__cell_taps=True)
    c.taps(2600, 2000, 2000, 2000, 2000, 2000)
    c.step(cap_mv=12600)
    assert c.k.bal_mask
    assert c.k.block() == 0 and c.k.bal_mask == 0
