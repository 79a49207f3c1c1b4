# Installation profile: JSON in volts, amps, seconds and degrees C; validated once at load and
# converted to the integer units the tick uses (mV, mA, ms, deci-degrees C).
# Reading and validating a document is load-time code, kept out of this module (which stays
# in RAM with every Profile): profile_load.py reads the file, profile_fields.py,
# profile_battery.py and profile_system.py hold the rules. They are imported only while a
# profile is validated: a board drops them afterwards (forget_rules) and gets their RAM back
# for the control loop.
import sys

_RULES = ("controller.profile_load", "controller.profile_fields", "controller.profile_battery",
          "controller.profile_system")


class Profile:
    """Validated installation settings in integer units. Built only by from_dict()."""

    def __init__(self):
        self.name = ""
        # battery
        self.chemistry = "agm"
        self.cells = 6  # cells in series
        self.capacity_mah = 0  # rated capacity C, mAh
        self.abs_cell_mv = 0  # absorption at ref temperature, mV per cell
        self.float_cell_mv = 0  # float at ref temperature, mV per cell
        self.eq_cell_mv = 0  # equalize at ref temperature, mV per cell; 0: not allowed
        self.eq_ms = 0  # equalize time limit, ms
        self.tc_uv_dc_cell = 0  # temperature coefficient, uV per deci-degree C per cell
        self.ref_temp_dc = 250  # reference temperature of the setpoints, deci-degrees C
        self.chg_limit_ma = 0  # battery charge-current limit, mA
        self.tail_ma = 0  # absorption ends when current stays at or below this, mA
        self.tail_hold_ms = 0  # ... for this long, ms
        self.abs_max_ms = 0  # absorption time limit (charging time only), ms
        self.temp_min_dc = 0  # charging temperature window, deci-degrees C
        self.temp_max_dc = 0
        self.rebulk_cell_mv = 0  # float returns to bulk below this, mV per cell ...
        self.rebulk_hold_ms = 0  # ... held this long, ms
        self.absent_mv = 0  # below this the battery counts as absent or open, mV (block)
        self.over_margin_mv = 0  # ceiling margin: 100 mV per 12 V block, scaled per cell
        self.lvd_mv = 0  # low-voltage disconnect: discharge switch opens below this, mV (block)
        self.lvr_mv = 0  # ... and closes again at or above this, mV (block)
        # supercap bank
        self.cap_cells = 0
        self.cap_cell_rating_mv = 0  # maker's rated cell voltage, mV
        self.cap_clamp_mv = 0  # bank clamp, mV (at or below cells x rating)
        self.cap_hyst_mv = 0  # recharge starts below clamp - hysteresis, mV
        self.cap_limit_ma = 0  # bank charge-current limit, mA
        self.cap_headroom_mv = 0  # limit x path resistance: duty ceiling above bank voltage, mV
        self.cap_taps = False  # board senses each cell and drives bleeders
        self.cap_bal_mv = 0  # bleed a cell this far above the cell mean, mV
        # USB port
        self.scheme = 0  # index into SCHEMES
        self.vbus_min_mv = 0
        self.vbus_max_mv = 0
        self.vbus_on_min_mv = 0  # the window shrunk by the VBUS sensor's tolerance, mV
        self.vbus_on_max_mv = 0
        self.line_tol_pct = 0  # data-line window, +/- percent of the nominal level
        self.short_tol_mv = 0  # largest D+/D- difference that still counts as shorted, mV
        self.usb_debounce_ms = 0  # readings stable this long before the port closes, ms
        self.usb_bus_min_mv = 0  # 5 V converter starts at this bus, mV ...
        self.usb_bus_hyst_mv = 0  # ... and stops at usb_bus_min_mv - this, mV
        # bus
        self.ovp_trip_mv = 0
        self.ovp_recover_mv = 0
        self.ovp_hold_ms = 0  # bus below recovery this long before the latch clears, ms
        self.trip_window_ms = 0  # trips counted over this window, ms ...
        self.lockout_trips = 0  # ... this many lock the outputs off until reset
        self.floor_mv = 0  # converters back off below this bus voltage, mV
        # sensor ranges: a reading outside [-neg, full scale] is implausible
        self.bus_fs_mv = 0
        self.batt_fs_mv = 0
        self.batt_fs_ma = 0
        self.cap_fs_mv = 0
        self.vbus_fs_mv = 0
        self.line_fs_mv = 0
        self.vbus_gain_tol_ppm = 0  # VBUS sensor gain tolerance, ppm of the reading ...
        self.vbus_offset_tol_mv = 0  # ... and offset tolerance, mV (the port's guard band)
        self.temp_lsb_dc = 1  # battery temperature sensor resolution, deci-degrees C
        # control
        self.period_ms = 0  # tick period, ms
        self.mppt = False  # hold the machine near its maximum power point (wind, hydro)
        self.mppt_step_mv = 0  # bus setpoint perturbation, mV
        self.mppt_interval_ms = 0  # time between perturbations, ms
        self.overspeed_mv = 0  # MPPT: dump load ramps in above this bus, mV

    def to_dict(self):
        """The resolved integer settings (for reports and the host tools)."""
        d = {}
        for k in dir(self):
            if not k.startswith("_"):
                v = getattr(self, k)
                if isinstance(v, (int, str, bool)):
                    d[k] = v
        return d


def from_dict(doc):
    """Validate a parsed profile document and return a Profile. Raises ConfigError."""
    from controller.profile_load import from_dict as _from_dict
    return _from_dict(doc)


def load(path):
    """Read and validate a profile file. Raises ConfigError (also for unreadable JSON)."""
    from controller.profile_load import load as _load
    return _load(path)


def forget_rules():
    """Drop the validation modules (a board calls this after loading its profile, before the
    control loop, so their code does not occupy the heap)."""
    import controller
    for name in _RULES:
        if name in sys.modules:
            del sys.modules[name]
        short = name.split(".")[1]
        if hasattr(controller, short):
            delattr(controller, short)


def default_path():
    """Path of the shipped default profile (next to this module)."""
    here = __file__.rsplit("/", 1)[0] if "/" in __file__ else "."
    return here + "/default_profile.json"
