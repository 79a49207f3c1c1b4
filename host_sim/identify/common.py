# Shared pieces of the identifiers: reading and checking a CSV bench log (every error names the
# file, the line and the column), the Student-t quantile for 95 % intervals, result tables,
# plots written whole, and the JSON fragment a scenario or profile picks up.
import csv
import json
import math
import os
import re
import sys

import numpy as np

from host_sim.errors import UserError
from host_sim.fileio import atomic_open, write_json


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


def linfit(X, y):
    """Ordinary least squares. Returns (beta, cov, resid, dof); cov from the residual variance
    s^2 (X'X)^-1. X must have full column rank (the callers check identifiability first)."""
    beta, _, rank, _ = np.linalg.lstsq(X, y, rcond=None)
    if rank < X.shape[1]:
        raise ValueError("linfit: design matrix is rank deficient")
    resid = y - X @ beta
    dof = len(y) - X.shape[1]
    s2 = float(resid @ resid) / dof if dof > 0 else float("nan")
    cov = s2 * np.linalg.inv(X.T @ X)
    return beta, cov, resid, dof


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


def pm(x, dx, digits=4):
    """(value text, '+/- text') with the same number of significant digits."""
    if dx is None or not math.isfinite(dx):
        return "%.*g" % (digits, x), "n/a"
    return "%.*g" % (digits, x), "+/- %.2g" % dx


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
    """Write {section: values} as JSON. An existing file that holds a JSON object keeps its
    other sections and the section's other fields (so the three identifiers can fill one
    fragment, or update a scenario in place); anything else is refused, not overwritten."""
    doc = {}
    if os.path.exists(path):
        try:
            with open(path) as f:
                doc = json.load(f)
        except (OSError, ValueError) as e:
            raise UserError("%s: exists and is not readable JSON (%s); not overwritten" % (path, e))
        if not isinstance(doc, dict):
            raise UserError("%s: exists and is not a JSON object; not overwritten" % path)
    old = doc.get(section)
    doc[section] = dict(old, **values) if isinstance(old, dict) else values
    try:
        write_json(path, doc)
    except OSError as e:
        raise UserError("%s: cannot write (%s)" % (path, e.strerror or e))
    diag("wrote section '%s' of %s" % (section, path))
