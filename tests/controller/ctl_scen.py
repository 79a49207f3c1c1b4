"""Plausible-but-adversarial measurement sequences for the controller's property tests.

A Scenario is a handful of shapes (knots of slowly varying physical signals, noise grades,
sensor events, tick timing), decoded from a fixed-size byte string that hypothesis draws and
shrinks (scenarios()); run() expands it tick by tick around a
Supervisor, closing a crude loop so the readings answer the commands (a battery whose terminal
voltage rises with charge current, a supercap bank that charges, VBUS that exists only while
the 5 V converter runs, data lines that follow the board's D+ probe). On top of the physics sit
the sensors: noise, spikes, step changes, stuck values and out-of-range glitches. The result is
a list of Tick records (readings and commands) that the oracles in ctl_props.py judge, and that
vector_lines() turns into a vector CSV for controller.replay on either interpreter.

Everything here is invented test data for the invariants, not a model of any product.
"""
import copy
import random
from collections import namedtuple

from ctl_bench import VARIANTS
from hypothesis import strategies as st

from controller import profile
from controller.compat import TICKS_MASK, TICKS_PERIOD
from controller.signals import DUTY_MAX
from controller.supervisor import Supervisor

MEAS = ("bus_mv", "batt_mv", "batt_ma", "batt_temp_dc", "cap_mv", "usb_vbus_mv", "usb_dp_mv",
        "usb_dm_mv", "src_ma", "cap_ma", "eq_req", "reset_req")
CMDS = ("batt_duty", "cap_duty", "dump_duty", "usb_conv", "usb_on", "usb_probe", "batt_out",
        "bal_mask", "stage", "usb_match", "fault")
M = namedtuple("M", MEAS)
C = namedtuple("C", CMDS)
# one control period: k index, t_abs unwrapped ms, now_ms as passed (masked to 2**30),
# m readings, cells tap readings (tuple, empty without taps), c commands after the tick
Tick = namedtuple("Tick", "k t_abs now_ms m cells c")

LINE_MODES = ("scheme",) * 5 + ("other", "open", "random", "vbus")
EVENT_SIGNALS = ("bus", "src", "batt_v", "batt_i", "temp", "cap", "cap_i", "tap", "vbus", "dp",
                 "dm", "battery", "reset")
EVENT_KINDS = ("spike", "glitch", "stuck", "step")
_LEVELS = {"div_2v0_2v7": (2000, 2700), "div_2v7_2v0": (2700, 2000),
           "div_2v7_2v7": (2700, 2700), "short_1v2": (1200, 1200)}
SCHEME_NAMES = ("dcp", "div_2v0_2v7", "div_2v7_2v0", "div_2v7_2v7", "short_1v2")


class Scenario:
    """What hypothesis draws. repr() is a constructor call, so a failing example can be pasted
    into a regression test: run(Scenario(...))."""

    FIELDS = ("variant", "period_ms", "start_ms", "n_ticks", "seed", "jitter_pct",
              "late_per_mille", "bus_mv", "bus_step", "osc_mv", "osc_ticks", "src_ma",
              "ocv_cell_mv", "load_ma", "temp_dc", "cap0_mv", "cap_df", "cap_load_ma",
              "imbalance_pm", "vbus_mv", "lines", "line_dev_pm", "probe_mv", "eq", "events",
              "noise")
    # knots are ((position per mille of the run, value), ...); cap_df: deci-farads;
    # *_pm: per mille; events: (position, ticks, signal, kind, magnitude 0..1000);
    # noise: grades 0-3 for the source, storage and USB sensors

    def __init__(self, **kw):
        for f in self.FIELDS:
            setattr(self, f, kw.pop(f))
        if kw:
            raise TypeError("unknown Scenario fields: %s" % ", ".join(kw))

    def __repr__(self):
        return "Scenario(%s)" % ", ".join("%s=%r" % (f, getattr(self, f)) for f in self.FIELDS)


def scenario_doc(scn):
    """The profile document a scenario runs under: its variant with the drawn period."""
    doc = copy.deepcopy(VARIANTS[scn.variant])
    doc.setdefault("control", {})["period_ms"] = scn.period_ms
    return doc


