# Supervisor: one tick = guards first, then the USB port, then the battery, then the supercap.
#
# Order and priority (documented in DEVELOPERS.md):
#  1. Plausibility. Each reading is checked against its physical range. An implausible bus
#     reading puts every output in the safe state (storage off, USB off) and, if it reads
#     above full scale, treats it as a trip (dump on). An implausible battery, supercap or USB
#     reading turns off the outputs that reading protects; the battery temperature is judged
#     by the charger (no charging without a plausible temperature).
#  2. Overvoltage guard: tripped or locked out -> safe state, dump on while tripped.
#     (The battery discharge switch is opened too: with the bus out of bounds nothing on it is
#     to be trusted; the battery's own loads wait for the latch.)
#  3. USB: the converter starts at the lowest bus of all (usb.bus_min_v), so phones are served
#     first when the source is weak.
#  4. Battery: its converter backs off when the bus falls below the floor.
#  5. Supercap: backs off at a floor _CAP_FLOOR_MV higher, so it yields first as the drive
#     slows and takes what the battery leaves.
#  With MPPT the floor is the hill-climbing setpoint instead of the profile's fixed floor.
from controller.compat import TICKS_MASK, const, micropython
from controller.leadacid import LeadAcidCharger
from controller.mppt import HillClimb
from controller.overvolt import OverVoltGuard
from controller.signals import (
    DUTY_MAX, F_BATT_SENSOR, F_BUS_SENSOR, F_CAP_SENSOR, F_OVP, F_OVP_LOCKOUT, F_USB_SENSOR,
    ST_BLOCKED, Commands, Measurements,
)
from controller.supercap import CapClamp
from controller.usbport import UsbPort

