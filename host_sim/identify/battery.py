# Lead-acid battery from one current step (on, off or a change of current):
#   ohmic resistance   R_0 = (jump in V at the step) / (step in I), the jump read at the step's
#                      own time: the middle of the row gap in which the current changed
#   polarisation       after the step v(t) = a + b exp(-(t - t_step) / tau) [+ c (t - t_step)]
#                      R_p = -b / dI, tau: one time constant (the drift term c only while a
#                      current flows afterwards, for the slow change of state of charge)
#   state of charge    from the open-circuit voltage of the whole rest and the BCI table
#                      (Battery Council International: flooded 12 V block, rested, 26.7 C;
#                      as commonly reproduced, from memory; scaled per cell)
# Current + into the battery (charging), as in controller/signals.py.
import math

import numpy as np

from host_sim.errors import UserError
from host_sim.identify.common import (RUNS_Z_WARN, calibration_from, calibration_u,
                                      check_clipping, check_magnitude, check_rows, combine, diag,
                                      emit, linfit, new_figure, pm, quantity, read_log,
                                      resolution, runs_z, save_figure, t975, table, write_result)

COLUMNS = ("t_s", "v", "i_a")
UNITS = {"t_s": "s", "v": "V (battery terminal voltage)", "i_a": "A (+ into the battery)"}
# BCI open-circuit voltage of a rested flooded 12 V block at 26.7 C (as commonly reproduced)
OCV_TABLE_V = (11.89, 12.06, 12.24, 12.45, 12.65)
OCV_TABLE_SOC = (0.0, 25.0, 50.0, 75.0, 100.0)
TABLE_CELLS = 6
_MIN_STEP_A = 0.01  # a smaller step cannot show the resistances above ADC noise
_SAME = 0.05  # rows within 5 % of the step of a level's current belong to that level
_MIN_POST = 8  # rows after the step the relaxation fit needs
_F_WARN = 8.0  # F of a second time constant above which the relaxation is called two-pair
_DRIFT_WARN_V = 0.005  # a rest moving more than 5 mV (about 0.7 % SOC on a 12 V block): unrested
_PRE_LINE = 10  # rows of a line read at the step when the old level carries a current
_WANT_PRE = 20  # rows at the old level below which the log is called short
_WANT_POST = 30  # rows after the step below which the log is called short
# How far a generic table can sit from one real block: chemistry (flooded, AGM, gel), acid
# density, temperature and age move the curve by several % SOC (from memory). Shown beside the
# reading's interval, not inside it.
SOC_TABLE_PCT = 5.0
METHOD = ("step at the middle of the row gap; before-step voltage from every row at the old "
          "level (mean, or a line when it moves), Student t on its own degrees of freedom; "
          "relaxation v = a + b exp(-t / tau) [+ c t] by least squares (tau on a log grid, "
          "golden-section refinement), intervals from the Jacobian and the residual variance; "
          "the step time uniform over the gap; plus the meter's calibration tolerance (GUM "
          "4.3.7)")
SOURCE = ("equivalent circuit R_0 + (R_p || C_p): any battery modelling text (e.g. Plett, "
          "Battery Management Systems vol. 1, equivalent-circuit models); state of charge: "
          "Battery Council International open-circuit voltage table, flooded, rested, 26.7 C, "
          "as commonly reproduced (from memory); calibration: GUM JCGM 100:2008 4.3.7")


def soc_from_ocv(ocv_v, cells=TABLE_CELLS):
    """State of charge in % from a rested open-circuit voltage by linear interpolation in the
    BCI table (per cell: the 12 V figures divided by 6). Returns (soc_pct, inside_table)."""
    v_block = ocv_v * TABLE_CELLS / cells
    inside = OCV_TABLE_V[0] <= v_block <= OCV_TABLE_V[-1]
    return float(np.interp(v_block, OCV_TABLE_V, OCV_TABLE_SOC)), inside


def soc_slope_pct_per_v(ocv_v, cells=TABLE_CELLS):
    """d(SOC)/d(OCV) of the table at ocv_v, % per volt (for the uncertainty)."""
    v_block = ocv_v * TABLE_CELLS / cells
    k = int(np.clip(np.searchsorted(OCV_TABLE_V, v_block) - 1, 0, len(OCV_TABLE_V) - 2))
    return ((OCV_TABLE_SOC[k + 1] - OCV_TABLE_SOC[k]) / (OCV_TABLE_V[k + 1] - OCV_TABLE_V[k])
            * TABLE_CELLS / cells)


