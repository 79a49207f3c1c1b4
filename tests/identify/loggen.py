"""Bench logs with known truths for the coverage test, written from textbook models and kept
apart from the fitting code (nothing here imports host_sim): it models what the fits do not
assume, so the test can see whether their intervals hold up.

- A meter: reading = truth x (1 + gain error) + noise that grows with the reading
  (sigma = floor + fraction x |reading|), rounded to the meter's step, held at its full scale.
  The gain error is drawn once per channel and log, uniform within the stated tolerance.
- Machine: E = K_e w; V = E - R_a I - V_b(I) into a load resistor R (V = R I). V_b is constant
  (a brush pair or a series diode) or saturating, V_b0 (1 - exp(-I / I_0)) (brush contact drop,
  which levels off with current; info only: the fit assumes a constant drop).
- Supercap: an ideal capacitor behind a series resistance, discharged at constant current that
  starts somewhere in the row gap: v = U - I R - I (t - t_on) / C.
- Battery: OCV(SOC) by the BCI table (flooded, rested, 26.7 C) interpolated linearly, R_0 and
  one RC pair, v = OCV + I R_0 + v_p, dv_p/dt = (I R_p - v_p) / tau, solved exactly per row for
  a piecewise-constant current; SOC follows the charge (coulomb counting). Two RC pairs is the
  info-only case. The step happens inside a row gap.
"""
import math

import numpy as np

GAIN_TOL = 0.005  # the tolerance the fits are told (their default, 0.5 %)
BCI_V = (11.89, 12.06, 12.24, 12.45, 12.65)  # 12 V flooded block, 0/25/50/75/100 % SOC
BCI_SOC = (0.0, 0.25, 0.5, 0.75, 1.0)


class Meter:
    def __init__(self, rng, floor, frac, step, full_scale=None, gain_tol=None):
        self.rng = rng
        self.floor, self.frac, self.step, self.fs = floor, frac, step, full_scale
        tol = GAIN_TOL if gain_tol is None else gain_tol
        self.gain = 1.0 + rng.uniform(-tol, tol)

    def read(self, x):
        x = np.asarray(x, dtype=float)
        sigma = self.floor + self.frac * np.abs(x)
        r = x * self.gain + self.rng.normal(0.0, 1.0, x.shape) * sigma
        r = np.round(r / self.step) * self.step
        if self.fs is not None:
            r = np.clip(r, -self.fs, self.fs)
        return r


def machine(rng, drop="none", clip=False):
    """Rows of (rpm, v_term, i_a) and the truths. drop: 'none', 'constant' or 'saturating'."""
    ke = rng.uniform(5.0, 80.0)  # V per 1000 rpm
    ra = rng.uniform(0.2, 3.0)
    vb0 = rng.uniform(0.4, 1.2) if drop != "none" else 0.0
    top = rng.uniform(600.0, 3000.0) * 12.0 / math.sqrt(ke)  # rpm: slower machines for big K_e
    speeds = np.linspace(0.3, 1.0, int(rng.integers(4, 7))) * top
    e_top = ke * top / 1000.0
    i_full = e_top / ra / rng.uniform(3.0, 8.0)  # largest bench current, a fraction of stall
    loads = [None] + list(e_top / (i_full * f) - ra for f in (1.0, 0.6, 0.35, 0.2, 0.1, 0.05))
    i0 = 0.3 * i_full

    def v_b(i):
        if drop == "none":
            return 0.0
        return vb0 if drop == "constant" else vb0 * (1.0 - math.exp(-i / i0))
    rpm_t, v_t, i_t = [], [], []
    for n in speeds:
        e = ke * n / 1000.0
        for r in loads:
            if r is None:
                i = 0.0
            else:  # E - R_a I - V_b(I) = R I, by bisection (monotone in I)
                lo, hi = 0.0, e / (ra + r)
                for _ in range(60):
                    mid = 0.5 * (lo + hi)
                    if e - ra * mid - v_b(mid) - r * mid > 0:
                        lo = mid
                    else:
                        hi = mid
                i = 0.5 * (lo + hi)
            rpm_t.append(n)
            i_t.append(i)
            v_t.append(e - ra * i - (v_b(i) if i > 0 else 0.0))
    v_t = np.array(v_t)
    vm = Meter(rng, 0.002, 0.0005, 0.001 if e_top < 40 else 0.01)
    if clip:  # a meter range just below the top fifth of the readings
        vm.fs = float(np.sort(v_t)[int(0.8 * len(v_t))]) * vm.gain
    im = Meter(rng, 0.001, 0.001, 0.001)
    nm = Meter(rng, 0.3, 0.001, 0.1)
    i_read = im.read(i_t)
    i_read[np.array(i_t) == 0.0] = 0.0  # open circuit: no current flows, the meter shows 0
    truth = {"ke_v_per_krpm": ke, "ra_ohm": ra}
    if drop == "constant":
        truth["v_brush_v"] = vb0
    return (nm.read(rpm_t), vm.read(v_t), i_read), truth


