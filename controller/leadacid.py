# Lead-acid charger: bulk, absorption, float and (flooded only, on request) equalize, with
# temperature-compensated setpoints and a charging temperature window.
#
# Missing or implausible temperature: we choose "no charging" (the first of the two
# conservative options) and raise F_TEMP_SENSOR. A lead-acid battery left uncharged for a
# while is harmed far less than one overcharged hot with no compensation.
from array import array

from controller.buckloop import BuckLoop, regulate
from controller.compat import MICROPYTHON, const, micropython
from controller.signals import ST_BULK

if not MICROPYTHON:  # on a board the viper compiler reads ptr32() itself
    from controller.compat import ptr32, state_names

# signals' stage codes and fault bits, repeated as consts: viper code sees a const as a machine
# int, an imported name as an object (tests/controller/test_compat.py checks they agree)
_ST_BULK = const(1)
_ST_ABSORPTION = const(2)
_ST_FLOAT = const(3)
_ST_EQUALIZE = const(4)
_F_TEMP_SENSOR = const(16)
_F_BATT_ABSENT = const(128)
_F_BATT_REVERSED = const(256)
_F_TEMP_WINDOW = const(512)
_F_BATT_OVER = const(1024)

_TEMP_MIN_PLAUSIBLE_DC = const(-400)  # an open NTC reads colder than this
_TEMP_MAX_PLAUSIBLE_DC = const(850)  # a shorted NTC reads hotter than this
_TEMP_HYST_DC = const(10)  # charging resumes 1.0 C inside the window (a noisy sensor at the
# edge would otherwise switch the charger, and the load on the drive, on and off every tick),
# or 3 LSB of the sensor if that is more, and only after _TEMP_BACK_MS there: one LSB of noise
# on a coarse NTC near 0 C cleared the 1 C (23 bulk/blocked flips in 11 minutes)
_TEMP_HYST_LSB = const(3)
_TEMP_BACK_MS = const(5000)
# Time off absorption's tail counts the tail timer down instead of restarting it: every pulse
# of a lamp or a USB device restarted it, and absorption never reached float. So the tail ends
# absorption once the battery has spent tail_hold more time on the tail than off it; the time
# limit ends it whatever the tail does.
_REVERSED_MV = const(-200)  # a battery further negative than this is connected backwards
_BIG_MV = const(100000)
if not MICROPYTHON:  # the host's names for the plausible range (private on the board: no RAM)
    TEMP_MIN_PLAUSIBLE_DC = _TEMP_MIN_PLAUSIBLE_DC
    TEMP_MAX_PLAUSIBLE_DC = _TEMP_MAX_PLAUSIBLE_DC


# Hard caps on the compensated setpoints, mV per cell: cold-battery compensation may not
# carry a setpoint past the caps that bound the profile itself (profile_battery.py).
_CAP_ABS_CELL_MV = const(2500)
_CAP_EQ_CELL_MV = const(2600)
_CAP_FLOAT_CELL_MV = const(2350)


# state slots of LeadAcidCharger.st (array('i'), all >= 0); the host names them (end of file)
_STAGE = const(0)  # stage: charging stage (not ST_BLOCKED: blocking is reported apart)
_BLOCKED = const(1)  # blocked: 1 while charging is forbidden this tick
_FAULT = const(2)  # fault: this tick's battery fault bits
_CEIL = const(3)  # ceil_mv: this tick's compensated ceiling, mV
_ABS_MS = const(4)  # abs_ms: time spent charging in absorption, ms
_TAIL_MS = const(5)  # tail_ms: time at voltage with current at or below the tail, less the
# time off it, ms
_REBULK_MS = const(6)  # rebulk_ms: time in float below the re-bulk threshold, ms
_EQ_MS = const(7)  # eq_ms: time spent charging in equalize, ms
_EQ_ARMED = const(8)  # eq_armed: 1 when an equalize request (rising edge) may start one
_LOST = const(9)  # lost: 1 after the battery was absent or reversed: restart at bulk
_TOO_HOT_COLD = const(10)  # too_hot_cold: 1 after leaving the temperature window, until 1 C
# back inside
_OUT_ON = const(11)  # out_on: discharge switch (loads, bus diode) closed
_LVD = const(12)  # lvd: 1 after a low-voltage disconnect, until the battery reaches lvr_mv
_BACK_MS = const(13)  # back_ms: time back inside the window by the hysteresis, ms
_N_ST = const(14)

