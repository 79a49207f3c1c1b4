# Supercap bank (and its cells) from one constant-current discharge, by the constant-current
# method of IEC 62391-1 (capacitance and internal resistance):
#   C = I (t2 - t1) / (U1 - U2), U1 = 0.8 U_R, U2 = 0.4 U_R   (the points as recalled: from memory)
#   R = dU3 / I, dU3 = U_start - (the straight part of the discharge extrapolated back to the
#       moment the current started)
# The straight part is taken as the stretch between U1 and U2. The current starts somewhere in
# the row gap before the first discharging row: the line is read at the middle of that gap.
import math

import numpy as np

from host_sim.errors import UserError
from host_sim.identify.common import (RUNS_Z_WARN, calibration_from, calibration_u,
                                      check_clipping, check_magnitude, check_rows, combine, emit,
                                      linfit, new_figure, pm, quantity, read_log, resolution,
                                      runs_z, save_figure, t975, table, write_result)

COLUMNS = ("t_s", "v", "i_a")
CELL_RX = r"cell[0-9]+"
UNITS = {"t_s": "s", "v": "V (bank voltage)", "i_a": "A (discharge current, either sign)",
         CELL_RX: "V (cell voltage)"}
UPPER_FRAC = 0.8  # U1 / U_R, IEC 62391-1 as recalled: from memory
LOWER_FRAC = 0.4  # U2 / U_R, from memory
SOURCE_NOTE = ("IEC 62391-1 constant-current discharge method: capacitance between U1 and U2, "
               "internal resistance from the drop dU3 to the straight part of the discharge "
               "extrapolated to the current's start (read at the middle of the row gap); the "
               "80 %/40 % points are the standard's as recalled (from memory; --points moves "
               "them); every value is computed from this log")
METHOD = ("crossing times of U1 and U2 from local lines; a least-squares line between them, "
          "read at the middle of the row gap before the first discharging row; held voltage "
          "from the whole rest; 95 % intervals Student t on the noise plus the start time "
          "uniform over the gap, plus the meter's calibration tolerance (GUM 4.3.7)")
_FLOWING = 0.05  # rows with |i_a| above 5 % of the largest count as discharging
_STEADY = 0.02  # the method wants a constant current: warn beyond 2 % variation
_REST_ROWS = 20  # the held voltage: mean of up to this many rows before the discharge
_BAND = 0.01  # crossing times from a local line through samples within 1 % of U_R of the level
_DRIFT_WARN = 0.001  # a held voltage moving more than 0.1 % of U_R over the rest: unrested
_WANT_LINE = 20  # rows on the straight part below which the log is called short
_WANT_REST = 10  # rows of held voltage below which the start is called short


def capacitance_f(i_a, t1_s, t2_s, u1_v, u2_v):
    """IEC 62391-1 constant-current capacitance C = I (t2 - t1) / (U1 - U2), farads."""
    return i_a * (t2_s - t1_s) / (u1_v - u2_v)


class CapResult:
    def __init__(self, name):
        self.name = name  # "bank" or the cell column
        self.u_r_v = 0.0  # rated (start) voltage the points are taken from, V
        self.u1_v = self.u2_v = 0.0  # the two voltage points, V
        self.t1_s = self.t2_s = 0.0  # when the discharge crosses them, s
        self.c_f = 0.0  # capacitance, F
        self.c_ci = 0.0  # its 95 % half-width, F
        self.esr_ohm = 0.0  # DC internal resistance, ohm
        self.esr_ci = 0.0  # its 95 % half-width, ohm
        self.du3_v = 0.0  # extrapolated initial drop, V
        self.t0_s = 0.0  # start of the discharge (first discharging row), s
        self.line = (0.0, 0.0)  # straight part: v = a + b (t - t0_s)
        self.flags = []  # reasons this cell stands out from the bank
        self.starts_below_u1 = False  # the resistive drop alone took the bank below U1
        self.n_line = 0  # rows on the straight part between U1 and U2
        self.runs_z = 0.0  # runs-test z of the straight part's residuals
        self.rest_drift_v = None  # change of the held voltage over the rest, when it moved
        self.c_ci_noise = self.esr_ci_noise = 0.0  # the noise parts of the intervals
        self.u_cal = {}  # standard uncertainties from the meter's calibration


