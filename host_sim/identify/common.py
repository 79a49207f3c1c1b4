# Shared pieces of the identifiers: reading and checking a CSV bench log (every error names the
# file, the line and the column), the Student-t quantile for 95 % intervals, result tables,
# plots written whole, and the JSON fragment a scenario or profile picks up.
import csv
import json
import math
import re
import sys

import numpy as np

from host_sim.errors import UserError
from host_sim.fileio import atomic_open


class Log:
    """A checked bench log. col[name] is a float array; line[i] is the file line of row i."""

    def __init__(self, path, names, col, line):
        self.path = path
        self.names = names  # every column in the header, in file order
        self.col = col  # checked columns only: name -> numpy float array
        self.line = line  # numpy int array: file line (1-based) of each data row

    def __len__(self):
        return len(self.line)

    def has(self, name):
        return name in self.col

    def where(self, i, name):
        """'FILE:LINE: column NAME' for row i, the prefix of a message about that cell."""
        return "%s:%d: column '%s'" % (self.path, self.line[i], name)


def read_log(path, required, units, optional=(), pattern=None, min_rows=2, time_col=None,
             what="this command"):
    """Read a CSV log with a header line. Lines starting with '#' and blank lines are skipped.
    required: columns that must be there; optional: checked when present; pattern: a regular
    expression for further columns to check (e.g. cell1..cellN). Every checked cell must be a
    finite number; time_col, when present, must increase strictly. units: name -> unit text for
    the messages (a pattern column uses units[pattern])."""
    try:
        with open(path, newline="") as f:
            lines = list(enumerate(f.read().splitlines(), start=1))
    except (OSError, UnicodeDecodeError) as e:
        raise UserError("%s: cannot read (%s)" % (path, getattr(e, "strerror", None) or e))
    rows = [(n, s) for n, s in lines if s.strip() and not s.lstrip().startswith("#")]
    if not rows:
        raise UserError("%s: no header line (expected columns: %s)" % (path, ", ".join(required)))
    head_line, head = rows[0]
    names = [c.strip() for c in next(csv.reader([head]))]
    seen = set()
    for c in names:
        if c in seen:
            raise UserError("%s:%d: column '%s' appears twice in the header" % (path, head_line, c))
        seen.add(c)
    for c in required:
        if c not in seen:
            raise UserError("%s:%d: missing column '%s' (%s); the header has: %s"
                            % (path, head_line, c, units.get(c, ""), ", ".join(names)))
    check = list(required) + [c for c in optional if c in seen and c not in required]
    if pattern is not None:
        rx = re.compile(pattern)
        check += [c for c in names if rx.fullmatch(c) and c not in check]
    idx = {c: names.index(c) for c in check}
    data = {c: [] for c in check}
    line_no = []
    for n, s in rows[1:]:
        cells = next(csv.reader([s]))
        if len(cells) != len(names):
            raise UserError("%s:%d: %d cells, the header has %d columns"
                            % (path, n, len(cells), len(names)))
        for c in check:
            raw = cells[idx[c]].strip()
            unit = units.get(c, units.get(pattern, ""))
            try:
                x = float(raw)
            except ValueError:
                x = None
            if x is None or not math.isfinite(x):
                raise UserError("%s:%d: column '%s' = %r: expected a finite number in %s"
                                % (path, n, c, raw, unit))
            data[c].append(x)
        line_no.append(n)
    if len(line_no) < min_rows:
        raise UserError("%s: %d data rows; %s needs at least %d"
                        % (path, len(line_no), what, min_rows))
    col = {c: np.array(v, dtype=float) for c, v in data.items()}
    log = Log(path, names, col, np.array(line_no))
    if time_col is not None and log.has(time_col):
        t = col[time_col]
        bad = np.nonzero(np.diff(t) <= 0)[0]
        if len(bad):
            i = bad[0] + 1
            raise UserError("%s = %r: time must increase (line %d before it has %r)"
                            % (log.where(i, time_col), t[i], log.line[i - 1], t[i - 1]))
    return log


def diag(msg):
    """A diagnostic or warning: stderr, never mixed with the results."""
    print(msg, file=sys.stderr)


# Student-t 97.5 % quantiles (two-sided 95 %) for 1-10 degrees of freedom (any statistics table);
# from 11 on the Cornish-Fisher series of Abramowitz & Stegun 26.7.5 is within 3e-6 (relative).
_T975_SMALL = (12.7062, 4.3027, 3.1824, 2.7764, 2.5706, 2.4469, 2.3646, 2.3060, 2.2622, 2.2281)
_Z975 = 1.959963984540054