def _basis(x_s, tau_s, drift):
    cols = [np.ones_like(x_s), np.exp(-x_s / tau_s)]
    if drift:
        cols.append(x_s)
    return np.column_stack(cols)


def fit_relaxation(x_s, v, drift=False, floor_var=0.0):
    """v = a + b exp(-x / tau) [+ c x] by least squares: tau on a log grid, the linear terms
    exactly for each tau, then a golden-section refinement. Returns (theta, cov, resid, dof,
    at_edge): theta = (a, b, [c,] tau), cov from the residual variance and the Jacobian, at_edge
    when tau ran to the end of its search range."""
    span = x_s[-1]
    dx = np.min(np.diff(x_s)) if len(x_s) > 1 else span
    dx = min(dx, x_s[0]) if x_s[0] > 0 else dx

    def sse(log_tau):
        X = _basis(x_s, math.exp(log_tau), drift)
        beta = np.linalg.lstsq(X, v, rcond=None)[0]
        r = v - X @ beta
        return float(r @ r), beta

    grid = np.linspace(math.log(max(dx, 1e-9) / 2), math.log(span * 3), 120)
    errs = [sse(g)[0] for g in grid]
    j = int(np.argmin(errs))
    lo, hi = grid[max(j - 1, 0)], grid[min(j + 1, len(grid) - 1)]
    g = (math.sqrt(5) - 1) / 2
    for _ in range(60):  # golden section on log(tau)
        m1, m2 = hi - g * (hi - lo), lo + g * (hi - lo)
        if sse(m1)[0] < sse(m2)[0]:
            hi = m2
        else:
            lo = m1
    log_tau = (lo + hi) / 2
    tau = math.exp(log_tau)
    err, beta = sse(log_tau)
    e = np.exp(-x_s / tau)
    J = np.column_stack([_basis(x_s, tau, drift), beta[1] * x_s / tau ** 2 * e])
    dof = len(v) - J.shape[1]
    s2 = max(err / dof, floor_var)
    cov = s2 * np.linalg.inv(J.T @ J)
    theta = np.append(beta, tau)
    at_edge = not grid[0] + 0.01 < log_tau < grid[-1] - 0.01
    return theta, cov, v - _basis(x_s, tau, drift) @ beta, dof, at_edge


def second_pair_f(x_s, v, drift, sse_one, tau_s, floor_var=0.0):
    """F statistic of a second exponential (a second RC pair) over the one-pair fit: the sum of
    squares the best pair of time constants removes, per added parameter (2), over the two-pair
    residual variance. tau_1 is searched around the one-pair tau_s, tau_2 over the whole log on
    a log grid. The search inflates F, so the threshold (_F_WARN) sits well above the F
    table's 99.9 % point (about 7 for these sizes)."""
    n = len(x_s)
    dx = float(np.min(np.diff(x_s))) if n > 1 else float(x_s[-1])
    t1s = tau_s * np.exp(np.linspace(-1.2, 1.2, 13))
    t2s = np.exp(np.linspace(math.log(max(dx, 1e-9)), math.log(3 * x_s[-1]), 30))
    best = sse_one
    one = np.ones_like(x_s)
    for t1 in t1s:
        e1 = np.exp(-x_s / t1)
        for t2 in t2s:
            if abs(math.log(t2 / t1)) < 0.5:
                continue
            X = np.column_stack([one, e1, np.exp(-x_s / t2)] + ([x_s] if drift else []))
            r = v - X @ np.linalg.lstsq(X, v, rcond=None)[0]
            best = min(best, float(r @ r))
    p2 = (4 if drift else 3) + 2
    if n - p2 < 3:
        return 0.0
    return ((sse_one - best) / 2) / max(best / (n - p2), floor_var)