def _crossing(t, v, level, band_v):
    """First time v falls through level: a local straight line through the samples within band_v
    of the level (noise-robust), else linear interpolation between the bracketing samples."""
    below = np.nonzero(v <= level)[0]
    if len(below) == 0:
        return None
    k = below[0]
    near = np.nonzero(np.abs(v - level) <= band_v)[0]
    if len(near) >= 3 and np.ptp(t[near]) > 0:
        b, a = np.polyfit(t[near], v[near], 1)
        if b < 0:
            return (level - a) / b
    if k == 0:
        return t[0]
    return t[k - 1] + (v[k - 1] - level) * (t[k] - t[k - 1]) / (v[k - 1] - v[k])


def held_voltage(t, v, k0, t_on, floor_var=0.0):
    """The held voltage before the discharge from the whole rest: its mean when the rest shows
    no slope at 95 %, else a line through it read at t_on. Returns (value, 95 % half-width,
    change over the rest in V or None when flat)."""
    n = k0
    if n < 2:
        return float(v[0]), float("nan"), None
    tr, vr = t[:k0], v[:k0]
    if n >= 4 and np.ptp(tr) > 0:
        beta, cov, _, dof = linfit(np.column_stack([np.ones(n), tr - t_on]), vr,
                                   floor_var=floor_var)
        z = beta[1] / math.sqrt(cov[1, 1]) if cov[1, 1] > 0 else 0.0
        if abs(z) > t975(dof):
            return float(beta[0]), t975(dof) * math.sqrt(cov[0, 0]), float(beta[1] * np.ptp(tr))
    var = max(float(np.var(vr, ddof=1)), floor_var)
    return float(np.mean(vr)), t975(n - 1) * math.sqrt(var / n), None


def analyse(t, v, i_mag, k0, u_r, name, upper=UPPER_FRAC, lower=LOWER_FRAC, where=""):
    """One voltage trace (bank or cell). t, v: the whole log; i_mag: discharge current magnitude;
    k0: first discharging row; u_r: rated voltage for the points."""
    r = CapResult(name)
    r.u_r_v = u_r
    r.u1_v, r.u2_v = upper * u_r, lower * u_r
    td, vd = t[k0:], v[k0:]
    band = _BAND * u_r
    t1 = _crossing(td, vd, r.u1_v, band)
    t2 = _crossing(td, vd, r.u2_v, band)
    if t1 is None or t2 is None or t2 <= t1:
        raise UserError("%s%s: the discharge must fall through U1 = %.3f V and then U2 = %.3f V "
                        "(%.0f %% and %.0f %% of U_R = %.3f V); its lowest reading is %.3f V"
                        % (where, name, r.u1_v, r.u2_v, 100 * upper, 100 * lower, u_r, vd.min()))
    r.t1_s, r.t2_s = float(t1), float(t2)
    r.starts_below_u1 = bool(vd[0] <= r.u1_v)
    seg = (td >= t1) & (td <= t2)
    if seg.sum() < 3:
        raise UserError("%s%s: only %d samples between U1 and U2; log faster (the straight part "
                        "needs at least 3)" % (where, name, seg.sum()))
    r.n_line = int(seg.sum())
    i_seg = i_mag[k0:][seg]
    i_mean = float(np.mean(i_seg))
    # the current started somewhere in the gap before the first discharging row: read the line
    # at the middle of the gap, and count the gap as a uniform uncertainty about that point
    gap = float(t[k0] - t[k0 - 1]) if k0 > 0 else 0.0
    r.t0_s = t0 = float(t[k0]) - gap / 2
    floor = resolution(v) ** 2 / 12
    X = np.column_stack([np.ones(seg.sum()), td[seg] - t0])
    beta, cov, resid, dof = linfit(X, vd[seg], floor_var=floor)
    r.line = (float(beta[0]), float(beta[1]))
    r.runs_z = runs_z(resid)
    r.c_f = capacitance_f(i_mean, r.t1_s, r.t2_s, r.u1_v, r.u2_v)
    # 95 % intervals: voltage noise (residual s) moves each crossing by s / |slope|; the
    # current's scatter moves C in proportion; both combined in quadrature.
    s = math.sqrt(max(float(resid @ resid) / dof, floor)) if dof > 0 else 0.0
    k = t975(max(dof, 1))
    rel_t = math.sqrt(2) * s / abs(beta[1]) / (r.t2_s - r.t1_s)
    rel_i = float(np.std(i_seg, ddof=1)) / i_mean / math.sqrt(len(i_seg)) if len(i_seg) > 1 else 0
    r.c_ci = k * r.c_f * math.hypot(rel_t, rel_i)
    u_start, ci_start, r.rest_drift_v = (held_voltage(t, v, k0, t0, floor) if k0 > 0
                                         else (u_r, 0.0, None))
    if not math.isfinite(ci_start):
        ci_start = 0.0
    r.du3_v = float(u_start - beta[0])
    r.esr_ohm = r.du3_v / i_mean
    # the intercept's own uncertainty, the held voltage's, and the start time within the gap
    # (uniform: standard deviation gap / sqrt 12 times the slope), each at 95 %
    ci_a = k * math.sqrt(cov[0, 0])
    ci_gap = 1.96 * abs(beta[1]) * gap / math.sqrt(12)
    r.esr_ci = math.sqrt(ci_a ** 2 + ci_gap ** 2 + ci_start ** 2) / i_mean
    r.c_ci_noise, r.esr_ci_noise = r.c_ci, r.esr_ci
    return r


