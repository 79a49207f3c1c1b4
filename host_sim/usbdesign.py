# `spinrail design usb-network`: choose the USB data-line resistors for a signalling scheme from
# an E-series, find the worst case over resistor tolerance and the VBUS window (corner enumeration
# and a seeded Monte Carlo), and check with the controller's own classifier that every legal
# combination is accepted and the usual build mistakes are rejected.
#
# Circuit model (the plant's, host_sim/plant/usb.py): each line may have an upper resistor (to
# VBUS) and a lower one (to GND); a link may join D+ and D-; each line leaks to ground through
# the sense input and ESD parts (leak_ohm); the board's D+ probe (dcp only) sources probe_v
# through probe_ohm. The defaults of those three are the scenario defaults (host_sim/scenario.py
# usb.network): put your board's figures on the command line.
import itertools
import json
import math

import numpy as np

from controller.usbport import MATCH_NAMES, classify
from host_sim.common import load_profile
from host_sim.errors import UserError

# IEC 60063 preferred numbers: E24 (two digits) and E96 (three digits), one decade
E24 = (10, 11, 12, 13, 15, 16, 18, 20, 22, 24, 27, 30, 33, 36, 39, 43, 47, 51, 56, 62, 68, 75,
       82, 91)
E96 = (100, 102, 105, 107, 110, 113, 115, 118, 121, 124, 127, 130, 133, 137, 140, 143, 147, 150,
       154, 158, 162, 165, 169, 174, 178, 182, 187, 191, 196, 200, 205, 210, 215, 221, 226, 232,
       237, 243, 249, 255, 261, 267, 274, 280, 287, 294, 301, 309, 316, 324, 332, 340, 348, 357,
       365, 374, 383, 392, 402, 412, 422, 432, 442, 453, 464, 475, 487, 499, 511, 523, 536, 549,
       562, 576, 590, 604, 619, 634, 649, 665, 681, 698, 715, 732, 750, 768, 787, 806, 825, 845,
       866, 887, 909, 931, 953, 976)
SERIES = {"E24": (E24, 10), "E96": (E96, 100)}
# the usual tolerance each series is sold in: common practice
DEFAULT_TOL_PCT = {"E24": 5.0, "E96": 1.0}

VNOM = 5.0  # levels are quoted at VBUS 5.00 V (controller/usbport.py)
# line levels at VBUS 5.00 V (data-line schemes in no standard: common practice); dcp has none
LEVELS = {"div_2v0_2v7": (2.0, 2.7), "div_2v7_2v0": (2.7, 2.0), "div_2v7_2v7": (2.7, 2.7),
          "short_1v2": (1.2, 1.2), "dcp": None}
SCHEMES = MATCH_NAMES[1:]  # a scheme's match code is 1 + its index (controller/usbport.py)
DCP_LINK_MAX_OHM = 200.0  # BC1.2 ch. 5 resistances table: R_DCP_DAT 0-200 ohm
DP_SRC_V = (0.5, 0.7)  # BC1.2 ch. 5 DC electrical characteristics: V_DP_SRC
TOTAL_OHM = (50e3, 200e3)  # divider total: keeps the divider current at 25-100 uA (our choice)
# the parts, named as the scenario names them (host_sim/scenario.py DIVIDER_RESISTORS)
PARTS = ("dp_top", "dp_bottom", "dm_top", "dm_bottom", "between")
PART_NAMES = {"dp_top": "D+ upper (to VBUS)", "dp_bottom": "D+ lower (to GND)",
              "dm_top": "D- upper (to VBUS)", "dm_bottom": "D- lower (to GND)",
              "between": "D+/D- link"}
_G_SHORT = 1e6  # S: a shorted part or a solid link; also a device holding D+ at V_DP_SRC
LEAK_OHM = 1e6  # each line to ground (sense input, ESD parts): scenario usb.network.leak_ohm
PROBE_V = 0.6  # the board's D+ probe: scenario defaults usb.network.probe_v ...
PROBE_OHM = 1e4  # ... and probe_ohm