def t975(dof):
    """Two-sided 95 % Student-t factor for dof degrees of freedom."""
    if dof < 1:
        raise ValueError("t975: dof must be at least 1")
    if dof <= len(_T975_SMALL):
        return _T975_SMALL[dof - 1]
    x = _Z975
    g1 = (x ** 3 + x) / 4
    g2 = (5 * x ** 5 + 16 * x ** 3 + 3 * x) / 96
    g3 = (3 * x ** 7 + 19 * x ** 5 + 17 * x ** 3 - 15 * x) / 384
    g4 = (79 * x ** 9 + 776 * x ** 7 + 1482 * x ** 5 - 1920 * x ** 3 - 945 * x) / 92160
    n = float(dof)
    return x + g1 / n + g2 / n ** 2 + g3 / n ** 3 + g4 / n ** 4


def linfit(X, y, robust=False, floor_var=0.0):
    """Ordinary least squares. Returns (beta, cov, resid, dof). cov is s^2 (X'X)^-1 from the
    residual variance s^2 (at least floor_var: a reading's quantisation q^2/12), or with
    robust=True the HC3 heteroscedasticity-consistent covariance (MacKinnon & White 1985;
    recommended for small samples by Long & Ervin 2000): (X'X)^-1 X' diag(e_i^2 / (1 - h_i)^2)
    X (X'X)^-1, e_i^2 floored the same way. X must have full column rank."""
    beta, _, rank, _ = np.linalg.lstsq(X, y, rcond=None)
    if rank < X.shape[1]:
        raise ValueError("linfit: design matrix is rank deficient")
    resid = y - X @ beta
    dof = len(y) - X.shape[1]
    xtx_inv = np.linalg.inv(X.T @ X)
    if robust:
        h = np.einsum("ij,jk,ik->i", X, xtx_inv, X)
        e2 = np.maximum(resid ** 2, floor_var) / np.maximum(1.0 - h, 1e-9) ** 2
        cov = xtx_inv @ (X.T * e2) @ X @ xtx_inv
    else:
        s2 = float(resid @ resid) / dof if dof > 0 else float("nan")
        cov = max(s2, floor_var) * xtx_inv
    return beta, cov, resid, dof


def resolution(x):
    """The reading step of a column: the smallest gap between its distinct values (0 when the
    column holds one value). Quantisation adds q^2/12 to each reading's variance (a uniform
    rounding error; GUM JCGM 100:2008, F.2.2.1)."""
    u = np.unique(np.asarray(x, dtype=float))
    if len(u) < 2:
        return 0.0
    return float(np.min(np.diff(u)))


def runs_z(resid):
    """Wald-Wolfowitz runs test on the signs of residuals in their logged order: z of the number
    of sign runs against its mean and variance for independent signs (any nonparametric
    statistics text). z well below zero (long runs) means structure the model does not have."""
    s = np.sign(np.asarray(resid, dtype=float))
    s = s[s != 0]
    n1, n2 = int(np.sum(s > 0)), int(np.sum(s < 0))
    n = n1 + n2
    if n1 < 2 or n2 < 2:
        return 0.0
    runs = 1 + int(np.sum(s[1:] != s[:-1]))
    mu = 2.0 * n1 * n2 / n + 1
    var = 2.0 * n1 * n2 * (2.0 * n1 * n2 - n) / (n * n * (n - 1))
    return (runs - mu) / math.sqrt(var) if var > 0 else 0.0


RUNS_Z_WARN = -3.0  # about 1 in 700 for a right model: a warning, not a verdict


# ---- calibration ------------------------------------------------------------------------------
# Every interval would otherwise cover noise only. The meter's gain tolerance (percent of the
# reading) and its offset tolerance (V, A) are treated as rectangular distributions of
# half-width tol (GUM JCGM 100:2008, 4.3.7: standard uncertainty tol / sqrt 3). Their effect on
# each result is found by refitting the log with each reading scaled or shifted by one standard
# uncertainty (a one-sided finite difference: the fits are smooth in the readings), combined
# in quadrature, and added to the noise interval at a 95 % coverage factor of 2.
DEFAULT_GAIN_TOL_PCT = 0.5  # a handheld DMM's DC basic accuracy is 0.05-1 %: common practice
K_CAL = 2.0  # coverage factor of the calibration part (GUM 6.3.3, about 95 %)


