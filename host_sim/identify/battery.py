# Lead-acid battery from one current step (on, off or a change of current):
#   ohmic resistance   R_0 = (jump in V at the step) / (step in I)
#   polarisation       after the step v(t) = a + b exp(-(t - t_step) / tau) [+ c (t - t_step)]
#                      R_p = -b / dI, tau: one time constant (the drift term c only while a
#                      current flows afterwards, for the slow change of state of charge)
#   state of charge    from a rested open-circuit voltage and the BCI table (check-values.md:
#                      flooded 12 V block at 26.7 C, scaled per cell for other cell counts)
# Current + into the battery (charging), as in controller/signals.py.
import math

import numpy as np

from host_sim.errors import UserError
from host_sim.identify.common import (diag, linfit, new_figure, pm, read_log, save_figure, t975,
                                      table, write_fragment)

COLUMNS = ("t_s", "v", "i_a")
UNITS = {"t_s": "s", "v": "V (battery terminal voltage)", "i_a": "A (+ into the battery)"}
# BCI open-circuit voltage of a rested flooded 12 V block at 26.7 C (check-values.md)
OCV_TABLE_V = (11.89, 12.06, 12.24, 12.45, 12.65)
OCV_TABLE_SOC = (0.0, 25.0, 50.0, 75.0, 100.0)
TABLE_CELLS = 6
_MIN_STEP_A = 0.01  # a smaller step cannot show the resistances above ADC noise
_SAME = 0.05  # rows within 5 % of the step of a level's current belong to that level
_MIN_POST = 8  # rows after the step the relaxation fit needs


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


def fit_relaxation(x_s, v, drift=False):
    """v = a + b exp(-x / tau) [+ c x] by least squares: tau on a log grid, the linear terms
    exactly for each tau, then a golden-section refinement. Returns (theta, cov, resid, dof,
    at_edge): theta = (a, b, [c,] tau), cov from the residual variance and the Jacobian, at_edge
    when tau ran to the end of its search range."""
    span = x_s[-1]
    dx = np.min(np.diff(x_s)) if len(x_s) > 1 else span

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
    s2 = err / dof
    cov = s2 * np.linalg.inv(J.T @ J)
    theta = np.append(beta, tau)
    at_edge = not grid[0] + 0.01 < log_tau < grid[-1] - 0.01
    return theta, cov, v - _basis(x_s, tau, drift) @ beta, dof, at_edge


class BatteryFit:
    def __init__(self):
        self.t_step_s = 0.0  # first row at the new current, s
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


def identify(log, cells=TABLE_CELLS):
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
    fit.t_step_s = float(t[k])
    fit.i_pre_a = float(np.mean(i_a[first:k]))
    fit.i_post_a = float(np.mean(i_a[k:end]))
    d_i = fit.i_post_a - fit.i_pre_a
    fit.rest_a = rested = max(_MIN_STEP_A, 0.01 * abs(d_i))
    fit.drift = abs(fit.i_post_a) > rested
    x = t[k:end] - t[k]
    theta, cov, resid, dof, at_edge = fit_relaxation(x, v[k:end], fit.drift)
    fit.theta, fit.post = theta, slice(k, end)
    fit.rms_v = float(math.sqrt(np.mean(resid ** 2)))
    q = t975(dof)
    # voltage just before the step: a line through the last (up to 10) rows at the old current,
    # read at the step
    pre = slice(max(first, k - 10), k)
    if k - pre.start >= 3:
        beta_pre, cov_pre = linfit(np.column_stack([np.ones(k - pre.start), t[pre] - t[k]]),
                                   v[pre])[:2]
        fit.v_pre_v, var_pre = float(beta_pre[0]), float(cov_pre[0, 0])
    else:
        fit.v_pre_v = float(np.mean(v[pre]))
        var_pre = float(resid @ resid) / dof / (k - pre.start)
    a, b, tau = theta[0], theta[1], theta[-1]
    fit.r0_ohm = (a + b - fit.v_pre_v) / d_i
    fit.r0_ci = q * math.sqrt(cov[0, 0] + cov[1, 1] + 2 * cov[0, 1] + var_pre) / abs(d_i)
    fit.rp_ohm = -b / d_i
    fit.rp_ci = q * math.sqrt(cov[1, 1]) / abs(d_i)
    fit.tau_s = tau
    fit.tau_ci = q * math.sqrt(cov[-1, -1])
    if at_edge:
        warn("the time constant ran to the edge of its search range (%.3g s): the log does not "
             "show one clear exponential" % tau)
    elif x[-1] < 3 * tau:
        warn("the log after the step covers %.2g time constants (3 or more wanted): tau and R_p "
             "are extrapolated" % (x[-1] / tau))
    if fit.r0_ohm <= 0 or fit.rp_ohm <= 0:
        warn("a resistance came out at or below zero: check the sign of i_a (+ into the battery)")
    if t[k] - t[k - 1] > 0.1 * tau:
        warn("rows are %.3g s apart at the step, not small against tau = %.3g s: part of the "
             "polarisation lands in R_0" % (t[k] - t[k - 1], tau))
    # open-circuit voltage: rested before the step, or the relaxation's end value after it
    if abs(fit.i_pre_a) <= rested:
        fit.ocv_v, fit.ocv_ci = fit.v_pre_v, q * math.sqrt(var_pre)
        fit.ocv_source = "rested voltage before the step (lines %d-%d)" % (
            log.line[first], log.line[k - 1])
    elif abs(fit.i_post_a) <= rested:
        fit.ocv_v, fit.ocv_ci = float(a), q * math.sqrt(cov[0, 0])
        fit.ocv_source = ("end value of the relaxation after the step (one time constant; a "
                          "longer rest may settle further)")
    if fit.ocv_v is not None:
        fit.soc_pct, inside = soc_from_ocv(fit.ocv_v, cells)
        fit.soc_ci = fit.ocv_ci * soc_slope_pct_per_v(fit.ocv_v, cells)
        if not inside:
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
                 "%.4g A -> %.4g A at t = %.4g s" % (fit.i_pre_a, fit.i_post_a, fit.t_step_s)))
    rows.append(("R_0 (ohmic)",) + pm(fit.r0_ohm, fit.r0_ci) + ("ohm", ""))
    rows.append(("R_p (polarisation)",) + pm(fit.rp_ohm, fit.rp_ci) + ("ohm", ""))
    rows.append(("tau",) + pm(fit.tau_s, fit.tau_ci) + ("s", "one time constant"))
    if fit.soc_pct is not None:
        rows.append(("open-circuit V",) + pm(fit.ocv_v, fit.ocv_ci, 5) + ("V", fit.ocv_source))
        rows.append(("state of charge",) + pm(fit.soc_pct, fit.soc_ci, 3) + ("%", ""))
    rows.append(("residual RMS", "%.3g" % fit.rms_v, "", "V", "relaxation fit"))
    note = ("state of charge: BCI open-circuit table for a rested flooded 12 V block at 26.7 C, "
            "scaled to %d cells (check-values.md); for AGM or gel use the maker's table"
            % fit.cells)
    return table(rows) + "\n" + note


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
    fit = identify(log, args.cells)
    print(report(fit))
    for w in fit.warnings:
        diag("warning: " + w)
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
        write_fragment(args.write, "battery", fit.fragment(args.capacity_ah))
    return 0
