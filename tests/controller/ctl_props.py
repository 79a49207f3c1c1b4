"""Oracles for the controller's invariants, written apart from the controller.

Every limit is computed from the profile document's own numbers (volts, V/cell, mV/C/cell,
seconds) with exact fractions, and from the documents that define them:
  docs/profile.md             compensated setpoints and their hard caps (2.50 / 2.60 / 2.35 V
                              per cell), the 0.1 V per 12 V block margin, sensor ranges
                              [-0.5 V, full scale] and currents [-full, +full], the OVP latch
  DEVELOPERS.md               the safe state scoped to each implausible reading
  controller/supervisor.py    docstring: a late tick counts as at most four periods; battery
                              voltage readable down to -full scale (to see a reversed battery);
                              cell taps plausible up to twice the cell rating
  controller/leadacid.py      temperature plausible from -40.0 to 85.0 C (open / shorted NTC)
  BC1.2 ch. 5 (DC table)      V_DP_SRC 0.5-0.7 V, V_DAT_REF top 0.4 V and V_LGC bottom 0.8 V
                              (chapter 5 "Parameter Values"); DCP = D+ shorted to D- (§1.4.7)
  common practice             divider levels 2.0 / 2.7 / 1.2 V at VBUS 5.00 V, ratiometric
None of the controller's functions is called here. Each check_* raises AssertionError naming the
tick, its readings and its commands.
"""
import math
from fractions import Fraction as F

from controller.signals import (
    DUTY_MAX,
    F_BATT_SENSOR,
    F_BUS_SENSOR,
    F_CAP_SENSOR,
    F_OVP,
    F_OVP_LOCKOUT,
    F_TEMP_SENSOR,
    F_USB_SENSOR,
)

ST_BLOCKED, ST_BULK, ST_ABSORPTION, ST_FLOAT, ST_EQUALIZE = range(5)  # signals.STAGE_NAMES order
STAGES = {ST_BLOCKED, ST_BULK, ST_ABSORPTION, ST_FLOAT, ST_EQUALIZE}
NEG_MV = -500  # docs/profile.md: voltage readings plausible from -0.5 V
TEMP_PLAUSIBLE_DC = (-400, 850)  # leadacid.py: open NTC colder, shorted NTC hotter
CAP_CELL_PER_CELL = {ST_BULK: 2500, ST_ABSORPTION: 2500, ST_FLOAT: 2350, ST_EQUALIZE: 2600}
LATE_PERIODS = 4  # supervisor.py: a late tick counts as at most four periods
SCHEME_LEVELS = {"div_2v0_2v7": (2000, 2700), "div_2v7_2v0": (2700, 2000),
                 "div_2v7_2v7": (2700, 2700), "short_1v2": (1200, 1200)}
ALL_FAULTS = (1 << 15) - 1


def fv(x):
    """A JSON number as an exact fraction of its decimal text (2.42 is 242/100, not a float)."""
    return F(repr(x)) if isinstance(x, float) else F(x)


def exact(x):
    """A whole fraction as an int (quicker to compare; the same value)."""
    return int(x) if x.denominator == 1 else x


