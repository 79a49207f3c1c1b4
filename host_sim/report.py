# report.png: the panels a person reads at a glance. Drive and power; bus with the trip level;
# battery voltage with the stages shaded, its ceiling and current; supercap with the clamp; USB
# VBUS with its window and the port state; and where the energy went.
import math

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from controller.signals import STAGE_NAMES  # noqa: E402
from host_sim.fileio import atomic_path  # noqa: E402

# Stage shading: light, distinct fills (our own choice), labelled in the legend.
_STAGE_FILL = {"bulk": "#fde2b8", "absorption": "#f7b7a3", "float": "#cfe8cf",
               "equalize": "#d9c8f0", "blocked": "#d0d0d0"}


def _spans(t, mask):
    """(start, end) times of the runs where mask is true."""
    out = []
    if len(t) == 0:
        return out
    m = np.asarray(mask, dtype=bool)
    edges = np.flatnonzero(np.diff(m.astype(int)))
    starts = [0] + list(edges + 1)
    for a, b in zip(starts, list(edges + 1) + [len(m)]):
        if m[a]:
            out.append((t[a], t[b - 1]))
    return out


# the run's verdict in the title (simulate.verdict)
_VERDICT_TEXT = {"held": "every limit held", "crossed": "a limit was CROSSED",
                 "not_doing_its_job": "limits held, but NOT DOING ITS JOB (service warnings)"}


def write(result, path, verdict=None):
    s = result.series
    p = result.scenario.profile
    t = s["t_s"] / 60.0  # minutes
    fig, ax = plt.subplots(6, 1, figsize=(11, 15), sharex=False,
                           gridspec_kw={"height_ratios": [1, 1, 1.3, 1, 1, 0.9]})
    title = "spinrail simulate: %s (%.0f s, seed %s)" % (
        result.scenario.name, result.scenario.duration_s, result.scenario.seed)
    if verdict:
        codes = sorted({w["code"] for w in result.warnings})
        title += "\n%s%s" % (_VERDICT_TEXT.get(verdict, verdict),
                             (": " + ", ".join(codes)) if codes and verdict != "held" else "")
    fig.suptitle(title, fontsize=12)

    a = ax[0]
    a.plot(t, s["drive_rpm"], color="#555555", lw=0.8, label="drive speed (rpm)")
    a.set_ylabel("drive rpm")
    a2 = a.twinx()
    a2.plot(t, s["p_in_w"], color="#1f77b4", lw=0.8, label="power in (W)")
    a2.plot(t, s["p_elec_w"], color="#2ca02c", lw=0.8, label="electrical out (W)")
    if np.isfinite(s["p_ideal_w"]).any():
        a2.plot(t, s["p_ideal_w"], color="#9467bd", lw=0.8, ls="--", label="ideal (max) W")
    a2.set_ylabel("W")
    _legend(a, a2)
    a.set_title("Drive and power", loc="left", fontsize=10)

    a = ax[1]
    a.plot(t, s["bus_v"], color="#333333", lw=0.7, label="bus")
    a.axhline(p.ovp_trip_mv / 1000, color="#d62728", ls="--", lw=1, label="overvoltage trip")
    a.axhline(p.ovp_recover_mv / 1000, color="#ff9896", ls=":", lw=1, label="recovery")
    for x0, x1 in _spans(t, s["dump_on"] > 0):
        a.axvspan(x0, x1, color="#ffbb78", alpha=0.5, lw=0)
    a.set_ylabel("V")
    a.legend(loc="upper right", fontsize=7, ncol=3)
    a.set_title("Bus (orange: dump load on)", loc="left", fontsize=10)

    a = ax[2]
    stage = s["stage"].astype(int)
    for code, name in enumerate(STAGE_NAMES):
        for x0, x1 in _spans(t, stage == code):
            a.axvspan(x0, x1, color=_STAGE_FILL[name], lw=0)
    a.plot(t, s["batt_v"], color="#000000", lw=0.8, label="battery V")
    a.plot(t, s["ceiling_v"], color="#d62728", lw=0.8, ls="--", label="stage ceiling V")
    a.set_ylabel("V")
    a2 = a.twinx()
    a2.plot(t, s["batt_a"], color="#1f77b4", lw=0.7, label="battery A")
    a2.axhline(p.chg_limit_ma / 1000, color="#1f77b4", ls=":", lw=0.8, label="current limit")
    a2.set_ylabel("A")
    # current in the lower half of the panel, voltage and ceiling in the upper: no overlap
    top_a = max(float(np.nanmax(s["batt_a"])) if len(t) else 0.0, p.chg_limit_ma / 1000)
    low_a = min(float(np.nanmin(s["batt_a"])) if len(t) else 0.0, 0.0)
    a2.set_ylim(low_a - 0.2, low_a + (top_a - low_a) * 2.1 + 0.2)
    v = s["batt_v"]
    if len(t):
        vmin = float(np.nanmin(v))
        vmax = max(float(np.nanmax(v)), float(np.nanmax(s["ceiling_v"])) if np.isfinite(
            s["ceiling_v"]).any() else 0.0)
        a.set_ylim(vmin - (vmax - vmin) * 1.1 - 0.1, vmax + 0.15)
    handles = [plt.Rectangle((0, 0), 1, 1, color=_STAGE_FILL[n]) for n in STAGE_NAMES]
    leg = a.legend(handles, STAGE_NAMES, loc="lower right", fontsize=7, ncol=5, title="stage",
                   title_fontsize=7)
    a.add_artist(leg)
    _legend(a, a2, loc="center left")
    a.set_title("Battery: voltage, ceiling and current; stages shaded", loc="left", fontsize=10)

    a = ax[3]
    a.plot(t, s["cap_v"], color="#8c564b", lw=0.8, label="bank V")
    a.axhline(p.cap_clamp_mv / 1000, color="#d62728", ls="--", lw=1, label="clamp")
    a.axhline(p.cap_cells * p.cap_cell_rating_mv / 1000, color="#7f7f7f", ls=":", lw=1,
              label="bank rating")
    a.set_ylabel("V")
    a.legend(loc="lower right", fontsize=7, ncol=3)
    a.set_title("Supercap bank", loc="left", fontsize=10)

    a = ax[4]
    a.plot(t, s["usb_vbus_v"], color="#17becf", lw=0.8, label="VBUS")
    a.axhspan(p.vbus_min_mv / 1000, p.vbus_max_mv / 1000, color="#c7e9c0", alpha=0.5, lw=0,
              label="VBUS window")
    for x0, x1 in _spans(t, s["usb_on"] > 0):
        a.axvspan(x0, x1, ymin=0, ymax=0.06, color="#2ca02c", lw=0)
    a.set_ylim(0, 6)
    a.set_ylabel("V")
    a2 = a.twinx()
    a2.plot(t, s["usb_a"], color="#e377c2", lw=0.7, label="USB A")
    a2.set_ylabel("A")
    _legend(a, a2, loc="lower right")
    a.set_title("USB port (green bar: port on)", loc="left", fontsize=10)
    for a in ax[:5]:
        a.set_xlabel("minutes", fontsize=8)
        a.grid(alpha=0.3)

    _energy(ax[5], result.ledger)
    fig.tight_layout(rect=(0, 0, 1, 0.965 if verdict else 0.98))
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=90, format="png")
    plt.close(fig)