# profile slots of LeadAcidCharger.cfg (array('i')), in the tick's units; block = cells x cell
_C_TEMP_MIN = const(0)  # charging window, deci-degrees C (signed slot)
_C_TEMP_MAX = const(1)
_C_REF_TEMP = const(2)  # reference temperature of the setpoints, deci-degrees C
_C_TC_BLOCK = const(3)  # cells x temperature coefficient, uV per deci-degree C (signed slot)
_C_ABS_MV = const(4)  # absorption, float and equalize setpoints for the block, mV
_C_FLOAT_MV = const(5)
_C_EQ_MV = const(6)  # 0: equalize not allowed
_C_ABS_TOP_MV = const(7)  # their hard caps for the block, mV
_C_FLOAT_TOP_MV = const(8)
_C_EQ_TOP_MV = const(9)
_C_OVER_MV = const(10)  # over_margin_mv
_C_ABSENT_MV = const(11)
_C_LVD_MV = const(12)
_C_LVR_MV = const(13)
_C_LIMIT_MA = const(14)  # chg_limit_ma
_C_TAIL_MA = const(15)
_C_TAIL_HOLD_MS = const(16)
_C_ABS_MAX_MS = const(17)
_C_REBULK_MV = const(18)  # cells x rebulk_cell_mv
_C_REBULK_HOLD_MS = const(19)
_C_EQ_MAX_MS = const(20)  # p.eq_ms
_C_TEMP_HYST = const(21)  # re-entry hysteresis, deci-degrees C
_N_CFG = const(22)
_L_U = const(0)  # the slots of BuckLoop.st (buckloop._U, _DUTY, _BUS_LAST)
_L_DUTY = const(1)
_L_BUS_LAST = const(2)
_S_HALF = const(0x20000000)  # sign restore of a ptr32 load (compat.py, viper state)
_S_MASK = const(0x3FFFFFFF)


