# Lead-acid charger: bulk, absorption, float and (flooded only, on request) equalize, with
# temperature-compensated setpoints and a charging temperature window.
#
# Missing or implausible temperature: we choose "no charging" (the first of the two
# conservative options) and raise F_TEMP_SENSOR. A lead-acid battery left uncharged for a
# while is harmed far less than one overcharged hot with no compensation.
from controller.buckloop import BuckLoop
from controller.compat import MICROPYTHON, const, micropython
from controller.signals import (
    F_BATT_ABSENT, F_BATT_OVER, F_BATT_REVERSED, F_TEMP_SENSOR, F_TEMP_WINDOW,
    ST_ABSORPTION, ST_BULK, ST_EQUALIZE, ST_FLOAT,
)

_TEMP_MIN_PLAUSIBLE_DC = const(-400)  # an open NTC reads colder than this
_TEMP_MAX_PLAUSIBLE_DC = const(850)  # a shorted NTC reads hotter than this
_TEMP_HYST_DC = const(10)  # charging resumes 1.0 C inside the window (a noisy sensor at the
# edge would otherwise switch the charger, and the load on the drive, on and off every tick)
_REVERSED_MV = const(-200)  # a battery further negative than this is connected backwards
_BIG_MV = const(100000)
if not MICROPYTHON:  # the host's names for the plausible range (private on the board: no RAM)
    TEMP_MIN_PLAUSIBLE_DC = _TEMP_MIN_PLAUSIBLE_DC
    TEMP_MAX_PLAUSIBLE_DC = _TEMP_MAX_PLAUSIBLE_DC


@micropython.native
def comp_mv(p, cell_mv, temp_dc):
    """Block setpoint for a per-cell voltage at a battery temperature, compensated by the
    profile's coefficient; the temperature is clamped to the charging window first.
    Integer: cells x (cell_mv + tc_uv_dc x dT / 1000)."""
    if temp_dc < p.temp_min_dc:
        temp_dc = p.temp_min_dc
    elif temp_dc > p.temp_max_dc:
        temp_dc = p.temp_max_dc
    n = p.cells
    return n * cell_mv + (n * p.tc_uv_dc_cell * (temp_dc - p.ref_temp_dc)) // 1000


# Hard caps on the compensated setpoints, mV per cell: cold-battery compensation may not
# carry a setpoint past the caps that bound the profile itself (profile_battery.py).
_CAP_ABS_CELL_MV = const(2500)
_CAP_EQ_CELL_MV = const(2600)
_CAP_FLOAT_CELL_MV = const(2350)


@micropython.native
def ceiling_mv(p, stage, temp_dc):
    """The stage's compensated voltage ceiling for the block, mV, within the hard caps.
    (comp_mv written out here: the tick calls this once or twice, and a call costs more on a
    board than the arithmetic.)"""
    if temp_dc < p.temp_min_dc:
        temp_dc = p.temp_min_dc
    elif temp_dc > p.temp_max_dc:
        temp_dc = p.temp_max_dc
    n = p.cells
    if stage == ST_ABSORPTION or stage == ST_BULK:
        v = n * p.abs_cell_mv
        top = n * _CAP_ABS_CELL_MV
    elif stage == ST_EQUALIZE:
        v = n * p.eq_cell_mv
        top = n * _CAP_EQ_CELL_MV
    else:
        v = n * p.float_cell_mv
        top = n * _CAP_FLOAT_CELL_MV
    v += (n * p.tc_uv_dc_cell * (temp_dc - p.ref_temp_dc)) // 1000
    return top if v > top else v


