# Drives: what turns the generator. Each gives the torque on its own shaft (the drive shaft,
# before the gear) and the derivative of that torque over the shaft speed, so the plant can
# integrate the rotor semi-implicitly. Per-period work (fatigue, the wind at this instant)
# happens in begin_period(); torque() is called every sub-step and stays a few float ops.
#
#  - pedal / crank: a person with a torque limit, a power limit that falls with working time
#    (fatigue, a Malewicki-type curve: fresh power decaying towards the sustained power;
#    Malewicki 1983: about 75 W sustained for hours on pedals; arm cranking 30-60 W, from
#    memory), a cadence they aim at (easing off above it), rests and changes of direction on
#    a schedule; after each start the torque limit ramps up over start_ramp_s (nobody stamps
#    full force from a standstill).
#  - wind: rotor power P = 1/2 rho A v^3 Cp(lambda) (physics: the wind's kinetic energy flux
#    through the swept area times the power coefficient) with a cubic Cp(lambda) that peaks
#    at cp_max at tsr_opt (at most the Betz limit 16/27: Betz 1920, in any wind-energy text),
#    has starting torque and reaches zero at runaway_ratio x tsr_opt; a gusty wind series
#    drawn from the scenario's seed (Ornstein-Uhlenbeck turbulence plus 1 - cos gusts).
#  - hydro: a turbine with a straight torque-speed line (stall torque to runaway speed), so
#    its power peaks at half the runaway speed; that peak is P = rho g Q H eta (physics: the
#    water's potential energy per second times the turbine's efficiency).
#  - scripted: piecewise-linear speed (the drive holds the speed whatever it costs) or torque.
import math

import numpy as np

from host_sim.plant.machine import RPM_PER_RAD_S

NAN = float("nan")


def _interp_pts(points, t):
    """Piecewise-linear value of [[t, v], ...] at t, held before the first and after the last."""
    if t <= points[0][0]:
        return points[0][1]
    for k in range(1, len(points)):
        t1, v1 = points[k]
        if t <= t1:
            t0, v0 = points[k - 1]
            return v0 + (v1 - v0) * (t - t0) / (t1 - t0)
    return points[-1][1]


class Drive:
    kind = "none"
    speed_mode = False  # True: the drive imposes the shaft speed (scripted speed)
    strength = 0.0  # wind speed (m/s) or flow (l/s) this period, for p_ideal

    def __init__(self, d):
        self.inertia = d["inertia_kg_m2"]  # on the drive shaft, kg m^2
        self.stopped = False  # drive_stop event

    def begin_period(self, t_s, dt_s):
        pass

    def torque(self, w):
        """(torque on the drive shaft, d torque / d w) at drive-shaft speed w (rad/s)."""
        return 0.0, 0.0

    def p_ideal_w(self):
        return NAN


class Human(Drive):
    def __init__(self, d):
        super().__init__(d)
        self.kind = d["kind"]
        self.w_target = d["cadence_rpm"] / RPM_PER_RAD_S  # rad/s
        self.t_max = d["torque_max_nm"]
        self.p_start = d["power_start_w"]
        self.p_sus = d["power_sustained_w"]
        self.tau_f = d["fatigue_tau_s"]
        self.tau_r = d["recovery_tau_s"]
        self.effort = d["effort"]
        self.start_s = d["start_s"]
        self.stop_s = d["stop_s"]
        self.pauses = d["pauses"]
        self.reversals = d["reversals_s"]
        self.ramp_s = d["start_ramp_s"]
        self.active_s = 0.0  # time since the person last (re)started turning, s
        self.t_lim = 0.0  # torque limit this period (ramps up after each start), N m
        self.work_s = 0.0  # fatigue state: equivalent working time, s
        self.dir = 1.0  # +1 / -1: the way the person turns
        self.active = False  # turning this period
        self.p_avail = 0.0  # power the person can give this period, W
        self._rev_i = 0

    def begin_period(self, t_s, dt_s):
        while self._rev_i < len(self.reversals) and self.reversals[self._rev_i] <= t_s:
            self.dir = -self.dir
            self._rev_i += 1
            self.active_s = 0.0  # a change of hands: the torque builds up again
        act = (t_s >= self.start_s and not self.stopped
               and (self.stop_s is None or t_s < self.stop_s))
        if act:
            for a, b in self.pauses:
                if a <= t_s < b:
                    act = False
                    break
        self.active = act
        if act:
            self.active_s += dt_s
            self.t_lim = self.t_max * min(1.0, self.active_s / self.ramp_s)
            self.work_s += dt_s
        else:
            self.active_s = 0.0
            self.work_s -= self.work_s * min(1.0, dt_s / self.tau_r)
        self.p_avail = self.effort * (self.p_sus + (self.p_start - self.p_sus)
                                      * math.exp(-self.work_s / self.tau_f))

    def torque(self, w):
        if not self.active:
            return 0.0, 0.0
        d = self.dir
        v = d * w  # speed the way the person wants to turn
        wt = self.w_target
        if v < 0.0:
            return d * self.t_lim, 0.0  # braking a rotor that turns the wrong way
        lo = 0.3 * wt
        if v > lo:
            tm = self.p_avail / v
            dtm = -tm / v
        else:
            tm = self.p_avail / lo
            dtm = 0.0
        if tm > self.t_lim:
            tm = self.t_lim
            dtm = 0.0
        if v <= wt:
            return d * tm, dtm
        hi = 1.15 * wt
        if v >= hi:
            return 0.0, 0.0
        band = hi - wt
        g = (hi - v) / band
        return d * tm * g, dtm * g - tm / band