class BatteryFit:
    def __init__(self):
        self.t_step_s = 0.0  # the step: the middle of the row gap before the new current, s
        self.gap_s = 0.0  # that row gap, s
        self.u_cal = {}  # standard uncertainties from the meter's calibration
        self.r0_ci_noise = self.rp_ci_noise = self.tau_ci_noise = self.ocv_ci_noise = 0.0
        self.second_pair_f = 0.0  # F statistic of a second time constant
        self.soc_ci_table = 0.0  # the SOC interval with the generic table's spread added
        self.i_pre_a = self.i_post_a = 0.0  # currents before and after the step, A
        self.rest_a = _MIN_STEP_A  # currents within +/- this count as rest, A
        self.v_pre_v = 0.0  # voltage just before the step, V
        self.r0_ohm = self.r0_ci = 0.0  # ohmic resistance and its 95 % half-width
        self.rp_ohm = self.rp_ci = 0.0  # polarisation resistance and its 95 % half-width
        self.tau_s = self.tau_ci = 0.0  # polarisation time constant and its 95 % half-width
        self.theta = None  # (a, b, [c,] tau) of the relaxation fit
        self.drift = False  # the fit carried a linear drift term
        self.ocv_v = None  # open-circuit voltage used for the state of charge, V
        self.ocv_ci = 0.0
        self.ocv_source = ""  # where that voltage came from
        self.soc_pct = None  # state of charge, %
        self.soc_ci = 0.0
        self.cells = TABLE_CELLS
        self.rms_v = 0.0  # residual RMS of the relaxation fit, V
        self.post = slice(0, 0)  # rows of the relaxation
        self.warnings = []

    def discharge_side(self):
        """True when the polarisation seen is the discharge one: a step into discharge, or the
        relaxation after a discharge stops."""
        if abs(self.i_post_a) <= self.rest_a:
            return self.i_pre_a < 0
        return self.i_post_a < 0

    def fragment(self, capacity_ah):
        """The battery section of a scenario (field names of host_sim/scenario.py: resistances
        and the polarisation capacitance per Ah). The plant raises R_0 and the discharge R_p as
        the state of charge falls; the measured values are divided by the plant's own factors at
        the measured state of charge, so a run from the fragment shows what the bench showed."""
        k0, kp = plant_factors(self.soc_pct / 100) if self.soc_pct is not None else (1.0, 1.0)
        dis = self.discharge_side()
        out = {"cells": self.cells, "capacity_ah": capacity_ah,
               "r0_mohm_ah": round(self.r0_ohm / k0 * 1000 * capacity_ah, 3),
               "rp_dis_ohm_ah" if dis else "rp_base_ohm_ah":
                   round(self.rp_ohm / (kp if dis else 1.0) * capacity_ah, 4),
               "cp_f_per_ah": round(self.tau_s / self.rp_ohm / capacity_ah, 3)}
        if self.soc_pct is not None:
            out["soc0"] = round(self.soc_pct / 100, 4)
        return out


def plant_factors(soc):
    """(R_0 factor, discharge R_p factor) the plant (host_sim/plant/battery.py) applies to its
    per-Ah base values at this state of charge and 25 C, read from a plant battery with unit
    base values."""
    from host_sim.plant.battery import Battery
    doc = {"present": True, "chemistry": "flooded", "cells": 6, "capacity_ah": 1.0, "soc0": soc,
           "ambient_c": 25.0, "temp0_c": 25.0, "r0_mohm_ah": 1000.0, "rp_base_ohm_ah": 1.0,
           "rp_full_ohm_ah": 1.0, "rp_dis_ohm_ah": 1.0, "cp_f_per_ah": 1.0,
           "gas_i0_ma_per_ah": 1.0, "gas_onset_v_per_cell": 2.4, "gas_slope_mv": 40.0,
           "gas_doubling_c": 10.0, "heat_j_per_k_ah": 300.0, "thermal_k_per_w": 2.0}
    b = Battery(doc)
    b.vp = -1e-6  # the discharge branch of the polarisation
    b.refresh()
    return b.r0, b.rp


def _level_end(i_a, start, level, tol, step):
    """First row at or after start whose current leaves level by more than tol (or the end)."""
    off = np.nonzero(np.abs(i_a[start::step] - level) > tol)[0]
    return start + step * int(off[0]) if len(off) else (len(i_a) if step > 0 else -1)


