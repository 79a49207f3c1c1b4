# Permanent-magnet DC machine from open-circuit and loaded runs, as a generator:
#   V_term = K_e w - R_a I - V_b sgn(I)    (E = K_e w; check-values.md, machine section)
# w in rad/s from rpm; I > 0 while the machine delivers current; V_b is the brush (or series
# diode) drop, present only while current flows. Ordinary least squares; 95 % intervals from the
# residual variance and the covariance matrix. The data decide which parameters can be told apart.
import math

import numpy as np

from host_sim.errors import UserError
from host_sim.identify.common import (diag, linfit, new_figure, pm, read_log, save_figure,
                                      t975, table, write_fragment)

RAD_S_PER_RPM = 2 * math.pi / 60
COLUMNS = ("rpm", "v_term", "i_a")
UNITS = {"rpm": "rpm (shaft speed)", "v_term": "V (terminal voltage)",
         "i_a": "A (armature current, + delivered, 0 on open circuit)", "t_s": "s"}
_ONE_SPEED = 0.05  # speeds within 5 % of the top speed count as one speed
_ONE_CURRENT = 0.10  # loaded currents within 10 % of the largest count as one current
_ILL = 1e3  # condition number of the column-scaled design above which the fit is fragile
NAMES = {"ke": "K_e", "ra": "R_a", "vb": "V_brush"}


class MachineFit:
    def __init__(self):
        self.params = []  # fitted parameter keys, in column order: "ke", "ra", "vb"
        self.value = {}  # key -> estimate (V s/rad, ohm, V)
        self.ci95 = {}  # key -> half-width of the 95 % interval, same unit
        self.rms_v = 0.0  # residual RMS, V
        self.n = 0  # rows used
        self.dof = 0  # residual degrees of freedom
        self.resid_v = None  # residual of each row, V
        self.warnings = []  # why a parameter was left out or is fragile
        self.omitted = {}  # key -> why it is not in the fit (short text for the table)

    def fragment(self):
        """The machine section of a scenario (field names of host_sim/scenario.py). The scenario
        has no brush-drop field (its R_a includes the brushes), so a fitted drop stays out."""
        out = {"ke_v_per_krpm": round(self.value["ke"] * 1000 * RAD_S_PER_RPM, 5)}
        if "ra" in self.value:
            out["ra_ohm"] = round(self.value["ra"], 5)
        return out


def _design(omega, i_a, loaded):
    return {"ke": omega, "ra": -i_a, "vb": -np.sign(i_a) * loaded}


def fit_machine(rpm, v_term, i_a, brush="auto", open_below_a=0.005):
    """Fit K_e, R_a and (brush: 'auto' if the data support it, 'fit' always when separable,
    'none' never) the brush drop. Rows with |i_a| below open_below_a count as open circuit."""
    rpm, v_term, i_a = (np.asarray(x, dtype=float) for x in (rpm, v_term, i_a))
    omega = rpm * RAD_S_PER_RPM
    loaded = np.abs(i_a) >= open_below_a
    fit = MachineFit()
    warn = fit.warnings.append
    top_w = float(np.max(np.abs(omega)))
    if top_w <= 0:
        raise UserError("every row has rpm = 0: K_e needs the machine turning")
    one_speed = (np.max(omega) - np.min(omega)) < _ONE_SPEED * top_w
    n_load = int(loaded.sum())
    params = ["ke", "ra", "vb"]
    if brush == "none":
        params.remove("vb")
        fit.omitted["vb"] = "not fitted (--brush none)"
    if n_load == 0:
        fit.omitted.update(ra="not identifiable: no loaded rows", vb="not identifiable")
        warn("no loaded rows (|i_a| >= %g A nowhere): R_a and the brush drop cannot be "
             "identified; only K_e is fitted" % open_below_a)
        params = ["ke"]
    else:
        il = np.abs(i_a[loaded])
        one_current = (il.max() - il.min()) < _ONE_CURRENT * il.max()
        if one_speed and n_load == len(i_a):
            if one_current:
                raise UserError("every row is loaded, at one speed and one current: K_e and R_a "
                                "cannot be separated; add open-circuit rows (i_a = 0) or runs at "
                                "other speeds or loads")
            if "vb" in params:
                warn("all rows at one speed and none on open circuit: K_e and the brush drop "
                     "cannot be separated; brush drop not fitted (K_e absorbs it)")
                params.remove("vb")
                fit.omitted["vb"] = "not separable from K_e (one speed, no open circuit)"
        if one_current and "vb" in params:
            warn("loaded rows all at one current (about %.3g A): R_a and the brush drop cannot "
                 "be separated; brush drop not fitted (R_a includes V_b / I)" % il.mean())
            params.remove("vb")
            fit.omitted["vb"] = "not separable from R_a (one load current)"
    if one_speed:
        warn("all rows at one speed (about %.0f rpm): K_e rests on a single speed, so an offset "
             "in the voltage reading cannot be told from K_e; log open-circuit runs at several "
             "speeds" % np.mean(np.abs(rpm)))
    cols = _design(omega, i_a, loaded)
    if len(rpm) - len(params) < 2:
        raise UserError("%d rows for %d parameters; need at least %d"
                        % (len(rpm), len(params), len(params) + 2))
    beta, cov, resid, dof = linfit(np.column_stack([cols[k] for k in params]), v_term)
    if brush == "auto" and "vb" in params:
        half = t975(dof) * math.sqrt(cov[2, 2])
        if beta[2] <= half:  # interval reaches zero (or below): the data do not support a drop
            params.remove("vb")
            fit.omitted["vb"] = "not supported by the data (%.3g +/- %.2g V)" % (beta[2], half)
            beta, cov, resid, dof = linfit(np.column_stack([cols[k] for k in params]), v_term)
    X = np.column_stack([cols[k] for k in params])
    scaled = X / np.linalg.norm(X, axis=0)
    sv, vt = np.linalg.svd(scaled, full_matrices=False)[1:]
    if len(params) > 1 and sv[0] / sv[-1] > _ILL:
        worst = np.argsort(-np.abs(vt[-1]))[:2]
        warn("the data barely separate %s and %s (condition number %.0f): their intervals are "
             "wide and strongly correlated" % (NAMES[params[worst[0]]], NAMES[params[worst[1]]],
                                               sv[0] / sv[-1]))
    t = t975(dof)
    for j, k in enumerate(params):
        fit.value[k] = float(beta[j])
        fit.ci95[k] = float(t * math.sqrt(cov[j, j]))
    fit.params = params
    if fit.value["ke"] < 0:
        warn("K_e is negative: the terminal polarity is reversed with respect to the rpm sign")
    if fit.value.get("ra", 0.0) < 0:
        warn("R_a came out negative: check the sign of i_a (+ while the machine delivers)")
    fit.resid_v = resid
    fit.rms_v = float(math.sqrt(np.mean(resid ** 2)))
    fit.n = len(rpm)
    fit.dof = dof
    return fit


