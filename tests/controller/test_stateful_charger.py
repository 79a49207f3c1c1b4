"""Stateful test of the charging stages: a rule-based machine whose rules are plant and
environment moves (battery voltage up and down, current, temperature, time, bus, equalize
requests, the battery removed, reversed or refitted, sensor glitches) and whose invariants are
the safety limits, one @invariant each, checked on every tick the last step ran.

Legal stage transitions (the reported stage may also go to and from 'blocked'):
    bulk -> absorption          absorption -> float        absorption -> equalize
    float -> equalize           equalize -> float          float -> bulk
    any -> bulk                 only after the battery was seen absent or reversed
A failure prints the steps as `state = ChargerMachine(); state.init(...); state.batt_up(...)`
with the invariant calls: paste them into a test function to replay it.
"""
from collections import namedtuple

from ctl_bench import doc_with
from ctl_props import (
    NEG_MV,
    ST_ABSORPTION,
    ST_BLOCKED,
    ST_BULK,
    ST_EQUALIZE,
    ST_FLOAT,
    Limits,
    OvpOracle,
    fv,
    late_dt,
)
from hypothesis import event, settings
from hypothesis import strategies as st
from hypothesis.stateful import RuleBasedStateMachine, initialize, invariant, rule

from controller import profile
from controller.compat import TICKS_MASK, TICKS_PERIOD
from controller.signals import (
    DUTY_MAX,
    F_BATT_ABSENT,
    F_BATT_REVERSED,
    F_BATT_SENSOR,
    F_BUS_SENSOR,
    F_OVP,
    F_TEMP_SENSOR,
    STAGE_NAMES,
)
from controller.supervisor import Supervisor

LEGAL = {(ST_BULK, ST_ABSORPTION), (ST_ABSORPTION, ST_FLOAT), (ST_ABSORPTION, ST_EQUALIZE),
         (ST_FLOAT, ST_EQUALIZE), (ST_EQUALIZE, ST_FLOAT), (ST_FLOAT, ST_BULK)}

_FAST = dict(control__period_ms=1000, battery__tail_hold_s=3, battery__rebulk_hold_s=3,
             battery__absorption_max_minutes=10)
PROFILES = {  # 1 s ticks and short holds, so stages turn over within a few dozen steps
    "flooded": doc_with(battery__chemistry="flooded", battery__capacity_ah=100,
                        battery__absorption_v_per_cell=2.45, battery__float_v_per_cell=2.23,
                        battery__equalize_v_per_cell=2.58, battery__equalize_minutes=10,
                        battery__temp_coeff_mv_per_c_per_cell=-5.0, battery__charge_limit_a=12.5,
                        battery__tail_current_a=2.0, **_FAST),
    "agm": doc_with(**_FAST),
    "gel": doc_with(battery__chemistry="gel", battery__absorption_v_per_cell=2.40,
                    battery__float_v_per_cell=2.25, battery__temp_coeff_mv_per_c_per_cell=-5.0,
                    battery__charge_limit_a=0.6, battery__tail_current_a=0.1,
                    battery__charge_temp_min_c=5, battery__charge_temp_max_c=40, **_FAST),
}

# one tick of the log: readings, commands and what the oracles made of them
Entry = namedtuple("Entry", "t_abs dt_ms m c latched locked ran lost prev_stage lost_between "
                            "eq_armed abs_ms eq_ms rebulk_before lvd")
Read = namedtuple("Read", "bus_mv batt_mv batt_ma batt_temp_dc eq_req reset_req")
OvpIn = namedtuple("OvpIn", "t_abs m")  # what OvpOracle.step reads
Cmd = namedtuple("Cmd", "batt_duty dump_duty usb_on usb_conv cap_duty batt_out stage fault")