def before_step(t, v, first, k, t_on, floor_var, rested):
    """The voltage just before the step, read at t_on. After a rest: every rest row (first ..
    k-1), their mean when they show no slope at 95 %, else a line through them. Under a current
    the voltage still relaxes, so only the last _PRE_LINE rows, a line through them. Returns
    (value, 95 % half-width with its own degrees of freedom, slope or None)."""
    if not rested:
        first = max(first, k - _PRE_LINE)
    n = k - first
    tr, vr = t[first:k], v[first:k]
    if n >= 4 and np.ptp(tr) > 0:
        beta, cov, _, dof = linfit(np.column_stack([np.ones(n), tr - t_on]), vr,
                                   floor_var=floor_var)
        moving = abs(beta[1]) > t975(dof) * math.sqrt(cov[1, 1]) if cov[1, 1] > 0 else False
        if moving or not rested:
            return float(beta[0]), t975(dof) * math.sqrt(cov[0, 0]), float(beta[1])
    if n >= 2:
        var = max(float(np.var(vr, ddof=1)), floor_var)
        return float(np.mean(vr)), t975(n - 1) * math.sqrt(var / n), None
    return float(vr[-1]), float("nan"), None


def _estimate(t, v, i_a, k, first, end, cells):
    """R_0, R_p, tau, the voltage before the step and the open-circuit voltage from one log
    (rows first .. k-1 at the old current, k .. end-1 at the new one). The step is taken at the
    middle of the row gap before row k (it happened somewhere in that gap)."""
    e = {}
    gap = float(t[k] - t[k - 1])
    t_on = float(t[k]) - gap / 2
    e["i_pre"] = float(np.mean(i_a[first:k]))
    e["i_post"] = float(np.mean(i_a[k:end]))
    d_i = e["i_post"] - e["i_pre"]
    e["rest_a"] = rested = max(_MIN_STEP_A, 0.01 * abs(d_i))
    e["drift"] = abs(e["i_post"]) > rested
    floor = resolution(v) ** 2 / 12
    x = t[k:end] - t_on
    theta, cov, resid, dof, at_edge = fit_relaxation(x, v[k:end], e["drift"], floor)
    q = t975(dof)
    v_pre, ci_pre, slope = before_step(t, v, first, k, t_on, floor, abs(e["i_pre"]) <= rested)
    if not math.isfinite(ci_pre):
        ci_pre = q * math.sqrt(max(float(resid @ resid) / dof, floor))
    a, b, tau = theta[0], theta[1], theta[-1]
    # the step's time is uniform over the gap: the amplitude read at t_on moves by b/tau per
    # second of it, into R_0 one way and R_p the other
    ci_gap = 1.96 * abs(b) / tau * gap / math.sqrt(12)
    e.update(t_on=t_on, gap=gap, theta=theta, resid=resid, dof=dof, at_edge=at_edge, x=x,
             v_pre=v_pre, ci_pre=ci_pre, pre_slope=slope, d_i=d_i)
    e["r0"] = (a + b - v_pre) / d_i
    e["r0_ci"] = math.sqrt(q ** 2 * (cov[0, 0] + cov[1, 1] + 2 * cov[0, 1]) + ci_pre ** 2
                           + ci_gap ** 2) / abs(d_i)
    e["rp"] = -b / d_i
    e["rp_ci"] = math.hypot(q * math.sqrt(cov[1, 1]), ci_gap) / abs(d_i)
    e["tau"] = tau
    e["tau_ci"] = q * math.sqrt(cov[-1, -1])
    e["ocv"] = None
    if abs(e["i_pre"]) <= rested:
        e["ocv"], e["ocv_ci"], e["ocv_from"] = v_pre, ci_pre, "before"
    elif abs(e["i_post"]) <= rested:
        e["ocv"], e["ocv_ci"], e["ocv_from"] = float(a), q * math.sqrt(cov[0, 0]), "after"
    if e["ocv"] is not None:
        e["soc"], e["soc_inside"] = soc_from_ocv(e["ocv"], cells)
        e["soc_ci"] = e["ocv_ci"] * soc_slope_pct_per_v(e["ocv"], cells)
    return e