def series_values(series, lo_ohm=1e3, hi_ohm=1e6):
    """Every value of the series from lo_ohm to hi_ohm, ohms (exact decimal multiples)."""
    digits, scale = SERIES[series]
    out = []
    for exp in range(0, 8):
        for d in digits:
            r = d * 10 ** exp / scale
            if lo_ohm <= r <= hi_ohm:
                out.append(float(r))
    return np.array(out)


def divider_v(vbus_v, r_top_ohm, r_bot_ohm):
    """Unloaded divider output, V."""
    return vbus_v * r_bot_ohm / (r_top_ohm + r_bot_ohm)


def choose_pair(level_v, series="E96", total_ohm=TOTAL_OHM, load_ohm=math.inf, vbus_v=VNOM):
    """The (upper, lower) pair from the series whose divider, loaded by load_ohm to ground,
    gives level_v at vbus_v most closely, among totals within total_ohm; ties go to the total
    nearest the range's geometric mean."""
    vals = series_values(series)
    top, bot = np.meshgrid(vals, vals, indexing="ij")
    tot = top + bot
    ok = (tot >= total_ohm[0]) & (tot <= total_ohm[1])
    bot_loaded = bot * load_ohm / (bot + load_ohm) if math.isfinite(load_ohm) else bot
    err = np.abs(divider_v(vbus_v, top, bot_loaded) - level_v)
    mid = math.sqrt(total_ohm[0] * total_ohm[1])
    key = np.where(ok, np.round(err, 12) + 1e-9 * np.abs(np.log(tot / mid)), np.inf)
    i, j = np.unravel_index(np.argmin(key), key.shape)
    if not np.isfinite(key[i, j]):
        raise UserError("no %s pair has a total of %g-%g ohm" % (series, *total_ohm))
    return float(top[i, j]), float(bot[i, j])


def design(scheme, series="E96", leak_ohm=LEAK_OHM):
    """The nominal network for a scheme: {part: ohms} (absent parts left out; link 0 = solid).
    The pairs are chosen for the level the sense inputs see, leakage included."""
    if scheme == "dcp":
        return {"between": 0.0}
    dp, dm = LEVELS[scheme]
    if scheme == "short_1v2":  # one divider, both lines (and both leaks) tied to it
        return dict(zip(("dp_top", "dp_bottom"), choose_pair(dp, series, load_ohm=leak_ohm / 2)),
                    between=0.0)
    net = dict(zip(("dp_top", "dp_bottom"), choose_pair(dp, series, load_ohm=leak_ohm)))
    net.update(zip(("dm_top", "dm_bottom"), choose_pair(dm, series, load_ohm=leak_ohm)))
    return net


def _g(r):
    r = np.asarray(r, dtype=float)
    with np.errstate(divide="ignore"):
        return np.where(r <= 0, _G_SHORT, np.where(np.isinf(r), 0.0, 1.0 / np.where(r > 0, r, 1)))


def lines_v(net, vbus_v, leak_ohm=LEAK_OHM, drive_v=0.0, drive_g=0.0):
    """(D+, D-) in volts for a network {part: ohms or arrays} (absent parts are open), each line
    leaking to ground through leak_ohm, D+ driven by drive_v through conductance drive_g (the
    board's probe; a device's V_DP_SRC as a stiff source)."""
    g = {p: _g(net[p]) if p in net else 0.0 for p in PARTS}
    vbus = np.asarray(vbus_v, dtype=float)
    gl = g["between"]
    leak = 1.0 / leak_ohm
    g1 = g["dp_top"] + g["dp_bottom"] + leak + drive_g  # each node's conductance to the sources
    g2 = g["dm_top"] + g["dm_bottom"] + leak
    b1 = vbus * g["dp_top"] + drive_g * np.asarray(drive_v, dtype=float)
    b2 = vbus * g["dm_top"]
    # the 2x2 nodal solve; the determinant written without the cancelling (g1+gl)(g2+gl) - gl^2
    det = g1 * g2 + gl * (g1 + g2)
    return (b1 * (g2 + gl) + gl * b2) / det, ((g1 + gl) * b2 + gl * b1) / det