def _legend(a, a2, loc="upper right"):
    h1, l1 = a.get_legend_handles_labels()
    h2, l2 = a2.get_legend_handles_labels()
    a.legend(h1 + h2, l1 + l2, loc=loc, fontsize=7, ncol=4)


def _energy(a, led):
    groups = [
        ("stored", [("battery", "batt_stored_j"), ("supercap", "cap_stored_j"),
                    ("bus cap", "buscap_stored_j"), ("rotor", "rotor_stored_j")]),
        ("delivered", [("USB", "usb_out_j"), ("loads", "loads_out_j")]),
        ("lost", [("winding", "loss_winding_j"), ("friction", "loss_friction_j"),
                  ("gear", "loss_gear_j"), ("diodes", "loss_diodes_j"),
                  ("clamp", "loss_clamp_j"), ("converters", "loss_conv_j"),
                  ("dump", "loss_dump_j"), ("bleed", "loss_bleed_j"),
                  ("battery", "loss_batt_j"), ("supercap", "loss_cap_j"),
                  ("bus step", "loss_bus_step_j")]),
    ]
    labels, vals, colors = [], [], []
    palette = {"stored": "#2ca02c", "delivered": "#1f77b4", "lost": "#d62728"}
    for g, items in groups:
        for name, key in items:
            v = led.get(key, 0.0)
            if v is None or (isinstance(v, float) and math.isnan(v)):
                v = 0.0
            labels.append("%s: %s" % (g, name))
            vals.append(v / 1000.0)
            colors.append(palette[g])
    y = np.arange(len(labels))
    a.barh(y, vals, color=colors)
    a.set_yticks(y, labels, fontsize=7)
    a.invert_yaxis()
    a.set_xlabel("kJ")
    a.set_title("Where the energy went: in %.1f kJ, balance error %.3f %%" % (
        led.get("drive_in_j", 0.0) / 1000.0, led.get("balance_error_pct", float("nan"))),
        loc="left", fontsize=10)
    a.grid(alpha=0.3, axis="x")