class Calibration:
    def __init__(self, gain_tol_pct=DEFAULT_GAIN_TOL_PCT, offset_v=0.0, offset_a=0.0):
        self.gain_tol_pct = gain_tol_pct
        self.offset_v = offset_v
        self.offset_a = offset_a

    def perturbations(self, cols):
        """(column, kind, standard uncertainty) for each reading column: kind 'gain' (relative)
        or 'offset' (absolute, in the column's unit). cols: name -> 'V', 'A' or 'rpm'."""
        out = []
        for c, unit in cols.items():
            if self.gain_tol_pct > 0:
                out.append((c, "gain", self.gain_tol_pct / 100 / math.sqrt(3)))
            off = {"V": self.offset_v, "A": self.offset_a}.get(unit, 0.0)
            if off > 0:
                out.append((c, "offset", off / math.sqrt(3)))
        return out

    def to_json(self):
        return {"gain_tol_pct": self.gain_tol_pct, "offset_v": self.offset_v,
                "offset_a": self.offset_a, "distribution": "rectangular (GUM 4.3.7)",
                "coverage_factor": K_CAL}


def calibration_u(fit_fn, data, units, cal):
    """Standard uncertainty of each result from the meter's calibration. fit_fn(data) -> dict
    key -> value; data: column -> array; units: column -> 'V', 'A' or 'rpm'. Returns key -> u."""
    base = fit_fn(data)
    acc = {k: 0.0 for k in base}
    for c, kind, u in cal.perturbations(units):
        d = dict(data)
        d[c] = data[c] * (1 + u) if kind == "gain" else data[c] + u * np.sign(data[c] + 1e-300)
        try:
            got = fit_fn(d)
        except (UserError, ValueError, np.linalg.LinAlgError):
            continue
        for k in acc:
            if k in got and math.isfinite(got[k]):
                acc[k] += (got[k] - base[k]) ** 2
    return {k: math.sqrt(v) for k, v in acc.items()}


def combine(ci_noise, u_cal):
    """95 % half-width from the noise part (already t x s) and the calibration part."""
    return math.hypot(ci_noise, K_CAL * u_cal)


# ---- checks of the log itself -----------------------------------------------------------------
_CLIP_MIN_ROWS = 4
_CLIP_PILE = 2  # rows at the extreme over rows at the next level in
_HELD_RUN = 8


def check_clipping(log, cols, rows=None):
    """Warnings for columns whose largest or smallest reading repeats exactly in several rows (a
    meter or ADC at full scale, or a held reading), and for runs of identical readings where the
    rest of the column scatters (zero scatter where noise is expected). rows: a slice or index
    array to check (default all)."""
    out = []
    for c in cols:
        if c not in log.col:
            continue
        x = log.col[c] if rows is None else log.col[c][rows]
        lines = log.line if rows is None else log.line[rows]
        if len(x) < 5:
            continue
        for which, val in (("largest", np.max(x)), ("smallest", np.min(x))):
            if val == 0:
                continue
            at = np.nonzero(x == val)[0]
            # a pile at the end of the range: many rows at exactly the extreme, against the
            # next reading inwards (noise spreads the top levels evenly; a full scale does not)
            inner = x[x < val] if which == "largest" else x[x > val]
            nxt = np.sum(inner == (np.max(inner) if which == "largest" else np.min(inner))) \
                if len(inner) else 0
            if len(at) >= _CLIP_MIN_ROWS and len(at) >= _CLIP_PILE * max(nxt, 1):
                out.append("column '%s' reads exactly %g in %d rows (its %s value, lines %d-%d): "
                           "clipped at the meter's full scale, or a held reading? those rows "
                           "bias the fit" % (c, val, len(at), which, lines[at[0]], lines[at[-1]]))
                break
        else:
            same = np.concatenate([[False], np.diff(x) == 0])
            run = best = 0
            end = 0
            for j, s in enumerate(same):
                run = run + 1 if s else 0
                if run > best:
                    best, end = run, j
            if best + 1 >= _HELD_RUN and np.any(np.diff(x) != 0):
                out.append("column '%s' holds %g unchanged for %d rows (lines %d-%d) while it "
                           "scatters elsewhere: a held or stuck reading; noise there cannot be "
                           "estimated" % (c, x[end], best + 1, lines[end - best], lines[end]))
    return out


def check_rows(n, wanted, what):
    """A warning when fewer rows than wanted carry a quantity (the interval then rests on few
    degrees of freedom, and the structure checks cannot see much)."""
    if n < wanted:
        return ["only %d rows %s (%d or more wanted): the interval rests on few degrees of "
                "freedom" % (n, what, wanted)]
    return []