def phases(scheme):
    """How the controller sees the lines: (name, probe flag, what drives D+)."""
    if scheme == "dcp":
        return (("probe", 1, "board"), ("port on, lines idle", 0, None),
                ("port on, device sourcing V_DP_SRC", 0, "device"))
    return (("port check", 0, None),)


class Checker:
    """Runs networks through the controller's classifier over the legal spread."""

    def __init__(self, scheme, tol_pct, vbus_range, line_tol_pct, short_mv, seed,
                 leak_ohm=LEAK_OHM, probe_v=PROBE_V, probe_ohm=PROBE_OHM):
        self.scheme = scheme
        self.want = SCHEMES.index(scheme) + 1
        self.tol = tol_pct / 100.0
        self.vbus = vbus_range
        self.line_tol_pct, self.short_mv = line_tol_pct, short_mv
        self.seed = seed
        self.leak_ohm, self.probe_v, self.probe_ohm = leak_ohm, probe_v, probe_ohm

    def _classify(self, dp, dm, vbus, probe):
        dp_mv = np.rint(np.asarray(dp) * 1000).astype(int).ravel()
        dm_mv = np.rint(np.asarray(dm) * 1000).astype(int).ravel()
        vb_mv = np.rint(np.broadcast_to(vbus, np.shape(dp)) * 1000).astype(int).ravel()
        return np.array([classify(int(a), int(b), int(c), probe, self.line_tol_pct, self.short_mv)
                         for a, b, c in zip(dp_mv, dm_mv, vb_mv)])

    def _ranges(self, net):
        """part -> (low, high) ohms: every fitted resistor over its tolerance, the dcp link over
        its legal 0-200 ohm; shorts, opens and a solid tie stay as they are."""
        out = {}
        for p, r in net.items():
            if self.scheme == "dcp" and p == "between" and r == 0:
                out[p] = (0.0, DCP_LINK_MAX_OHM)
            elif 0 < r < math.inf:
                out[p] = (r * (1 - self.tol), r * (1 + self.tol))
        return out

    def _spread(self, net, rng, n):
        """Every corner (each varying part at either end, VBUS at min/nominal/max, for dcp a
        device's V_DP_SRC at both ends) followed by n uniform random samples of the same."""
        rg = self._ranges(net)
        drives = DP_SRC_V if self.scheme == "dcp" else (0.0,)
        combos = list(itertools.product(*[rg[p] for p in rg],
                                        (self.vbus[0], VNOM, self.vbus[1]), drives))
        cols = {p: np.full(len(combos) + n, float(r)) for p, r in net.items()}
        for j, p in enumerate(rg):
            cols[p][:len(combos)] = [c[j] for c in combos]
            cols[p][len(combos):] = rng.uniform(rg[p][0], rg[p][1], n)
        vbus = np.concatenate([[c[-2] for c in combos], rng.uniform(*self.vbus, n)])
        dev = np.concatenate([[c[-1] for c in combos], rng.uniform(*DP_SRC_V, n)])
        return cols, vbus, dev, len(combos)

    def lines(self, net, vbus, driver, dev_v=0.6):
        if driver == "board":
            return lines_v(net, vbus, self.leak_ohm, self.probe_v, 1.0 / self.probe_ohm)
        if driver == "device":
            return lines_v(net, vbus, self.leak_ohm, dev_v, _G_SHORT)
        return lines_v(net, vbus, self.leak_ohm)

    def run(self, net, n):
        """Per phase: the line voltages and match codes at every corner, then every sample."""
        rng = np.random.default_rng(self.seed)
        cols, vbus, dev, n_corner = self._spread(net, rng, n)
        out = []
        for name, probe, driver in phases(self.scheme):
            dp, dm = self.lines(cols, vbus, driver, dev)
            dp, dm = np.broadcast_to(dp, vbus.shape), np.broadcast_to(dm, vbus.shape)
            out.append({"phase": name, "dp_v": dp, "dm_v": dm, "vbus_v": vbus,
                        "codes": self._classify(dp, dm, vbus, probe), "corners": n_corner})
        return out