class ChargerMachine(RuleBasedStateMachine):
    """The plant around one Supervisor, and the oracle's running account of it."""

    def __init__(self):
        super().__init__()
        self.sup = None
        self.log = []

    def __repr__(self):
        if self.sup is None:
            return "ChargerMachine(uninitialised)"
        c = self.sup.c
        return ("ChargerMachine(%s t=%d ms: bus %d mV, battery %s %d mV %d mA, %.1f C, eq_req %d"
                " -> stage %s, batt_duty %d, fault %d)"
                % (self.variant, self.t_abs, self.bus_mv, self.battery, self.batt_mv,
                   self.batt_ma, self.temp_dc / 10, self.eq_req, STAGE_NAMES[c.stage],
                   c.batt_duty, c.fault))

    # -- set-up
    @initialize(variant=st.sampled_from(sorted(PROFILES)),
                start_ms=st.sampled_from((0, TICKS_PERIOD - 30_000)))
    def init(self, variant, start_ms):
        doc = PROFILES[variant]
        self.variant = variant
        self.L = Limits(doc)
        self.p = profile.from_dict(doc)
        self.sup = Supervisor(self.p)
        b = doc["battery"]
        self.rebulk_mv = fv(b["rebulk_v_per_cell"]) * 1000 * self.L.cells
        self.lvd_mv = fv(b["disconnect_v_per_cell"]) * 1000 * self.L.cells
        self.lvr_mv = fv(b["reconnect_v_per_cell"]) * 1000 * self.L.cells
        self.abs_max_ms = fv(b["absorption_max_minutes"]) * 60000
        self.eq_max_ms = fv(b.get("equalize_minutes", 120)) * 60000
        self.rebulk_hold_ms = fv(b["rebulk_hold_s"]) * 1000
        # plant and environment
        self.t_abs = start_ms
        self.bus_mv = 16000
        self.batt_mv = self.L.cells * 2100
        self.batt_ma = 500
        self.temp_dc = 250
        self.eq_req = 0
        self.battery = "fitted"  # fitted, removed, reversed
        self.glitch = None  # (reading, value, ticks left)
        # oracle's running account
        self.ovp = OvpOracle(self.L)
        self.first = True
        self.prev_stage = None  # last stage reported while not blocked
        self.lost_between = False  # a lost battery seen since prev_stage
        self.eq_armed = True
        self.abs_ms = self.eq_ms = self.rebulk_ms = 0
        self.lvd = False
        self.prev_duty = 0
        self._run(1)

    # -- ticking
    def _reading(self):
        mv, ma = self.batt_mv, self.batt_ma
        if self.battery == "removed":
            mv, ma = self.L.cells * 150, 0
        elif self.battery == "reversed":
            mv, ma = -self.batt_mv, 0
        r = dict(bus_mv=self.bus_mv, batt_mv=mv, batt_ma=ma, batt_temp_dc=self.temp_dc,
                 eq_req=self.eq_req, reset_req=0)
        if self.glitch:
            name, value, left = self.glitch
            r[name] = value
            self.glitch = (name, value, left - 1) if left > 1 else None
        return Read(**r)

    def _run(self, n, dt_ms=None):
        """n ticks; readings from the plant; every tick logged with the oracle's account."""
        self.log = []
        L = self.L
        period = self.p.period_ms if dt_ms is None else dt_ms
        m = self.sup.m
        m.cap_mv, m.usb_vbus_mv = 5000, 0
        for _ in range(n):
            r = self._reading()
            for k, v in r._asdict().items():
                setattr(m, k, v)
            dt = 0 if self.first else period
            if not self.first:
                self.t_abs += period
            self.first = False
            self.sup.tick(self.t_abs & TICKS_MASK)
            c = self.sup.c
            ran_dt = late_dt(dt, self.p.period_ms)
            self.ovp.step(OvpIn(self.t_abs, r), dt,
                          bool(c.fault & F_BUS_SENSOR) and NEG_MV <= r.bus_mv <= L.bus_fs)
            # the battery section runs unless the bus (its range, or the controller's own
            # cross-checks: the bus bit) or the guard took the tick, or the reading is bad
            bus_ok = NEG_MV <= r.bus_mv <= L.bus_fs and not c.fault & F_BUS_SENSOR
            batt_ok = -L.batt_fs <= r.batt_mv <= L.batt_fs and -L.i_fs <= r.batt_ma <= L.i_fs
            ran = bus_ok and not self.ovp.latched and not self.ovp.locked and batt_ok
            lost = ran and r.batt_mv < L.absent_mv
            prev_stage, lost_between = self.prev_stage, self.lost_between
            if lost:
                self.lost_between = True
            if ran:
                if r.batt_mv < self.lvd_mv:
                    self.lvd = True
                elif r.batt_mv >= self.lvr_mv:
                    self.lvd = False
            st = c.stage
            rebulk_before = self.rebulk_ms
            if st != ST_BLOCKED:
                charging = self.prev_duty > 0 and r.batt_ma > 0
                was = ST_BULK if lost_between else prev_stage  # a lost battery restarts bulk
                if st != was:
                    self.abs_ms = self.eq_ms = self.rebulk_ms = 0
                if st == ST_ABSORPTION and charging and st == was:
                    self.abs_ms += ran_dt
                if st == ST_EQUALIZE and charging and st == was:
                    self.eq_ms += ran_dt
                if st == ST_FLOAT:
                    self.rebulk_ms = self.rebulk_ms + ran_dt if r.batt_mv < self.rebulk_mv else 0
                if r.eq_req == 0:
                    self.eq_armed = True
            entry = Entry(self.t_abs, ran_dt, r, Cmd(c.batt_duty, c.dump_duty, c.usb_on,
                                                     c.usb_conv, c.cap_duty, c.batt_out, st,
                                                     c.fault),
                          self.ovp.latched, self.ovp.locked, ran, lost, prev_stage,
                          lost_between, self.eq_armed, self.abs_ms, self.eq_ms,
                          rebulk_before, self.lvd)
            self.log.append(entry)
            if st == ST_EQUALIZE and (prev_stage != ST_EQUALIZE or lost_between):
                self.eq_armed = False
            if st != ST_BLOCKED:
                if prev_stage is not None and st != prev_stage:
                    event("%s -> %s" % (STAGE_NAMES[prev_stage], STAGE_NAMES[st]))
                self.prev_stage = st
                self.lost_between = False
            self.prev_duty = c.batt_duty

    # -- rules: plant and environment moves (each runs one tick unless it is time passing)
    @rule(mv=st.integers(10, 600))
    def batt_up(self, mv):
        self.batt_mv = min(self.batt_mv + mv, self.L.cells * 2800)
        self._run(1)

    @rule(mv=st.integers(10, 600))
    def batt_down(self, mv):
        self.batt_mv = max(self.batt_mv - mv, self.L.cells * 1700)
        self._run(1)

    @rule(level=st.sampled_from(("disconnect", "rebulk", "rest", "float", "absorption",
                                 "equalize", "over")), offset_mv=st.integers(-120, 120))
    def batt_to(self, level, offset_mv):
        """The battery moves to near one of its profile levels (per cell at 25 C), e.g. a
        charge that has reached absorption, or a load that has pulled it under re-bulk."""
        b = PROFILES[self.variant]["battery"]
        per_cell_v = {"disconnect": b["disconnect_v_per_cell"], "rebulk": b["rebulk_v_per_cell"],
                      "rest": 2.12, "float": b["float_v_per_cell"],
                      "absorption": b["absorption_v_per_cell"],
                      "equalize": b.get("equalize_v_per_cell", 2.55),
                      "over": b["absorption_v_per_cell"] + 0.05}[level]
        self.batt_mv = round(per_cell_v * 1000 * self.L.cells) + offset_mv
        self._run(1)

    @rule(ma=st.one_of(st.integers(-3000, 6000), st.integers(0, 2500)))
    def current(self, ma):
        self.batt_ma = ma
        self._run(1)

    @rule(dc=st.integers(-150, 150))
    def temperature(self, dc):
        self.temp_dc = max(-250, min(650, self.temp_dc + dc))
        self._run(1)

    @rule(mv=st.sampled_from((0, 8000, 12000, 16000, 20000, 23000, 24000, 26000)))
    def bus(self, mv):
        self.bus_mv = mv
        self._run(1)

    @rule(on=st.booleans())
    def equalize_request(self, on):
        self.eq_req = int(on)
        self._run(1)

    @rule(ticks=st.integers(1, 40))
    def time_passes(self, ticks):
        self._run(ticks)

    @rule(ticks=st.integers(100, 700))
    def long_wait(self, ticks):
        self._run(ticks)

    @rule(periods=st.integers(2, 30))
    def late_tick(self, periods):
        self._run(1, dt_ms=periods * self.p.period_ms)

    @rule(how=st.sampled_from(("removed", "reversed", "fitted")))
    def battery_lead(self, how):
        self.battery = how
        self._run(1)

    @rule(reading=st.sampled_from(("batt_mv", "batt_ma", "batt_temp_dc", "bus_mv")),
          high=st.booleans(), ticks=st.integers(1, 5))
    def sensor_glitch(self, reading, high, ticks):
        value = {"batt_mv": (-30000, 30000), "batt_ma": (-40000, 40000),
                 "batt_temp_dc": (-600, 1200), "bus_mv": (-3000, 50000)}[reading][int(high)]
        self.glitch = (reading, value, ticks)
        self._run(1)

    # -- invariants: one per safety limit, over every tick of the last step
    @invariant()
    def inv_duty_under_the_ceiling(self):
        """I1: off above the compensated ceiling plus margin; never rising at the ceiling."""
        prev = None
        for e in self.log:
            duty, st = e.c.batt_duty, e.c.stage
            if st == ST_BLOCKED:
                assert duty == 0, e
            else:
                ceil = self.L.ceiling_mv(st, e.m.batt_temp_dc)
                if e.m.batt_mv > ceil + self.L.margin_mv:
                    assert duty == 0, e
                if e.m.batt_mv >= ceil and prev is not None:
                    assert duty <= prev, e
            prev = duty

    @invariant()
    def inv_no_charging_outside_the_temperature_window(self):
        """I2."""
        for e in self.log:
            if not self.L.temp_ok(e.m.batt_temp_dc):
                assert e.c.batt_duty == 0, e

    @invariant()
    def inv_no_charging_without_a_plausible_temperature(self):
        for e in self.log:
            if not self.L.temp_plausible(e.m):
                assert e.c.batt_duty == 0, e
                if e.ran:
                    assert e.c.fault & F_TEMP_SENSOR, e

    @invariant()
    def inv_lost_battery_not_charged(self):
        for e in self.log:
            if e.lost:
                assert e.c.batt_duty == 0 and e.c.batt_out == 0, e
                assert e.c.fault & (F_BATT_ABSENT | F_BATT_REVERSED), e

    @invariant()
    def inv_implausible_battery_reading_safe(self):
        for e in self.log:
            if not (-self.L.batt_fs <= e.m.batt_mv <= self.L.batt_fs
                    and -self.L.i_fs <= e.m.batt_ma <= self.L.i_fs):
                assert e.c.batt_duty == 0 and e.c.batt_out == 0, e
                if not (e.c.fault & F_BUS_SENSOR or e.latched or e.locked):
                    assert e.c.fault & F_BATT_SENSOR, e

    @invariant()
    def inv_implausible_bus_everything_off(self):
        for e in self.log:
            if not NEG_MV <= e.m.bus_mv <= self.L.bus_fs:
                c = e.c
                assert (c.batt_duty, c.usb_on, c.usb_conv, c.cap_duty, c.batt_out) == (0,) * 5, e
                assert c.fault & F_BUS_SENSOR, e

    @invariant()
    def inv_overvoltage_guard(self):
        """I5: latched -> dump full, storage and USB off; the latch as the oracle keeps it."""
        for e in self.log:
            c = e.c
            assert bool(c.fault & F_OVP) == e.latched, e
            if e.latched:
                assert c.dump_duty == DUTY_MAX, e
            if e.latched or e.locked:
                assert (c.batt_duty, c.usb_on, c.usb_conv, c.cap_duty, c.batt_out) == (0,) * 5, e

    @invariant()
    def inv_legal_stage_transitions(self):
        for e in self.log:
            st = e.c.stage
            if st == ST_BLOCKED or e.prev_stage is None or st == e.prev_stage:
                continue
            # after a lost battery the charger restarts from bulk (and may leave it at once)
            before = ST_BULK if e.lost_between else e.prev_stage
            assert st == before or (before, st) in LEGAL, (
                "illegal %s -> %s" % (STAGE_NAMES[e.prev_stage], STAGE_NAMES[st]), e)

    @invariant()
    def inv_restart_at_bulk_after_a_lost_battery(self):
        """After a lost battery charging starts over at bulk, with fresh timers. The first
        unblocked tick reports bulk, or absorption when the battery already reads at the
        compensated absorption voltage (bulk's own exit, taken in that same tick)."""
        for e in self.log:
            if e.lost_between and e.c.stage != ST_BLOCKED:
                if e.c.stage == ST_ABSORPTION:
                    ceil = self.L.ceiling_mv(ST_ABSORPTION, e.m.batt_temp_dc)
                    assert e.m.batt_mv >= ceil - self.L.margin_mv and e.abs_ms == 0, e
                else:
                    assert e.c.stage == ST_BULK, e

    @invariant()
    def inv_absorption_only_at_the_compensated_voltage(self):
        for e in self.log:
            if e.prev_stage == ST_BULK and e.c.stage == ST_ABSORPTION and not e.lost_between:
                ceil = self.L.ceiling_mv(ST_ABSORPTION, e.m.batt_temp_dc)
                assert e.m.batt_mv >= ceil - self.L.margin_mv, e

    @invariant()
    def inv_equalize_only_on_request_for_flooded(self):
        for e in self.log:
            if e.c.stage == ST_EQUALIZE:
                assert self.L.flooded and e.m.eq_req == 1, e
                if e.prev_stage != ST_EQUALIZE:
                    assert e.eq_armed, ("a held request started a second equalize", e)

    @invariant()
    def inv_equalize_time_limited(self):
        for e in self.log:
            if e.c.stage == ST_EQUALIZE:
                assert e.eq_ms < self.eq_max_ms, e

    @invariant()
    def inv_absorption_time_limited(self):
        """The absorption timer counts charging time only, and ends absorption at the limit."""
        for e in self.log:
            if e.c.stage == ST_ABSORPTION:
                assert e.abs_ms < self.abs_max_ms, e

    @invariant()
    def inv_rebulk_only_after_the_hold(self):
        """Float returns to bulk only after the battery read below the re-bulk level for the
        hold time (in float, unblocked, late ticks counting at most four periods)."""
        for e in self.log:
            if e.prev_stage == ST_FLOAT and e.c.stage == ST_BULK and not e.lost_between:
                assert e.m.batt_mv < self.rebulk_mv, e
                assert e.rebulk_before + e.dt_ms >= self.rebulk_hold_ms, e

    @invariant()
    def inv_low_voltage_disconnect(self):
        for e in self.log:
            batt_out = e.c.batt_out
            if e.ran:
                assert batt_out == (0 if (e.lvd or e.m.batt_mv < self.L.absent_mv) else 1), e
            else:
                assert batt_out == 0, e

    @invariant()
    def inv_outputs_in_range(self):
        for e in self.log:
            c = e.c
            for duty in (c.batt_duty, c.dump_duty, c.cap_duty):
                assert 0 <= duty <= DUTY_MAX, e
            for switch in (c.usb_on, c.usb_conv, c.batt_out):
                assert switch in (0, 1), e
            assert c.stage in range(len(STAGE_NAMES)), e