class Limits:
    """The limits of one profile document, in exact mV / mA / ms / deci-degrees."""

    def __init__(self, doc):
        b, s, u, bus, sen, ctl = (doc["battery"], doc["supercap"], doc["usb"], doc["bus"],
                                  doc["sensors"], doc["control"])
        self.cells = b["cells"]
        self.cell_mv = {ST_BULK: fv(b["absorption_v_per_cell"]) * 1000,
                        ST_ABSORPTION: fv(b["absorption_v_per_cell"]) * 1000,
                        ST_FLOAT: fv(b["float_v_per_cell"]) * 1000}
        eq = b.get("equalize_v_per_cell")
        self.flooded = b["chemistry"] == "flooded"
        if eq is not None:
            self.cell_mv[ST_EQUALIZE] = fv(eq) * 1000
        self.coeff = fv(b["temp_coeff_mv_per_c_per_cell"])  # mV per C per cell
        self.ref_c = fv(b["ref_temp_c"])
        self.tmin_dc = fv(b["charge_temp_min_c"]) * 10
        self.tmax_dc = fv(b["charge_temp_max_c"]) * 10
        self.margin_mv = F(100 * self.cells, 6)  # 0.1 V per 12 V block
        # the charge limit as the profile's integer mA (to_int rounding)
        self.chg_lim_ma = math.floor(fv(b["charge_limit_a"]) * 1000 + F(1, 2))
        self.absent_mv = fv(b["absent_v_per_cell"]) * 1000 * self.cells
        self.clamp_mv = (s["cells"] * fv(s["cell_rating_v"]) * 1000
                         * (100 - fv(s["clamp_derate_pct"])) / 100)
        self.cell_rating_mv = fv(s["cell_rating_v"]) * 1000
        self.taps = s["cell_taps"]
        self.scheme = u["scheme"]
        self.vbus_min_mv = fv(u["vbus_min_v"]) * 1000
        self.vbus_max_mv = fv(u["vbus_max_v"]) * 1000
        # docs/profile.md, sensors: the port switches on only inside the window shrunk by the
        # VBUS sensor's tolerance (gain x the edge, rounded up to the mV, plus the offset)
        g = fv(sen.get("vbus_gain_tol_pct", 0.5)) / 100
        off = fv(sen.get("vbus_offset_tol_mv", 4))
        self.vbus_on_min_mv = self.vbus_min_mv + math.ceil(self.vbus_min_mv * g) + off
        self.vbus_on_max_mv = self.vbus_max_mv - math.ceil(self.vbus_max_mv * g) - off
        self.line_tol = fv(u["line_tolerance_pct"]) / 100
        self.short_mv = fv(u["short_tolerance_mv"])
        self.debounce_ms = fv(u["debounce_ms"])
        self.trip_mv = fv(bus["ovp_trip_v"]) * 1000
        self.recover_mv = fv(bus["ovp_recover_v"]) * 1000
        self.hold_ms = fv(bus["ovp_hold_ms"])
        self.window_ms = fv(bus["trip_window_s"]) * 1000
        self.lockout_n = bus["lockout_trips"]
        self.bus_fs = fv(sen["bus_full_scale_v"]) * 1000
        self.batt_fs = fv(sen["batt_full_scale_v"]) * 1000
        self.i_fs = fv(sen["batt_current_full_scale_a"]) * 1000
        self.cap_fs = fv(sen["cap_full_scale_v"]) * 1000
        self.vbus_fs = fv(sen["vbus_full_scale_v"]) * 1000
        self.line_fs = fv(sen["line_full_scale_v"]) * 1000
        self.period_ms = ctl["period_ms"]
        self.mppt = ctl.get("mppt", False)
        ovs = ctl.get("overspeed_bus_v")
        self.overspeed_mv = fv(ovs) * 1000 if (self.mppt and ovs is not None) else None
        for k, v in list(vars(self).items()):
            if isinstance(v, F):
                setattr(self, k, exact(v))
        self._ceil = {}

    # -- battery
    def ceiling_mv(self, stage, temp_dc):
        """cells x min(V_stage + coeff x (T - T_ref), cap), T clamped to the charging window."""
        key = (stage, temp_dc)
        if key not in self._ceil:
            t_dc = F(min(max(F(temp_dc), self.tmin_dc), self.tmax_dc))  # (an int edge: still exact)
            per_cell = self.cell_mv[stage] + self.coeff * (t_dc / 10 - self.ref_c)
            self._ceil[key] = exact(self.cells * min(per_cell, CAP_CELL_PER_CELL[stage]))
        return self._ceil[key]

    def temp_ok(self, temp_dc):
        return self.tmin_dc <= temp_dc <= self.tmax_dc

    # -- plausibility (one reading at a time)
    def bus_plausible(self, m):
        return NEG_MV <= m.bus_mv <= self.bus_fs and -self.i_fs <= m.src_ma <= self.i_fs

    def batt_plausible(self, m):
        return -self.batt_fs <= m.batt_mv <= self.batt_fs and -self.i_fs <= m.batt_ma <= self.i_fs

    def cap_plausible(self, m, cells):
        return (NEG_MV <= m.cap_mv <= self.cap_fs and -self.i_fs <= m.cap_ma <= self.i_fs
                and all(NEG_MV <= x <= 2 * self.cell_rating_mv for x in cells))

    def usb_plausible(self, m):
        return (NEG_MV <= m.usb_vbus_mv <= self.vbus_fs
                and NEG_MV <= m.usb_dp_mv <= self.line_fs
                and NEG_MV <= m.usb_dm_mv <= self.line_fs)

    @staticmethod
    def temp_plausible(m):
        return TEMP_PLAUSIBLE_DC[0] <= m.batt_temp_dc <= TEMP_PLAUSIBLE_DC[1]

    # -- USB
    def lines_match(self, dp, dm, vbus, probe):
        """Do the data lines show the profile's scheme? probe: the board's D+ probe was on
        while they were read."""
        shorted = abs(dp - dm) <= self.short_mv
        if self.scheme == "dcp":
            if probe:  # BC1.2 ch. 5: V_DP_SRC on D+, D- above V_DAT_REF's top
                return shorted and 500 <= dp <= 700 and dm > 400
            return shorted and dp < 800 and dm < 800  # below V_LGC's bottom (BC1.2 ch. 5)
        if probe:
            return False  # the board never probes for the other schemes
        dp_nom, dm_nom = SCHEME_LEVELS[self.scheme]
        if self.scheme == "short_1v2" and not shorted:
            return False  # D+ tied to D- (common practice)
        return self._near(dp, dp_nom, vbus) and self._near(dm, dm_nom, vbus)

    def _near(self, x, nom_mv, vbus):
        level = F(nom_mv) * vbus / 5000  # dividers track VBUS (derived)
        # +1 mV: readings and levels are whole millivolts
        return abs(x - level) <= level * self.line_tol + 1