class LeadAcidCharger:
    def __init__(self, p):
        self.p = p
        self.stage = ST_BULK  # charging stage (not ST_BLOCKED: blocking is reported apart)
        self.blocked = 1  # 1 while charging is forbidden this tick
        self.fault = 0  # this tick's battery fault bits
        self.ceil_mv = 0  # this tick's compensated ceiling, mV
        self.abs_ms = 0  # time spent charging in absorption, ms
        self.tail_ms = 0  # time at voltage with current at or below the tail, ms
        self.rebulk_ms = 0  # time in float below the re-bulk threshold, ms
        self.eq_ms = 0  # time spent charging in equalize, ms
        self.eq_armed = 1  # 1 when an equalize request (rising edge) may start one
        self.lost = 0  # 1 after the battery was absent or reversed: restart at bulk
        self.too_hot_cold = 0  # 1 after leaving the temperature window, until 1 C back inside
        self.out_on = 0  # discharge switch (loads, bus diode) closed
        self.lvd = 0  # 1 after a low-voltage disconnect, until the battery reaches lvr_mv
        self.loop = BuckLoop()

    @micropython.native
    def _enter(self, stage):
        self.stage = stage
        self.abs_ms = 0
        self.tail_ms = 0
        self.rebulk_ms = 0
        self.eq_ms = 0

    @micropython.native
    def block(self):
        """Charging forbidden by the supervisor (guard or sensor fault): duty 0, stage kept."""
        self.blocked = 1
        self.loop.stop()
        return 0

    @micropython.native
    def discharge(self, batt_mv):
        """Low-voltage disconnect with hysteresis; returns the discharge switch state."""
        p = self.p
        if batt_mv < p.lvd_mv:
            self.lvd = 1
        elif batt_mv >= p.lvr_mv:
            self.lvd = 0
        self.out_on = 0 if (self.lvd or batt_mv < p.absent_mv) else 1
        return self.out_on

    @micropython.native
    def update(self, m, dt_ms, floor_mv):
        """One tick. Returns the battery converter duty."""
        p = self.p
        fault = 0
        t = m.batt_temp_dc
        v = m.batt_mv
        if t < _TEMP_MIN_PLAUSIBLE_DC or t > _TEMP_MAX_PLAUSIBLE_DC:
            fault = F_TEMP_SENSOR
        else:
            lo = p.temp_min_dc
            hi = p.temp_max_dc
            if t < lo or t > hi:
                fault = F_TEMP_WINDOW
                self.too_hot_cold = 1
            elif self.too_hot_cold:
                if t < lo + _TEMP_HYST_DC or t > hi - _TEMP_HYST_DC:
                    fault = F_TEMP_WINDOW  # back inside, but not yet by the hysteresis
                else:
                    self.too_hot_cold = 0
        if v < _REVERSED_MV:
            fault |= F_BATT_REVERSED
            self.lost = 1
        elif v < p.absent_mv:
            fault |= F_BATT_ABSENT
            self.lost = 1
        self.fault = fault
        if fault:
            return self.block()
        if self.lost:
            self.lost = 0
            self._enter(ST_BULK)
        self.blocked = 0
        st = self.stage
        # bulk and absorption share a ceiling: work it out once for both _advance and the loop
        ceil = 0
        if st == ST_BULK or st == ST_ABSORPTION:
            ceil = ceiling_mv(p, ST_ABSORPTION, t)
        if self._advance(m, dt_ms, ceil):
            ceil = ceiling_mv(p, self.stage, t)  # a new stage, maybe a new ceiling
        elif not ceil:
            ceil = ceiling_mv(p, st, t)
        self.ceil_mv = ceil
        if v > ceil + p.over_margin_mv:
            self.fault = F_BATT_OVER
            self.loop.stop()
            return 0
        return self.loop.update(v, ceil, m.batt_ma, p.chg_limit_ma, m.bus_mv, floor_mv, _BIG_MV)

    @micropython.native
    def _advance(self, m, dt_ms, abs_ceil_mv):
        """Stage transitions for this tick; returns 1 if the stage changed. abs_ceil_mv is the
        absorption ceiling at this temperature (computed only in bulk and absorption)."""
        p = self.p
        st = self.stage
        v = m.batt_mv
        eq_req = m.eq_req
        if not eq_req:
            self.eq_armed = 1
        if st == ST_BULK:
            if v >= abs_ceil_mv - (p.over_margin_mv >> 1):  # "at voltage": within 50 mV/block
                self._enter(ST_ABSORPTION)
                return 1
        elif st == ST_ABSORPTION:
            i = m.batt_ma
            if self.loop.duty > 0 and i > 0:  # charging
                self.abs_ms += dt_ms
            if v >= abs_ceil_mv - (p.over_margin_mv >> 1) and i <= p.tail_ma:
                self.tail_ms += dt_ms
            else:
                self.tail_ms = 0
            if eq_req and self.eq_armed and p.eq_cell_mv > 0:
                self._start_eq()
                return 1
            if self.tail_ms >= p.tail_hold_ms or self.abs_ms >= p.abs_max_ms:
                self._enter(ST_FLOAT)
                return 1
        elif st == ST_FLOAT:
            if v < p.cells * p.rebulk_cell_mv:
                self.rebulk_ms += dt_ms
            else:
                self.rebulk_ms = 0
            if eq_req and self.eq_armed and p.eq_cell_mv > 0:
                self._start_eq()
                return 1
            if self.rebulk_ms >= p.rebulk_hold_ms:
                self._enter(ST_BULK)
                return 1
        elif st == ST_EQUALIZE:
            if self.loop.duty > 0 and m.batt_ma > 0:  # charging
                self.eq_ms += dt_ms
            if not eq_req or self.eq_ms >= p.eq_ms:
                self._enter(ST_FLOAT)
                return 1
        return 0

    @micropython.native
    def _start_eq(self):
        self._enter(ST_EQUALIZE)
        self.eq_armed = 0  # one request, one equalize: release and press again for another