def identify(log, cells=TABLE_CELLS, cal=None):
    t, v, i_a = log.col["t_s"], log.col["v"], log.col["i_a"]
    fit = BatteryFit()
    fit.cells = cells
    warn = fit.warnings.append
    k = int(np.argmax(np.abs(np.diff(i_a)))) + 1
    d_i = float(i_a[k] - i_a[k - 1])
    if abs(d_i) < _MIN_STEP_A:
        raise UserError("%s: column 'i_a' has no current step of at least %g A (largest: %.4g A "
                        "at line %d)" % (log.path, _MIN_STEP_A, abs(d_i), log.line[k]))
    tol = _SAME * abs(d_i)
    end = _level_end(i_a, k, i_a[k], tol, 1)
    first = _level_end(i_a, k - 1, i_a[k - 1], tol, -1) + 1
    if end - k < _MIN_POST:
        raise UserError("%s: only %d rows at the new current after the step at line %d; the "
                        "relaxation fit needs at least %d" % (log.path, end - k, log.line[k],
                                                             _MIN_POST))
    e = _estimate(t, v, i_a, k, first, end, cells)
    u = {}
    if cal is not None:
        keys = ("r0", "rp", "tau", "ocv", "soc")

        def refit(d):
            x = _estimate(t, d["v"], d["i_a"], k, first, end, cells)
            return {key: x[key] for key in keys if x.get(key) is not None}
        u = calibration_u(refit, {"v": v, "i_a": i_a}, {"v": "V", "i_a": "A"}, cal)
    fit.u_cal = u
    fit.t_step_s = e["t_on"]
    fit.gap_s = e["gap"]
    fit.i_pre_a, fit.i_post_a = e["i_pre"], e["i_post"]
    fit.rest_a = e["rest_a"]
    fit.drift = e["drift"]
    fit.theta, fit.post = e["theta"], slice(k, end)
    fit.rms_v = float(math.sqrt(np.mean(e["resid"] ** 2)))
    fit.v_pre_v = e["v_pre"]
    fit.r0_ohm, fit.r0_ci_noise = e["r0"], e["r0_ci"]
    fit.rp_ohm, fit.rp_ci_noise = e["rp"], e["rp_ci"]
    fit.tau_s, fit.tau_ci_noise = e["tau"], e["tau_ci"]
    fit.r0_ci = combine(e["r0_ci"], u.get("r0", 0.0))
    fit.rp_ci = combine(e["rp_ci"], u.get("rp", 0.0))
    fit.tau_ci = combine(e["tau_ci"], u.get("tau", 0.0))
    tau = fit.tau_s
    x = e["x"]
    if e["at_edge"]:
        warn("the time constant ran to the edge of its search range (%.3g s): the log does not "
             "show one clear exponential" % tau)
    elif x[-1] < 3 * tau:
        warn("the log after the step covers %.2g time constants (3 or more wanted): tau and R_p "
             "are extrapolated" % (x[-1] / tau))
    if fit.r0_ohm <= 0 or fit.rp_ohm <= 0:
        warn("a resistance came out at or below zero: check the sign of i_a (+ into the battery)")
    if e["gap"] > 0.25 * tau:
        warn("rows are %.3g s apart at the step, a large part of tau = %.3g s: the jump is "
             "extrapolated over the gap (its uncertainty is in the intervals); log faster around "
             "the step" % (e["gap"], tau))
    z = runs_z(e["resid"])
    resid = e["resid"]
    f2 = second_pair_f(x, v[k:end], fit.drift, float(resid @ resid), tau,
                       resolution(v) ** 2 / 12)
    fit.second_pair_f = f2
    if z < RUNS_Z_WARN or f2 > _F_WARN:
        warn("model mismatch: the relaxation is not one exponential (runs test z = %.1f on its "
             "residuals, F = %.0f for a second time constant): a second, slower time constant "
             "(two RC pairs) or a drifting state; R_p and tau are then a compromise and their "
             "intervals do not cover it" % (z, f2))
    rested_before = abs(fit.i_pre_a) <= fit.rest_a
    change = (e["pre_slope"] or 0.0) * (t[k - 1] - t[first])
    if rested_before and abs(change) > _DRIFT_WARN_V:
        warn("unrested start: the voltage before the step still moves %+.4f V over lines %d-%d "
             "(%.3g mV/min): the battery had not settled, so the open-circuit voltage and the "
             "state of charge are not those of a rested battery; rest longer before the step"
             % (change, log.line[first], log.line[k - 1], e["pre_slope"] * 60e3))
    fit.warnings += check_clipping(log, ("v",))
    fit.warnings += check_rows(k - first, _WANT_PRE, "at the old current before the step")
    fit.warnings += check_rows(end - k, _WANT_POST, "after the step")
    if e["ocv"] is not None:
        fit.ocv_v = e["ocv"]
        fit.ocv_ci_noise = e["ocv_ci"]
        fit.ocv_ci = combine(e["ocv_ci"], u.get("ocv", 0.0))
        if e["ocv_from"] == "before":
            fit.ocv_source = "rested voltage before the step (lines %d-%d)" % (
                log.line[first], log.line[k - 1])
        else:
            fit.ocv_source = ("end value of the relaxation after the step (one time constant; "
                              "a longer rest may settle further)")
        fit.soc_pct = e["soc"]
        fit.soc_ci = combine(e["soc_ci"], u.get("soc", 0.0))
        fit.soc_ci_table = math.hypot(fit.soc_ci, SOC_TABLE_PCT)
        if not e["soc_inside"]:
            warn("open-circuit voltage %.3f V lies outside the table (%.2f-%.2f V for %d cells): "
                 "state of charge clipped to %.0f %%%s"
                 % (fit.ocv_v, OCV_TABLE_V[0] * cells / 6, OCV_TABLE_V[-1] * cells / 6, cells,
                    fit.soc_pct, "; surface charge? rest longer" if fit.soc_pct >= 100 else ""))
    else:
        warn("no rest before or after the step: state of charge not estimated")
    return fit


