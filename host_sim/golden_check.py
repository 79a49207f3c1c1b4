# Golden check for refactoring the tick: drives a Supervisor with long seeded random
# Measurements (random walks in moving regimes, sensor glitches, battery faults, equalize and
# reset requests, early, late and repeated ticks, the clock wrap) and prints, per profile, a
# 32-bit hash of every Commands field of every tick. A change that must not change behaviour
# must leave every line the same. Runs unchanged on CPython and on the MicroPython unix port
# (like mp_bench.py it imports only controller/), so the two can be compared too:
#   python host_sim/golden_check.py [ticks]
#   .venv/bin/micropython -X heapsize=4m host_sim/golden_check.py [ticks]
import json
import sys

sys.path.insert(0, ".")

from controller import profile  # noqa: E402
from controller.supervisor import Supervisor  # noqa: E402

FIELDS = ("batt_duty", "cap_duty", "dump_duty", "usb_conv", "usb_on", "usb_probe", "batt_out",
          "bal_mask", "stage", "usb_match", "fault")
MASK32 = 0xFFFFFFFF

# profile file, then overrides of its sections: the three shipped profiles, and two variants
# that reach what they do not (equalize and short stage timers, cell taps with balancing, a
# quick lockout, MPPT with taps)
CASES = (
    ("default", "controller/default_profile.json", None),
    ("crank_relief", "host_sim/profiles/crank_relief.json", None),
    ("hut_wind", "host_sim/profiles/hut_wind.json", None),
    ("flooded_taps_quick", "controller/default_profile.json", {
        "battery": {"chemistry": "flooded", "tail_hold_s": 2, "rebulk_hold_s": 2,
                    "absorption_max_minutes": 10, "equalize_minutes": 10},
        "supercap": {"cell_taps": True},
        "bus": {"ovp_hold_ms": 200, "trip_window_s": 600, "lockout_trips": 2},
        "control": {"period_ms": 20}}),
    ("wind_taps", "host_sim/profiles/hut_wind.json", {
        "supercap": {"cell_taps": True, "balance_threshold_mv": 20},
        "usb": {"scheme": "div_2v0_2v7"}}),
)


class Rng:
    """xorshift32: the same numbers on both interpreters."""

    def __init__(self, seed):
        self.s = (seed & MASK32) or 1

    def next(self):
        x = self.s
        x ^= (x << 13) & MASK32
        x ^= x >> 17
        x ^= (x << 5) & MASK32
        self.s = x
        return x

    def below(self, n):
        return self.next() % n

    def between(self, lo, hi):
        return lo + self.next() % (hi - lo + 1)

    def chance(self, one_in):
        return self.next() % one_in == 0


def load_case(path, overrides):
    with open(path) as f:
        doc = json.load(f)
    if overrides:
        for sec in overrides:
            d = doc.get(sec)
            if d is None:
                d = {}
                doc[sec] = d
            for k in overrides[sec]:
                d[k] = overrides[sec][k]
    return profile.from_dict(doc)


# the readings a glitch overwrites with its value, by glitch number (4: the thermistor, open or
# shorted; 10 and up: the cases written out in run_case)
GLITCH_FIELDS = ("bus_mv", "src_ma", "batt_mv", "batt_ma", None, "cap_mv", "cap_ma",
                 "usb_vbus_mv", "usb_dp_mv", "usb_dm_mv")


class Walk:
    """A reading that wanders around a centre that jumps to a new regime now and then."""

    def __init__(self, rng, lo, hi, step):
        self.rng = rng
        self.lo = lo
        self.hi = hi
        self.step = step
        self.centre = rng.between(lo, hi)
        self.v = self.centre

    def regime(self):
        self.centre = self.rng.between(self.lo, self.hi)

    def next(self):
        r = self.rng
        v = self.v + r.between(-self.step, self.step)
        v += (self.centre - v) // 16  # pulled towards the centre
        self.v = v
        return v


