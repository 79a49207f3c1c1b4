# The limits a closed-loop run must hold, judged on the plant's true values (not the
# controller's readings) after every control period. Each limit keeps its worst margin and when
# it happened, for summary.json and the exit status of `spinrail simulate`.
import math

from controller.signals import ST_ABSORPTION, ST_BLOCKED, ST_BULK, ST_EQUALIZE

BATT_A_TOL = 1.10  # battery current may exceed its limit by 10 % ...
CAP_TOL = 1.01  # supercap bank may exceed its clamp by 1 %
CHARGING_A = 0.05  # the ceiling is judged while charge current flows (a resting battery relaxes)
LEDGER_TOL_PCT = 0.5


# Hard caps on compensated setpoints, V/cell (docs/profile.md). Repeated here on purpose: the
# checker is an oracle written apart from the controller, so a controller bug cannot move it.
_CAP_ABS = 2.50
_CAP_EQ = 2.60
_CAP_FLOAT = 2.35


def ceiling_v(p, stage, temp_c):
    """Active stage ceiling of the block in volts at a battery temperature, computed in floats
    from the profile: cells x (V_cell + coeff x (T - T_ref)), T clamped to the charging window,
    within the hard caps."""
    t = min(max(temp_c, p.temp_min_dc / 10.0), p.temp_max_dc / 10.0)
    coeff_v = p.tc_uv_dc_cell * 10e-6  # uV per deci-degree -> V per degree
    if stage in (ST_BULK, ST_ABSORPTION):
        cell, cap = p.abs_cell_mv / 1000.0, _CAP_ABS
    elif stage == ST_EQUALIZE:
        cell, cap = p.eq_cell_mv / 1000.0, _CAP_EQ
    else:
        cell, cap = p.float_cell_mv / 1000.0, _CAP_FLOAT
    return p.cells * min(cell + coeff_v * (t - p.ref_temp_dc / 10.0), cap)


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
    def __init__(self, p, period_s, bus_limit_v):
        self.p = p
        self.period_s = period_s
        self.bus_limit_v = bus_limit_v
        self.margin_v = p.over_margin_mv / 1000.0
        self.over_i_s = 0.0  # how long the battery current has been above limit x 1.1
        self.lim = {
            "batt_ceiling": Limit("batt_ceiling", "V", "battery terminal voltage while charging <= "
                                  "active compensated ceiling + 0.1 V per 12 V block"),
            "batt_current": Limit("batt_current", "A", "battery charge current <= limit x 1.1 "
                                  "(transients shorter than one control period excepted)"),
            "cap_clamp": Limit("cap_clamp", "V", "supercap bank (behind its ESR: the voltage "
                               "that stresses the cells) <= clamp x 1.01"),
            "cap_cell": Limit("cap_cell", "V", "every supercap cell <= its rating"),
            "usb_vbus": Limit("usb_vbus", "V", "VBUS inside 4.75-5.25 V (the profile's window) "
                              "whenever the port is switched on, judged on the true VBUS at the "
                              "tick that decided it; margin to the nearer edge"),
            "bus": Limit("bus", "V", "bus <= overvoltage trip + surge-clamp margin"),
            "ledger": Limit("ledger", "%", "energy ledger balance error <= 0.5 %"),
        }

    def check(self, t_s, s, c, stage):
        """s: plant snapshot after the period; c: the commands that were applied;
        stage: the battery stage the controller reported."""
        p = self.p
        L = self.lim
        if s["batt_a"] > CHARGING_A and s.get("batt_connected", 1):
            if stage == ST_BLOCKED:
                ceil_v = 0.0  # no charge current may flow while blocked
            else:
                ceil_v = ceiling_v(p, stage, s["batt_temp_c"])
            L["batt_ceiling"].see(t_s, s["batt_v"], ceil_v + self.margin_v)
        lim_a = p.chg_limit_ma / 1000.0
        if s["batt_a"] > lim_a * BATT_A_TOL:
            self.over_i_s += self.period_s
        else:
            self.over_i_s = 0.0
        # a current above the band counts once it has lasted longer than one control period;
        # the raw peak is kept beside it, so the spikes the rule lets pass stay visible
        L["batt_current"].see_peak(t_s, s["batt_a"])
        L["batt_current"].see(t_s, s["batt_a"] if self.over_i_s > self.period_s + 1e-9
                              else min(s["batt_a"], lim_a * BATT_A_TOL), lim_a * BATT_A_TOL)
        L["cap_clamp"].see(t_s, s.get("cap_v_int", s["cap_v"]), p.cap_clamp_mv / 1000.0 * CAP_TOL)
        L["cap_cell"].see(t_s, s["cell_v_max"], p.cap_cell_rating_mv / 1000.0)
        L["bus"].see(t_s, s["bus_v"], self.bus_limit_v)

    def check_usb(self, t_s, vbus_v, usb_on):
        """At a tick: the port may be on only if the true VBUS the controller was shown (its
        reading taken now) is inside the window."""
        if usb_on:
            p = self.p
            lo = p.vbus_min_mv / 1000.0
            hi = p.vbus_max_mv / 1000.0
            # two-sided window: the margin is the distance to the nearer edge
            edge = lo if vbus_v - lo < hi - vbus_v else hi
            self.lim["usb_vbus"].see(t_s, vbus_v, edge, min(vbus_v - lo, hi - vbus_v))

    def finish(self, t_s, balance_error_pct):
        self.lim["ledger"].see(t_s, abs(balance_error_pct), LEDGER_TOL_PCT)
        return self.lim

    def crossed(self):
        return [x for x in self.lim.values() if not x.held]