def supercap(rng, clip_rest=False):
    """(t_s, v, i_a) of a held, then constant-current discharged bank, and the truths."""
    c = rng.uniform(1.0, 60.0)
    u_r = rng.uniform(2.5, 16.2)
    dur = rng.uniform(20.0, 100.0)  # seconds to fall from U_R to 0.3 U_R
    i = 0.7 * u_r * c / dur
    # IEC 62391-1 picks the current so the resistive drop is a few % of U_R (95 % discharge
    # efficiency at I = U_R / (40 R), from memory): here 0.5-5 %
    esr = rng.uniform(0.005, 0.05) * u_r / i
    dt = float(rng.choice([0.05, 0.1, 0.2]))
    n_rest = int(rng.integers(30, 80))
    t = np.arange(0.0, n_rest * dt + dur * 1.1, dt)
    t_on = t[n_rest] - rng.uniform(0.0, dt)  # inside the gap before row n_rest
    on = t >= t_on
    v = np.where(on, u_r - i * esr - i * (t - t_on) / c, u_r)
    keep = v > 0.25 * u_r
    t, v, on = t[keep], v[keep], on[keep]
    vm = Meter(rng, 0.0005, 0.0003, 0.0001)
    if clip_rest:  # the meter's full scale 2 mV below the held reading
        vm.fs = u_r * vm.gain - 0.002
    im = Meter(rng, 0.0005, 0.001, 0.0001)
    cur = np.where(on, -i, 0.0)
    i_read = np.where(on, im.read(cur), 0.0)
    return (t, vm.read(v), i_read), {"capacitance_f": c, "esr_ohm": esr}


_CUBIC = np.polyfit(BCI_SOC, BCI_V, 3)  # a smooth curve through the table, for the slope


def _ocv(soc, soc0=None):
    """The table's value at soc0 (the rested start), moving from there along a smooth cubic
    through the table (a real OCV curve has no corners)."""
    if soc0 is None:
        return float(np.interp(soc, BCI_SOC, BCI_V))
    return _ocv(soc0) + float(np.polyval(_CUBIC, soc) - np.polyval(_CUBIC, soc0))


def battery(rng, pairs=1, unrested=False):
    """(t_s, v, i_a) of a rested block stepped into discharge, and the truths."""
    q_ah = rng.uniform(7.0, 100.0)
    soc0 = rng.uniform(0.2, 0.9)
    r0 = rng.uniform(0.15, 0.5) / q_ah  # ohm: 150-500 mohm Ah
    rp = rng.uniform(1.0, 3.0) / q_ah
    tau = rng.uniform(10.0, 60.0)
    r2, tau2 = 0.6 * rp, 8.0 * tau  # the slower second pair (info only)
    i_step = -rng.uniform(0.05, 0.3) * q_ah
    dt = float(rng.choice([0.5, 1.0]))
    n_rest = int(rng.integers(60, 240))
    t_end = n_rest * dt + 6.0 * tau
    t = np.arange(0.0, t_end, dt)
    t_on = t[n_rest] - rng.uniform(0.0, dt)
    v = np.empty_like(t)
    cur = np.where(t >= t_on, i_step, 0.0)
    for k, tk in enumerate(t):
        x = max(0.0, tk - t_on)  # time under current
        soc = soc0 + i_step * x / 3600.0 / q_ah
        vp = i_step * rp * (1.0 - math.exp(-x / tau)) if x > 0 else 0.0
        if pairs == 2 and x > 0:
            vp += i_step * r2 * (1.0 - math.exp(-x / tau2))
        v[k] = _ocv(soc, soc0) + cur[k] * r0 + vp
    if unrested:  # the rest still recovers: +20 mV over the last 60 s before the step
        rise = 0.020 * np.clip(1.0 - (t_on - t) / 60.0, 0.0, 1.0) - 0.020
        v = v + np.where(t < t_on, rise, -0.0)
    vm = Meter(rng, 0.0005, 0.00003, 0.0001)
    im = Meter(rng, 0.002, 0.002, 0.001)
    i_read = np.where(cur != 0.0, im.read(cur), 0.0)
    truth = {"r0_ohm": r0, "rp_ohm": rp, "tau_s": tau, "ocv_v": _ocv(soc0),
             "soc_pct": 100.0 * soc0}
    return (t, vm.read(v), i_read), truth, q_ah