_NEG_MV = const(-500)  # a voltage reading may sit this far below zero (offset, noise)
_CAP_FLOOR_MV = const(500)  # the supercap backs off this far above the battery's floor
_TICKS_HALF = const(0x20000000)  # compat._TICKS_HALF
_DT_MAX_PERIODS = const(4)  # a late tick counts as at most this many periods
_XCHK_MV = const(300)  # a buck delivering current from a bus this far below its output ...
_XCHK_MA = const(200)  # ... at more than this is physically impossible: the bus reading lies


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
        self.last_ms = 0  # now_ms of the previous tick
        self.ticks = 0  # ticks run, wrapping from 2**30 - 1 to 1 (0 only before the first)
        self.dt_max_ms = _DT_MAX_PERIODS * p.period_ms
        self.bus_lie = 0  # 1 after the bus reading contradicted a running converter, until
        # it reads above the battery and the bank again (a stuck-low bus sensor)
        self.lie_mv = 0  # the bus reading when it last contradicted a converter, mV

    @micropython.native
    def tick(self, now_ms):
        """Run one control period on self.m; results in self.c. Integer-only, allocates
        nothing, raises nothing."""
        p = self.p
        m = self.m
        c = self.c
        ticks = self.ticks
        dt = 0
        if ticks:
            # compat.ticks_diff written out: on a board the call costs more than the sum
            dt = ((now_ms - self.last_ms + _TICKS_HALF) & TICKS_MASK) - _TICKS_HALF
            if dt < 0:
                dt = 0
            elif dt > self.dt_max_ms:
                dt = self.dt_max_ms
        self.last_ms = now_ms
        self.ticks = ticks + 1 if ticks < TICKS_MASK else 1  # stays a small int

        fault = 0
        bus = m.bus_mv
        fs_ma = p.batt_fs_ma  # one full scale for every current sensor
        src = m.src_ma
        if bus < _NEG_MV or bus > p.bus_fs_mv or src < -fs_ma or src > fs_ma:
            fault = F_BUS_SENSOR
            if bus > p.bus_fs_mv:
                bus = p.ovp_trip_mv  # an over-range bus is treated as a trip
            elif bus < _NEG_MV:
                bus = p.ovp_recover_mv  # bus unknown: no trip, and no time below recovery
        elif self._bus_contradicted():
            fault = F_BUS_SENSOR
            if bus < p.ovp_trip_mv:  # a suspect reading proves no low bus; a high one trips
                bus = p.ovp_recover_mv
        ovp = self.ovp
        ovp.update(bus, dt, now_ms, m.reset_req)
        if ovp.tripped:
            fault |= F_OVP
        if ovp.locked:
            fault |= F_OVP_LOCKOUT
        dump = ovp.dump  # full while latched, stepping down after
        if self.bus_lie:
            # the bus reading is known false and the safe state takes every load off the
            # source: the dump load holds it instead (an unloaded generator rises to its clamp)
            dump = DUTY_MAX

        if fault:
            c.dump_duty = dump
            self.charger.block()
            self.clamp.block()
            self.usb.block()
            c.set_safe()
            c.stage = ST_BLOCKED
            c.usb_match = 0
            c.fault = fault
            return

        floor = p.floor_mv
        mppt = self.mppt
        if mppt is not None:
            floor = mppt.update(bus, src, dt)
            d = mppt.dump_duty(bus)
            if d > dump:
                dump = d
        c.dump_duty = dump

        # USB
        usb = self.usb
        v = m.usb_vbus_mv
        fs = p.line_fs_mv
        dp = m.usb_dp_mv
        dm = m.usb_dm_mv
        if (v < _NEG_MV or v > p.vbus_fs_mv or dp < _NEG_MV or dp > fs or dm < _NEG_MV
                or dm > fs):
            fault |= F_USB_SENSOR
            usb.block()
        else:
            usb.update(m, dt)
            fault |= usb.fault
        c.usb_conv = usb.conv
        c.usb_on = usb.on
        c.usb_probe = usb.probe
        c.usb_match = usb.match

        # battery
        charger = self.charger
        v = m.batt_mv
        fs = p.batt_fs_mv
        i = m.batt_ma
        if v < -fs or v > fs or i < -fs_ma or i > fs_ma:
            fault |= F_BATT_SENSOR
            c.batt_duty = charger.block()
            c.batt_out = 0
        else:
            c.batt_out = charger.discharge(v)
            c.batt_duty = charger.update(m, dt, floor)
            fault |= charger.fault
        c.stage = ST_BLOCKED if charger.blocked else charger.stage

        # supercap
        clamp = self.clamp
        v = m.cap_mv
        i = m.cap_ma
        if (v < _NEG_MV or v > p.cap_fs_mv or i < -fs_ma or i > fs_ma
                or (m.n_taps and self._taps_implausible())):
            fault |= F_CAP_SENSOR
            c.cap_duty = clamp.block()
        else:
            c.cap_duty = clamp.update(m, floor + _CAP_FLOOR_MV)
            fault |= clamp.fault
        c.bal_mask = clamp.bal_mask
        c.fault = fault

    @micropython.native
    def _bus_contradicted(self):
        """A buck cannot push current into a store that sits above its input: a bus reading
        below the battery (or bank) while that converter runs and current flows is wrong.
        Latched until the bus reads above both stores again (a stuck-low bus sensor would
        otherwise let the converters restart every other tick), or until no current flows into
        either store and the reading has moved from where it lied (then a low bus contradicts
        nothing: a source that stopped, read once with a lagging current sample, must not keep
        the battery's loads off; a stuck sensor reads the same value on and on)."""
        m = self.m
        c = self.c
        p = self.p
        b = m.bus_mv + _XCHK_MV
        # only plausible readings may contradict the bus: an implausible one is its own fault
        bus = m.bus_mv
        if ((c.batt_duty and _XCHK_MA < m.batt_ma <= p.batt_fs_ma
             and b < m.batt_mv <= p.batt_fs_mv)
                or (c.cap_duty and _XCHK_MA < m.cap_ma <= p.batt_fs_ma
                    and b < m.cap_mv <= p.cap_fs_mv)):
            self.bus_lie = 1
            self.lie_mv = bus
        elif self.bus_lie and ((bus > m.batt_mv + _XCHK_MV and bus > m.cap_mv + _XCHK_MV)
                               or (m.batt_ma <= _XCHK_MA and m.cap_ma <= _XCHK_MA
                                   and bus != self.lie_mv)):
            self.bus_lie = 0
        return self.bus_lie

    @micropython.native
    def _taps_implausible(self):
        m = self.m
        top = 2 * self.p.cap_cell_rating_mv
        for i in range(m.n_taps):
            if m.cell_mv[i] < _NEG_MV or m.cell_mv[i] > top:
                return 1
        return 0