def late_dt(dt_ms, period_ms):
    return min(max(dt_ms, 0), LATE_PERIODS * period_ms)


def _where(t, why):
    return "tick %d (now_ms %d): %s\n  readings %r cells %r\n  commands %r" % (
        t.k, t.now_ms, why, t.m, t.cells, t.c)


def storage_and_usb_off(c):
    return c.batt_duty == 0 and c.cap_duty == 0 and c.usb_on == 0 and c.usb_conv == 0


# --- the invariants -------------------------------------------------------------------------
def check_i1(ticks, L):
    """I1: batt_duty is 0 when batt_mv is above the active stage's compensated ceiling by more
    than 0.1 V per 12 V block, and never rises while batt_mv is at or above the ceiling."""
    prev = 0
    for t in ticks:
        m, c = t.m, t.c
        if c.stage == ST_BLOCKED:
            assert c.batt_duty == 0, _where(t, "blocked, yet the battery converter runs")
        else:
            ceil = L.ceiling_mv(c.stage, m.batt_temp_dc)
            if m.batt_mv > ceil + L.margin_mv:
                assert c.batt_duty == 0, _where(
                    t, "battery %d mV over ceiling %.1f + margin, duty %d"
                    % (m.batt_mv, float(ceil), c.batt_duty))
            if m.batt_mv >= ceil:
                assert c.batt_duty <= prev, _where(
                    t, "at/above ceiling %.1f mV the duty rose %d -> %d"
                    % (float(ceil), prev, c.batt_duty))
        prev = c.batt_duty


def check_i2(ticks, L):
    """I2: batt_duty is 0 outside the charging temperature window (implausible readings are
    outside it too)."""
    for t in ticks:
        if not L.temp_ok(t.m.batt_temp_dc):
            assert t.c.batt_duty == 0, _where(t, "charging outside the temperature window")


def check_i3(ticks, L):
    """I3: cap_duty is 0 at or above the clamp, and while a sensed cell is at or above its
    rating."""
    for t in ticks:
        if t.m.cap_mv >= L.clamp_mv:
            assert t.c.cap_duty == 0, _where(t, "supercap charging at/above the clamp")
        if L.taps and any(x >= L.cell_rating_mv for x in t.cells):
            assert t.c.cap_duty == 0, _where(t, "supercap charging with a cell at its rating")


def check_i4(ticks, L):
    """I4: usb_on is 1 only while VBUS is inside its window, shrunk by the VBUS sensor's
    tolerance, and the data lines show the
    profile's scheme (judged with the probe state they were read in), and only after they
    have done so for the debounce time; and only with the converter on."""
    probe = 0  # the probe command in force while this tick's readings were taken
    since_ms = ticks[0].t_abs if ticks else 0  # time of the last tick that was not ok
    for t in ticks:
        m, c = t.m, t.c
        ok = (c.usb_conv == 1 and L.vbus_on_min_mv <= m.usb_vbus_mv <= L.vbus_on_max_mv
              and L.usb_plausible(m) and L.lines_match(m.usb_dp_mv, m.usb_dm_mv, m.usb_vbus_mv,
                                                      probe))
        if not ok:
            since_ms = t.t_abs
        if c.usb_on:
            assert c.usb_conv == 1, _where(t, "port on with the converter off")
            assert ok, _where(t, "port on but VBUS/lines do not show %s (probe %d)"
                              % (L.scheme, probe))
            assert t.t_abs - since_ms >= L.debounce_ms, _where(
                t, "port on after %d ms of matching readings, debounce %s ms"
                % (t.t_abs - since_ms, L.debounce_ms))
        probe = c.usb_probe


