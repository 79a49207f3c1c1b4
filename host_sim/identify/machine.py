# Permanent-magnet DC machine from open-circuit and loaded runs, as a generator:
#   V_term = K_e w - R_a I - V_b sgn(I)    (E = K_e w; any electric machines text)
# w in rad/s from rpm; I > 0 while the machine delivers current; V_b is the brush (or series
# diode) drop, present only while current flows. Least squares with a heteroscedasticity-robust
# (HC3) covariance; the meter's calibration tolerance joins the intervals. The data decide which
# parameters can be told apart.
import math

import numpy as np

from host_sim.errors import UserError
from host_sim.identify.common import (calibration_from, calibration_u, check_clipping,
                                      check_magnitude, check_rows, combine, diag, emit, linfit,
                                      new_figure, pm, quantity, read_log, resolution,
                                      save_figure, t975, table, write_result)

RAD_S_PER_RPM = 2 * math.pi / 60
COLUMNS = ("rpm", "v_term", "i_a")
UNITS = {"rpm": "rpm (shaft speed)", "v_term": "V (terminal voltage)",
         "i_a": "A (armature current, + delivered, 0 on open circuit)", "t_s": "s"}
_ONE_SPEED = 0.05  # speeds within 5 % of the top speed count as one speed
_ONE_CURRENT = 0.10  # loaded currents within 10 % of the largest count as one current
_ILL = 1e3  # condition number of the column-scaled design above which the fit is fragile
NAMES = {"ke": "K_e", "ra": "R_a", "vb": "V_brush"}
_STRUCT_T = 3.0  # |t| of an extra term above which the residuals are called structured
_WANT_ROWS = 12  # rows below which the log is called short
METHOD = ("least squares on V_term = K_e w - R_a I - V_b sgn(I) (numpy lstsq); covariance HC3 "
          "(heteroscedasticity-consistent, MacKinnon & White 1985), 95 % intervals Student t "
          "on n - p degrees of freedom plus the meter's calibration tolerance")
SOURCE = ("E = K_e w, V_term = E - I R_a: any electric machines text (e.g. Fitzgerald & "
          "Kingsley, Electric Machinery, the DC machine chapter); HC3: J. G. MacKinnon and H. "
          "White, J. Econometrics 29 (1985) 305-325; calibration: GUM JCGM 100:2008 4.3.7")


class MachineFit:
    def __init__(self):
        self.params = []  # fitted parameter keys, in column order: "ke", "ra", "vb"
        self.value = {}  # key -> estimate (V s/rad, ohm, V)
        self.ci95 = {}  # key -> half-width of the 95 % interval (noise and calibration)
        self.ci95_noise = {}  # key -> the noise part of it alone
        self.u_cal = {}  # key -> standard uncertainty from the meter's calibration
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


def _fit(omega, v_term, i_a, loaded, params, floor_var):
    cols = _design(omega, i_a, loaded)
    return linfit(np.column_stack([cols[k] for k in params]), v_term, robust=True,
                  floor_var=floor_var)


def fit_machine(rpm, v_term, i_a, brush="auto", open_below_a=0.005, cal=None):
    """Fit K_e, R_a and (brush: 'auto' if the data support it, 'fit' always when separable,
    'none' never) the brush drop. Rows with |i_a| below open_below_a count as open circuit.
    Least squares with the HC3 covariance (meter and tachometer noise grow with the reading, so
    the rows do not share one variance); cal: a common.Calibration added to the intervals."""
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
    if len(rpm) - len(params) < 2:
        raise UserError("%d rows for %d parameters; need at least %d"
                        % (len(rpm), len(params), len(params) + 2))
    floor = resolution(v_term) ** 2 / 12
    beta, cov, resid, dof = _fit(omega, v_term, i_a, loaded, params, floor)
    if brush == "auto" and "vb" in params:
        half = t975(dof) * math.sqrt(cov[2, 2])
        if beta[2] <= half:  # interval reaches zero (or below): the data do not support a drop
            params.remove("vb")
            fit.omitted["vb"] = "not supported by the data (%.3g +/- %.2g V)" % (beta[2], half)
            beta, cov, resid, dof = _fit(omega, v_term, i_a, loaded, params, floor)
    cols = _design(omega, i_a, loaded)
    X = np.column_stack([cols[k] for k in params])
    scaled = X / np.linalg.norm(X, axis=0)
    sv, vt = np.linalg.svd(scaled, full_matrices=False)[1:]
    if len(params) > 1 and sv[0] / sv[-1] > _ILL:
        worst = np.argsort(-np.abs(vt[-1]))[:2]
        warn("the data barely separate %s and %s (condition number %.0f): their intervals are "
             "wide and strongly correlated" % (NAMES[params[worst[0]]], NAMES[params[worst[1]]],
                                               sv[0] / sv[-1]))
    fit.warnings += _structure(X, v_term, omega, i_a, loaded, params, floor)
    t = t975(dof)
    if cal is not None:
        def refit(d):
            b = _fit(d["rpm"] * RAD_S_PER_RPM, d["v_term"], d["i_a"], loaded, params, floor)[0]
            return dict(zip(params, (float(x) for x in b)))
        fit.u_cal = calibration_u(refit, {"rpm": rpm, "v_term": v_term, "i_a": i_a},
                                  {"rpm": "rpm", "v_term": "V", "i_a": "A"}, cal)
    for j, k in enumerate(params):
        fit.value[k] = float(beta[j])
        fit.ci95_noise[k] = float(t * math.sqrt(cov[j, j]))
        fit.ci95[k] = combine(fit.ci95_noise[k], fit.u_cal.get(k, 0.0))
    fit.params = params
    if fit.value["ke"] < 0:
        warn("K_e is negative: the terminal polarity is reversed with respect to the rpm sign")
    if fit.value.get("ra", 0.0) < 0:
        warn("R_a came out negative: check the sign of i_a (+ while the machine delivers)")
    fit.warnings += check_rows(len(rpm), _WANT_ROWS, "in the log")
    fit.resid_v = resid
    fit.rms_v = float(math.sqrt(np.mean(resid ** 2)))
    fit.n = len(rpm)
    fit.dof = dof
    return fit