def _rng_range(x):
    return [round(float(np.min(x)), 4), round(float(np.max(x)), 4)]


def mistakes(scheme, net, series, leak_ohm=LEAK_OHM):
    """The usual build mistakes as (description, network)."""
    out = []
    for ln, name in (("dp", "D+"), ("dm", "D-")):
        if ln + "_bottom" not in net:  # (with a lower resistor this is "lower shorted" below)
            out.append(("%s shorted to ground" % name, dict(net, **{ln + "_bottom": 0.0})))
    for p in ("dp_top", "dp_bottom", "dm_top", "dm_bottom"):
        if p not in net:
            continue
        r, name = net[p], PART_NAMES[p]
        out += [("%s %s x10 (decade off)" % (name, fmt_ohm(r)), dict(net, **{p: r * 10})),
                ("%s %s /10 (decade off)" % (name, fmt_ohm(r)), dict(net, **{p: r / 10})),
                ("%s open" % name, dict(net, **{p: math.inf})),
                ("%s shorted" % name, dict(net, **{p: 0.0}))]
    for ln in ("dp", "dm"):
        if ln + "_top" in net:
            out.append(("%s pair swapped (upper <-> lower)" % ("D+" if ln == "dp" else "D-"),
                        dict(net, **{ln + "_top": net[ln + "_bottom"],
                                     ln + "_bottom": net[ln + "_top"]})))
    if "dm_top" in net:
        out.append(("D+ and D- networks swapped", dict(net, dp_top=net["dm_top"],
                    dp_bottom=net["dm_bottom"], dm_top=net["dp_top"], dm_bottom=net["dp_bottom"])))
    if "between" in net:
        # (a link of the wrong value is not listed: with nothing but the sense inputs loading
        # D-, even 2 kohm moves it by about 1 mV, below what any voltage check can use)
        out.append(("D+/D- link open", {k: v for k, v in net.items() if k != "between"}))
    else:
        out.append(("D+ bridged to D- (solder bridge)", dict(net, between=0.0)))
    for other in SCHEMES:
        if other != scheme:
            out.append(("%s network fitted instead" % other, design(other, series, leak_ohm)))
    return out


def fmt_ohm(r):
    if r == 0:
        return "0"
    if not math.isfinite(r):
        return "open"
    for div, suf in ((1e6, "M"), (1e3, "k"), (1, "")):
        if r >= div:
            return ("%.4g" % (r / div)) + suf
    return "%.3g" % r