def check_magnitude(log, col, lo, hi, unit, hint):
    """Refuse a column whose readings lie outside a physical range (a log in mV or mA)."""
    x = np.abs(log.col[col])
    big = float(np.max(x))
    if big > hi:
        i = int(np.argmax(x))
        raise UserError("%s = %g: above %g %s, outside any part this tool models; %s"
                        % (log.where(i, col), log.col[col][i], hi, unit, hint))
    if lo is not None and big < lo:
        raise UserError("%s: largest reading %g is below %g %s; %s"
                        % (log.path + ": column '%s'" % col, big, lo, unit, hint))


def table(rows):
    """Rows of (name, value, plus-minus, unit, note) as aligned text; value/pm are strings."""
    w = [max(len(str(r[k])) for r in rows) for k in range(4)]
    out = []
    for r in rows:
        s = "%-*s  %*s  %*s  %-*s" % (w[0], r[0], w[1], r[1], w[2], r[2], w[3], r[3])
        if len(r) > 4 and r[4]:
            s += "  " + r[4]
        out.append(s.rstrip())
    return "\n".join(out)


def decimals(dx):
    """Decimal places that show a half-width to two significant digits."""
    if dx is None or not math.isfinite(dx) or dx <= 0:
        return None
    return max(0, 1 - int(math.floor(math.log10(dx))))


def pm(x, dx, digits=4):
    """(value text, '+/- text'): the value printed to the precision of its interval (the
    interval to two significant digits, the value to the same decimal place)."""
    d = decimals(dx)
    if d is None:
        return "%.*g" % (digits, x), "n/a"
    if d == 0:
        return "%.0f" % x, "+/- %.2g" % dx
    return "%.*f" % (d, x), "+/- %.*f" % (d, dx)


def quantity(value, ci95, unit, **extra):
    """One result for the JSON output."""
    d = {"value": value, "ci95": ci95, "unit": unit}
    d.update(extra)
    return d


def _finite(x):
    """A JSON-safe copy: numpy scalars as Python numbers, a non-finite number as null."""
    if isinstance(x, dict):
        return {k: _finite(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_finite(v) for v in x]
    if isinstance(x, (bool, np.bool_)):
        return bool(x)
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        return float(x) if math.isfinite(x) else None
    return x


def emit(args, result, text):
    """Print a result: the table (or with --json the whole result as JSON) on stdout, every
    warning on stderr."""
    if getattr(args, "json", False):
        print(json.dumps(_finite(result), indent=2, allow_nan=False))
    else:
        print(text)
    for w in result["warnings"]:
        diag("warning: " + w)


def new_figure(nrows=1, ncols=1, size=(8, 6)):
    import matplotlib
    matplotlib.use("Agg")  # files only; never a window
    import matplotlib.pyplot as plt
    fig, axes = plt.subplots(nrows, ncols, figsize=size, squeeze=False)
    return fig, axes


def save_figure(fig, path):
    """Write the PNG whole (temporary file, then rename) and close the figure."""
    import matplotlib.pyplot as plt
    try:
        with atomic_open(path, "wb") as f:
            fig.savefig(f, format="png", dpi=110)
    except OSError as e:
        raise UserError("%s: cannot write the plot (%s)" % (path, e.strerror or e))
    finally:
        plt.close(fig)


def write_fragment(path, section, values):
    """Merge {section: values} into a scenario or fragment file after validating the merged
    scenario (host_sim/identify/site.py); print each field changed, old -> new, and any
    warning about the site on stderr. Returns what was written (for the JSON output)."""
    from host_sim.identify import site
    written = site.write_section(path, section, values)
    for line in site.describe(written):
        diag(line)
    return written


def write_result(args, result, section, values):
    """--write: merge the section, record what changed and any site warning in the result (the
    warnings then print with the others)."""
    written = write_fragment(args.write, section, values)
    result["written"] = written
    result["warnings"] += written["warnings"]


def calibration_from(args):
    """The Calibration of the command line's --gain-tol-pct, --offset-v, --offset-a."""
    g = getattr(args, "gain_tol_pct", DEFAULT_GAIN_TOL_PCT)
    ov, oa = getattr(args, "offset_v", 0.0), getattr(args, "offset_a", 0.0)
    if not 0 <= g <= 10:
        raise UserError("--gain-tol-pct = %g: allowed 0 to 10 %%" % g)
    if not 0 <= ov <= 10:
        raise UserError("--offset-v = %g: allowed 0 to 10 V" % ov)
    if not 0 <= oa <= 10:
        raise UserError("--offset-a = %g: allowed 0 to 10 A" % oa)
    return Calibration(g, ov, oa)