# --- drawing ------------------------------------------------------------------------------------
class _Genome:
    """Decodes a fixed-size byte string into scenario fields. Hypothesis draws the bytes (one
    draw per example, which keeps the runs fast) and shrinks them towards zero; every field
    sits at a fixed offset and a zero byte decodes to its simplest value, so shrinking one
    field does not disturb the others."""

    def __init__(self, data):
        self.b = data
        self.i = 0

    def byte(self):
        v = self.b[self.i]
        self.i += 1
        return v

    def pick(self, seq):
        return seq[self.byte() % len(seq)]

    def int(self, lo, hi):
        v = (self.byte() << 8) | self.byte()
        return lo + v * (hi - lo) // 65535

    def banded(self, bands):
        """An integer from one of several (lo, hi) bands; a band listed twice is picked twice
        as often. Bands put most draws where the limits are (near a ceiling, the trip)."""
        return self.int(*self.pick(bands))

    def knots(self, bands, max_n):
        n = 1 + self.byte() % max_n
        ks = [(self.int(0, 1000), self.banded(bands)) for _ in range(max_n)]  # fixed size
        return tuple(sorted(ks[:n]))


GENOME_BYTES = 200


def _bands(p):
    """Drawing bands scaled to a profile (generation only; the oracles never use these)."""
    top_cell = max(p.abs_cell_mv, p.eq_cell_mv)
    floor, rec, trip = p.floor_mv, p.ovp_recover_mv, p.ovp_trip_mv
    return {
        # bus: working range (twice), stalled, and around / above the trip
        "bus": ((floor, rec), (floor, rec), (0, floor), (rec - 1000, trip * 13 // 10)),
        # open-circuit voltage per cell: near the setpoints (thrice), anywhere, above the top
        # (an outside source pushing the battery)
        "ocv": ((p.float_cell_mv - 80, top_cell + 60),) * 3 + ((1850, top_cell),
                                                               (top_cell, top_cell + 200)),
        "temp": ((p.temp_min_dc, p.temp_max_dc),) * 4 + ((p.temp_min_dc - 60, p.temp_min_dc),
                                                         (p.temp_max_dc, p.temp_max_dc + 60)),
        "cap0": ((p.cap_clamp_mv - 1500, p.cap_clamp_mv + 200),) * 2 + ((0, p.cap_clamp_mv),),
        "vbus": ((4760, 5240),) * 3 + ((4500, 5500),),
        "probe": ((500, 700),) * 3 + ((450, 750),),  # the board's D+ source, BC1.2 V_DP_SRC
    }


_PROFILES = {}


def variant_profile(name, period_ms):
    key = (name, period_ms)
    if key not in _PROFILES:
        doc = copy.deepcopy(VARIANTS[name])
        doc.setdefault("control", {})["period_ms"] = period_ms
        _PROFILES[key] = profile.from_dict(doc)
    return _PROFILES[key]


def decode(data, variants=None, max_ticks=300, min_ticks=30):
    """The Scenario a genome (GENOME_BYTES bytes) stands for."""
    g = _Genome(data)
    name = g.pick(sorted(variants or VARIANTS))
    period_ms = g.pick((50, 10, 20, 100, 250))
    p = variant_profile(name, period_ms)
    r = _bands(p)
    start_mode = g.byte() % 3
    start_raw = g.int(0, 65535) << 14 | g.int(0, 16383)
    start = (0, TICKS_PERIOD - 1 - start_raw % 10000, start_raw & TICKS_MASK)[start_mode]
    n_ticks = g.int(min_ticks, max_ticks)
    seed = g.int(0, 65535) << 15 | g.int(0, 32767)
    jitter_pct = g.pick((0, 5, 20))
    late = g.pick((0, 5, 40))
    bus = g.knots(r["bus"], 4)
    bus_step = g.byte() % 2 == 1
    osc_mv = g.pick((0, 0, p.ovp_trip_mv // 10, p.ovp_trip_mv // 4))
    osc_ticks = g.int(2, 80)
    src = g.int(-500, 8000)
    ocv = g.knots(r["ocv"], 3)
    load = g.int(0, 2 * p.chg_limit_ma)
    temp = g.knots(r["temp"], 3)
    cap0 = g.banded(r["cap0"])
    cap_df = g.int(1, 50)  # deci-farads: 0.1-5 F, so a bank moves within a run
    cap_load = g.int(0, p.cap_limit_ma)
    imbalance = g.int(0, 60)
    vbus = g.knots(r["vbus"], 2)
    n_lines = 1 + g.byte() % 3
    lines = tuple(sorted([(g.int(0, 1000), g.pick(LINE_MODES)) for _ in range(3)][:n_lines]))
    line_dev = g.int(-60, 60)
    probe = g.banded(r["probe"])
    n_eq = g.byte() % 4
    eq = tuple(sorted([(g.int(0, 1000), g.byte() % 2) for _ in range(3)][:n_eq]))
    n_ev = g.byte() % 7
    evs = [(g.int(0, 1000), g.int(1, 40), g.pick(EVENT_SIGNALS), g.pick(EVENT_KINDS),
            g.int(0, 1000)) for _ in range(6)]
    noise = tuple(g.pick((0, 0, 1, 2, 3)) for _ in range(3))  # grades: none .. heavy
    assert g.i <= GENOME_BYTES
    return Scenario(
        variant=name, period_ms=period_ms, start_ms=start, n_ticks=n_ticks, seed=seed,
        jitter_pct=jitter_pct, late_per_mille=late, bus_mv=bus, bus_step=bus_step,
        osc_mv=osc_mv, osc_ticks=osc_ticks, src_ma=src, ocv_cell_mv=ocv, load_ma=load,
        temp_dc=temp, cap0_mv=cap0, cap_df=cap_df, cap_load_ma=cap_load, imbalance_pm=imbalance,
        vbus_mv=vbus, lines=lines, line_dev_pm=line_dev, probe_mv=probe, eq=eq,
        events=tuple(evs[:n_ev]), noise=noise)


def scenarios(variants=None, max_ticks=300, min_ticks=30):
    """Hypothesis strategy for Scenario (see decode). Shapes come from the genome; the fine
    grain (noise, jitter, cell imbalance) from the scenario's seed."""
    return st.binary(min_size=GENOME_BYTES, max_size=GENOME_BYTES).map(
        lambda data: decode(data, variants, max_ticks, min_ticks))


# --- running ------------------------------------------------------------------------------------
def _interp(knots, f, step=False):
    """Value of a knot list at position f (per mille of the run)."""
    if f <= knots[0][0]:
        return knots[0][1]
    prev = knots[0]
    for kn in knots[1:]:
        if f < kn[0]:
            if step or kn[0] == prev[0]:
                return prev[1]
            return prev[1] + (kn[1] - prev[1]) * (f - prev[0]) // (kn[0] - prev[0])
        prev = kn
    return prev[1]


# noise amplitudes per grade (index = grade): sources, storage sensors, USB sensors
_NOISE = {"bus": (0, 100, 500, 1500), "src": (0, 20, 100, 300), "batt_v": (0, 5, 20, 60),
          "batt_i": (0, 20, 100, 300), "temp": (0, 1, 5, 15), "cap": (0, 5, 20, 60),
          "vbus": (0, 10, 40, 120), "line": (0, 3, 15, 40)}


def _level(knots, f):
    v = 0
    for fk, x in knots:
        if fk <= f:
            v = x
    return v


def _lines(scheme, mode, vbus_mv, probe, scn, rng, line_fs_mv):
    """D+ and D- of the port's network as the board reads them this tick."""
    if mode == "other":
        scheme = SCHEME_NAMES[(SCHEME_NAMES.index(scheme) + 1 + scn.seed % 4) % 5]
    elif mode == "open":
        return (scn.probe_mv if probe else 0), 0
    elif mode == "random":
        return int(rng.random() * line_fs_mv), int(rng.random() * line_fs_mv)
    elif mode == "vbus":
        return vbus_mv, vbus_mv
    if scheme == "dcp":  # shorted lines: they follow the probe, else sit at 0 V
        v = scn.probe_mv if probe else 0
        return v, max(0, v - (scn.seed % 25))
    dp_nom, dm_nom = _LEVELS[scheme]
    k = 1000 + scn.line_dev_pm  # resistor tolerance, per mille
    return (dp_nom * vbus_mv * k // 5_000_000, dm_nom * vbus_mv * k // 5_000_000)


def _sensor_specs(p):
    """Per signal: (spike value for a magnitude 0..1000, glitch below range, glitch above
    range, step offset at full magnitude). Spikes stay plausible; glitches do not."""
    ceil_guess = p.cells * max(p.abs_cell_mv, p.eq_cell_mv)
    return {
        "bus": (lambda g: p.ovp_trip_mv - 500 + 4 * g, -501, p.bus_fs_mv + 1, p.ovp_trip_mv // 4),
        "src": (lambda g: 20 * g, -p.batt_fs_ma - 1, p.batt_fs_ma + 1, 2000),
        "batt_v": (lambda g: ceil_guess - 300 + g, -p.batt_fs_mv - 1, p.batt_fs_mv + 1,
                   100 * p.cells),
        "batt_i": (lambda g: 10 * g - 3000, -p.batt_fs_ma - 1, p.batt_fs_ma + 1, 3000),
        "temp": (lambda g: (p.temp_max_dc + 1 + g // 5) if g % 2 else (p.temp_min_dc - 1 - g // 5),
                 -401, 851, 100),
        "cap": (lambda g: p.cap_clamp_mv - 200 + g, -501, p.cap_fs_mv + 1, 500),
        "cap_i": (lambda g: 5 * g, -p.batt_fs_ma - 1, p.batt_fs_ma + 1, 1000),
        "vbus": (lambda g: 4500 + g if g % 2 else 5300 + g, -501, p.vbus_fs_mv + 1, 300),
        "dp": (lambda g: 3 * g, -501, p.line_fs_mv + 1, 300),
        "dm": (lambda g: 3 * g, -501, p.line_fs_mv + 1, 300),
        "tap": (lambda g: p.cap_cell_rating_mv - 100 + g // 4, -501,
                2 * p.cap_cell_rating_mv + 1, 200),
    }


class _Sensors:
    """Applies the drawn events to the true signals: spikes, glitches, stuck values, steps."""

    def __init__(self, scn, p, n):
        self.spec = _sensor_specs(p)
        self.at = [None] * n  # per tick: {signal: (kind, magnitude)} while an event runs
        for f, length, sig, kind, mag in scn.events:
            k0 = f * n // 1000
            for k in range(k0, min(n, k0 + length)):
                if self.at[k] is None:
                    self.at[k] = {}
                self.at[k].setdefault(sig, (kind, mag))  # the first event on a signal wins
        self.last = {}

    def mode(self, k, sig):
        e = self.at[k]
        if e is None or sig not in e:
            return None, 0
        return e[sig]

    def read(self, k, sig, true):
        e = self.at[k]
        if e is None or sig not in e:
            self.last[sig] = true
            return true
        kind, mag = e[sig]
        spike, glitch_lo, glitch_hi, step_scale = self.spec[sig]
        if kind == "spike":
            v = spike(mag)
        elif kind == "glitch":
            v = glitch_lo - mag if mag % 2 else glitch_hi + mag
        elif kind == "stuck":
            return self.last.get(sig, true)
        else:  # step: an offset for the event's length
            v = true + (mag - 500) * step_scale // 500
        self.last[sig] = v
        return v


def run(scn, mutate=None, probe=None):
    """Run a scenario closed-loop through a Supervisor; return the list of Tick records.
    mutate(sup), if given, breaks the supervisor on purpose after it is built; probe(sup, k),
    if given, looks at the supervisor after every tick."""
    p = variant_profile(scn.variant, scn.period_ms)
    sup = Supervisor(p)
    if mutate is not None:
        mutate(sup)
    m, c = sup.m, sup.c
    rng = random.Random(scn.seed)
    rnd = rng.random
    g_src, g_store, g_usb = scn.noise
    nz_bus, nz_src = _NOISE["bus"][g_src], _NOISE["src"][g_src]
    nz_bv, nz_bi = _NOISE["batt_v"][g_store], _NOISE["batt_i"][g_store]
    nz_temp, nz_cap = _NOISE["temp"][g_store], _NOISE["cap"][g_store]
    nz_vbus, nz_line = _NOISE["vbus"][g_usb], _NOISE["line"][g_usb]
    imbalance = [rng.randint(-scn.imbalance_pm, scn.imbalance_pm) for _ in range(p.cap_cells)]
    n = scn.n_ticks
    sens = _Sensors(scn, p, n)
    read = sens.read
    scheme = SCHEME_NAMES[p.scheme]
    cells = p.cells
    r_mohm = 20 * cells  # battery internal resistance, 20 mOhm per cell (a small, worn block)
    i_top = 3 * p.chg_limit_ma + 1000
    cap_v = scn.cap0_mv * 1000  # bank voltage, uV
    path_mohm = max(1, p.cap_headroom_mv * 1000 // max(1, p.cap_limit_ma))
    n_taps = p.cap_cells if p.cap_taps else 0
    m.n_taps = n_taps
    t_abs = scn.start_ms
    out = []
    prev = C(*([0] * len(CMDS)))

    def nzv(x, a):
        return x + int((2 * rnd() - 1) * a) if a else x

    for k in range(n):
        f = k * 1000 // n
        # -- time: jitter and the occasional late tick
        if k:
            dt = scn.period_ms + int(rnd() * (scn.period_ms * scn.jitter_pct // 100 + 1))
            if rnd() * 1000 < scn.late_per_mille:
                dt = scn.period_ms * (2 + int(rnd() * 11))
            t_abs += dt
        else:
            dt = 0
        now_ms = t_abs & TICKS_MASK
        # -- source
        osc = 0
        if scn.osc_mv:
            osc = scn.osc_mv if (k // scn.osc_ticks) % 2 else -scn.osc_mv
        bus = max(0, _interp(scn.bus_mv, f, scn.bus_step) + osc)
        # -- battery: OCV plus what the converter pushes through the internal resistance;
        # "battery" events: spike or glitch = lead opened (reads near 0 V), stuck = reversed
        kind, mag = sens.mode(k, "battery")
        ocv = cells * _interp(scn.ocv_cell_mv, f)
        if kind in ("spike", "glitch"):
            v_true, i_true = mag * p.absent_mv // 1000, 0
        elif kind == "stuck":
            v_true, i_true = -ocv, 0
        else:
            v_out = prev.batt_duty * bus // DUTY_MAX
            i_chg = min(max(0, (v_out - ocv) * 1000 // r_mohm), i_top)
            i_true = i_chg - scn.load_ma
            v_true = ocv + i_true * r_mohm // 1000
        temp = _interp(scn.temp_dc, f)
        # -- supercap bank: charged through the path resistance, drained by its load
        cv_mv = cap_v // 1000
        i_cap = max(0, (prev.cap_duty * bus // DUTY_MAX - cv_mv) * 1000 // path_mohm)
        i_cap = min(i_cap, 3 * p.cap_limit_ma)
        cap_v = max(0, cap_v + (i_cap - scn.cap_load_ma) * dt * 10 // scn.cap_df)
        cv_mv = cap_v // 1000
        # -- USB: VBUS only while the converter runs; the lines answer the probe
        vbus = _interp(scn.vbus_mv, f) if prev.usb_conv else 0
        mode = scn.lines[0][1]
        for fk, md in scn.lines:
            if fk <= f:
                mode = md
        dp, dm = _lines(scheme, mode, vbus, prev.usb_probe, scn, rng, p.line_fs_mv)
        # -- sensors
        m.bus_mv = read(k, "bus", nzv(bus, nz_bus))
        m.src_ma = read(k, "src", nzv(scn.src_ma, nz_src))
        m.batt_mv = read(k, "batt_v", nzv(v_true, nz_bv))
        m.batt_ma = read(k, "batt_i", nzv(i_true, nz_bi))
        m.batt_temp_dc = read(k, "temp", nzv(temp, nz_temp))
        m.cap_mv = read(k, "cap", nzv(cv_mv, nz_cap))
        m.cap_ma = read(k, "cap_i", nzv(i_cap, nz_bi))
        m.usb_vbus_mv = read(k, "vbus", nzv(vbus, nz_vbus))
        m.usb_dp_mv = read(k, "dp", nzv(dp, nz_line))
        m.usb_dm_mv = read(k, "dm", nzv(dm, nz_line))
        m.reset_req = 1 if sens.mode(k, "reset")[0] else 0
        m.eq_req = _level(scn.eq, f)
        if n_taps:
            base = cv_mv // n_taps
            kind, g = sens.mode(k, "tap")
            for i in range(n_taps):
                tv = nzv(base * (1000 + imbalance[i]) // 1000, nz_cap // 4)
                if kind and g % n_taps == i:
                    tv = read(k, "tap", tv)
                m.cell_mv[i] = tv
        sup.tick(now_ms)
        if probe is not None:
            probe(sup, k)
        prev = C(c.batt_duty, c.cap_duty, c.dump_duty, c.usb_conv, c.usb_on, c.usb_probe,
                 c.batt_out, c.bal_mask, c.stage, c.usb_match, c.fault)
        out.append(Tick(k, t_abs, now_ms,
                        M(m.bus_mv, m.batt_mv, m.batt_ma, m.batt_temp_dc, m.cap_mv, m.usb_vbus_mv,
                          m.usb_dp_mv, m.usb_dm_mv, m.src_ma, m.cap_ma, m.eq_req, m.reset_req),
                        tuple(m.cell_mv[:n_taps]), prev))
    return out


# --- vectors ------------------------------------------------------------------------------------
def vector_lines(ticks):
    """The readings of a run as controller.replay's input CSV (list of lines)."""
    n_taps = len(ticks[0].cells) if ticks else 0
    head = ["t_ms"] + list(MEAS) + ["cell%d" % (i + 1) for i in range(n_taps)]
    lines = [",".join(head) + "\n"]
    for t in ticks:
        row = [t.now_ms] + list(t.m) + list(t.cells)
        lines.append(",".join(str(x) for x in row) + "\n")
    return lines


def long_scenario(variant, n_ticks=20000, seed=1, period_ms=50):
    """A fixed, rich scenario for long runs: many knots and events spread over n_ticks, built
    from a seeded generator (deterministic, not drawn by hypothesis)."""
    rng = random.Random(seed)
    p = variant_profile(variant, period_ms)
    r = _bands(p)

    def knots(bands, n):
        return tuple(sorted((rng.randint(0, 1000), rng.randint(*rng.choice(bands)))
                            for _ in range(n)))

    events = []
    for i in range(n_ticks // 250):
        events.append((rng.randint(0, 1000), rng.randint(1, 30), rng.choice(EVENT_SIGNALS),
                       rng.choice(EVENT_KINDS), rng.randint(0, 1000)))
    for f in range(50, 1000, 100):  # a reset request every tenth of the run
        events.append((f, 3, "reset", "spike", 0))
    for f in range(120, 1000, 300):  # an open NTC, and a cell over its rating
        events.append((f, 5, "temp", "glitch", 1))
        events.append((f + 10, 5, "tap", "spike", 800))
    for i, sig in enumerate(("bus", "batt_v", "cap", "vbus", "dp", "batt_i", "cap_i", "src")):
        events.append((140 + 100 * i, 4, sig, "glitch", 2 * i))  # every sensor out of range
    events.append((180, 30, "battery", "spike", 300))  # a battery lead opened ...
    events.append((580, 30, "battery", "stuck", 0))  # ... and a battery fitted backwards
    step = 100_000 // n_ticks + 1  # per mille for 100 ticks: five quick trips, a lockout
    for i in range(5):
        events.append((430 + step * i, 2, "bus", "spike", 900))
    return Scenario(
        variant=variant, period_ms=period_ms, start_ms=TICKS_PERIOD - 4321, n_ticks=n_ticks,
        seed=seed, jitter_pct=10, late_per_mille=5, bus_mv=knots(r["bus"], 60), bus_step=True,
        osc_mv=p.ovp_trip_mv // 10, osc_ticks=45, src_ma=2500, ocv_cell_mv=knots(r["ocv"], 30),
        load_ma=p.chg_limit_ma // 3, temp_dc=knots(r["temp"], 12), cap0_mv=p.cap_clamp_mv // 3,
        cap_df=20, cap_load_ma=p.cap_limit_ma // 4, imbalance_pm=40, vbus_mv=knots(r["vbus"], 10),
        lines=tuple(sorted((rng.randint(0, 1000), rng.choice(LINE_MODES)) for _ in range(25))),
        line_dev_pm=12, probe_mv=610,
        eq=tuple(sorted((rng.randint(0, 1000), rng.randint(0, 1)) for _ in range(12))),
        events=tuple(events), noise=(1, 1, 1))