def evaluate(scheme, series="E96", tol_pct=None, vbus_tol_pct=5.0, line_tol_pct=8,
             short_mv=100, samples=20000, seed=1, leak_ohm=LEAK_OHM, probe_v=PROBE_V,
             probe_ohm=PROBE_OHM):
    """The whole design and check as a JSON-ready dict; ok is False when a legal combination is
    rejected or a visible mistake is accepted."""
    tol_pct = DEFAULT_TOL_PCT[series] if tol_pct is None else tol_pct
    vbus = (VNOM * (1 - vbus_tol_pct / 100), VNOM * (1 + vbus_tol_pct / 100))
    net = design(scheme, series, leak_ohm)
    chk = Checker(scheme, tol_pct, vbus, line_tol_pct, short_mv, seed, leak_ohm, probe_v,
                  probe_ohm)
    res = {"scheme": scheme, "series": series, "tolerance_pct": tol_pct, "vbus_v": list(vbus),
           "line_tol_pct": line_tol_pct, "short_tol_mv": short_mv, "leak_ohm": leak_ohm,
           "probe_v": probe_v, "probe_ohm": probe_ohm, "samples": samples, "seed": seed,
           "network_ohm": net, "levels": [], "phases": [], "mistakes": [], "failures": []}
    lv = LEVELS[scheme]
    if lv:
        seen = lines_v(net, VNOM, leak_ohm)
        for k, (ln, want) in enumerate((("D+", lv[0]), ("D-", lv[1]))):
            ln_net = "dm" if k == 1 and "dm_top" in net else "dp"  # short_1v2: one divider
            top, bot = ln_net + "_top", ln_net + "_bottom"
            v = float(seen[k])
            res["levels"].append({"line": ln, "upper_ohm": net[top], "lower_ohm": net[bot],
                                  "target_v": want,
                                  "unloaded_v": round(divider_v(VNOM, net[top], net[bot]), 4),
                                  "nominal_v": round(v, 4),
                                  "error_pct": round(100 * (v - want) / want, 3),
                                  "source_ohm": net[top] * net[bot] / (net[top] + net[bot])})
    for ph in chk.run(net, samples):
        bad = np.nonzero(ph["codes"] != chk.want)[0]
        nc = ph["corners"]
        row = {"phase": ph["phase"], "dp_v": _rng_range(ph["dp_v"][:nc]),
               "dm_v": _rng_range(ph["dm_v"][:nc]),
               "dp_mc_v": _rng_range(ph["dp_v"][nc:]) if samples else None,
               "dm_mc_v": _rng_range(ph["dm_v"][nc:]) if samples else None,
               "corners": nc, "corners_rejected": int(np.sum(bad < nc)),
               "samples_rejected": int(np.sum(bad >= nc))}
        if lv:
            scale = ph["vbus_v"][:nc] / VNOM
            row["dp_pct"] = _rng_range(100 * (ph["dp_v"][:nc] / (lv[0] * scale) - 1))
            row["dm_pct"] = _rng_range(100 * (ph["dm_v"][:nc] / (lv[1] * scale) - 1))
        res["phases"].append(row)
        if len(bad):
            i = bad[0]
            res["failures"].append(
                "legal combination rejected in phase '%s': D+ %.3f V, D- %.3f V at VBUS %.3f V "
                "reads as '%s'" % (ph["phase"], ph["dp_v"][i], ph["dm_v"][i], ph["vbus_v"][i],
                                   MATCH_NAMES[ph["codes"][i]]))
    drivers = [d for _, _, d in phases(scheme)]
    base = [chk.lines(net, VNOM, d) for d in drivers]
    for desc, mnet in mistakes(scheme, net, series, leak_ohm):
        nominal = [chk.lines(mnet, VNOM, d) for d in drivers]
        same = all(abs(a[0] - b[0]) < 5e-4 and abs(a[1] - b[1]) < 5e-4
                   for a, b in zip(base, nominal))
        runs = chk.run(mnet, min(samples, 2000))
        acc = runs[0]["codes"] == chk.want  # the port closes once the first phase accepts
        row = {"mistake": desc, "dp_v": _rng_range(runs[0]["dp_v"]),
               "dm_v": _rng_range(runs[0]["dm_v"]),
               "reads_as": sorted({MATCH_NAMES[c] for c in runs[0]["codes"]})}
        if same:
            row["result"] = "invisible (same line levels)"
        elif acc.any():
            later = [r["phase"] for r in runs[1:] if np.all(r["codes"] != chk.want)]
            row["result"] = "ACCEPTED" + (" while probing; rejected once on (%s): the port "
                                          "pulses" % ", ".join(later) if later else "")
            res["failures"].append("mistake accepted: %s (%s)" % (desc, row["result"]))
        else:
            row["result"] = "rejected"
        res["mistakes"].append(row)
    res["ok"] = not res["failures"]
    return res


