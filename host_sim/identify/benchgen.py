# Bench logs written by the plant simulator (host_sim/plant), with measurement noise from a
# seeded generator: the tests check that each identifier recovers the plant's parameters, and
# `python -m host_sim.identify.benchgen` rewrites the example logs in host_sim/data/bench/.
# Demo setting (invented): the parts of the hut_wind scenario, on the bench before they go up
# the mast: its direct-drive machine (50 V/krpm, 0.35 ohm) turned by a lathe, its six-cell
# 100 F supercap bank and the hut's 100 Ah flooded block at about a third of its charge. A step
# of current happens between two rows (where a real one happens), never on a row.
import sys
from pathlib import Path

import numpy as np

from host_sim.fileio import atomic_open
from host_sim.plant.battery import Battery
from host_sim.plant.machine import RPM_PER_RAD_S, Machine
from host_sim.plant.supercap import Bank

BENCH_DIR = Path(__file__).resolve().parents[1] / "data" / "bench"

# plant parameters of the demo parts, in the scenario's field names (docs/scenario.md)
MACHINE = {"ke_v_per_krpm": 50.0, "ra_ohm": 0.35, "la_mh": 3.0, "inertia_kg_m2": 2e-3,
           "viscous_nm_per_krpm": 0.05, "coulomb_nm": 0.08}
SUPERCAP = {"present": True, "cells": 6, "cell_f": 100.0, "cap_spread_pct": 3.0, "esr_mohm": 15.0,
            "leak_ua": 30.0, "leak_spread_pct": 30.0, "balance_ohm": 2200.0, "bleeder_ohm": 47.0,
            "v0_per_cell": 2.7}
BATTERY = {"present": True, "chemistry": "flooded", "cells": 6, "capacity_ah": 100.0, "soc0": 0.35,
           "ambient_c": 25.0, "temp0_c": 25.0, "r0_mohm_ah": 250.0, "rp_base_ohm_ah": 3.0,
           "rp_full_ohm_ah": 1.5, "rp_dis_ohm_ah": 2.0, "cp_f_per_ah": 15.0,
           "gas_i0_ma_per_ah": 6.0, "gas_onset_v_per_cell": 2.40, "gas_slope_mv": 40.0,
           "gas_doubling_c": 10.0, "heat_j_per_k_ah": 300.0, "thermal_k_per_w": 2.0}
PERIOD_S = 0.05  # the plant's per-period refresh, as in a closed-loop run


def write_csv(path, header, cols, fmt):
    """Columns (equal-length arrays) as CSV, written whole."""
    with atomic_open(path) as f:
        f.write(",".join(header) + "\n")
        for row in zip(*cols):
            f.write(",".join(fm % x for fm, x in zip(fmt, row)) + "\n")


def machine_log(rng, doc=MACHINE, speeds_rpm=(150, 250, 350, 450), loads_ohm=(None, 20, 10, 5),
                noise_v=0.02, noise_a=0.005, noise_rpm=2.0, drop_v=0.0):
    """Steady-state rows: each speed on open circuit (None) and into each load resistor.
    drop_v: a constant brush/diode drop the meter sees while current flows (the plant has none:
    its R_a includes the brushes). Returns (rpm, v_term, i_a) with noise."""
    m = Machine.from_doc(doc)
    rows = []
    for rpm in speeds_rpm:
        w = rpm / RPM_PER_RAD_S
        for r in loads_ohm:
            if r is None:
                i, v = 0.0, m.emf(w)
            elif drop_v == 0.0:
                i, v = m.into_resistor(w, r)[:2]
            else:
                e = m.emf(w) - drop_v
                i = e / (m.ra + r)
                v = i * r
            rows.append((rpm + rng.normal(0, noise_rpm), v + rng.normal(0, noise_v),
                         i + (rng.normal(0, noise_a) if i else 0.0)))
    return tuple(np.array(c) for c in zip(*rows))