def report(fit):
    rows = [("parameter", "value", "95 % CI", "unit")]
    ke, dke = fit.value["ke"], fit.ci95["ke"]
    rows.append(("K_e",) + pm(ke, dke) + ("V s/rad", "= %.4g +/- %.2g V per 1000 rpm"
                                         % (ke * 1000 * RAD_S_PER_RPM, dke * 1000 * RAD_S_PER_RPM)))
    for k, unit in (("ra", "ohm"), ("vb", "V")):
        if k in fit.value:
            rows.append((NAMES[k],) + pm(fit.value[k], fit.ci95[k]) + (unit,))
        else:
            rows.append((NAMES[k], "-", "", unit, fit.omitted.get(k, "not fitted")))
    rows.append(("residual RMS", "%.3g" % fit.rms_v, "", "V",
                 "%d rows, %d degrees of freedom" % (fit.n, fit.dof)))
    return table(rows)


def plot(fit, rpm, v_term, i_a, path, open_below_a=0.005):
    loaded = np.abs(i_a) >= open_below_a
    fig, ax = new_figure(3, 1, (8, 9))
    a = ax[0][0]
    a.plot(rpm[~loaded], v_term[~loaded], "o", label="open circuit")
    a.plot(rpm[loaded], v_term[loaded], "s", label="loaded")
    r = np.linspace(min(0.0, rpm.min()), rpm.max(), 50)
    a.plot(r, fit.value["ke"] * r * RAD_S_PER_RPM, "-", label="E = K_e w (fit)")
    a.set_xlabel("rpm")
    a.set_ylabel("V_term, V")
    a.legend()
    for a, x, lab in ((ax[1][0], rpm, "rpm"), (ax[2][0], i_a, "i_a, A")):
        a.axhline(0.0, color="grey", lw=0.8)
        a.plot(x[~loaded], fit.resid_v[~loaded], "o")
        a.plot(x[loaded], fit.resid_v[loaded], "s")
        a.set_xlabel(lab)
        a.set_ylabel("residual, V")
    ax[0][0].set_title("machine fit: K_e %.4g V s/rad, residual RMS %.3g V"
                       % (fit.value["ke"], fit.rms_v))
    fig.tight_layout()
    save_figure(fig, path)


def run(args):
    if not 0 <= args.open_below <= 100:
        raise UserError("--open-below = %g: allowed 0 to 100 A" % args.open_below)
    log = read_log(args.log, COLUMNS, UNITS, optional=("t_s",), min_rows=3, time_col="t_s",
                   what="identify machine")
    c = log.col
    try:
        fit = fit_machine(c["rpm"], c["v_term"], c["i_a"], brush=args.brush,
                          open_below_a=args.open_below)
    except UserError as e:
        raise UserError("%s: %s" % (log.path, e))
    print(report(fit))
    for w in fit.warnings:
        diag("warning: " + w)
    if args.plot:
        plot(fit, c["rpm"], c["v_term"], c["i_a"], args.plot, args.open_below)
    if args.write:
        if "vb" in fit.value:
            diag("note: the scenario has no brush-drop field; V_brush = %.3g V is not written"
                 % fit.value["vb"])
        write_fragment(args.write, "machine", fit.fragment())
    return 0