class OvpOracle:
    """The overvoltage latch and lockout as docs/profile.md describes them, tick by tick."""

    def __init__(self, L):
        self.L = L
        self.latched = False
        self.locked = False
        self.below_ms = 0
        self.trips = []  # unwrapped times of trips since the last reset

    def step(self, t, dt_ms, suspect=False):
        """One tick. suspect: the bus voltage reading is in range but the controller's own
        cross-checks rejected it (see bus_suspect); a suspect reading is no evidence that the
        bus is below recovery, so the latch may hold through it."""
        L, m = self.L, t.m
        over = m.bus_mv > L.bus_fs or m.bus_mv >= L.trip_mv  # over range counts as a trip
        if over:
            self.below_ms = 0
            if not self.latched:
                self.latched = True
                self.trips.append(t.t_abs)
                if (len(self.trips) >= L.lockout_n
                        and t.t_abs - self.trips[-L.lockout_n] < L.window_ms):
                    self.locked = True
        elif self.latched:
            # only a reading the sensor can vouch for shows the bus below recovery
            if NEG_MV <= m.bus_mv < L.recover_mv and not suspect:
                self.below_ms += late_dt(dt_ms, L.period_ms)
                if self.below_ms >= L.hold_ms:
                    self.latched = False
                    self.below_ms = 0
            else:
                self.below_ms = 0
        if m.reset_req and self.locked and not self.latched:
            self.locked = False
            self.trips = []


RELEASE_PERIODS = 10  # overvolt.py: after the latch clears the dump steps down over ten periods
SOFT_RELEASE = DUTY_MAX // 20  # docs/profile.md: the soft zone's dump falls 5 % per period
OVERSPEED_RAMP_MV = 1000  # docs/profile.md: the overspeed dump goes 0 -> full over 1 V ...
OVERSPEED_RELEASE = DUTY_MAX // 20  # ... and falls by at most 5 % of full per period;
OVERSPEED_KI_SHIFT = 2  # once in, it integrates the bus error: err >> 2 duty per period


def bus_suspect(t, L):
    """The controller flagged the bus sensor although every bus reading is in range: its own
    cross-check (a converter delivering current from a bus below its store) doubts the bus
    voltage. (A source current out of range flags the bus sensor too, but leaves the bus
    voltage reading usable.)"""
    return bool(t.c.fault & F_BUS_SENSOR) and L.bus_plausible(t.m)