def cp_coeffs():
    """Cp(x)/cp_max = x (a + b x + c x^2), x = lambda / tsr_opt: peak 1 at x = 1, zero at
    x = runaway ratio r. Returns a function r -> (a, b, c)."""
    def abc(r):
        # a + b + c = 1, a + 2b + 3c = 0, a + b r + c r^2 = 0
        m = np.array([[1.0, 1.0, 1.0], [1.0, 2.0, 3.0], [1.0, r, r * r]])
        a, b, c = np.linalg.solve(m, np.array([1.0, 0.0, 0.0]))
        return float(a), float(b), float(c)
    return abc


def gust_series(gusts, t):
    """The gusts' summed speed at the times t (numpy array, s), m/s: each a 1 - cos pulse of
    its peak over its duration."""
    g = np.zeros(len(t))
    for gust in gusts:
        x = (t - gust["t_s"]) / gust["duration_s"]
        m = (x >= 0) & (x <= 1)
        g[m] += gust["peak_ms"] * 0.5 * (1.0 - np.cos(2.0 * np.pi * x[m]))
    return g


class Wind(Drive):
    def __init__(self, d, rng, duration_s):
        super().__init__(d)
        self.kind = "wind"
        self.r = d["rotor_radius_m"]
        self.rho = d["air_density"]
        self.cp_max = d["cp_max"]
        self.tsr = d["tsr_opt"]
        self.runaway = d["runaway_ratio"]
        self.a, self.b, self.c = cp_coeffs()(self.runaway)
        self.mean = d["wind_mean_ms"]
        self.ti = d["turbulence_pct"] / 100.0
        self.start_s = d["start_s"]
        # torque = kq v^2 (a + b x + c x^2), x = w r / (v tsr): from P = 1/2 rho pi r^2 v^3 Cp
        self.kq = 0.5 * self.rho * math.pi * self.r ** 3 * self.cp_max / self.tsr
        dt = d["series_dt_s"]
        n = int(duration_s / dt) + 3
        # turbulence: unit-variance Ornstein-Uhlenbeck series
        phi = math.exp(-dt / d["turbulence_tau_s"])
        e = rng.standard_normal(n) * math.sqrt(1.0 - phi * phi)
        u = np.empty(n)
        u[0] = rng.standard_normal()
        for k in range(1, n):
            u[k] = phi * u[k - 1] + e[k]
        g = gust_series(d["gusts"], np.arange(n) * dt)
        self.series_dt = dt
        self.turb = u.tolist()  # unit turbulence
        self.gust = g.tolist()  # gust speed added, m/s
        self.v = 0.0  # wind speed this period, m/s
        self.kv2 = 0.0  # kq v^2 this period
        self.kx = 0.0  # x per rad/s this period
        self._ideal = None  # (strength grid, p_ideal grid) set by the plant

    def wind_at(self, t_s):
        if t_s < self.start_s or self.stopped:
            return 0.0
        k = t_s / self.series_dt
        i = int(k)
        if i >= len(self.turb) - 1:
            i = len(self.turb) - 2
            f = 1.0
        else:
            f = k - i
        u = self.turb[i] + (self.turb[i + 1] - self.turb[i]) * f
        gs = self.gust[i] + (self.gust[i + 1] - self.gust[i]) * f
        v = self.mean * (1.0 + self.ti * u) + gs
        return v if v > 0.0 else 0.0

    def begin_period(self, t_s, dt_s):
        v = self.wind_at(t_s + 0.5 * dt_s)
        self.v = v
        self.strength = v
        self.kv2 = self.kq * v * v
        self.kx = self.r / (v * self.tsr) if v > 0.05 else 0.0

    def torque(self, w):
        if self.kx == 0.0:
            return 0.0, 0.0
        x = w * self.kx
        t = self.kv2 * (self.a + x * (self.b + self.c * x))
        return t, self.kv2 * self.kx * (self.b + 2.0 * self.c * x)

    def torque_array(self, v, w):
        """Vectorised torque for the p_ideal table: v (m/s) and w (rad/s) arrays."""
        vv = np.maximum(v, 1e-6)
        x = w * self.r / (vv * self.tsr)
        return self.kq * v * v * (self.a + x * (self.b + self.c * x))

    def p_ideal_w(self):
        return _ideal_lookup(self._ideal, self.strength)