def report(fit):
    rows = [("quantity", "value", "95 % CI", "unit", "")]
    rows.append(("step", "%.4g" % (fit.i_post_a - fit.i_pre_a), "", "A",
                 "%.4g A -> %.4g A at t = %.4g s (middle of a %.3g s row gap)"
                 % (fit.i_pre_a, fit.i_post_a, fit.t_step_s, fit.gap_s)))
    rows.append(("R_0 (ohmic)",) + pm(fit.r0_ohm, fit.r0_ci) + ("ohm", ""))
    rows.append(("R_p (polarisation)",) + pm(fit.rp_ohm, fit.rp_ci) + ("ohm", ""))
    rows.append(("tau",) + pm(fit.tau_s, fit.tau_ci) + ("s", "one time constant"))
    if fit.soc_pct is not None:
        rows.append(("open-circuit V",) + pm(fit.ocv_v, fit.ocv_ci) + ("V", fit.ocv_source))
        rows.append(("state of charge",) + pm(fit.soc_pct, fit.soc_ci) + (
            "%", "reading and meter only; with the generic table's +/- %g %%: +/- %.1f %%"
            % (SOC_TABLE_PCT, fit.soc_ci_table)))
    rows.append(("residual RMS", "%.3g" % fit.rms_v, "", "V", "relaxation fit"))
    note = ("state of charge: the BCI open-circuit table for a rested flooded 12 V block at "
            "26.7 C (Battery Council International, as commonly reproduced; from memory), "
            "scaled to %d cells; a real block sits several %% SOC off a generic table "
            "(chemistry, temperature, age: from memory), which the first interval leaves out; "
            "for AGM or gel use the maker's table\nmethod: %s.\nsource: %s."
            % (fit.cells, METHOD, SOURCE))
    return table(rows) + "\n" + note


def to_json(log, fit, cal):
    vals = {"r0_ohm": quantity(fit.r0_ohm, fit.r0_ci, "ohm", ci95_noise=fit.r0_ci_noise),
            "rp_ohm": quantity(fit.rp_ohm, fit.rp_ci, "ohm", ci95_noise=fit.rp_ci_noise),
            "tau_s": quantity(fit.tau_s, fit.tau_ci, "s", ci95_noise=fit.tau_ci_noise),
            "step_a": fit.i_post_a - fit.i_pre_a, "i_before_a": fit.i_pre_a,
            "i_after_a": fit.i_post_a, "t_step_s": fit.t_step_s, "gap_s": fit.gap_s}
    if fit.soc_pct is not None:
        vals["ocv_v"] = quantity(fit.ocv_v, fit.ocv_ci, "V", ci95_noise=fit.ocv_ci_noise,
                                 source=fit.ocv_source)
        vals["soc_pct"] = quantity(fit.soc_pct, fit.soc_ci, "%",
                                   ci95_with_table=fit.soc_ci_table,
                                   table_spread_pct=SOC_TABLE_PCT,
                                   covers="the reading's noise and the meter's calibration; "
                                          "ci95_with_table adds the generic table's spread")
    return {"part": "battery", "log": str(log.path), "values": vals,
            "residual_rms_v": fit.rms_v, "method": METHOD, "source": SOURCE,
            "calibration": cal.to_json(), "warnings": list(fit.warnings)}


