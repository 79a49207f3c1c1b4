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
from controller.compat import micropython
from controller.signals import F_CAP_CELL


class CapClamp:
    def __init__(self, p):
        self.p = p
        self.full = 0  # 1 after the clamp was reached, until the bank falls below the band
        self.fault = 0  # this tick's supercap fault bits
        self.bal_mask = 0  # bleeders on, bit i for cell i
        self.loop = BuckLoop()

    @micropython.native
    def block(self):
        self.loop.stop()
        self.bal_mask = 0
        return 0

    @micropython.native
    def update(self, m, floor_mv):
        """One tick. Returns the supercap converter duty."""
        p = self.p
        v = m.cap_mv
        cell_hot = self._balance(m) if m.n_taps else 0
        if not m.n_taps:
            self.bal_mask = 0
        clamp = p.cap_clamp_mv
        hyst = p.cap_hyst_mv
        full = self.full
        if v >= clamp:
            full = 1
        elif v < clamp - hyst:
            full = 0
        self.full = full
        self.fault = F_CAP_CELL if cell_hot else 0
        if full or cell_hot:
            self.loop.stop()
            return 0
        return self.loop.update(v, clamp - (hyst >> 1), m.cap_ma, p.cap_limit_ma, m.bus_mv,
                                floor_mv, v + p.cap_headroom_mv, 1)

    @micropython.native
    def _balance(self, m):
        """Set the bleeders; return 1 if any cell is at or above its rating."""
        p = self.p
        n = m.n_taps
        if not p.cap_taps or n == 0:
            self.bal_mask = 0
            return 0
        cells = m.cell_mv
        rating = p.cap_cell_rating_mv
        total = 0
        hot = 0
        for i in range(n):
            c = cells[i]
            total += c
            if c >= rating:
                hot = 1
        top = total // n + p.cap_bal_mv
        mask = 0
        for i in range(n):
            if cells[i] > top:
                mask |= 1 << i
        self.bal_mask = mask
        return hot
