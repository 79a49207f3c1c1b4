# Outside check of the plant's generator path against ngspice (a reference circuit simulator,
# Debian package `ngspice`, run in batch mode): the machine's EMF at a fixed speed behind R_a and
# L_a, a full diode bridge with the plant's own diode curve as a SPICE .model (IS, N, RS), the bus
# capacitor and a resistive bus load. The same circuit runs through our Plant (scripted speed,
# the dump resistor at full duty as the load, no storage, no USB) and the two mean bus voltages
# and mean machine currents are compared. ngspice keeps L_a and every switching instant; the
# plant's averaged solver does not, so the check is on means after the start-up transient.
#
# compare(seconds=...) returns both results and the wall times; the speed bench (issue 5)
# reports ngspice wall time / ours and the mean-bus difference in percent.
import copy
import json
import math
import os
import shutil
import subprocess
import tempfile
import time

from host_sim.plant.diode import Diode
from host_sim.plant.machine import RPM_PER_RAD_S, ke_si

NGSPICE = "/usr/bin/ngspice"


class SpiceError(RuntimeError):
    pass


def ngspice_path():
    """The ngspice executable, or None."""
    if os.path.exists(NGSPICE):
        return NGSPICE
    return shutil.which("ngspice")


def circuit_params(doc, rpm, r_load_ohm, ramp_s=0.0):
    """The shared parameters from a resolved scenario document at a machine speed (rpm);
    ramp_s > 0: the speed rises linearly from 0 over ramp_s, then holds."""
    m = doc["machine"]
    r = doc["rectifier"]
    b = doc["bus"]
    return {
        "emf_v": ke_si(m["ke_v_per_krpm"]) * rpm / RPM_PER_RAD_S,
        "ra_ohm": m["ra_ohm"],
        "la_h": m["la_mh"] / 1000.0,
        "diode": Diode(r["is_a"], r["n"], r["rs_ohm"], r["temp_c"]),
        "c_f": b["capacitance_uf"] * 1e-6,
        "r_load_ohm": r_load_ohm,
        "bleed_ohm": b["bleed_ohm"],
        "ramp_s": ramp_s,
    }


def netlist(prm, seconds, out_path, max_step_s=1e-5):
    d = prm["diode"]
    la = max(prm["la_h"], 1e-9)
    if prm["ramp_s"] > 0:
        src = "VE m1 m2 PWL(0 0 %.9g %.9g)" % (prm["ramp_s"], prm["emf_v"])
    else:
        src = "VE m1 m2 DC %.9g" % prm["emf_v"]
    return "\n".join([
        "* spinrail: generator, bridge, bus capacitor, resistive load",
        ".options TEMP=%.6g TNOM=%.6g" % (d.temp_c, d.temp_c),
        src,
        "RA m1 m3 %.9g" % prm["ra_ohm"],
        "LA m3 ac %.9g IC=0" % la,
        "RFLOAT m2 0 1e9",  # the machine floats; this only gives SPICE a DC path
        "D1 ac busp DBR",
        "D2 m2 busp DBR",
        "D3 0 ac DBR",
        "D4 0 m2 DBR",
        "CBUS busp 0 %.9g IC=0" % prm["c_f"],
        "RLOAD busp 0 %.9g" % prm["r_load_ohm"],
        "RBLEED busp 0 %.9g" % prm["bleed_ohm"],
        d.spice_model("DBR"),
        ".tran %.6g %.6g 0 %.6g UIC" % (max_step_s, seconds, max_step_s),
        ".control",
        "set wr_singlescale",
        "set wr_vecnames",
        "option numdgt=9",
        "run",
        "wrdata %s v(busp) i(VE)" % out_path,
        "quit",
        ".endc",
        ".end",
        "",
    ])


def _time_mean(t, y, t0):
    """Trapezoidal time average of y over t >= t0."""
    acc = 0.0
    span = 0.0
    for k in range(1, len(t)):
        a, b = t[k - 1], t[k]
        if b <= t0:
            continue
        ya, yb = y[k - 1], y[k]
        if a < t0:
            f = (t0 - a) / (b - a)
            ya = ya + (yb - ya) * f
            a = t0
        acc += 0.5 * (ya + yb) * (b - a)
        span += b - a
    return acc / span


def run_ngspice(prm, seconds, settle_s, max_step_s=1e-5):
    exe = ngspice_path()
    if exe is None:
        raise SpiceError("ngspice not found (Debian package ngspice)")
    with tempfile.TemporaryDirectory(prefix="spinrail-spice-") as tmp:
        out = os.path.join(tmp, "out.txt")
        cir = os.path.join(tmp, "gen.cir")
        with open(cir, "w") as f:
            f.write(netlist(prm, seconds, out, max_step_s))
        t0 = time.perf_counter()
        proc = subprocess.run([exe, "-b", cir], capture_output=True, text=True, timeout=600,
                              check=False)
        wall = time.perf_counter() - t0
        if proc.returncode != 0 or not os.path.exists(out):
            raise SpiceError("ngspice failed (exit %s): %s" % (proc.returncode,
                                                               (proc.stderr or proc.stdout)[-800:]))
        t, v, i = [], [], []
        with open(out) as f:
            header = f.readline().split()
            iv = header.index("v(busp)")
            ii = next(k for k, h in enumerate(header) if h.lower().startswith("i(ve"))
            for line in f:
                x = line.split()
                if len(x) < 3:
                    continue
                t.append(float(x[0]))
                v.append(float(x[iv]))
                i.append(-float(x[ii]))  # SPICE: current into the + node; the machine delivers
    return {"bus_v_mean": _time_mean(t, v, settle_s), "src_a_mean": _time_mean(t, i, settle_s),
            "wall_s": wall, "points": len(t)}