def analyse_cal(t, v, i_mag, k0, u_r, name, upper, lower, where, cal, rated_given):
    """analyse() plus the meter's calibration tolerance in both intervals."""
    r = analyse(t, v, i_mag, k0, u_r, name, upper, lower, where)
    if cal is None:
        return r

    def refit(d):
        ur = u_r + (float(np.mean(d["v"][:k0]) - np.mean(v[:k0]))
                    if not rated_given and k0 > 0 else 0.0)
        x = analyse(t, d["v"], d["i"], k0, ur, name, upper, lower, where)
        return {"c": x.c_f, "esr": x.esr_ohm}
    u = calibration_u(refit, {"v": v, "i": i_mag}, {"v": "V", "i": "A"}, cal)
    r.c_ci = combine(r.c_ci_noise, u["c"])
    r.esr_ci = combine(r.esr_ci_noise, u["esr"])
    r.u_cal = u
    return r


def _start_row(log, i_a):
    flowing = np.abs(i_a) > _FLOWING * np.max(np.abs(i_a))
    if not flowing.any() or np.max(np.abs(i_a)) == 0:
        raise UserError("%s: column 'i_a' is zero throughout: no discharge in this log" % log.path)
    k0 = int(np.nonzero(flowing)[0][0])
    run = flowing[k0:]
    end = k0 + (int(np.argmin(run)) if not run.all() else len(run))
    sign = np.sign(i_a[k0:end])
    if np.any(sign != sign[0]):
        i = k0 + int(np.nonzero(sign != sign[0])[0][0])
        raise UserError("%s = %r: the discharge current changes sign; one constant-current "
                        "discharge per log" % (log.where(i, "i_a"), i_a[i]))
    return k0, end


def identify(log, rated_v=None, upper=UPPER_FRAC, lower=LOWER_FRAC, spread_pct=10.0, cal=None):
    """Bank and per-cell results from a checked log. Returns (bank, cells, warnings)."""
    warnings = []
    t, i_a = log.col["t_s"], log.col["i_a"]
    k0, end = _start_row(log, i_a)
    if not 0 < lower < upper < 1:
        raise UserError("--points %g,%g: need 0 < lower < upper < 1" % (upper, lower))
    i_mag = np.abs(i_a)
    # keep the discharge only: rows after the current stops belong to the recovery
    t, i_mag = t[:end], i_mag[:end]
    # the current's range without its noise tails (1st to 99th percentile)
    spread = float(np.diff(np.percentile(i_mag[k0:], [1, 99]))[0]) / np.mean(i_mag[k0:])
    if spread > _STEADY:
        warnings.append("the discharge current varies by %.1f %% (the method wants it constant)"
                        % (100 * spread))
    if k0 == 0 and rated_v is None:
        raise UserError("%s: the log starts already discharging; give --rated-v or log the "
                        "held charge before the discharge starts" % log.path)
    v = log.col["v"][:end]
    u_r = rated_v if rated_v is not None else float(np.mean(v[:k0]))
    if rated_v is not None and k0 > 0 and abs(v[k0 - 1] - rated_v) > 0.02 * rated_v:
        warnings.append("the bank starts at %.3f V, not at --rated-v %.3f V: the method charges "
                        "to U_R and holds it before the discharge" % (v[k0 - 1], rated_v))
    where = log.path + ": "
    given = rated_v is not None
    bank = analyse_cal(t, v, i_mag, k0, u_r, "bank", upper, lower, where, cal, given)
    names = sorted((c for c in log.col if c.startswith("cell")), key=lambda c: int(c[4:]))
    cells = []
    for c in names:
        vc = log.col[c][:end]
        # a cell's own held voltage stands in for its rating (the cells may sit unbalanced)
        u_c = float(np.mean(vc[:k0])) if k0 > 0 else u_r / len(names)
        cells.append(analyse_cal(t, vc, i_mag, k0, u_c, c, upper, lower, where, cal, k0 == 0))
    if cells:
        total = sum(float(log.col[c][k0 - 1 if k0 else 0]) for c in names)
        if abs(total - v[max(k0 - 1, 0)]) > 0.02 * v[max(k0 - 1, 0)]:
            warnings.append("the cell columns add up to %.3f V, the bank column reads %.3f V: "
                            "a tap is missing or misread" % (total, v[max(k0 - 1, 0)]))
        flag_cells(cells, spread_pct)
    # checks of the log: clipped or held readings, short stretches, an unsettled hold, and
    # structure in the straight part that a capacitor and a resistor do not make
    warnings += check_clipping(log, ["v"] + names, slice(0, end))
    warnings += check_rows(bank.n_line, _WANT_LINE, "between U1 and U2")
    warnings += check_rows(k0, _WANT_REST, "of held voltage before the discharge")
    if bank.rest_drift_v is not None and abs(bank.rest_drift_v) > _DRIFT_WARN * bank.u_r_v:
        warnings.append("unrested start: the held voltage moves %+.4f V over the %d rows before "
                        "the discharge (the method holds the bank at U_R until it is steady); "
                        "the start voltage is the line through them read at the step, and U_R "
                        "is uncertain by that much" % (bank.rest_drift_v, k0))
    if bank.starts_below_u1:
        warnings.append("the first discharging row is already below U1: the resistive drop I R "
                        "takes the bank past the upper point, so t1 and C are wrong; discharge "
                        "at a smaller current (the method keeps I R to a few %% of U_R)")
    if bank.runs_z < RUNS_Z_WARN:
        warnings.append("model mismatch: the discharge between U1 and U2 is not a straight line "
                        "(runs test z = %.1f): capacitance that changes with voltage, a current "
                        "that drifts, or charge redistribution; C is then an average over the "
                        "stretch" % bank.runs_z)
    return bank, cells, warnings


