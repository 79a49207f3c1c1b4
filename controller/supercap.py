# Supercap clamp: charge the bank up to the clamp (a derating below its rating) with a current
# limit, stop at the clamp, restart only below clamp - hysteresis; never charge at or above it.
# The regulator aims half the hysteresis below the clamp, so the charge current tapers off
# instead of stopping dead at the clamp (a sudden load step on the bus upsets the battery's
# converter); the clamp itself stays the hard stop.
# A bank at 0 V is a short circuit: the current limit comes from the current sensor where the
# board has one, and from u <= bank + limit x path resistance always, so it holds without one.
# With cell taps, a cell above the cell mean by the threshold gets its bleeder, and any cell
# at or above its rating stops charging (F_CAP_CELL).
from array import array

from controller.buckloop import BuckLoop, regulate
from controller.compat import MICROPYTHON, const, micropython

if not MICROPYTHON:  # on a board the viper compiler reads ptr32() itself
    from controller.compat import ptr32, state_names

_F_CAP_CELL = const(2048)  # signals.F_CAP_CELL as a const (a machine int in viper)
# state slots of CapClamp.st (array('i')); the host names them (end of file)
_FULL = const(0)  # full: 1 after the clamp was reached, until the bank falls below the band
_FAULT = const(1)  # fault: this tick's supercap fault bits
_BAL_MASK = const(2)  # bal_mask: bleeders on, bit i for cell i
# profile slots of CapClamp.cfg (array('i'))
_C_CLAMP_MV = const(0)
_C_HYST_MV = const(1)
_C_LIMIT_MA = const(2)
_C_HEADROOM_MV = const(3)
_C_TAPS = const(4)  # 1: the board senses each cell and drives bleeders
_C_RATING_MV = const(5)  # cell rating, mV
_C_BAL_MV = const(6)
_L_U = const(0)  # the slots of BuckLoop.st (buckloop._U, _DUTY, _BUS_LAST)
_L_DUTY = const(1)
_L_BUS_LAST = const(2)


class CapClamp:
    def __init__(self, p):
        self.p = p
        self.st = array("i", [0, 0, 0])  # full, fault, bal_mask (slots above)
        self.cfg = array("i", [p.cap_clamp_mv, p.cap_hyst_mv, p.cap_limit_ma, p.cap_headroom_mv,
                               1 if p.cap_taps else 0, p.cap_cell_rating_mv, p.cap_bal_mv])
        self.loop = BuckLoop()

    @micropython.viper
    def block(self) -> int:
        ls = ptr32(self.loop.st)  # loop.stop(), written out
        ls[_L_U] = 0
        ls[_L_DUTY] = 0
        ls[_L_BUS_LAST] = 0
        s = ptr32(self.st)
        s[_BAL_MASK] = 0
        return 0

    @micropython.viper
    def update(self, m, floor_mv: int) -> int:
        """One tick. Returns the supercap converter duty."""
        s = ptr32(self.st)
        cfg = ptr32(self.cfg)
        v = int(m.cap_mv)
        cell_hot = 0
        if int(m.n_taps):
            cell_hot = int(self._balance(m))
        else:
            s[_BAL_MASK] = 0
        clamp = cfg[_C_CLAMP_MV]
        hyst = cfg[_C_HYST_MV]
        full = s[_FULL]
        if v >= clamp:
            full = 1
        elif v < clamp - hyst:
            full = 0
        s[_FULL] = full
        s[_FAULT] = _F_CAP_CELL if cell_hot else 0
        loop = self.loop.st
        if full or cell_hot:
            ls = ptr32(loop)  # loop.stop(), written out
            ls[_L_U] = 0
            ls[_L_DUTY] = 0
            ls[_L_BUS_LAST] = 0
            return 0
        return int(regulate(loop, v, clamp - (hyst >> 1), int(m.cap_ma), cfg[_C_LIMIT_MA],
                            int(m.bus_mv), floor_mv, v + cfg[_C_HEADROOM_MV], 1))

    @micropython.viper
    def _balance(self, m) -> int:
        """Set the bleeders; return 1 if any cell is at or above its rating."""
        s = ptr32(self.st)
        cfg = ptr32(self.cfg)
        n = int(m.n_taps)
        if not cfg[_C_TAPS] or n == 0:
            s[_BAL_MASK] = 0
            return 0
        cells = m.cell_mv
        rating = cfg[_C_RATING_MV]
        total = 0
        hot = 0
        for i in range(n):
            c = int(cells[i])
            total += c
            if c >= rating:
                hot = 1
        top = total // n + cfg[_C_BAL_MV]  # n > 0 here
        mask = 0
        for i in range(n):
            if int(cells[i]) > top:
                mask |= 1 << i
        s[_BAL_MASK] = mask
        return hot


if not MICROPYTHON:
    state_names(CapClamp, "st", full=_FULL, fault=_FAULT, bal_mask=_BAL_MASK)