def plant_doc(base_doc, rpm, r_load_ohm, seconds, ramp_s=0.0):
    """A scenario document for the same circuit: scripted speed, full dump as the load."""
    d = copy.deepcopy(base_doc)
    d["duration_s"] = seconds
    pts = [[0.0, 0.0], [ramp_s, rpm]] if ramp_s > 0 else [[0.0, rpm]]
    d["drive"] = {"kind": "scripted", "mode": "speed", "points": pts,
                  "inertia_kg_m2": d["drive"].get("inertia_kg_m2", 0.01)}
    d["gear"] = {"ratio": 1.0, "efficiency": 1.0}
    d["bus"] = dict(d["bus"], dump_ohm=r_load_ohm, initial_v=0.0, clamp_knee_v=200.0)
    d["battery"] = dict(d["battery"], present=False)
    d["supercap"] = dict(d["supercap"], present=False)
    d["usb"] = dict(d["usb"], devices=[])
    d["loads"] = []
    d["events"] = []
    return d


def run_plant(sc_doc, profile, seconds, settle_s, source="<spice check>"):
    from controller.signals import DUTY_MAX, Commands
    from host_sim.plant.plant import Plant
    from host_sim.scenario import load_doc

    d = dict(sc_doc)
    d["profile"] = profile
    sc = load_doc(d, source)
    dt = sc.profile.period_ms / 1000.0
    c = Commands()
    c.dump_duty = DUTY_MAX
    t0 = time.perf_counter()
    plant = Plant(sc)
    n = int(round(seconds / dt))
    v_acc = i_acc = 0.0
    k_acc = 0
    for k in range(n):
        plant.step(c, dt)
        if plant.t > settle_s + 1e-9:
            v_acc += plant.v_mean  # the period's time average, like ngspice's below
            i_acc += plant.i_src_mean
            k_acc += 1
    wall = time.perf_counter() - t0
    return {"bus_v_mean": v_acc / k_acc, "src_a_mean": i_acc / k_acc, "wall_s": wall,
            "steps": n}


def compare(seconds=1.0, scenario="demo", rpm=None, r_load_ohm=10.0, settle_s=None,
            ramp_s=0.0, max_step_s=1e-5):
    """Run the generator-bridge-bus-load circuit through ngspice and through our Plant.

    rpm: machine speed (default: the scenario drive's working speed, cadence x gear, or
    1000 rpm); ramp_s > 0 ramps the speed up from 0 first (a transient check). Returns
    {"ours": {...}, "ngspice": {...}, "bus_diff_pct", "src_diff_pct", "wall_ratio", "params"};
    means are taken after settle_s (default 20 % of the run at a fixed speed, 0 with a ramp)."""
    from host_sim.scenario import load_scenario

    sc = load_scenario(scenario)
    if rpm is None:
        dr = sc.doc["drive"]
        rpm = dr.get("cadence_rpm", 1000.0 / sc.doc["gear"]["ratio"]) * sc.doc["gear"]["ratio"]
    if settle_s is None:
        settle_s = 0.0 if ramp_s > 0 else 0.2 * seconds
    prm = circuit_params(sc.doc, rpm, r_load_ohm, ramp_s)
    ours = run_plant(plant_doc(sc.doc, rpm, r_load_ohm, seconds, ramp_s), sc.profile_doc,
                     seconds, settle_s)
    ref = run_ngspice(prm, seconds, settle_s, max_step_s)
    return {
        "ours": ours,
        "ngspice": ref,
        "bus_diff_pct": 100.0 * (ours["bus_v_mean"] - ref["bus_v_mean"]) / ref["bus_v_mean"],
        "src_diff_pct": 100.0 * (ours["src_a_mean"] - ref["src_a_mean"]) / ref["src_a_mean"],
        "wall_ratio": ref["wall_s"] / ours["wall_s"] if ours["wall_s"] > 0 else math.inf,
        "params": {"rpm": rpm, "emf_v": prm["emf_v"], "ra_ohm": prm["ra_ohm"],
                   "la_h": prm["la_h"], "c_f": prm["c_f"], "r_load_ohm": r_load_ohm,
                   "diode_model": prm["diode"].spice_model("DBR"), "seconds": seconds,
                   "ramp_s": ramp_s},
    }


if __name__ == "__main__":  # python -m host_sim.spice [seconds]
    import sys

    print(json.dumps(compare(float(sys.argv[1]) if len(sys.argv) > 1 else 1.0), indent=2))
