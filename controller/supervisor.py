# Supervisor: one tick = guards first, then the USB port, then the battery, then the supercap.
# The order, the safe state of each implausible reading, the guard's soft zone and when it reads
# a rise ahead, and the dump's and the battery's answers to a converter stepping off beside
# them: DEVELOPERS.md, "Supervisor order and the safe state" (kept there, in one place).
from array import array

from controller.compat import MICROPYTHON, const, micropython
from controller.leadacid import LeadAcidCharger
from controller.mppt import HillClimb
from controller.overvolt import OverVoltGuard
from controller.signals import Commands, Measurements
from controller.supercap import CapClamp
from controller.usbport import UsbPort

if not MICROPYTHON:  # on a board the viper compiler reads ptr32() itself
    from controller.compat import ptr32, state_names

_NEG_MV = const(-500)  # a voltage reading may sit this far below zero (offset, noise)
_CAP_FLOOR_MV = const(500)  # the supercap backs off this far above the battery's floor
_TICKS_HALF = const(0x20000000)  # compat._TICKS_HALF
_TICKS_MASK = const(0x3FFFFFFF)  # compat.TICKS_MASK
_DT_MAX_PERIODS = const(4)  # a late tick counts as at most this many periods
_XCHK_MV = const(300)  # a buck delivering current from a bus this far below its output ...
_XCHK_MA = const(200)  # ... at more than this is physically impossible: the bus reading lies
_S_HALF = const(0x20000000)  # sign restore of a ptr32 load (compat.py, viper state)
_S_MASK = const(0x3FFFFFFF)

# signals' codes, repeated as consts: viper code sees a const as a machine int, an imported
# name as an object (tests/controller/test_compat.py holds every repeated const equal)
_DUTY_MAX = const(10000)
_ST_BLOCKED = const(0)
_ST_BULK = const(1)
_F_OVP = const(1)
_F_OVP_LOCKOUT = const(2)
_F_BUS_SENSOR = const(4)
_F_BATT_SENSOR = const(8)
_F_CAP_SENSOR = const(32)
_F_USB_SENSOR = const(64)
# the slots the tick reads from its parts' state arrays (their modules' _NAME, same test)
_OVP_TRIPPED = const(0)  # overvolt._TRIPPED
_OVP_LOCKED = const(1)  # overvolt._LOCKED
_OVP_SOFT = const(8)  # overvolt._SOFT
_OVP_DUMP = const(9)  # overvolt._DUMP
_OVP_BUS_LAST = const(10)  # overvolt._BUS_LAST
_OVP_NO_AHEAD = const(11)  # overvolt._NO_AHEAD
_RISE_SHIFT = const(6)  # overvolt._RISE_SHIFT: a bus running up rose more than 1/64 of itself
_USB_CONV = const(1)  # usbport._CONV
_USB_ON = const(2)  # usbport._ON
_USB_PROBE = const(3)  # usbport._PROBE
_USB_MATCH = const(5)  # usbport._MATCH
_USB_FAULT = const(7)  # usbport._FAULT
_CH_STAGE = const(0)  # leadacid._STAGE
_CH_BLOCKED = const(1)  # leadacid._BLOCKED
_CH_FAULT = const(2)  # leadacid._FAULT
_CH_C_LIMIT_MA = const(14)  # leadacid._C_LIMIT_MA
_CH_CEIL = const(3)  # leadacid._CEIL
_L_DUTY = const(1)  # buckloop._DUTY
_CAP_FAULT = const(1)  # supercap._FAULT
_CAP_BAL_MASK = const(2)  # supercap._BAL_MASK
_MPPT_DUMP = const(5)  # mppt._DUMP