def check_i5(ticks, L):
    """I5: at or above the trip (or a bus reading above full scale) the dump load is fully on,
    USB off and both storage duties 0, in that tick; the latch holds until the bus has read
    below recovery for the hold time, then the dump load steps down to off over ten periods;
    lockout_trips trips within the window keep every output off until reset.
    Between recovery and the trip the dump load comes in in proportion at once (on a bus
    running up, more than 1/64 of itself in a period, none at recovery and full at the trip,
    judged where twice the last period's rise would take it, only when the battery had no room
    for the rise and the stores did not make it; on any other bus
    over the zone's top eighth only) and lets go by at most 5 % of full per period; a storage
    converter that steps off carrying current on a bus running up puts it fully on. While the
    controller's cross-check holds the bus reading false, the dump load is fully on (also on a
    tick whose reading is out of range: the latch carries over it). With MPPT and an
    overspeed level the dump load also follows the bus above it (full over 1 V) at once, and
    once in integrates the bus error over overspeed (err >> 2 per period), falling by at most
    5 % of full per period; while a bus fault or the guard keeps the
    tracker from running, the overspeed dump holds its last duty (docs/profile.md, control)."""
    o = OvpOracle(L)
    prev_abs = None
    guard_dump = 0  # what the guard asks of the dump load
    ovs_dump = 0  # what overspeed asks of it (advanced on the ticks that reach the tracker)
    soft_dump = 0  # the guard's soft zone (docs/profile.md, bus)
    prev_gb = 0  # the bus the guard judged last period, mV (0: none, or a stand-in)
    prev_bd = prev_cd = 0  # last tick's storage duties
    prev_stage = ST_BLOCKED  # last tick's stage
    trip_mv = math.floor(L.trip_mv + F(1, 2))  # the profile's integer mV (to_int rounding)
    rec_mv = math.floor(L.recover_mv + F(1, 2))
    span_mv = max(1, trip_mv - rec_mv)
    lie = False  # the controller's cross-check latch on the bus reading: seen through the bus
    # bit on a plausible reading; a reading out of range neither sets nor clears it (the
    # cross-check judges plausible readings only), so it carries over such a tick
    for t in ticks:
        m, c = t.m, t.c
        suspect = bus_suspect(t, L)
        if L.bus_plausible(m):
            lie = suspect
        o.step(t, 0 if prev_abs is None else t.t_abs - prev_abs, suspect)
        prev_abs = t.t_abs
        # the bus the guard judges: over range counts as the trip; below range, or a reading
        # the cross-check doubts (under the trip), as the recovery level
        gb = m.bus_mv
        if gb > L.bus_fs:
            gb = trip_mv
        elif gb < NEG_MV or (suspect and gb < trip_mv):
            gb = rec_mv
        # on a bus that rose since the last period the soft zone reads twice that rise ahead;
        # a stand-in value (a reading out of range, or one the cross-check doubts) gives no
        # rise, into it or out of it
        standin = suspect or not L.bus_plausible(m)
        # (only a bus running up: more than 1/64 of itself; a steady one over the zone's top
        # eighth alone)
        running_up = bool(not standin and prev_gb and gb - prev_gb > gb >> 6)
        # ... only when no store has room for the rise (last tick the
        # battery in bulk, its converter on, its current under 7/8 of its limit) and the
        # stores did not make it (the bus 0.3 V over both last period, or the source giving
        # over 200 mA)
        lim = L.chg_lim_ma
        no_ahead = ((prev_bd and prev_stage == ST_BULK and m.batt_ma < lim - (lim >> 3))
                    or (m.src_ma <= 200 and (prev_gb - 300 <= m.batt_mv
                                             or prev_gb - 300 <= m.cap_mv)))
        if running_up and not no_ahead:
            zone_mv = span_mv
            over = gb + 2 * (gb - prev_gb) - rec_mv
        else:
            zone_mv = max(1, (trip_mv - rec_mv) >> 3)
            over = gb - trip_mv + zone_mv
        prev_gb = 0 if standin else max(gb, 0)
        prop = 0 if over <= 0 else min(DUTY_MAX, over * DUTY_MAX // zone_mv)
        soft_dump = max(prop, soft_dump - SOFT_RELEASE)
        # a store's converter that steps off carrying current (over 200 mA) on a bus running
        # up: the dump takes its place, fully on, letting go as the soft zone does
        if (running_up and not c.fault & (F_BUS_SENSOR | F_OVP | F_OVP_LOCKOUT)
                and ((prev_bd and not c.batt_duty and m.batt_ma > 200)
                     or (prev_cd and not c.cap_duty and m.cap_ma > 200))):
            soft_dump = DUTY_MAX
        prev_bd, prev_cd, prev_stage = c.batt_duty, c.cap_duty, c.stage
        if L.overspeed_mv is not None and not c.fault & (F_BUS_SENSOR | F_OVP | F_OVP_LOCKOUT):
            over = m.bus_mv - L.overspeed_mv
            prop = 0 if over <= 0 else min(DUTY_MAX, over * DUTY_MAX // OVERSPEED_RAMP_MV)
            held = ovs_dump
            if held:
                held = min(DUTY_MAX, held + max(-OVERSPEED_RELEASE, over >> OVERSPEED_KI_SHIFT))
            ovs_dump = max(prop, held)
        if o.latched:
            guard_dump = DUTY_MAX
            assert c.dump_duty == DUTY_MAX, _where(t, "latched, dump load not fully on")
            assert storage_and_usb_off(c) and c.batt_out == 0, _where(t, "latched, outputs on")
            assert c.fault & F_OVP, _where(t, "latched, ovp bit clear")
        else:
            guard_dump = max(0, guard_dump - DUTY_MAX // RELEASE_PERIODS)
            assert not c.fault & F_OVP, _where(t, "ovp bit set with the latch clear")
            want = max(guard_dump, soft_dump, ovs_dump)
            if lie:  # the cross-check proved the bus reading false: the dump holds the bus
                want = DUTY_MAX
            assert c.dump_duty == want, _where(
                t, "dump %d, the guard's release ramp is at %d, its soft zone at %d, overspeed "
                   "asks %d" % (c.dump_duty, guard_dump, soft_dump, ovs_dump))
        if o.locked:
            assert c.fault & F_OVP_LOCKOUT, _where(t, "locked out, lockout bit clear")
            assert storage_and_usb_off(c) and c.batt_out == 0, _where(t, "locked out, outputs on")
        else:
            assert not c.fault & F_OVP_LOCKOUT, _where(t, "lockout bit without a lockout")


def check_i6(ticks, L):
    """I6: an implausible reading puts what it protects in the safe state, with its fault bit:
    bus (or source current) -> every output off; battery -> batt_duty 0 and batt_out 0;
    supercap (voltage, current, a cell tap) -> cap_duty 0; USB (VBUS, D+, D-) -> usb_on 0 and
    usb_conv 0; battery temperature -> batt_duty 0. The battery, supercap, USB and temperature
    bits are never set for a plausible reading. (The bus bit may also come from the
    controller's own cross-checks; whenever it is set, every output is off.)"""
    o = OvpOracle(L)
    prev_abs = None
    for t in ticks:
        m, c = t.m, t.c
        o.step(t, 0 if prev_abs is None else t.t_abs - prev_abs, bus_suspect(t, L))
        prev_abs = t.t_abs
        if not L.bus_plausible(m):
            assert c.fault & F_BUS_SENSOR, _where(t, "implausible bus, no bus sensor bit")
        if c.fault & F_BUS_SENSOR:
            assert storage_and_usb_off(c) and c.batt_out == 0 and c.usb_probe == 0 \
                and c.bal_mask == 0, _where(t, "bus sensor fault, an output on")
            continue  # the whole tick went to the safe state; the other readings not judged
        if o.latched or o.locked:
            continue  # the guard took the tick (I5); the other readings are not judged
        batt_ok = L.batt_plausible(m)
        assert bool(c.fault & F_BATT_SENSOR) == (not batt_ok), _where(t, "battery bit wrong")
        if not batt_ok:
            assert c.batt_duty == 0 and c.batt_out == 0, _where(t, "implausible battery reading")
        cap_ok = L.cap_plausible(m, t.cells)
        assert bool(c.fault & F_CAP_SENSOR) == (not cap_ok), _where(t, "supercap bit wrong")
        if not cap_ok:
            assert c.cap_duty == 0, _where(t, "implausible supercap reading")
        usb_ok = L.usb_plausible(m)
        assert bool(c.fault & F_USB_SENSOR) == (not usb_ok), _where(t, "usb bit wrong")
        if not usb_ok:
            assert c.usb_on == 0 and c.usb_conv == 0, _where(t, "implausible USB reading")
        if batt_ok:  # the charger judges the temperature whenever it runs
            temp_ok = L.temp_plausible(m)
            assert bool(c.fault & F_TEMP_SENSOR) == (not temp_ok), _where(t, "temp bit wrong")
            if not temp_ok:
                assert c.batt_duty == 0, _where(t, "implausible temperature, charging")


def check_i7(ticks, L):
    """I7 (ranges): duties within 0..DUTY_MAX, switches 0/1, stages and port matches from the
    documented sets, fault bits among the defined ones, bleeders only for sensed cells."""
    for t in ticks:
        c = t.c
        for name in ("batt_duty", "cap_duty", "dump_duty"):
            assert 0 <= getattr(c, name) <= DUTY_MAX, _where(t, name + " out of range")
        for name in ("usb_conv", "usb_on", "usb_probe", "batt_out"):
            assert getattr(c, name) in (0, 1), _where(t, name + " not a switch")
        assert c.stage in STAGES, _where(t, "unknown stage")
        assert 0 <= c.usb_match <= 5, _where(t, "unknown usb_match")
        assert 0 <= c.fault <= ALL_FAULTS, _where(t, "unknown fault bit")
        n = len(t.cells) if L.taps else 0
        assert 0 <= c.bal_mask < (1 << n), _where(t, "bleeder for an unsensed cell")


CHECKS = (check_i1, check_i2, check_i3, check_i4, check_i5, check_i6, check_i7)