def check_all(state):
    for name in sorted(dir(state)):
        if name.startswith("inv_"):
            getattr(state, name)()


def test_regression_a_suspect_bus_reading_holds_the_latch():
    """Found by the deep profile (pasted from its printout): the rider stops while the battery
    current still reads 500 mA, so the controller suspects the 0 V bus reading; a surge trips
    the guard; the bus then reads 0 V but is still suspect. The latch must hold through the
    suspect readings (they are no evidence the bus is below recovery) and every invariant
    holds, whatever follows."""
    for last in (("late_tick", dict(periods=2)), ("current", dict(ma=0)),
                 ("battery_lead", dict(how="removed"))):
        state = ChargerMachine()
        state.init(variant="agm", start_ms=0)
        state.bus(mv=0)
        check_all(state)
        state.sensor_glitch(high=True, reading="bus_mv", ticks=1)
        check_all(state)
        state.batt_down(mv=10)
        check_all(state)
        getattr(state, last[0])(**last[1])
        check_all(state)
        state.teardown()


def test_regression_a_suspect_bus_at_the_trip_trips():
    """Found by the deep profile (pasted): the bus is suspected after the rider stops, a battery
    voltage glitch keeps the suspicion from clearing, then the bus reads the 24 V trip. The
    guard must trip (dump load on) although the reading is suspect."""
    state = ChargerMachine()
    state.init(variant="agm", start_ms=0)
    state.bus(mv=0)
    check_all(state)
    state.sensor_glitch(high=True, reading="batt_mv", ticks=2)
    check_all(state)
    state.bus(mv=24000)
    check_all(state)
    state.teardown()


# max_examples and the rest from the HYPOTHESIS_PROFILE chosen in conftest
TestChargerStages = ChargerMachine.TestCase
TestChargerStages.settings = settings(stateful_step_count=40)