# state slots of Supervisor.st (array('i')); the host names them (end of file)
_LAST_MS = const(0)  # last_ms: now_ms of the previous tick
_BUS_LIE = const(1)  # bus_lie: 1 after the bus reading contradicted a running converter,
# until it reads above the battery and the bank again (a stuck-low bus sensor)
_LIE_MV = const(2)  # lie_mv: the bus reading when it last contradicted a converter, mV
# (signed slot)
# profile slots of Supervisor.cfg (array('i'))
_C_DT_MAX_MS = const(0)  # dt_max_ms: a late tick counts as at most this, ms
_C_BUS_FS_MV = const(1)  # sensor full scales: a reading outside [-neg, full scale] is
_C_BATT_FS_MV = const(2)  # implausible (one full scale for every current sensor)
_C_FS_MA = const(3)
_C_CAP_FS_MV = const(4)
_C_VBUS_FS_MV = const(5)
_C_LINE_FS_MV = const(6)
_C_TAP_TOP_MV = const(7)  # 2 x cap_cell_rating_mv: a cell tap reading above is implausible
_C_TRIP_MV = const(8)  # ovp_trip_mv
_C_RECOVER_MV = const(9)  # ovp_recover_mv
_C_FLOOR_MV = const(10)  # floor_mv
_C_MPPT = const(11)  # 1: MPPT sets the floor


