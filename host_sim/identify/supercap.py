# Supercap bank (and its cells) from one constant-current discharge, by the constant-current
# method of IEC 62391-1 (check-values.md, supercap rows):
#   C = I (t2 - t1) / (U1 - U2), U1 = 0.8 U_R, U2 = 0.4 U_R       (method confirmed; the 80 % and
#   R = dU3 / I, dU3 = U_start - (the straight part of the          40 % points FROM MEMORY)
#       discharge extrapolated back to the start of the discharge)   (detail FROM MEMORY)
# The straight part is taken as the stretch between U1 and U2. Until the standard is checked the
# output says so.
import math

import numpy as np

from host_sim.errors import UserError
from host_sim.identify.common import (diag, linfit, new_figure, pm, read_log, save_figure,
                                      t975, table, write_fragment)

COLUMNS = ("t_s", "v", "i_a")
CELL_RX = r"cell[0-9]+"
UNITS = {"t_s": "s", "v": "V (bank voltage)", "i_a": "A (discharge current, either sign)",
         CELL_RX: "V (cell voltage)"}
UPPER_FRAC = 0.8  # U1 / U_R, IEC 62391-1 as recalled: from memory
LOWER_FRAC = 0.4  # U2 / U_R, from memory
SOURCE_NOTE = ("IEC 62391-1 constant-current method; the 80 %/40 % points and the "
               "extrapolation detail are from memory until checked against the standard")
_FLOWING = 0.05  # rows with |i_a| above 5 % of the largest count as discharging
_STEADY = 0.02  # the method wants a constant current: warn beyond 2 % variation
_REST_ROWS = 20  # the held voltage: mean of up to this many rows before the discharge
_BAND = 0.01  # crossing times from a local line through samples within 1 % of U_R of the level


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
    seg = (td >= t1) & (td <= t2)
    if seg.sum() < 3:
        raise UserError("%s%s: only %d samples between U1 and U2; log faster (the straight part "
                        "needs at least 3)" % (where, name, seg.sum()))
    i_seg = i_mag[k0:][seg]
    i_mean = float(np.mean(i_seg))
    r.t0_s = t0 = float(t[k0])
    X = np.column_stack([np.ones(seg.sum()), td[seg] - t0])
    beta, cov, resid, dof = linfit(X, vd[seg])
    r.line = (float(beta[0]), float(beta[1]))
    r.c_f = capacitance_f(i_mean, r.t1_s, r.t2_s, r.u1_v, r.u2_v)
    # 95 % intervals: voltage noise (residual s) moves each crossing by s / |slope|; the
    # current's scatter moves C in proportion; both combined in quadrature.
    s = math.sqrt(float(resid @ resid) / dof) if dof > 0 else 0.0
    k = t975(max(dof, 1))
    rel_t = math.sqrt(2) * s / abs(beta[1]) / (r.t2_s - r.t1_s)
    rel_i = float(np.std(i_seg, ddof=1)) / i_mean / math.sqrt(len(i_seg)) if len(i_seg) > 1 else 0
    r.c_ci = k * r.c_f * math.hypot(rel_t, rel_i)
    # the held voltage before the discharge: the mean of the last rest rows (one row alone
    # carries the full reading noise into R)
    rest = v[max(0, k0 - _REST_ROWS):k0]
    u_start = float(np.mean(rest)) if k0 > 0 else u_r
    var_start = float(np.var(rest, ddof=1)) / len(rest) if len(rest) > 1 else 0.0
    r.du3_v = float(u_start - beta[0])
    r.esr_ohm = r.du3_v / i_mean
    # the intercept's own uncertainty, plus not knowing when in the gap before the first
    # discharging row the current started (uniform over the gap)
    gap = t[k0] - t[k0 - 1] if k0 > 0 else 0.0
    sd_a = math.sqrt(cov[0, 0])
    sd_gap = abs(beta[1]) * gap / math.sqrt(12)
    r.esr_ci = k * math.sqrt(sd_a ** 2 + sd_gap ** 2 + var_start) / i_mean
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