def flag_cells(cells, spread_pct):
    """Mark cells whose C is more than spread_pct from the bank median (common practice), or
    whose ESR exceeds twice the median (supercap makers' end-of-life criterion, ESR at 200 %,
    applied against the bank median: our reading)."""
    c_med = float(np.median([c.c_f for c in cells]))
    r_med = float(np.median([c.esr_ohm for c in cells]))
    for c in cells:
        dev = 100 * (c.c_f - c_med) / c_med
        if abs(dev) > spread_pct:
            c.flags.append("C %+.1f %% from the median" % dev)
        if r_med > 0 and c.esr_ohm > 2 * r_med:
            c.flags.append("ESR %.1fx the median" % (c.esr_ohm / r_med))


def report(bank, cells, spread_pct):
    rows = [("quantity", "value", "95 % CI", "unit", "")]
    rows.append(("U_R (start)", "%.3f" % bank.u_r_v, "", "V",
                 "U1 = %.3f V at %.3f s, U2 = %.3f V at %.3f s"
                 % (bank.u1_v, bank.t1_s, bank.u2_v, bank.t2_s)))
    rows.append(("capacitance",) + pm(bank.c_f, bank.c_ci) + ("F", ""))
    rows.append(("DC resistance",) + pm(bank.esr_ohm, bank.esr_ci) + ("ohm",
                 "dU3 = %.4g V" % bank.du3_v))
    out = [table(rows), "method: " + SOURCE_NOTE + ".", "fit: " + METHOD + "."]
    if cells:
        rows = [("cell", "C, F", "ESR, ohm", "U_R, V", "flag")]
        for c in cells:
            rows.append((c.name, " ".join(pm(c.c_f, c.c_ci)),
                         " ".join(pm(c.esr_ohm, c.esr_ci)), "%.3f" % c.u_r_v,
                         "; ".join(c.flags) or "ok"))
        out += ["", table(rows),
                "flag rule: C more than %g %% from the bank median (common practice); ESR above "
                "2x the median (makers' end-of-life 200 %% criterion, applied to the median: "
                "common practice)."
                % spread_pct]
    return "\n".join(out)


