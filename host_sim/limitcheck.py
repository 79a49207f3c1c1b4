# The limits a closed-loop run must hold, judged on the plant's true values (not the
# controller's readings) after every control period. Each limit keeps its worst margin and when
# it happened, for summary.json and the exit status of `spinrail simulate`.
import math

from controller.signals import ST_ABSORPTION, ST_BLOCKED, ST_BULK, ST_EQUALIZE

BATT_A_TOL = 1.10  # battery current may exceed its limit by 10 % ...
CAP_A_TOL = 1.10  # ... and so may the supercap's charge current (the same rule)
CAP_TOL = 1.01  # supercap bank may exceed its clamp by 1 %
CHARGING_A = 0.05  # the ceiling is judged while charge current flows (a resting battery relaxes)
LEDGER_TOL_PCT = 0.5


# Every limit below comes from the profile *document* (the JSON the user wrote) and the defaults
# docs/profile.md states for what it leaves out, in floats; never from the controller's converted
# Profile. Repeated here on purpose: the checker is an oracle written apart from the controller
# (as tests/controller/ctl_props.py is), so a bug in the controller or in its profile conversion
# cannot move the limit it is judged against.
# docs/profile.md, battery: per chemistry (absorption, float, equalize V/cell, temperature
# coefficient mV/C/cell, charge limit in C)
_CHEM = {"flooded": (2.45, 2.23, 2.58, -5.0, 0.125),
         "agm": (2.42, 2.27, None, -4.0, 0.2),
         "gel": (2.37, 2.25, None, -5.0, 0.05)}
# docs/profile.md: hard caps on compensated setpoints, V/cell
_CAP_ABS = 2.50
_CAP_EQ = 2.60
_CAP_FLOAT = 2.35


class DocLimits:
    """The limits of one profile document (a dict as loaded from JSON), in V, A, C and s."""

    def __init__(self, doc):
        b, s = doc.get("battery", {}), doc.get("supercap", {})
        u, bus, ctl = doc.get("usb", {}), doc.get("bus", {}), doc.get("control", {})
        chem = b.get("chemistry", "agm")
        d_abs, d_flt, d_eq, d_tc, d_lim_c = _CHEM[chem]
        self.cells = b.get("cells", 6)
        cap_ah = b.get("capacity_ah", 7.0)
        self.abs_v_cell = b.get("absorption_v_per_cell", d_abs)
        self.float_v_cell = b.get("float_v_per_cell", d_flt)
        self.eq_v_cell = b.get("equalize_v_per_cell", d_eq)  # None: equalizing not allowed
        self.tc_v_cell = b.get("temp_coeff_mv_per_c_per_cell", d_tc) / 1000.0  # V/C/cell
        self.ref_c = b.get("ref_temp_c", 25)
        self.temp_min_c = b.get("charge_temp_min_c", 0)
        self.temp_max_c = b.get("charge_temp_max_c", 45)
        self.chg_limit_a = b.get("charge_limit_a", d_lim_c * cap_ah)
        self.margin_v = 0.1 * self.cells / 6.0  # 0.1 V per 12 V block
        self.cap_cell_rating_v = s.get("cell_rating_v", 2.7)
        self.cap_clamp_v = (s.get("cells", 6) * self.cap_cell_rating_v
                            * (100 - s.get("clamp_derate_pct", 10)) / 100.0)
        self.cap_limit_a = s.get("charge_limit_a", 2.0)
        self.vbus_min_v = u.get("vbus_min_v", 4.75)
        self.vbus_max_v = u.get("vbus_max_v", 5.25)
        self.ovp_trip_v = bus.get("ovp_trip_v", 24)
        self.period_s = ctl.get("period_ms", 50) / 1000.0


def ceiling_v(lims, stage, temp_c):
    """Active stage ceiling of the block in volts at a battery temperature (lims: DocLimits):
    cells x (V_cell + coeff x (T - T_ref)), T clamped to the charging window, within the hard
    caps. An equalize the document does not allow is judged against absorption."""
    t = min(max(temp_c, lims.temp_min_c), lims.temp_max_c)
    if stage == ST_EQUALIZE and lims.eq_v_cell is not None:
        cell, cap = lims.eq_v_cell, _CAP_EQ
    elif stage in (ST_BULK, ST_ABSORPTION, ST_EQUALIZE):
        cell, cap = lims.abs_v_cell, _CAP_ABS
    else:
        cell, cap = lims.float_v_cell, _CAP_FLOAT
    return lims.cells * min(cell + lims.tc_v_cell * (t - lims.ref_c), cap)


def bus_limit_v(profile_doc, clamp_margin_v):
    """Bus limit for the closed-loop check: the document's trip plus the surge clamp's margin."""
    return DocLimits(profile_doc).ovp_trip_v + float(clamp_margin_v)