def run_case(name, p, n_ticks, seed):
    rng = Rng(seed)
    sup = Supervisor(p)
    m = sup.m
    c = sup.c
    cells = p.cells
    bus = Walk(rng, 3000, 27000, 400)
    src = Walk(rng, -200, 8000, 200)
    batt = Walk(rng, cells * 1700, cells * 2650, 40)
    batt_i = Walk(rng, -3000, p.chg_limit_ma + p.chg_limit_ma // 4, 150)
    temp = Walk(rng, -150, 520, 6)
    cap = Walk(rng, 0, p.cap_cells * 2800, 80)
    cap_i = Walk(rng, -500, p.cap_limit_ma + 600, 120)
    vbus = Walk(rng, 4400, 5600, 30)
    dp = Walk(rng, 0, 3000, 60)
    dm = Walk(rng, 0, 3000, 60)
    walks = (bus, src, batt, batt_i, temp, cap, cap_i, vbus, dp, dm)
    n_cells = p.cap_cells
    taps = n_cells if p.cap_taps else 0
    skew = [0] * n_cells
    glitch_field = -1
    glitch_left = 0
    glitch_val = 0
    lines_short = 0  # USB lines follow the dedicated-port short for a while
    t = (0x3FFFFFFF - 20000 - rng.below(20000)) & 0x3FFFFFFF
    h = 2166136261
    seen_stage = 0
    seen_fault = 0
    seen_on = 0
    raised = 0
    for k in range(n_ticks):
        if rng.chance(700):
            for w in walks:
                if rng.chance(3):
                    w.regime()
        if rng.chance(900):
            lines_short = rng.between(0, 3)
        m.bus_mv = bus.next()
        m.src_ma = src.next()
        m.batt_mv = batt.next()
        m.batt_ma = batt_i.next()
        m.batt_temp_dc = temp.next()
        m.cap_mv = cap.next()
        m.cap_ma = cap_i.next()
        m.usb_vbus_mv = vbus.next()
        a = dp.next()
        b = dm.next()
        if lines_short == 1:  # dedicated port: D- follows D+ (probe level or near zero)
            a = 600 + rng.between(-120, 120) if c.usb_probe else rng.between(0, 900)
            b = a - rng.between(-110, 110)
        elif lines_short == 2:  # a divider pair, 2.0 V / 2.7 V at this VBUS
            a = (2000 * m.usb_vbus_mv) // 5000 + rng.between(-200, 200)
            b = (2700 * m.usb_vbus_mv) // 5000 + rng.between(-200, 200)
        elif lines_short == 3:  # shorted at 1.2 V
            a = (1200 * m.usb_vbus_mv) // 5000 + rng.between(-120, 120)
            b = a + rng.between(-60, 60)
        m.usb_dp_mv = a
        m.usb_dm_mv = b
        # cell taps: the bank split unevenly, now and then a tap that reads nonsense
        if taps:
            if rng.chance(500):
                m.n_taps = 0 if rng.chance(4) else taps
            if rng.chance(50):
                skew[rng.below(n_cells)] = rng.between(-150, 150)
            if m.n_taps:
                base = m.cap_mv // m.n_taps
                for i in range(m.n_taps):
                    m.cell_mv[i] = base + skew[i]
                if rng.chance(400):
                    m.cell_mv[rng.below(m.n_taps)] = rng.between(-2000, 9000)
        # sensor glitches: one reading far out of range (or stuck at a limit) for a few ticks
        if glitch_left == 0 and rng.chance(250):
            glitch_field = rng.below(14)
            glitch_left = rng.between(1, 40)
            glitch_val = rng.between(-5000, 60000) if rng.chance(2) else -rng.between(0, 40000)
        if glitch_left:
            glitch_left -= 1
            g = glitch_field
            if g < len(GLITCH_FIELDS) and GLITCH_FIELDS[g]:
                setattr(m, GLITCH_FIELDS[g], glitch_val)
            elif g == 4:
                m.batt_temp_dc = -600 if glitch_val < 0 else 900
            elif g == 10:  # battery absent or reversed
                m.batt_mv = rng.between(-3000, cells * 900)
            elif g == 11:  # an overvoltage spike
                m.bus_mv = p.ovp_trip_mv + rng.between(-1500, 3000)
            elif g == 12:  # a bus that reads low under running converters (the cross-check)
                m.bus_mv = m.batt_mv - rng.between(0, 3000)
                m.batt_ma = rng.between(0, 3000)
            else:  # bus and bank both just below 0 V (offsets): the bank's converter is
                # asked for a negative duty, and the bus comes back with the bank near its limit
                m.bus_mv = -rng.between(1, 480)
                m.cap_mv = -rng.between(380, 500)
                m.cap_ma = p.cap_limit_ma - rng.between(0, 300)
        if rng.chance(3000):
            m.eq_req = 1 - m.eq_req
        m.reset_req = 1 if rng.chance(800) else 0
        try:
            sup.tick(t)
            x = h
        except ZeroDivisionError:
            # the tick raises nothing (until the buck loop's off test took a bus at or below
            # 0 V, one under a bank reading below -0.3 V divided by zero there): hashed and
            # counted, so a raise shows as raised=N and must match on both interpreters
            x = ((h ^ 0xDEAD) * 16777619) & MASK32
            raised += 1
        for f in FIELDS:
            x = ((x ^ (getattr(c, f) & MASK32)) * 16777619) & MASK32
        h = x
        seen_stage |= 1 << c.stage
        seen_fault |= c.fault
        seen_on |= c.usb_on | (2 if c.bal_mask else 0) | (4 if c.dump_duty else 0)
        # the next tick's time: mostly one period; repeated, early, late, long gaps
        r = rng.below(1000)
        if r < 3:
            dt = 0
        elif r < 6:
            dt = -rng.between(1, 2 * p.period_ms)
        elif r < 12:
            dt = rng.between(2, 12) * p.period_ms
        elif r < 13:
            dt = rng.between(1, 3600000)
        else:
            dt = p.period_ms + rng.between(-2, 2)
        t = (t + dt) & 0x3FFFFFFF
    return h, seen_stage, seen_fault, seen_on, raised


def main(argv):
    n = int(argv[1]) if len(argv) > 1 else 60000
    only = argv[2] if len(argv) > 2 else None
    seed = 12345
    for name, path, over in CASES:
        seed += 1
        if only and name != only:
            continue
        p = load_case(path, over)
        h, st, fl, on, raised = run_case(name, p, n, seed)
        print("%s ticks=%d hash=%08x stages=%x faults=%x usb_bal_dump=%x raised=%d"
              % (name, n, h, st, fl, on, raised))


if __name__ == "__main__":
    main(sys.argv)
