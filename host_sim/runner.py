# Closed-loop runner: the controller ticks at the profile's period through the same
# Measurements/Commands path a board uses; the plant advances one period between ticks (and
# sub-steps inside as its stiffness needs). The controller's clock starts one minute before
# the 2**30 ms wrap, so every run also crosses the wrap.
import math
import sys
import time

import numpy as np

from controller.compat import TICKS_MASK, TICKS_PERIOD
from controller.signals import ST_BLOCKED
from controller.supervisor import Supervisor
from host_sim.limitcheck import LimitChecker, ceiling_v
from host_sim.plant.plant import Plant
from host_sim.service import ServiceMeter

CLOCK_START_MS = TICKS_PERIOD - 60000

# timeseries.csv columns: name -> (unit, meaning). Documented in docs/simulate.md.
COLUMNS = (
    ("t_s", "s", "simulated time"),
    ("drive_rpm", "rpm", "drive (crank, pedal or rotor) speed; negative when reversed"),
    ("machine_rpm", "rpm", "generator shaft speed"),
    ("p_in_w", "W", "mechanical power from the drive"),
    ("p_elec_w", "W", "generator electrical output"),
    ("p_ideal_w", "W", "wind/hydro: max steady-state electrical power at this wind speed"),
    ("p_best_w", "W", "the source's best electrical power this period (service.BestPower; "
     "blank where not defined)"),
    ("wind_ms", "m/s", "wind drives: wind speed this period (blank for other drives)"),
    ("flow_lps", "l/s", "hydro drives: water flow this period (blank for other drives)"),
    ("bus_v", "V", "rectified bus"),
    ("src_a", "A", "current from the bridge into the bus"),
    ("batt_v", "V", "battery terminal voltage"),
    ("batt_a", "A", "battery current, + into the battery"),
    ("batt_temp_c", "C", "battery temperature"),
    ("batt_soc", "1", "battery state of charge, 0..1"),
    ("stage", "", "battery stage the controller reports"),
    ("ceiling_v", "V", "active compensated ceiling at the true temperature (blank if blocked)"),
    ("cap_v", "V", "supercap bank voltage"),
    ("cap_a", "A", "supercap current, + into the bank"),
    ("cell_v_max", "V", "highest supercap cell"),
    ("usb_vbus_v", "V", "5 V converter output"),
    ("usb_a", "A", "current to the USB devices"),
    ("usb_conv", "0/1", "5 V converter enabled"),
    ("usb_on", "0/1", "port switch closed"),
    ("loads_w", "W", "battery-side loads' power"),
    ("dump_on", "0/1", "dump load duty above zero"),
    ("batt_duty", "1e-4", "battery converter duty"),
    ("cap_duty", "1e-4", "supercap converter duty"),
    ("dump_duty", "1e-4", "dump load duty"),
    ("fault", "bits", "controller fault bits (controller/signals.py)"),
)
COLUMN_NAMES = tuple(c[0] for c in COLUMNS)


class RunResult:
    def __init__(self, scenario, series, limits, ledger, ticks, wall_s, service=None):
        self.scenario = scenario
        self.series = series  # dict name -> numpy array (stage as int codes)
        self.limits = limits  # dict name -> limitcheck.Limit
        self.ledger = ledger  # dict of joules and balance_error_pct
        self.ticks = ticks
        self.wall_s = wall_s
        self.service = service  # dict: summary.json's "service" section (host_sim/service.py)
        self.every = 1  # one series row per this many control periods

    @property
    def all_held(self):
        return all(x.held for x in self.limits.values())

    @property
    def warnings(self):
        return (self.service or {}).get("warnings", [])

    def speedup(self):
        return self.scenario.duration_s / self.wall_s if self.wall_s > 0 else math.inf


class Progress:
    """Progress on stderr for runs that take more than a couple of seconds."""

    def __init__(self, label, total, enabled=True):
        self.label = label
        self.total = total
        self.enabled = enabled
        self.t0 = time.monotonic()
        self.next_t = self.t0 + 2.0
        self.shown = False

    def update(self, done):
        now = time.monotonic()
        if not self.enabled or now < self.next_t:
            return
        self.next_t = now + 1.0
        frac = done / self.total if self.total else 1.0
        eta = (now - self.t0) * (1 - frac) / frac if frac > 0 else 0
        end = "\r" if sys.stderr.isatty() else "\n"
        print("%s: %5.1f %%  (about %.0f s left)" % (self.label, 100 * frac, eta), end=end,
              file=sys.stderr, flush=True)
        self.shown = True

    def close(self):
        if self.shown and sys.stderr.isatty():
            print(file=sys.stderr)