class Supervisor:
    def __init__(self, p):
        self.p = p
        self.m = Measurements()  # filled by the board, the simulator or the link, then tick()
        self.c = Commands()  # read after tick()
        self.charger = LeadAcidCharger(p)
        self.clamp = CapClamp(p)
        self.usb = UsbPort(p)
        self.ovp = OverVoltGuard(p)
        self.mppt = HillClimb(p) if p.mppt else None
        self.ticks = 0  # ticks run, wrapping from 2**30 - 1 to 1 (0 only before the first)
        self.st = array("i", [0, 0, 0])  # last_ms, bus_lie, lie_mv (slots above)
        self.cfg = array("i", [_DT_MAX_PERIODS * p.period_ms, p.bus_fs_mv, p.batt_fs_mv,
                               p.batt_fs_ma, p.cap_fs_mv, p.vbus_fs_mv, p.line_fs_mv,
                               2 * p.cap_cell_rating_mv, p.ovp_trip_mv, p.ovp_recover_mv,
                               p.floor_mv, 1 if p.mppt else 0])

    @micropython.viper
    def tick(self, now_ms: int):
        """Run one control period on self.m; results in self.c. Integer-only, allocates
        nothing, raises nothing."""
        s = ptr32(self.st)
        cfg = ptr32(self.cfg)
        m = self.m
        c = self.c
        ticks = int(self.ticks)
        dt = 0
        if ticks:
            # compat.ticks_diff written out: on a board the call costs more than the sum
            dt = ((now_ms - s[_LAST_MS] + _TICKS_HALF) & _TICKS_MASK) - _TICKS_HALF
            if dt < 0:
                dt = 0
            elif dt > cfg[_C_DT_MAX_MS]:
                dt = cfg[_C_DT_MAX_MS]
        s[_LAST_MS] = now_ms & _TICKS_MASK  # (dt reads it modulo the period only: a caller's
        # unmasked clock still fits the slot)
        self.ticks = ticks + 1 if ticks < _TICKS_MASK else 1  # stays a small int

        fault = 0
        bus = int(m.bus_mv)
        fs_ma = cfg[_C_FS_MA]  # one full scale for every current sensor
        src = int(m.src_ma)
        batt_mv = int(m.batt_mv)
        batt_ma = int(m.batt_ma)
        cap_mv = int(m.cap_mv)
        cap_ma = int(m.cap_ma)
        if bus < _NEG_MV or bus > cfg[_C_BUS_FS_MV] or src < -fs_ma or src > fs_ma:
            fault = _F_BUS_SENSOR
            if bus > cfg[_C_BUS_FS_MV]:
                bus = cfg[_C_TRIP_MV]  # an over-range bus is treated as a trip
            elif bus < _NEG_MV:
                bus = cfg[_C_RECOVER_MV]  # bus unknown: no trip, and no time below recovery
        else:
            # The bus cross-check: a buck cannot push current into a store that sits above
            # its input, so a bus reading below the battery (or bank) while that converter
            # runs and current flows is wrong. Latched until the bus reads above both stores
            # again (a stuck-low bus sensor would otherwise let the converters restart every
            # other tick), or until no current flows into either store and the reading has
            # moved from where it lied (then a low bus contradicts nothing: a source that
            # stopped, read once with a lagging current sample, must not keep the battery's
            # loads off; a stuck sensor reads the same value on and on). Only plausible
            # readings may contradict the bus: an implausible one is its own fault.
            # (the sums are on the plausible bus: an implausible store reading near a 32-bit
            # board's word limit must not wrap them)
            b = bus + _XCHK_MV
            if ((int(c.batt_duty) and _XCHK_MA < batt_ma <= fs_ma
                 and b < batt_mv <= cfg[_C_BATT_FS_MV])
                    or (int(c.cap_duty) and _XCHK_MA < cap_ma <= fs_ma
                        and b < cap_mv <= cfg[_C_CAP_FS_MV])):
                s[_BUS_LIE] = 1
                s[_LIE_MV] = bus
            elif s[_BUS_LIE] and ((bus - _XCHK_MV > batt_mv and bus - _XCHK_MV > cap_mv)
                                  or (batt_ma <= _XCHK_MA and cap_ma <= _XCHK_MA
                                      and bus != ((s[_LIE_MV] + _S_HALF) & _S_MASK) - _S_HALF)):
                s[_BUS_LIE] = 0
            if s[_BUS_LIE]:
                fault = _F_BUS_SENSOR
                if bus < cfg[_C_TRIP_MV]:  # a suspect reading proves no low bus; a high one
                    bus = cfg[_C_RECOVER_MV]  # trips
        ovp = self.ovp
        g = ptr32(ovp.st)
        if fault:  # a stand-in bus value: the guard reads no rise into it, nor out of it
            ovp.forget_rise()
        last = g[_OVP_BUS_LAST]
        rising = 1 if (last and bus - last > bus >> _RISE_SHIFT) else 0
        # no rise read ahead (overvolt.py _NO_AHEAD) where the battery has room for it (bulk,
        # converter on, under 7/8 of its limit) or the stores made it (power-up)
        ch = ptr32(self.charger.st)
        lim = ptr32(self.charger.cfg)[_CH_C_LIMIT_MA]
        top = last - _XCHK_MV  # (no sums on the store readings: they may be implausible)
        g[_OVP_NO_AHEAD] = 1 if ((int(c.batt_duty) and ch[_CH_STAGE] == _ST_BULK
                                  and not ch[_CH_BLOCKED] and batt_ma < lim - (lim >> 3))
                                 or (src <= _XCHK_MA and (top <= batt_mv or top <= cap_mv))
                                 ) else 0
        ovp.update(bus, dt, now_ms, int(m.reset_req))
        if fault:
            ovp.forget_rise()
        if g[_OVP_TRIPPED]:
            fault |= _F_OVP
        if g[_OVP_LOCKED]:
            fault |= _F_OVP_LOCKOUT
        dump = g[_OVP_DUMP]  # full while latched, stepping down after
        if s[_BUS_LIE]:
            # the bus reading is known false and the safe state takes every load off the
            # source: the dump load holds it instead (an unloaded generator rises to its clamp)
            dump = _DUTY_MAX

        if fault:
            if cfg[_C_MPPT]:
                # the tracker does not run on this path (a bus fault, a trip, a lockout): the
                # overspeed dump keeps its last duty (a rotor braked a period ago must not be
                # let go by a sensor fault; dump_duty resumes from it)
                d = ptr32(self.mppt.st)[_MPPT_DUMP]
                if d > dump:
                    dump = d
            c.dump_duty = dump
            self.charger.block()
            self.clamp.block()
            self.usb.block()
            c.set_safe()
            c.stage = _ST_BLOCKED
            c.usb_match = 0
            c.fault = fault
            return

        floor = cfg[_C_FLOOR_MV]
        if cfg[_C_MPPT]:
            mppt = self.mppt
            floor = int(mppt.update(bus, src, dt))
            d = int(mppt.dump_duty(bus))
            if d > dump:
                dump = d
        c.dump_duty = dump

        # USB
        usb = self.usb
        v = int(m.usb_vbus_mv)
        fs = cfg[_C_LINE_FS_MV]
        dp = int(m.usb_dp_mv)
        dm = int(m.usb_dm_mv)
        if (v < _NEG_MV or v > cfg[_C_VBUS_FS_MV] or dp < _NEG_MV or dp > fs or dm < _NEG_MV
                or dm > fs):
            fault |= _F_USB_SENSOR
            usb.block()
            u = ptr32(usb.st)
        else:
            usb.update(m, dt)
            u = ptr32(usb.st)
            fault |= u[_USB_FAULT]
        c.usb_conv = u[_USB_CONV]
        c.usb_on = u[_USB_ON]
        c.usb_probe = u[_USB_PROBE]
        c.usb_match = u[_USB_MATCH]

        # battery
        charger = self.charger
        ch = ptr32(charger.st)
        was_batt = int(c.batt_duty)  # last tick's duties
        was_cap = int(c.cap_duty)
        fs = cfg[_C_BATT_FS_MV]
        if batt_mv < -fs or batt_mv > fs or batt_ma < -fs_ma or batt_ma > fs_ma:
            fault |= _F_BATT_SENSOR
            c.batt_duty = charger.block()
            c.batt_out = 0
        else:
            c.batt_out = charger.discharge(batt_mv)
            c.batt_duty = charger.update(m, dt, floor)
            fault |= ch[_CH_FAULT]
        c.stage = _ST_BLOCKED if ch[_CH_BLOCKED] else ch[_CH_STAGE]

        # supercap
        clamp = self.clamp
        k = ptr32(clamp.st)
        if (cap_mv < _NEG_MV or cap_mv > cfg[_C_CAP_FS_MV] or cap_ma < -fs_ma or cap_ma > fs_ma
                or (int(m.n_taps) and int(self._taps_implausible()))):
            fault |= _F_CAP_SENSOR
            c.cap_duty = clamp.block()
        else:
            c.cap_duty = clamp.update(m, floor + _CAP_FLOOR_MV)
            fault |= k[_CAP_FAULT]
        c.bal_mask = k[_CAP_BAL_MASK]
        c.fault = fault
        # The bank stepping off carrying current lifts the bus within the period: within 1/64
        # of its ceiling the battery takes it at 1/32 less duty (its loop keeps it). A 3-cell
        # block went 7.327 V against 7.324 V when the bank dropped 0.3 A, the bus up 0.11 V.
        d = int(c.batt_duty)
        ceil = ch[_CH_CEIL]
        if (d and was_cap and not int(c.cap_duty) and cap_ma > _XCHK_MA
                and batt_mv >= ceil - (ceil >> 6)):
            d -= d >> 5
            c.batt_duty = d
            ptr32(charger.loop.st)[_L_DUTY] = d
        # A store's converter that steps off carrying current on a bus running up leaves the
        # source unloaded within the period: the dump load takes its place (fully on, then
        # letting go as the soft zone does). A crank whose torque built within 0.05 s from a
        # rest ran its bus 14.8 -> 28.3 V in one 20 ms period when the battery's converter
        # stepped off its 6.4 A start.
        if rising and ((was_batt and not int(c.batt_duty) and batt_ma > _XCHK_MA)
                       or (was_cap and not int(c.cap_duty) and cap_ma > _XCHK_MA)):
            g[_OVP_SOFT] = _DUTY_MAX
            c.dump_duty = _DUTY_MAX

    @micropython.viper
    def _taps_implausible(self) -> int:
        m = self.m
        cells = m.cell_mv
        top = ptr32(self.cfg)[_C_TAP_TOP_MV]
        for i in range(int(m.n_taps)):
            v = int(cells[i])
            if v < _NEG_MV or v > top:
                return 1
        return 0


if not MICROPYTHON:
    state_names(Supervisor, "st", last_ms=_LAST_MS, bus_lie=_BUS_LIE, lie_mv=_LIE_MV)
    state_names(Supervisor, "cfg", dt_max_ms=_C_DT_MAX_MS)