class LeadAcidCharger:
    def __init__(self, p):
        self.p = p
        st = array("i", [0] * _N_ST)  # the state, slots above
        st[_STAGE] = ST_BULK
        st[_BLOCKED] = 1
        st[_EQ_ARMED] = 1
        self.st = st
        n = p.cells
        cfg = array("i", [0] * _N_CFG)  # the profile's numbers the tick reads, slots above
        cfg[_C_TEMP_MIN] = p.temp_min_dc
        cfg[_C_TEMP_MAX] = p.temp_max_dc
        cfg[_C_REF_TEMP] = p.ref_temp_dc
        cfg[_C_TC_BLOCK] = n * p.tc_uv_dc_cell
        cfg[_C_ABS_MV] = n * p.abs_cell_mv
        cfg[_C_FLOAT_MV] = n * p.float_cell_mv
        cfg[_C_EQ_MV] = n * p.eq_cell_mv
        cfg[_C_ABS_TOP_MV] = n * _CAP_ABS_CELL_MV
        cfg[_C_FLOAT_TOP_MV] = n * _CAP_FLOAT_CELL_MV
        cfg[_C_EQ_TOP_MV] = n * _CAP_EQ_CELL_MV
        cfg[_C_OVER_MV] = p.over_margin_mv
        cfg[_C_ABSENT_MV] = p.absent_mv
        cfg[_C_LVD_MV] = p.lvd_mv
        cfg[_C_LVR_MV] = p.lvr_mv
        cfg[_C_LIMIT_MA] = p.chg_limit_ma
        cfg[_C_TAIL_MA] = p.tail_ma
        cfg[_C_TAIL_HOLD_MS] = p.tail_hold_ms
        cfg[_C_ABS_MAX_MS] = p.abs_max_ms
        cfg[_C_REBULK_MV] = n * p.rebulk_cell_mv
        cfg[_C_REBULK_HOLD_MS] = p.rebulk_hold_ms
        cfg[_C_EQ_MAX_MS] = p.eq_ms
        hyst = max(_TEMP_HYST_DC, _TEMP_HYST_LSB * p.temp_lsb_dc)
        cfg[_C_TEMP_HYST] = min(hyst, (p.temp_max_dc - p.temp_min_dc) // 4)  # a window to return to
        self.cfg = cfg
        self.loop = BuckLoop()

    @micropython.viper
    def block(self) -> int:
        """Charging forbidden by the supervisor (guard or sensor fault): duty 0, stage kept."""
        s = ptr32(self.st)
        s[_BLOCKED] = 1
        ls = ptr32(self.loop.st)  # loop.stop(), written out
        ls[_L_U] = 0
        ls[_L_DUTY] = 0
        ls[_L_BUS_LAST] = 0
        return 0

    @micropython.viper
    def discharge(self, batt_mv: int) -> int:
        """Low-voltage disconnect with hysteresis; returns the discharge switch state."""
        s = ptr32(self.st)
        cfg = ptr32(self.cfg)
        if batt_mv < cfg[_C_LVD_MV]:
            s[_LVD] = 1
        elif batt_mv >= cfg[_C_LVR_MV]:
            s[_LVD] = 0
        out_on = 0 if (s[_LVD] or batt_mv < cfg[_C_ABSENT_MV]) else 1
        s[_OUT_ON] = out_on
        return out_on

    @micropython.viper
    def update(self, m, dt_ms: int, floor_mv: int) -> int:
        """One tick. Returns the battery converter duty. (The stage transitions, the ceiling
        and the stage entries are written out here: a call costs more on a board than the
        arithmetic.)"""
        s = ptr32(self.st)
        cfg = ptr32(self.cfg)
        fault = 0
        t = int(m.batt_temp_dc)
        v = int(m.batt_mv)
        i_ma = int(m.batt_ma)
        lo = ((cfg[_C_TEMP_MIN] + _S_HALF) & _S_MASK) - _S_HALF  # signed slot
        hi = cfg[_C_TEMP_MAX]
        if t < _TEMP_MIN_PLAUSIBLE_DC or t > _TEMP_MAX_PLAUSIBLE_DC:
            fault = _F_TEMP_SENSOR
        else:
            if t < lo or t > hi:
                fault = _F_TEMP_WINDOW
                s[_TOO_HOT_COLD] = 1
                s[_BACK_MS] = 0
            elif s[_TOO_HOT_COLD]:
                fault = _F_TEMP_WINDOW
                hyst = cfg[_C_TEMP_HYST]
                if t < lo + hyst or t > hi - hyst:
                    s[_BACK_MS] = 0  # back inside, but not yet by the hysteresis
                else:
                    back = s[_BACK_MS] + dt_ms
                    if back >= _TEMP_BACK_MS:
                        back = 0
                        fault = 0
                        s[_TOO_HOT_COLD] = 0
                    s[_BACK_MS] = back
        if v < _REVERSED_MV:
            fault |= _F_BATT_REVERSED
            s[_LOST] = 1
        elif v < cfg[_C_ABSENT_MV]:
            fault |= _F_BATT_ABSENT
            s[_LOST] = 1
        s[_FAULT] = fault
        loop = self.loop.st
        if fault:
            s[_BLOCKED] = 1  # block(), written out
            ls = ptr32(loop)
            ls[_L_U] = 0
            ls[_L_DUTY] = 0
            ls[_L_BUS_LAST] = 0
            return 0
        st = s[_STAGE]
        if s[_LOST]:
            s[_LOST] = 0
            st = _ST_BULK  # enter bulk
            s[_ABS_MS] = 0
            s[_TAIL_MS] = 0
            s[_REBULK_MS] = 0
            s[_EQ_MS] = 0
        s[_BLOCKED] = 0
        # temperature compensation, the same for every stage (ceiling_mv, written out): the
        # temperature clamped to the charging window first
        tc = t
        if tc < lo:
            tc = lo
        elif tc > hi:
            tc = hi
        tc_block = ((cfg[_C_TC_BLOCK] + _S_HALF) & _S_MASK) - _S_HALF  # signed slot
        comp = (tc_block * (tc - cfg[_C_REF_TEMP])) // 1000
        # stage transitions; bulk and absorption share the absorption ceiling
        new = st
        eq_req = int(m.eq_req)
        if not eq_req:
            s[_EQ_ARMED] = 1
        if st == _ST_BULK or st == _ST_ABSORPTION:
            abs_ceil = cfg[_C_ABS_MV] + comp
            top = cfg[_C_ABS_TOP_MV]
            if abs_ceil > top:
                abs_ceil = top
            at_v = v >= abs_ceil - (cfg[_C_OVER_MV] >> 1)  # "at voltage": within 50 mV/block
            if st == _ST_BULK:
                if at_v:
                    new = _ST_ABSORPTION
            else:
                duty = ((ptr32(loop)[_L_DUTY] + _S_HALF) & _S_MASK) - _S_HALF  # signed slot
                if duty > 0 and i_ma > 0:  # charging
                    s[_ABS_MS] = s[_ABS_MS] + dt_ms
                tail = s[_TAIL_MS]
                if at_v and i_ma <= cfg[_C_TAIL_MA]:
                    tail += dt_ms
                elif tail > dt_ms:
                    tail -= dt_ms
                else:
                    tail = 0
                s[_TAIL_MS] = tail
                if eq_req and s[_EQ_ARMED] and cfg[_C_EQ_MV] > 0:
                    new = _ST_EQUALIZE
                elif (s[_TAIL_MS] >= cfg[_C_TAIL_HOLD_MS]
                      or s[_ABS_MS] >= cfg[_C_ABS_MAX_MS]):
                    new = _ST_FLOAT
        elif st == _ST_FLOAT:
            if v < cfg[_C_REBULK_MV]:
                s[_REBULK_MS] = s[_REBULK_MS] + dt_ms
            else:
                s[_REBULK_MS] = 0
            if eq_req and s[_EQ_ARMED] and cfg[_C_EQ_MV] > 0:
                new = _ST_EQUALIZE
            elif s[_REBULK_MS] >= cfg[_C_REBULK_HOLD_MS]:
                new = _ST_BULK
        elif st == _ST_EQUALIZE:
            duty = ((ptr32(loop)[_L_DUTY] + _S_HALF) & _S_MASK) - _S_HALF  # signed slot
            if duty > 0 and i_ma > 0:  # charging
                s[_EQ_MS] = s[_EQ_MS] + dt_ms
            if not eq_req or s[_EQ_MS] >= cfg[_C_EQ_MAX_MS]:
                new = _ST_FLOAT
        if new != st:  # enter the new stage: its timers from zero
            st = new
            s[_ABS_MS] = 0
            s[_TAIL_MS] = 0
            s[_REBULK_MS] = 0
            s[_EQ_MS] = 0
            if new == _ST_EQUALIZE:
                s[_EQ_ARMED] = 0  # one request, one equalize: release and press again
        s[_STAGE] = st
        # this stage's ceiling
        if st == _ST_ABSORPTION or st == _ST_BULK:
            ceil = cfg[_C_ABS_MV] + comp
            top = cfg[_C_ABS_TOP_MV]
        elif st == _ST_EQUALIZE:
            ceil = cfg[_C_EQ_MV] + comp
            top = cfg[_C_EQ_TOP_MV]
        else:
            ceil = cfg[_C_FLOAT_MV] + comp
            top = cfg[_C_FLOAT_TOP_MV]
        if ceil > top:
            ceil = top
        s[_CEIL] = ceil
        if v > ceil + cfg[_C_OVER_MV]:
            s[_FAULT] = _F_BATT_OVER
            ls = ptr32(loop)  # loop.stop(), written out
            ls[_L_U] = 0
            ls[_L_DUTY] = 0
            ls[_L_BUS_LAST] = 0
            return 0
        return int(regulate(loop, v, ceil, i_ma, cfg[_C_LIMIT_MA],
                            int(m.bus_mv), floor_mv, _BIG_MV, 0))


if not MICROPYTHON:
    state_names(LeadAcidCharger, "st", stage=_STAGE, blocked=_BLOCKED, fault=_FAULT,
                ceil_mv=_CEIL, abs_ms=_ABS_MS, tail_ms=_TAIL_MS, rebulk_ms=_REBULK_MS,
                eq_ms=_EQ_MS, eq_armed=_EQ_ARMED, lost=_LOST, too_hot_cold=_TOO_HOT_COLD,
                out_on=_OUT_ON, lvd=_LVD, back_ms=_BACK_MS)
    from controller.leadacid_host import ceiling_mv, comp_mv  # noqa: E402,F401 (re-exported)