def plot(log, bank, cells, path):
    t = log.col["t_s"]
    fig, ax = new_figure(2 if cells else 1, 1, (8, 8 if cells else 5))
    groups = [[("v", bank)]] + ([[(c.name, c) for c in cells]] if cells else [])
    for a, group in zip((row[0] for row in ax), groups):
        for col, r in group:
            a.plot(t, log.col[col], "-", lw=1, label=r.name)
            tl = np.array([r.t0_s, r.t2_s])
            a.plot(tl, r.line[0] + r.line[1] * (tl - r.t0_s), "--", lw=0.8, color="grey")
            a.plot([r.t1_s, r.t2_s], [r.u1_v, r.u2_v], "o", color="red")
            a.plot([r.t0_s], [r.line[0]], "x", color="black")
        a.set_xlabel("t, s")
        a.set_ylabel("V")
        a.legend(fontsize="small")
    ax[0][0].set_title("C = %.4g F, R = %.3g ohm (red: U1/U2 points, x: extrapolated start)"
                       % (bank.c_f, bank.esr_ohm))
    fig.tight_layout()
    save_figure(fig, path)


def check_units(log, n_cells=None):
    """Refuse logs whose magnitudes no bank this tool models shows (a log in mV or mA)."""
    check_magnitude(log, "v", None, 1000.0, "V", "is the column in mV? give volts")
    check_magnitude(log, "i_a", None, 1000.0, "A", "is the column in mA? give amps")
    for c in log.col:
        if c.startswith("cell"):
            check_magnitude(log, c, None, 5.0, "V per cell", "is the column in mV? give volts")
    if n_cells:
        per = float(np.max(log.col["v"])) / n_cells
        if per > 5.0:
            raise UserError("%s: column 'v' reaches %.4g V, %.3g V per cell for --cells %d: above "
                            "5 V per cell; is the column in mV, or --cells wrong?"
                            % (log.path, np.max(log.col["v"]), per, n_cells))


def to_json(log, bank, cells, warnings, cal):
    def q(r):
        return {"capacitance_f": quantity(r.c_f, r.c_ci, "F", ci95_noise=r.c_ci_noise),
                "esr_ohm": quantity(r.esr_ohm, r.esr_ci, "ohm", ci95_noise=r.esr_ci_noise),
                "u_r_v": r.u_r_v, "u1_v": r.u1_v, "u2_v": r.u2_v, "t1_s": r.t1_s,
                "t2_s": r.t2_s, "t_start_s": r.t0_s, "du3_v": r.du3_v}
    out = {"part": "supercap", "log": str(log.path), "values": q(bank),
           "cells": [dict(q(c), name=c.name, flags=c.flags) for c in cells],
           "method": METHOD, "source": SOURCE_NOTE, "calibration": cal.to_json(),
           "warnings": list(warnings)}
    return out


def run(args):
    if args.cells is not None and not 1 <= args.cells <= 64:
        raise UserError("--cells = %d: allowed 1 to 64" % args.cells)
    if args.rated_v is not None and not 0 < args.rated_v <= 1000:
        raise UserError("--rated-v = %g: allowed above 0 up to 1000 V" % args.rated_v)
    if not 0 < args.spread_pct <= 100:
        raise UserError("--spread-pct = %g: allowed above 0 up to 100 %%" % args.spread_pct)
    log = read_log(args.log, COLUMNS, UNITS, pattern=CELL_RX, min_rows=5, time_col="t_s",
                   what="identify supercap")
    check_units(log, args.cells)
    cal = calibration_from(args)
    bank, cells, warnings = identify(log, args.rated_v, args.points[0], args.points[1],
                                     args.spread_pct, cal)
    if cells and args.cells is not None and args.cells != len(cells):
        raise UserError("--cells %d, but %s has %d cell columns" % (args.cells, log.path,
                                                                   len(cells)))
    result = to_json(log, bank, cells, warnings, cal)
    if args.plot:
        plot(log, bank, cells, args.plot)
    if args.write:
        write_result(args, result, "supercap", fragment(bank, cells, args.cells))
    emit(args, result, report(bank, cells, args.spread_pct))
    return 0


def fragment(bank, cells, n_cells=None):
    """The supercap section of a scenario (field names of host_sim/scenario.py: per-cell
    capacitance and ESR, the cells' capacitance spread when each cell was logged)."""
    if cells:
        c = np.array([x.c_f for x in cells])
        return {"cells": len(cells), "cell_f": round(float(c.mean()), 4),
                "cap_spread_pct": round(float(100 * c.std(ddof=1) / c.mean()), 3),
                "esr_mohm": round(float(np.mean([x.esr_ohm for x in cells])) * 1000, 4)}
    if n_cells is None:
        raise UserError("--write needs --cells N when the log has no cell columns (the scenario "
                        "takes per-cell capacitance and ESR)")
    return {"cells": n_cells, "cell_f": round(bank.c_f * n_cells, 4),
            "esr_mohm": round(bank.esr_ohm / n_cells * 1000, 4)}