def identify(log, rated_v=None, upper=UPPER_FRAC, lower=LOWER_FRAC, spread_pct=10.0):
    """Bank and per-cell results from a checked log. Returns (bank, cells, warnings)."""
    warnings = []
    t, i_a = log.col["t_s"], log.col["i_a"]
    k0, end = _start_row(log, i_a)
    if not 0 < lower < upper < 1:
        raise UserError("--points %g,%g: need 0 < lower < upper < 1" % (upper, lower))
    i_mag = np.abs(i_a)
    # keep the discharge only: rows after the current stops belong to the recovery
    t, i_mag = t[:end], i_mag[:end]
    spread = np.ptp(i_mag[k0:]) / np.mean(i_mag[k0:])
    if spread > _STEADY:
        warnings.append("the discharge current varies by %.1f %% (the method wants it constant)"
                        % (100 * spread))
    if k0 == 0 and rated_v is None:
        raise UserError("%s: the log starts already discharging; give --rated-v or log the "
                        "held charge before the discharge starts" % log.path)
    v = log.col["v"][:end]
    u_r = rated_v if rated_v is not None else float(np.mean(v[max(0, k0 - _REST_ROWS):k0]))
    if rated_v is not None and k0 > 0 and abs(v[k0 - 1] - rated_v) > 0.02 * rated_v:
        warnings.append("the bank starts at %.3f V, not at --rated-v %.3f V: the method charges "
                        "to U_R and holds it before the discharge" % (v[k0 - 1], rated_v))
    where = log.path + ": "
    bank = analyse(t, v, i_mag, k0, u_r, "bank", upper, lower, where)
    names = sorted((c for c in log.col if c.startswith("cell")), key=lambda c: int(c[4:]))
    cells = []
    for c in names:
        vc = log.col[c][:end]
        # a cell's own held voltage stands in for its rating (the cells may sit unbalanced)
        u_c = float(np.mean(vc[max(0, k0 - _REST_ROWS):k0])) if k0 > 0 else u_r / len(names)
        cells.append(analyse(t, vc, i_mag, k0, u_c, c, upper, lower, where))
    if cells:
        total = sum(float(log.col[c][k0 - 1 if k0 else 0]) for c in names)
        if abs(total - v[max(k0 - 1, 0)]) > 0.02 * v[max(k0 - 1, 0)]:
            warnings.append("the cell columns add up to %.3f V, the bank column reads %.3f V: "
                            "a tap is missing or misread" % (total, v[max(k0 - 1, 0)]))
        flag_cells(cells, spread_pct)
    return bank, cells, warnings


def flag_cells(cells, spread_pct):
    """Mark cells whose C is more than spread_pct from the bank median (common practice), or
    whose ESR exceeds twice the median (makers' end-of-life ESR 200 % criterion, check-values.md,
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
    out = [table(rows), "method: " + SOURCE_NOTE + "."]
    if cells:
        rows = [("cell", "C, F", "ESR, ohm", "U_R, V", "flag")]
        for c in cells:
            rows.append((c.name, "%.4g +/- %.2g" % (c.c_f, c.c_ci),
                         "%.4g +/- %.2g" % (c.esr_ohm, c.esr_ci), "%.3f" % c.u_r_v,
                         "; ".join(c.flags) or "ok"))
        out += ["", table(rows),
                "flag rule: C more than %g %% from the bank median (common practice); ESR above "
                "2x the median (makers' end-of-life 200 %% criterion, applied to the median)."
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


def run(args):
    if args.cells is not None and not 1 <= args.cells <= 64:
        raise UserError("--cells = %d: allowed 1 to 64" % args.cells)
    if args.rated_v is not None and not 0 < args.rated_v <= 1000:
        raise UserError("--rated-v = %g: allowed above 0 up to 1000 V" % args.rated_v)
    if not 0 < args.spread_pct <= 100:
        raise UserError("--spread-pct = %g: allowed above 0 up to 100 %%" % args.spread_pct)
    log = read_log(args.log, COLUMNS, UNITS, pattern=CELL_RX, min_rows=5, time_col="t_s",
                   what="identify supercap")
    bank, cells, warnings = identify(log, args.rated_v, args.points[0], args.points[1],
                                     args.spread_pct)
    if cells and args.cells is not None and args.cells != len(cells):
        raise UserError("--cells %d, but %s has %d cell columns" % (args.cells, log.path,
                                                                   len(cells)))
    print(report(bank, cells, args.spread_pct))
    for w in warnings:
        diag("warning: " + w)
    if args.plot:
        plot(log, bank, cells, args.plot)
    if args.write:
        write_fragment(args.write, "supercap", fragment(bank, cells, args.cells))
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