class Limit:
    """One limit: value must stay <= limit (margin = limit - value, negative when crossed)."""

    def __init__(self, name, unit, what):
        self.name = name
        self.unit = unit
        self.what = what
        self.worst_margin = math.inf
        self.worst = None  # value at the worst margin
        self.limit = None  # limit at the worst margin
        self.t_worst_s = None
        self.crossed_at_s = None  # first time the limit was crossed
        self.peak = None  # largest raw value, where a rule lets short excursions pass
        self.t_peak_s = None

    def see(self, t_s, value, limit, margin=None):
        if margin is None:
            margin = limit - value
        if margin < self.worst_margin:
            self.worst_margin = margin
            self.worst = value
            self.limit = limit
            self.t_worst_s = t_s
        if margin < 0 and self.crossed_at_s is None:
            self.crossed_at_s = t_s

    def see_peak(self, t_s, value):
        if self.peak is None or value > self.peak:
            self.peak = value
            self.t_peak_s = t_s

    @property
    def held(self):
        return self.crossed_at_s is None

    def as_dict(self):
        def r(x):
            return None if x is None or (isinstance(x, float) and not math.isfinite(x)) else round(x, 4)
        d = {"held": self.held, "worst": r(self.worst), "limit": r(self.limit),
             "t_worst_s": r(self.t_worst_s), "margin": r(self.worst_margin),
             "first_crossed_s": r(self.crossed_at_s), "unit": self.unit, "what": self.what}
        if self.peak is not None:
            d["peak"] = r(self.peak)
            d["t_peak_s"] = r(self.t_peak_s)
        return d


class LimitChecker:
    def __init__(self, profile_doc, bus_limit_v):
        """profile_doc: the profile document as written (a dict); bus_limit_v: the bus limit
        (bus_limit_v() of the document and the scenario's clamp margin)."""
        self.doc = DocLimits(profile_doc)
        self.period_s = self.doc.period_s
        self.bus_limit_v = bus_limit_v
        self.over_s = {"batt_current": 0.0, "cap_current": 0.0}  # time above the band so far
        self.lim = {
            "batt_ceiling": Limit("batt_ceiling", "V", "battery terminal voltage while charging <= "
                                  "active compensated ceiling + 0.1 V per 12 V block"),
            "batt_current": Limit("batt_current", "A", "battery charge current <= limit x 1.1 "
                                  "(transients shorter than one control period excepted)"),
            "cap_clamp": Limit("cap_clamp", "V", "supercap bank (behind its ESR: the voltage "
                               "that stresses the cells) <= clamp x 1.01"),
            "cap_cell": Limit("cap_cell", "V", "every supercap cell <= its rating"),
            "cap_current": Limit("cap_current", "A", "supercap charge current <= limit x 1.1 "
                                 "(transients shorter than one control period excepted)"),
            "usb_vbus": Limit("usb_vbus", "V", "VBUS inside 4.75-5.25 V (the profile's window) "
                              "whenever the port is switched on, judged on the true VBUS at the "
                              "tick that decided it; margin to the nearer edge"),
            "bus": Limit("bus", "V", "bus <= overvoltage trip + surge-clamp margin"),
            "ledger": Limit("ledger", "%", "energy ledger balance error <= 0.5 %"),
        }

    @classmethod
    def for_scenario(cls, sc):
        """The checker of a loaded scenario (host_sim.scenario.Scenario): its profile document
        as written, its bus section's clamp margin."""
        return cls(sc.profile_doc, bus_limit_v(sc.profile_doc, sc.clamp_margin_v))

    def _current(self, name, t_s, value_a, band_a):
        """A current above the band counts once it has lasted longer than one control period;
        the raw peak is kept beside it, so the spikes the rule lets pass stay visible."""
        if value_a > band_a:
            self.over_s[name] += self.period_s
        else:
            self.over_s[name] = 0.0
        lim = self.lim[name]
        lim.see_peak(t_s, value_a)
        lim.see(t_s, value_a if self.over_s[name] > self.period_s + 1e-9
                else min(value_a, band_a), band_a)

    def check(self, t_s, s, c, stage):
        """s: plant snapshot after the period; c: the commands that were applied;
        stage: the battery stage the controller reported."""
        d = self.doc
        L = self.lim
        if s["batt_a"] > CHARGING_A and s.get("batt_connected", 1):
            if stage == ST_BLOCKED:
                ceil_v = 0.0  # no charge current may flow while blocked
            else:
                ceil_v = ceiling_v(d, stage, s["batt_temp_c"])
            L["batt_ceiling"].see(t_s, s["batt_v"], ceil_v + d.margin_v)
        self._current("batt_current", t_s, s["batt_a"], d.chg_limit_a * BATT_A_TOL)
        L["cap_clamp"].see(t_s, s.get("cap_v_int", s["cap_v"]), d.cap_clamp_v * CAP_TOL)
        L["cap_cell"].see(t_s, s["cell_v_max"], d.cap_cell_rating_v)
        self._current("cap_current", t_s, s.get("cap_a", 0.0), d.cap_limit_a * CAP_A_TOL)
        L["bus"].see(t_s, s["bus_v"], self.bus_limit_v)

    def check_usb(self, t_s, vbus_v, usb_on):
        """At a tick: the port may be on only if the true VBUS the controller was shown (its
        reading taken now) is inside the window."""
        if usb_on:
            lo = self.doc.vbus_min_v
            hi = self.doc.vbus_max_v
            # two-sided window: the margin is the distance to the nearer edge
            edge = lo if vbus_v - lo < hi - vbus_v else hi
            self.lim["usb_vbus"].see(t_s, vbus_v, edge, min(vbus_v - lo, hi - vbus_v))

    def finish(self, t_s, balance_error_pct):
        self.lim["ledger"].see(t_s, abs(balance_error_pct), LEDGER_TOL_PCT)
        return self.lim

    def crossed(self):
        return [x for x in self.lim.values() if not x.held]