def supercap_log(rng, doc=SUPERCAP, rating_v=2.7, i_a=5.0, rest_s=5.0, dt_s=0.1,
                 end_frac=0.3, noise_v=0.002, noise_a=0.002, lead_s=None):
    """A held bank discharged at constant current i_a (logged + into the bank, as the plant
    has it: negative while discharging). The current switches on lead_s (default half a row)
    before the row at rest_s. Returns (bank, t_s, v, i_a, cells [n x rows])."""
    bank = Bank(doc, rng, rating_v)
    esr_cell = doc["esr_mohm"] / 1000.0
    t_on = rest_s - (dt_s / 2 if lead_s is None else lead_s)
    t, v, cur, cells = [], [], [], []
    k = 0
    u_r = bank.v_sum
    n_sub = int(round(dt_s / PERIOD_S))
    while True:
        t_s = k * dt_s
        i = -i_a if t_s >= t_on else 0.0
        # the reading at this row: voltage behind the ESR plus the drop of this row's current
        t.append(t_s)
        cur.append(i + rng.normal(0, noise_a))
        v.append(bank.v_sum + i * bank.esr + rng.normal(0, noise_v))
        cells.append([c + i * esr_cell + rng.normal(0, noise_v) for c in bank.v])
        if bank.v_sum < end_frac * u_r:
            break
        for j in range(n_sub):
            tm = t_s + (j + 0.5) * PERIOD_S
            bank.substep(-i_a if tm >= t_on else 0.0, PERIOD_S)
            bank.end_period(PERIOD_S, 0)
        k += 1
    return bank, np.array(t), np.array(v), np.array(cur), np.array(cells).T


def battery_log(rng, doc=BATTERY, steps=((0.0, 0.0), (59.75, -10.0)), end_s=360.0, dt_s=0.5,
                noise_v=0.001, noise_a=0.005):
    """A battery through current steps [(t_s, i_a), ...] (+ into the battery); a step at a time
    between rows shows first at the next row. Returns (battery, truth, t_s, v, i_a); truth holds
    the plant's R_0, R_p and tau just after the last step and its state of charge at the
    start."""
    b = Battery(doc)
    truth = {"soc0": b.soc}

    def current(ts):
        return [x for t0, x in steps if t0 <= ts + 1e-9][-1]
    t, v, cur = [], [], []
    n = int(round(end_s / dt_s))
    n_sub = int(round(dt_s / PERIOD_S))
    for k in range(n + 1):
        t_s = k * dt_s
        i = current(t_s)
        t.append(t_s)
        cur.append(i + rng.normal(0, noise_a))
        v.append(b.terminal_v(i) + rng.normal(0, noise_v))
        for j in range(n_sub):
            b.substep(current(t_s + (j + 0.5) * PERIOD_S), PERIOD_S)
            b.end_period(PERIOD_S)
        if "r0_ohm" not in truth and t_s >= steps[-1][0] + 5 * dt_s:
            truth.update(r0_ohm=b.r0, rp_ohm=b.rp, tau_s=b.rp * b.cp)  # branch on its sign
    return b, truth, np.array(t), np.array(v), np.array(cur)


def write_examples(folder=BENCH_DIR, seed=2024):
    """The three example logs of docs/identify.md."""
    folder = Path(folder)
    rng = np.random.default_rng(seed)
    rpm, v, i = machine_log(rng)
    write_csv(folder / "machine.csv", ("rpm", "v_term", "i_a"), (rpm, v, i),
              ("%.1f", "%.3f", "%.3f"))
    _, t, v, i, cells = supercap_log(rng)
    write_csv(folder / "supercap.csv", ("t_s", "v", "i_a") + tuple(
        "cell%d" % (k + 1) for k in range(len(cells))), (t, v, i) + tuple(cells),
        ("%.2f", "%.4f", "%.4f") + ("%.4f",) * len(cells))
    _, _, t, v, i = battery_log(rng)
    write_csv(folder / "battery.csv", ("t_s", "v", "i_a"), (t, v, i), ("%.2f", "%.4f", "%.3f"))
    return [folder / n for n in ("machine.csv", "supercap.csv", "battery.csv")]


if __name__ == "__main__":
    for p in write_examples(sys.argv[1] if len(sys.argv) > 1 else BENCH_DIR):
        print(p)
