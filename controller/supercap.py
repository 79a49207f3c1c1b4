# Supercap clamp: charge the bank up to the clamp (a derating below its rating) with a current
# limit, stop at the clamp, restart only below clamp - hysteresis; never charge at or above it.
# The regulator aims half the hysteresis below the clamp, so the charge current tapers off
# instead of stopping dead at the clamp (a sudden load step on the bus upsets the battery's
# converter); the clamp itself stays the hard stop.
# A bank at 0 V is a short circuit: the current limit comes from the current sensor where the
# board has one, and from u <= bank + limit x path resistance always, so it holds without one.
# With cell taps, a cell above the cell mean by the threshold gets its bleeder, and any cell
# at or above its rating stops charging (F_CAP_CELL).
from controller.buckloop import BuckLoop
from controller.signals import F_CAP_CELL


class CapClamp:
    def __init__(self, p):
        self.p = p
        self.full = 0  # 1 after the clamp was reached, until the bank falls below the band
        self.fault = 0  # this tick's supercap fault bits
        self.bal_mask = 0  # bleeders on, bit i for cell i
        self.loop = BuckLoop()

    def block(self):
        self.loop.stop()
        self.bal_mask = 0
        return 0

    def update(self, m, floor_mv):
        """One tick. Returns the supercap converter duty."""
        p = self.p
        self.fault = 0
        v = m.cap_mv
        cell_hot = self._balance(m)
        if v >= p.cap_clamp_mv:
            self.full = 1
        elif v < p.cap_clamp_mv - p.cap_hyst_mv:
            self.full = 0
        if cell_hot:
            self.fault = F_CAP_CELL
        if self.full or cell_hot:
            self.loop.stop()
            return 0
        return self.loop.update(v, p.cap_clamp_mv - (p.cap_hyst_mv >> 1), m.cap_ma, p.cap_limit_ma,
                                m.bus_mv, floor_mv, v + p.cap_headroom_mv)

    def _balance(self, m):
        """Set the bleeders; return 1 if any cell is at or above its rating."""
        p = self.p
        n = m.n_taps
        if not p.cap_taps or n == 0:
            self.bal_mask = 0
            return 0
        total = 0
        hot = 0
        for i in range(n):
            c = m.cell_mv[i]
            total += c
            if c >= p.cap_cell_rating_mv:
                hot = 1
        mean = total // n
        mask = 0
        for i in range(n):
            if m.cell_mv[i] > mean + p.cap_bal_mv:
                mask |= 1 << i
        self.bal_mask = mask
        return hot