def report(res, prof_path):
    out = []
    lv = LEVELS[res["scheme"]]
    if lv:
        out.append("scheme %s: D+ %.1f V, D- %.1f V at VBUS 5.00 V (common practice)"
                   % (res["scheme"], lv[0], lv[1]))
    else:
        out.append("scheme dcp: BC1.2 dedicated charging port: only a short of 0-200 ohm "
                   "between D+ and D- (R_DCP_DAT, BC1.2 ch. 5 resistances table); fit a 0 ohm "
                   "link, no resistors to choose")
    out.append("series %s, resistor tolerance +/- %g %%, VBUS %.2f-%.2f V (BC1.2 ch. 5 V_CHG)"
               % (res["series"], res["tolerance_pct"], res["vbus_v"][0], res["vbus_v"][1]))
    out.append("controller windows: +/- %d %% of each level scaled by VBUS, lines count as "
               "shorted within %d mV (profile %s)" % (res["line_tol_pct"], res["short_tol_mv"],
                                                       prof_path))
    out.append("board: each line leaks %s ohm to ground; D+ probe %.2f V through %s ohm"
               % (fmt_ohm(res["leak_ohm"]), res["probe_v"], fmt_ohm(res["probe_ohm"])))
    if res["levels"]:
        out.append("")
        out.append("%-4s %8s %8s %8s %10s %9s %8s %9s" % (
            "line", "upper", "lower", "total", "unloaded V", "at ADC V", "error %", "source R"))
        for lvl in res["levels"]:
            out.append("%-4s %8s %8s %8s %10.3f %9.3f %8.2f %9s" % (
                lvl["line"], fmt_ohm(lvl["upper_ohm"]), fmt_ohm(lvl["lower_ohm"]),
                fmt_ohm(lvl["upper_ohm"] + lvl["lower_ohm"]), lvl["unloaded_v"],
                lvl["nominal_v"], lvl["error_pct"], fmt_ohm(lvl["source_ohm"])))
        if res["scheme"] == "short_1v2":
            out.append("D+ and D- tied together (0 ohm link) on the one divider")
    out.append("")
    out.append("worst case (corners) and Monte Carlo (%d samples, seed %d):"
               % (res["samples"], res["seed"]))
    for ph in res["phases"]:
        pct = (" (%+.2f..%+.2f %% / %+.2f..%+.2f %% of the VBUS-scaled level)"
               % tuple(ph["dp_pct"] + ph["dm_pct"]) if "dp_pct" in ph else "")
        mc = (", MC D+ %.3f-%.3f V, D- %.3f-%.3f V" % tuple(ph["dp_mc_v"] + ph["dm_mc_v"])
              if ph["dp_mc_v"] else "")
        out.append("  %s: D+ %.3f-%.3f V, D- %.3f-%.3f V%s%s" % (
            ph["phase"], ph["dp_v"][0], ph["dp_v"][1], ph["dm_v"][0], ph["dm_v"][1], pct, mc))
        out.append("    rejected: %d of %d corners, %d of %d samples" % (
            ph["corners_rejected"], ph["corners"], ph["samples_rejected"], res["samples"]))
    out.append("")
    w = max(len(m["mistake"]) for m in res["mistakes"])
    out.append("%-*s  %-13s  %-13s  %s" % (w, "build mistake", "D+ V", "D- V", "result"))
    for m in res["mistakes"]:
        out.append("%-*s  %5.3f-%-7.3f  %5.3f-%-7.3f  %s" % (
            w, m["mistake"], m["dp_v"][0], m["dp_v"][1], m["dm_v"][0], m["dm_v"][1],
            m["result"]))
    out.append("")
    out.append("PASS: every legal combination accepted, every visible mistake rejected"
               if res["ok"] else "FAIL:\n  " + "\n  ".join(res["failures"]))
    return "\n".join(out)