def _structure(X, v_term, omega, i_a, loaded, params, floor):
    """Model-mismatch checks: refit with one extra term the model does not have and warn when
    its HC3 t statistic passes 3. A drop that grows less than linearly with current (a brush
    drop that saturates) or heating shows as I|I| on loaded rows; a speed-dependent EMF (iron
    loss, a mis-scaled tachometer at one end) as w|w|."""
    out = []
    i_max = float(np.max(np.abs(i_a))) or 1.0
    extra = [("I|I|", -i_a * np.abs(i_a) * loaded,
              "the terminal voltage falls faster than linearly with current: heating of the "
              "winding, or a drop that grows with current; R_a is then an average over the "
              "logged currents"),
             ("log(1 + 5 I/I_max)", -np.sign(i_a) * np.log1p(5 * np.abs(i_a) / i_max) * loaded,
              "the drop levels off with current (a brush contact drop that saturates): R_a "
              "and the drop are then an average over the logged currents and biased"),
             ("w|w|", omega * np.abs(omega),
              "the open-circuit voltage is not proportional to speed: check the tachometer, or "
              "a rectifier in the voltage lead")]
    for name, col, why in extra:
        if name != "w|w|" and ("ra" not in params or len(np.unique(np.round(i_a[loaded], 6))) < 3):
            continue
        Xa = np.column_stack([X, col])
        if len(v_term) - Xa.shape[1] < 3 or np.linalg.matrix_rank(Xa) < Xa.shape[1]:
            continue
        b, c = linfit(Xa, v_term, robust=True, floor_var=floor)[:2]
        z = b[-1] / math.sqrt(c[-1, -1]) if c[-1, -1] > 0 else 0.0
        if abs(z) > _STRUCT_T:
            out.append("model mismatch: the residuals follow %s (t = %.1f): %s" % (name, z, why))
    return out


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


def to_json(fit, log_path, cal):
    vals = {"ke_v_s_per_rad": quantity(fit.value["ke"], fit.ci95["ke"], "V s/rad"),
            "ke_v_per_krpm": quantity(fit.value["ke"] * 1000 * RAD_S_PER_RPM,
                                      fit.ci95["ke"] * 1000 * RAD_S_PER_RPM, "V/krpm")}
    for k, key, unit in (("ra", "ra_ohm", "ohm"), ("vb", "v_brush_v", "V")):
        if k in fit.value:
            vals[key] = quantity(fit.value[k], fit.ci95[k], unit,
                                 ci95_noise=fit.ci95_noise[k])
        else:
            vals[key] = {"value": None, "why": fit.omitted.get(k, "not fitted")}
    vals["ke_v_s_per_rad"]["ci95_noise"] = fit.ci95_noise["ke"]
    return {"part": "machine", "log": str(log_path), "values": vals,
            "residual_rms_v": fit.rms_v, "rows": fit.n, "dof": fit.dof, "method": METHOD,
            "source": SOURCE, "calibration": cal.to_json(), "warnings": list(fit.warnings)}


def check_units(log):
    """Refuse logs whose magnitudes no machine this tool models shows (a log in mV or mA)."""
    check_magnitude(log, "v_term", None, 1000.0, "V", "is the column in mV? give volts")
    check_magnitude(log, "i_a", None, 1000.0, "A", "is the column in mA? give amps")
    check_magnitude(log, "rpm", None, 100000.0, "rpm", "give shaft revolutions per minute")


def run(args):
    if not 0 <= args.open_below <= 100:
        raise UserError("--open-below = %g: allowed 0 to 100 A" % args.open_below)
    log = read_log(args.log, COLUMNS, UNITS, optional=("t_s",), min_rows=3, time_col="t_s",
                   what="identify machine")
    check_units(log)
    c = log.col
    cal = calibration_from(args)
    try:
        fit = fit_machine(c["rpm"], c["v_term"], c["i_a"], brush=args.brush,
                          open_below_a=args.open_below, cal=cal)
    except UserError as e:
        raise UserError("%s: %s" % (log.path, e))
    # rpm is left out: rows at one speed setting may read the same by design
    fit.warnings[:0] = check_clipping(log, ("v_term", "i_a"))
    result = to_json(fit, log.path, cal)
    if args.plot:
        plot(fit, c["rpm"], c["v_term"], c["i_a"], args.plot, args.open_below)
    if args.write:
        if "vb" in fit.value:
            diag("note: the scenario has no brush-drop field; V_brush = %.3g V is not written"
                 % fit.value["vb"])
        write_result(args, result, "machine", fit.fragment())
    emit(args, result, report(fit) + "\nmethod: " + METHOD + ".\nsource: " + SOURCE + ".")
    return 0
