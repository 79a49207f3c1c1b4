# Measurements in, Commands out: the two objects that cross the controller's boundary every
# tick. Both are made once and mutated in place (no allocation in the tick).
from controller.compat import MICROPYTHON, const, micropython

DUTY_MAX = const(10000)  # converter and dump duties are in 0.01 % steps: 0 off .. 10000 full

# Battery charging stages (codes); names are the trade's where it has them.
ST_BLOCKED = const(0)  # charging forbidden now: temperature, battery or sensor fault, a guard
ST_BULK = const(1)  # constant current (or whatever the source gives) up to absorption voltage
ST_ABSORPTION = const(2)  # constant compensated voltage until the tail current or time limit
ST_FLOAT = const(3)  # lower compensated holding voltage
ST_EQUALIZE = const(4)  # flooded only, on request, time-limited
# their names (STAGE_NAMES) are host-only: controller/signals_host.py

# Fault bits (Commands.fault). Several may be set at once.
F_OVP = const(1)  # bus at or above the overvoltage trip, or latched after one
F_OVP_LOCKOUT = const(2)  # too many trips in the window: outputs locked until reset
F_BUS_SENSOR = const(4)  # bus reading outside its physical range
F_BATT_SENSOR = const(8)  # battery voltage or current reading outside its range
F_TEMP_SENSOR = const(16)  # battery temperature reading missing or implausible
F_CAP_SENSOR = const(32)  # supercap reading outside its range
F_USB_SENSOR = const(64)  # VBUS or data-line reading outside its range
F_BATT_ABSENT = const(128)  # no battery, or an open battery lead
F_BATT_REVERSED = const(256)  # battery connected backwards
F_TEMP_WINDOW = const(512)  # battery outside the charging temperature window
F_BATT_OVER = const(1024)  # battery above the stage ceiling plus margin
F_CAP_CELL = const(2048)  # a supercap cell at or above its rating
F_USB_LINES = const(4096)  # port check failed: VBUS or data lines do not match
F_FIRMWARE = const(8192)  # the firmware entry caught an exception (set by boards/)
F_LINK = const(16384)  # link mode: measurements stopped arriving (set by the link)
# their names (FAULT_NAMES, bit i -> index i) are host-only: controller/signals_host.py

_MAX_CELL_TAPS = const(12)  # private: no dict entry on the board (host: MAX_CELL_TAPS)


class Measurements:
    """One tick's sensor readings, already scaled to integer engineering units."""

    def __init__(self):
        self.bus_mv = 0  # rectified generator bus, mV
        self.src_ma = 0  # generator (bus input) current, mA; 0 where not sensed
        self.batt_mv = 0  # battery terminal voltage, mV
        self.batt_ma = 0  # battery current, mA, + into the battery
        self.batt_temp_dc = 250  # battery temperature, deci-degrees C
        self.cap_mv = 0  # supercap bank voltage, mV
        self.cap_ma = 0  # supercap charge current, mA, + into the bank; 0 where not sensed
        self.usb_vbus_mv = 0  # 5 V converter output (VBUS), mV
        self.usb_dp_mv = 0  # USB D+ line, mV
        self.usb_dm_mv = 0  # USB D- line, mV
        self.cell_mv = [0] * _MAX_CELL_TAPS  # supercap cell tap voltages, mV (first n_taps used)
        self.n_taps = 0  # how many cell taps the board senses (0: none)
        self.eq_req = 0  # 1 while the user asks for an equalize charge (flooded only)
        self.reset_req = 0  # 1 to clear an overvoltage lockout

    @micropython.native
    def copy_from(self, other):
        self.bus_mv = other.bus_mv
        self.src_ma = other.src_ma
        self.batt_mv = other.batt_mv
        self.batt_ma = other.batt_ma
        self.batt_temp_dc = other.batt_temp_dc
        self.cap_mv = other.cap_mv
        self.cap_ma = other.cap_ma
        self.usb_vbus_mv = other.usb_vbus_mv
        self.usb_dp_mv = other.usb_dp_mv
        self.usb_dm_mv = other.usb_dm_mv
        self.n_taps = other.n_taps
        for i in range(other.n_taps):
            self.cell_mv[i] = other.cell_mv[i]
        self.eq_req = other.eq_req
        self.reset_req = other.reset_req


class Commands:
    """One tick's outputs. Duties in 0.01 % (0..DUTY_MAX); switches 0 or 1."""

    def __init__(self):
        self.batt_duty = 0  # battery buck converter duty
        self.cap_duty = 0  # supercap buck converter duty
        self.dump_duty = 0  # dump-load switch duty (DUTY_MAX: full dump)
        self.usb_conv = 0  # 1: 5 V converter enabled
        self.usb_on = 0  # 1: port load switch closed (phone powered)
        self.usb_probe = 0  # 1: board sources its D+ probe voltage (dedicated-port check)
        self.batt_out = 0  # 1: battery discharge switch closed (loads, and the bus via its diode)
        self.bal_mask = 0  # supercap balancing bleeders, bit i for cell i
        self.stage = 0  # battery stage code (ST_*)
        self.usb_match = 0  # which signalling scheme the data lines match (usbport.SCHEME_*)
        self.fault = 0  # fault bits (F_*)

    @micropython.native
    def set_safe(self):
        """Storage converters, USB and the battery discharge switch off. The dump load is left
        to the overvoltage guard."""
        self.batt_duty = 0
        self.cap_duty = 0
        self.usb_conv = 0
        self.usb_on = 0
        self.usb_probe = 0
        self.bal_mask = 0
        self.batt_out = 0


if not MICROPYTHON:  # the host's names: stage and fault names, MAX_CELL_TAPS
    from controller import signals_host as _host
    _host.publish(globals())