# Rows kept in memory when the caller names no decimation: a 7-day run at 50 ms (12 million
# periods) keeps one row in 61, about 200,000 rows of 29 doubles (46 MB), where keeping every
# period took about 650 B each (8 GB). The limit check and the service meter see every period.
MAX_ROWS = 200_000


def auto_every(n_periods):
    """One row in this many periods keeps a run of n_periods within MAX_ROWS rows."""
    return max(1, -(-n_periods // MAX_ROWS))


def run(sc, progress=True, every=None, controller=None):
    """Run scenario sc in closed loop. every: keep one row in `every` periods (None: every
    period up to MAX_ROWS rows, then decimated evenly; RunResult.every says what was used).
    controller: anything with .m, .c and .tick(now_ms) in place of the in-process Supervisor
    (the hardware-in-the-loop link, host_sim/hil.py)."""
    p = sc.profile
    sup = controller if controller is not None else Supervisor(p)
    plant = Plant(sc)
    period_ms = p.period_ms
    dt_s = period_ms / 1000.0
    n = int(round(sc.duration_s * 1000.0 / period_ms))
    checker = LimitChecker.for_scenario(sc)  # judged from the profile document, not from p
    meter = ServiceMeter(sc, plant, dt_s)
    drive = plant.drive
    hydro = drive.kind == "hydro"  # its flow is drive.strength (the wind speed is in s)
    if every is None:
        every = auto_every(n)
    # one column a row of this buffer: each kept period is written in place, nothing grows
    rows = np.empty((len(COLUMN_NAMES), -(-n // every)))
    j = 0
    prog = Progress("simulate %s" % sc.name, n, progress)
    now_ms = CLOCK_START_MS
    m, c = sup.m, sup.c
    s = plant.snapshot()
    t0 = time.perf_counter()
    for k in range(n):
        plant.measure(m)
        sup.tick(now_ms)
        checker.check_usb(k * dt_s, s["usb_vbus_v"], c.usb_on)
        plant.step(c, dt_s)
        s = plant.snapshot()
        t_s = (k + 1) * dt_s
        checker.check(t_s, s, c, c.stage)
        meter.period(t_s, s, c)
        if k % every == 0:
            rows[:, j] = _row(s, c, checker.doc, meter.p_best,
                              drive.strength if hydro else math.nan)
            j += 1
        now_ms = (now_ms + period_ms) & TICKS_MASK
        if (k & 255) == 0:
            prog.update(k)
    wall = time.perf_counter() - t0
    prog.close()
    led = plant.ledger()
    limits = checker.finish(n * dt_s, led["balance_error_pct"])
    service = meter.finish(led, n * dt_s)
    series = {name: rows[i, :j] for i, name in enumerate(COLUMN_NAMES)}
    res = RunResult(sc, series, limits, led, n, wall, service)
    res.every = every
    return res


def _row(s, c, lims, p_best=math.nan, flow_lps=math.nan):
    """lims: the checker's limits of the profile document (limitcheck.DocLimits)."""
    stage = c.stage
    ceil = ceiling_v(lims, stage, s["batt_temp_c"]) if stage != ST_BLOCKED else math.nan
    return (s["t_s"], s["drive_rpm"], s["machine_rpm"], s["p_in_w"], s["p_elec_w"],
            s.get("p_ideal_w", math.nan), p_best, s.get("wind_ms", math.nan), flow_lps,
            s["bus_v"], s["src_a"], s["batt_v"], s["batt_a"], s["batt_temp_c"], s["batt_soc"],
            stage, ceil, s["cap_v"], s["cap_a"], s["cell_v_max"], s["usb_vbus_v"], s["usb_a"],
            c.usb_conv, c.usb_on, s["loads_w"], 1 if c.dump_duty > 0 else 0, c.batt_duty,
            c.cap_duty, c.dump_duty, c.fault)