def cmd_usb_network(args):
    p, prof_path = load_profile(args.profile)
    scheme = args.scheme or SCHEMES[p.scheme]
    if args.tolerance is not None and not 0 < args.tolerance <= 20:
        raise UserError("--tolerance = %g: allowed above 0 up to 20 %%" % args.tolerance)
    if not 0 <= args.vbus_tol <= 10:
        raise UserError("--vbus-tol = %g: allowed 0 to 10 %%" % args.vbus_tol)
    if not 0 <= args.samples <= 1000000:
        raise UserError("--samples = %d: allowed 0 to 1000000" % args.samples)
    if not 1e3 <= args.leak_ohm <= 1e12:
        raise UserError("--leak-ohm = %g: allowed 1e3 to 1e12 ohm" % args.leak_ohm)
    if not DP_SRC_V[0] <= args.probe_v <= DP_SRC_V[1]:
        raise UserError("--probe-v = %g: allowed 0.5 to 0.7 V (BC1.2 ch. 5 V_DP_SRC)"
                        % args.probe_v)
    if not 0 < args.probe_ohm <= 1e6:
        raise UserError("--probe-ohm = %g: allowed above 0 up to 1e6 ohm" % args.probe_ohm)
    res = evaluate(scheme, args.series, args.tolerance, args.vbus_tol, p.line_tol_pct,
                   p.short_tol_mv, args.samples, args.seed, args.leak_ohm, args.probe_v,
                   args.probe_ohm)
    if args.json:
        print(json.dumps(res, indent=2))
    else:
        print(report(res, prof_path))
    return 0 if res["ok"] else 1


def register(sub):
    dp = sub.add_parser("design", help="design helpers (USB data-line network)",
                        description="Design helpers for a spinrail build.")
    dsub = dp.add_subparsers(dest="what", metavar="PART", required=True)
    up = dsub.add_parser(
        "usb-network", help="choose the USB data-line resistors and check them against the "
                            "controller's port check",
        description="Choose E-series resistor pairs for a USB data-line scheme, give the worst "
                    "case over resistor tolerance and VBUS 4.75-5.25 V (BC1.2 V_CHG) by corner "
                    "enumeration and Monte Carlo, and check with the controller's own classifier "
                    "that every legal combination is accepted and the usual build mistakes "
                    "(decade-off resistor, swapped pair, open, short, wrong network) rejected. "
                    "Exit 1 if not.")
    up.add_argument("--scheme", choices=SCHEMES, help="signalling scheme (default: the profile's)")
    up.add_argument("--series", choices=sorted(SERIES), default="E96", help="E-series (IEC 60063)")
    up.add_argument("--tolerance", type=float, metavar="PCT",
                    help="resistor tolerance, +/- %% (default 1 for E96, 5 for E24)")
    up.add_argument("--vbus-tol", type=float, default=5.0, metavar="PCT",
                    help="VBUS window around 5.00 V, +/- %% (default 5: BC1.2 4.75-5.25 V)")
    up.add_argument("--samples", type=int, default=20000, metavar="N",
                    help="Monte Carlo samples (default 20000; 0: corners only)")
    up.add_argument("--seed", type=int, default=1, help="Monte Carlo seed (default 1)")
    up.add_argument("--leak-ohm", type=float, default=LEAK_OHM, metavar="OHM",
                    help="each line's leakage to ground: sense input, ESD parts (default 1e6, "
                         "the scenario default)")
    up.add_argument("--probe-v", type=float, default=PROBE_V, metavar="V",
                    help="the board's D+ probe voltage, dcp only (default 0.6)")
    up.add_argument("--probe-ohm", type=float, default=PROBE_OHM, metavar="OHM",
                    help="the board's D+ probe source resistance, dcp only (default 1e4, the "
                         "scenario default)")
    up.add_argument("--profile", help="profile JSON file or built-in name for the controller's "
                                      "windows (default: shipped default)")
    up.add_argument("--json", action="store_true", help="print the result as JSON")
    up.set_defaults(func=cmd_usb_network)