def check_units(log, cells, capacity_ah=None):
    """Refuse logs whose magnitudes no lead-acid block shows (a log in mV or mA)."""
    v = log.col["v"]
    per = float(np.median(v)) / cells
    if not 1.5 <= per <= 3.0:
        i = int(np.argmin(np.abs(v - np.median(v))))
        raise UserError("%s = %g: %.4g V per cell for %d cells, outside 1.5-3.0 V per cell of a "
                        "lead-acid cell; is the column in mV, or --cells wrong?"
                        % (log.where(i, "v"), v[i], per, cells))
    hi = 1000.0 if capacity_ah is None else min(1000.0, 30.0 * capacity_ah)
    check_magnitude(log, "i_a", None, hi, "A", "is the column in mA? give amps (limit: 1000 A, "
                    "or 30 C with --capacity-ah)")


def plot(log, fit, path):
    t, v = log.col["t_s"], log.col["v"]
    x = t[fit.post] - fit.t_step_s
    model = fit.theta[0] + fit.theta[1] * np.exp(-x / fit.tau_s)
    if fit.drift:
        model = model + fit.theta[2] * x
    fig, ax = new_figure(2, 1, (8, 7))
    a = ax[0][0]
    a.plot(t, v, ".", ms=3, label="log")
    a.plot(t[fit.post], model, "-", label="fit, tau = %.3g s" % fit.tau_s)
    a.plot([fit.t_step_s, fit.t_step_s], [fit.v_pre_v, model[0]], "r-", lw=2,
           label="ohmic jump, R_0 = %.3g ohm" % fit.r0_ohm)
    a.set_xlabel("t, s")
    a.set_ylabel("V")
    a.legend(fontsize="small")
    a = ax[1][0]
    a.axhline(0.0, color="grey", lw=0.8)
    a.plot(t[fit.post], v[fit.post] - model, ".", ms=3)
    a.set_xlabel("t, s")
    a.set_ylabel("residual, V")
    fig.tight_layout()
    save_figure(fig, path)


def run(args):
    if not 1 <= args.cells <= 24:
        raise UserError("--cells = %d: allowed 1 to 24" % args.cells)
    if args.capacity_ah is not None and not 0.1 <= args.capacity_ah <= 10000:
        raise UserError("--capacity-ah = %g: allowed 0.1 to 10000 Ah" % args.capacity_ah)
    log = read_log(args.log, COLUMNS, UNITS, min_rows=_MIN_POST + 2, time_col="t_s",
                   what="identify battery")
    check_units(log, args.cells, args.capacity_ah)
    cal = calibration_from(args)
    fit = identify(log, args.cells, cal)
    result = to_json(log, fit, cal)
    if args.plot:
        plot(log, fit, args.plot)
    if args.write:
        if args.capacity_ah is None:
            raise UserError("--write needs --capacity-ah (the scenario gives resistances and "
                            "the polarisation capacitance per Ah)")
        if fit.soc_pct is None:
            diag("note: no state of charge, so R_0 and R_p are written as measured, not "
                 "referred to the plant's base values")
        else:
            k0, kp = plant_factors(fit.soc_pct / 100)
            diag("note: written as the plant's base values at 25 C: measured R_0 / %.3f and R_p "
                 "/ %.3f (the plant's factors at %.0f %% state of charge; temperature not logged)"
                 % (k0, kp if fit.discharge_side() else 1.0, fit.soc_pct))
        if not fit.discharge_side():
            diag("note: a charge-side step: R_p goes to rp_base_ohm_ah; the plant adds "
                 "rp_full_ohm_ah / (1 - soc) on top of it")
        write_result(args, result, "battery", fit.fragment(args.capacity_ah))
    emit(args, result, report(fit))
    return 0