class Hydro(Drive):
    def __init__(self, d):
        super().__init__(d)
        self.kind = "hydro"
        self.w_run = d["runaway_rpm"] / RPM_PER_RAD_S
        self.k_p = 1000.0 * 9.81 * d["head_m"] * d["efficiency"] / 1000.0  # W per l/s
        self.flow = d["flow_lps"]
        self.points = d["flow_points"]
        self.start_s = d["start_s"]
        self.t_stall = 0.0  # stall torque this period, N m
        self._ideal = None

    def begin_period(self, t_s, dt_s):
        q = _interp_pts(self.points, t_s) if self.points else self.flow
        if t_s < self.start_s or self.stopped:
            q = 0.0
        self.strength = q
        self.t_stall = 4.0 * self.k_p * q / self.w_run  # power peaks at w_run / 2

    def torque(self, w):
        return self.t_stall * (1.0 - w / self.w_run), -self.t_stall / self.w_run

    def torque_array(self, q, w):
        return 4.0 * self.k_p * q / self.w_run * (1.0 - w / self.w_run)

    def p_ideal_w(self):
        return _ideal_lookup(self._ideal, self.strength)


class Scripted(Drive):
    def __init__(self, d):
        super().__init__(d)
        self.kind = "scripted"
        self.speed_mode = d["mode"] == "speed"
        self.points = d["points"]
        self.value = 0.0  # torque (N m) or speed (rad/s) this period

    def begin_period(self, t_s, dt_s):
        if self.stopped:
            self.speed_mode = False
            self.value = 0.0
            return
        x = _interp_pts(self.points, t_s + dt_s)
        self.value = x / RPM_PER_RAD_S if self.speed_mode else x

    def speed_at(self, t_s):
        return _interp_pts(self.points, t_s) / RPM_PER_RAD_S

    def torque(self, w):
        return self.value, 0.0


def _ideal_lookup(tab, s):
    if tab is None:
        return NAN
    grid, p = tab
    if s <= grid[0]:
        return p[0]
    step = grid[1] - grid[0]
    k = (s - grid[0]) / step
    i = int(k)
    if i >= len(p) - 1:
        return p[-1]
    f = k - i
    return p[i] + (p[i + 1] - p[i]) * f


def ideal_table(drive, machine, gear_ratio, gear_eff, s_max):
    """p_ideal over the drive's strength (wind m/s or flow l/s): the largest steady-state
    electrical output of the machine at any constant speed, with gear, friction and armature
    losses counted (bridge and converters excluded)."""
    grid = np.linspace(0.0, s_max, 321)
    out = np.zeros_like(grid)
    for k, s in enumerate(grid):
        if s <= 0:
            continue
        if isinstance(drive, Wind):
            w_hi = drive.tsr * drive.runaway * s / drive.r
        else:
            w_hi = drive.w_run
        wd = np.linspace(0.0, w_hi, 600)
        td = drive.torque_array(np.full_like(wd, s), wd)
        wm = wd * gear_ratio
        tm = td * gear_eff / gear_ratio
        tf = machine.b * wm + machine.tc * np.minimum(1.0, wm / machine.w_s)
        i = np.maximum(0.0, (tm - tf) / machine.k)
        p = (machine.k * wm - i * machine.ra) * i
        out[k] = max(0.0, float(p.max()))
    return grid.tolist(), out.tolist()


def make_drive(d, rng, duration_s):
    k = d["kind"]
    if k in ("pedal", "crank"):
        return Human(d)
    if k == "wind":
        return Wind(d, rng, duration_s)
    if k == "hydro":
        return Hydro(d)
    return Scripted(d)
