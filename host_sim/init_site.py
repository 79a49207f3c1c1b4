# `spinrail init SITE.json`: a starter site from a few answers. It writes the scenario (the
# world around the controller) and, beside it, SITE.profile.json (the controller's profile: the
# same file the board is flashed with), so the two always match. Answers come as flags or, on a
# terminal, as questions; without a terminal the defaults are used and said on stderr.
#
# The defaults per drive are the built-in rigs' (host_sim/scenarios: demo for pedal,
# crank_relief for crank, hut_wind for wind; hydro is ours, invented settings). The site is then
# checked with the simulator's own derived bounds before it is written:
#   - the machine can charge the battery at the drive's working speed (identify/site.py
#     charge_headroom); the gear (or K_e, when it is to be measured later) is chosen so the EMF
#     per drive turn is the reference rig's;
#   - the full dump load holds the drive with the bus at its limit (envelope.py: dump_hold,
#     wind_hold; hydro: sizing.flow_hold): else the next smaller E12 dump resistor;
#   - a person's torque rise stays inside what a once-per-period controller holds
#     (envelope.rise_hold): else the torque limit is capped.
# `spinrail init --board FILE` writes a board file from a chip and a pin list, validated by the
# same checker as the shipped boards (boards/board.py).
import copy
import json
import math
import os
import sys
from pathlib import Path

from controller.profile_fields import CHEMISTRIES, SCHEMES
from host_sim import envelope, sizing
from host_sim.common import ROOT, caution
from host_sim.errors import UserError
from host_sim.fileio import write_json

DRIVE_KINDS = ("pedal", "crank", "wind", "hydro")
BLOCK_CELLS = (3, 6, 12)
E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)  # IEC 60063 E12 series

# reference rigs: the drive, machine, gear and bus of a built-in scenario (or ours for hydro),
# the battery the site defaults to, and the profile's control section
RIGS = {
    "pedal": {  # host_sim/scenarios/demo.json
        "drive": {"kind": "pedal", "cadence_rpm": 70, "torque_max_nm": 35, "power_start_w": 140,
                  "power_sustained_w": 75, "fatigue_tau_s": 400, "recovery_tau_s": 120,
                  "inertia_kg_m2": 2.5},
        "machine": {"ke_v_per_krpm": 18, "ra_ohm": 0.5, "la_mh": 1.2, "inertia_kg_m2": 0.0003,
                    "viscous_nm_per_krpm": 0.01, "coulomb_nm": 0.03},
        "gear": {"ratio": 16, "efficiency": 0.93},
        "bus": {"dump_ohm": 4.7},
        "battery": ("agm", 12.0),
        "control": {"mppt": False},
    },
    "crank": {  # host_sim/scenarios/crank_relief.json
        "drive": {"kind": "crank", "cadence_rpm": 60, "torque_max_nm": 15, "power_start_w": 70,
                  "power_sustained_w": 45, "fatigue_tau_s": 150, "recovery_tau_s": 60,
                  "inertia_kg_m2": 0.05},
        "machine": {"ke_v_per_krpm": 18, "ra_ohm": 0.6, "la_mh": 1.0, "inertia_kg_m2": 0.00015,
                    "viscous_nm_per_krpm": 0.008, "coulomb_nm": 0.02},
        "gear": {"ratio": 18, "efficiency": 0.9},
        "bus": {"dump_ohm": 4.7},
        "battery": ("agm", 12.0),
        "control": {"mppt": False},
    },
    "wind": {  # host_sim/scenarios/hut_wind.json, at sea-level air
        "drive": {"kind": "wind", "rotor_radius_m": 0.9, "cp_max": 0.4, "tsr_opt": 6.0,
                  "runaway_ratio": 1.6, "air_density": 1.2, "wind_mean_ms": 6.0,
                  "turbulence_pct": 15, "turbulence_tau_s": 8, "inertia_kg_m2": 0.6},
        "machine": {"ke_v_per_krpm": 50, "ra_ohm": 0.35, "la_mh": 3.0, "inertia_kg_m2": 0.002,
                    "viscous_nm_per_krpm": 0.05, "coulomb_nm": 0.08},
        "gear": {"ratio": 1, "efficiency": 1.0},
        "bus": {"capacitance_uf": 2200, "dump_ohm": 0.4},
        "battery": ("flooded", 100.0),
        "control": {"mppt": True, "mppt_step_v": 0.25, "mppt_interval_ms": 500,
                    "overspeed_bus_v": 22.0},
    },
    "hydro": {  # ours (invented settings): 5 m head, 5 l/s, a direct-drive machine
        "drive": {"kind": "hydro", "head_m": 5, "flow_lps": 5, "efficiency": 0.6,
                  "runaway_rpm": 800, "inertia_kg_m2": 0.05},
        "machine": {"ke_v_per_krpm": 45, "ra_ohm": 0.5, "la_mh": 2.0, "inertia_kg_m2": 0.001,
                    "viscous_nm_per_krpm": 0.03, "coulomb_nm": 0.05},
        "gear": {"ratio": 1, "efficiency": 1.0},
        "bus": {"capacitance_uf": 2200, "dump_ohm": 4.7},
        "battery": ("flooded", 40.0),
        "control": {"mppt": True, "mppt_step_v": 0.25, "mppt_interval_ms": 500,
                    "overspeed_bus_v": 22.0},
    },
}
GEARED_EFFICIENCY = 0.95  # a direct-drive rig given a gear (the schema's default)
CLAMP_KNEE_V = 26.0  # the schema's bus.clamp_knee_v and clamp_margin_v for a 12 V system
CLAMP_MARGIN_V = 4.0
# where the working EMF sits from the battery's need (0) to the soft zone's bottom (1): ours,
# chosen by running every drive x chemistry x cell count (tests/test_init_size.py); the
# reference rigs sit at 0.55-0.9, where the loaded bus reached the soft zone on 24 V and
# small-battery sites and the dump took what a store could have
EMF_PLACE = 0.2


def _num(flag, lo, hi, unit, why="", integer=False):
    def parse(text):
        try:
            v = int(text) if integer else float(text)
        except (TypeError, ValueError):
            raise UserError("%s = %s: allowed %s %g to %g %s%s" % (
                flag, text, "a whole number from" if integer else "a number from", lo, hi, unit,
                " (%s)" % why if why else ""))
        if not (lo <= v <= hi) or (isinstance(v, float) and not math.isfinite(v)):
            raise UserError("%s = %s: allowed %g to %g %s%s" % (flag, text, lo, hi, unit,
                                                               " (%s)" % why if why else ""))
        return v
    return parse


def _choice(flag, choices, conv=str):
    def parse(text):
        for c in choices:
            if str(c) == str(text).strip():
                return conv(c)
        raise UserError("%s = %s: allowed one of %s" % (flag, text, ", ".join(map(str, choices))))
    return parse


def _machine_value(flag, lo, hi, unit):
    num = _num(flag, lo, hi, unit, "the scenario's machine range")

    def parse(text):
        if str(text).strip().lower() == "later":
            return None
        return num(text)
    return parse


# (dest, flag, question, parser); the default of each depends on the answers before it
QUESTIONS = (
    ("drive", "--drive", "what turns the generator", _choice("--drive", DRIVE_KINDS)),
    ("battery", "--battery", "battery chemistry", _choice("--battery", CHEMISTRIES)),
    ("capacity_ah", "--capacity-ah", "battery capacity, Ah (20 h rating)",
     _num("--capacity-ah", 1, 1000, "Ah", "the profile's battery.capacity_ah range")),
    ("cells", "--cells", "battery cells in series (3: 6 V, 6: 12 V, 12: 24 V)",
     _choice("--cells", BLOCK_CELLS, int)),
    ("cap_cells", "--cap-cells", "supercap cells in series",
     _num("--cap-cells", 1, 16, "cells", "the profile's supercap.cells range", integer=True)),
    ("cap_f", "--cap-f", "supercap cell capacitance, F",
     _num("--cap-f", 0.1, 10000, "F", "the scenario's supercap.cell_f range, within reason")),
    ("cap_rating_v", "--cap-rating-v", "supercap cell rating, V (maker's data)",
     _num("--cap-rating-v", 2.3, 3.0, "V", "the profile's supercap.cell_rating_v range")),
    ("ke", "--ke-v-per-krpm", "machine K_e, V/krpm ('later' to measure it)",
     _machine_value("--ke-v-per-krpm", 0.5, 500, "V/krpm")),
    ("ra", "--ra-ohm", "machine armature resistance, ohm ('later' to measure it)",
     _machine_value("--ra-ohm", 0.005, 100, "ohm")),
    ("gear", "--gear-ratio", "gear ratio, machine turns per drive turn ('auto' to choose)",
     None),
    ("usb", "--usb-scheme", "USB data-line scheme", _choice("--usb-scheme", SCHEMES)),
    ("period_ms", "--period-ms", "control period, ms",
     _num("--period-ms", 5, 1000, "ms", "the profile's control.period_ms range", integer=True)),
    ("duration_s", "--duration-s", "simulated time, s",
     _num("--duration-s", 10, 604800, "s", "long enough to charge, at most a week")),
)

_gear_num = _num("--gear-ratio", 0.05, 200, "", "the scenario's gear.ratio range")


def _parse_gear(text):
    if str(text).strip().lower() == "auto":
        return None
    return _gear_num(text)


def default_for(dest, a):
    """The default answer to a question given the answers so far (dict a)."""
    rig = RIGS[a.get("drive") or "pedal"]
    k = 2 if a.get("cells", 6) > 6 else 1
    return {
        "drive": "pedal", "battery": rig["battery"][0], "capacity_ah": rig["battery"][1],
        "cells": 6, "cap_cells": 6 * k, "cap_f": 50.0, "cap_rating_v": 2.7, "ke": None,
        "ra": None, "gear": None, "usb": "dcp", "period_ms": 50, "duration_s": 600.0,
    }[dest]


def _show(v, dest=""):
    if v is None:
        return "auto" if dest == "gear" else "later"
    return "%g" % v if isinstance(v, float) else str(v)


def gather(args, stdin=None, stderr=None):
    """The answers (a dict) from the flags, asking on a terminal for those not given."""
    stdin = stdin or sys.stdin
    stderr = stderr or sys.stderr
    tty = stdin.isatty()
    if getattr(args, "machine_later", False):
        args.ke = args.ra = "later"
    a = {}
    defaulted = []
    for dest, flag, question, parse in QUESTIONS:
        parse = parse or _parse_gear
        given = getattr(args, dest)
        if given is not None:
            a[dest] = parse(given)
            continue
        dflt = default_for(dest, a)
        if not tty:
            a[dest] = dflt
            defaulted.append("%s %s" % (flag, _show(dflt, dest)))
            continue
        while True:
            stderr.write("%s [%s]: " % (question, _show(dflt, dest)))
            stderr.flush()
            line = stdin.readline()
            if not line:  # end of input: take the default
                a[dest] = dflt
                break
            line = line.strip()
            if not line:
                a[dest] = dflt
                break
            try:
                a[dest] = parse(line)
                break
            except UserError as e:
                stderr.write("  %s\n" % e)
    if defaulted:
        print("spinrail: stdin is not a terminal, so nothing was asked; defaults used: %s"
              % ", ".join(defaulted), file=stderr)
    if (a["ke"] is None) != (a["ra"] is None):
        raise UserError("--ke-v-per-krpm and --ra-ohm: give both (a measured machine) or "
                        "neither ('later': spinrail identify machine fills them in)")
    return a


# ---- building the site -----------------------------------------------------------------------

def build_profile(a, name):
    """The controller profile for the answers: the shipped default made into this block
    (scenario_gen.block_profile), then the bank, the USB scheme and the control period."""
    from host_sim.scenario_gen import block_profile
    from controller import profile as _profile
    with open(_profile.default_path()) as f:
        base = json.load(f)
    base["control"] = dict(base.get("control", {}), **RIGS[a["drive"]]["control"])
    prof, k = block_profile(base, a["cells"], a["battery"], a["capacity_ah"])
    prof["name"] = "%s: %d-cell %s %g Ah, %d-cell supercap, %s drive (spinrail init)" % (
        name, a["cells"], a["battery"], a["capacity_ah"], a["cap_cells"], a["drive"])
    prof["notes"] = ("Written by spinrail init: starting points only. Follow the battery and "
                     "supercap makers' data, local codes and licensed practice. Every field: "
                     "docs/profile.md.")
    sc = prof["supercap"]
    sc["cells"] = a["cap_cells"]
    sc["cell_rating_v"] = a["cap_rating_v"]
    clamp_v = a["cap_cells"] * a["cap_rating_v"] * (1 - sc.get("clamp_derate_pct", 10) / 100.0)
    # the bank charges from the bus through a buck: its clamp must sit under the soft zone
    room_v = prof["bus"]["ovp_recover_v"] - 2.0
    if clamp_v > room_v:
        most = int(room_v / (a["cap_rating_v"] * (1 - sc.get("clamp_derate_pct", 10) / 100.0)))
        raise UserError("--cap-cells = %d: allowed 1 to %d cells for a %g V system with %g V "
                        "cells (the bank's clamp %.1f V must stay 2 V under the bus recovery "
                        "level %g V: it charges from the bus through a buck)" % (
                            a["cap_cells"], most, 12 * k, a["cap_rating_v"], clamp_v,
                            prof["bus"]["ovp_recover_v"]))
    sens = prof["sensors"]
    if sens["cap_full_scale_v"] < 1.1 * clamp_v:  # the profile wants the range above the clamp
        sens["cap_full_scale_v"] = float(min(60, math.ceil(1.15 * clamp_v)))
    prof["usb"]["scheme"] = a["usb"]
    prof["control"]["period_ms"] = a["period_ms"]
    return prof, k


def build_scenario(a, name, profile_ref, k):
    rig = copy.deepcopy(RIGS[a["drive"]])
    later = a["ke"] is None
    mach = rig["machine"]
    emf_per_turn = mach["ke_v_per_krpm"] * rig["gear"]["ratio"] * k  # V/krpm at the drive
    gear = rig["gear"]
    if later:
        if a["gear"] is not None:
            mach["ke_v_per_krpm"] = round(emf_per_turn / a["gear"], 3)
            gear["ratio"] = a["gear"]
        else:
            mach["ke_v_per_krpm"] = round(mach["ke_v_per_krpm"] * k, 3)
    else:
        mach["ke_v_per_krpm"] = a["ke"]
        mach["ra_ohm"] = a["ra"]
        gear["ratio"] = a["gear"] if a["gear"] is not None else round(
            min(200.0, max(0.05, emf_per_turn / a["ke"])), 2)
    if gear["ratio"] != RIGS[a["drive"]]["gear"]["ratio"] and gear["efficiency"] == 1.0:
        gear["efficiency"] = GEARED_EFFICIENCY
    bus = dict(rig["bus"], clamp_knee_v=CLAMP_KNEE_V * k, clamp_margin_v=CLAMP_MARGIN_V * k)
    return {
        "name": name,
        "description": "",
        "duration_s": a["duration_s"],
        "seed": 1,
        "profile": profile_ref,
        "drive": rig["drive"],
        "machine": mach,
        "gear": gear,
        "bus": bus,
        "battery": {"soc0": 0.5, "ambient_c": 20},
        "supercap": {"cell_f": a["cap_f"], "v0_per_cell": 0.0},
        "usb": {"devices": [{"name": "phone", "arrive_s": 10, "battery_wh": 12, "soc0": 0.3,
                             "max_a": 2.0}]},
    }


def describe(a, doc, profile_ref):
    """The scenario's description: what the site is, and whether the machine is measured."""
    mach = doc["machine"]
    what = {"pedal": "a pedal charging point", "crank": "a hand-crank kit",
            "wind": "a micro-wind mast", "hydro": "a micro-hydro run"}[a["drive"]]
    desc = ("Starter site written by spinrail init: %s, a %d-cell %s %g Ah battery, a %d-cell "
            "%g F supercap bank, one phone on the USB port (scheme %s). The controller's "
            "profile is %s. " % (what, a["cells"], a["battery"], a["capacity_ah"],
                                 a["cap_cells"], a["cap_f"], a["usb"], profile_ref))
    if a["ke"] is None:
        desc += ("MACHINE NOT MEASURED: K_e %g V/krpm and R_a %g ohm are placeholders for this "
                 "drive; measure yours with `spinrail identify machine LOG.csv --write %s`. "
                 % (mach["ke_v_per_krpm"], mach["ra_ohm"], doc["name"] + ".json"))
    return desc + "Every field: docs/scenario.md; what to buy: spinrail size."


def _load(doc, path, prof_doc):
    from host_sim.scenario import ScenarioError, load_doc
    d = dict(doc, profile=prof_doc)
    try:
        return load_doc(d, src=str(path))
    except ScenarioError as e:
        raise UserError("not written: %s" % e)


def _smaller_dump(ohm):
    """The next E12 value below ohm, or None under 0.1 ohm (the schema's smallest)."""
    vals = sorted({round(m * 10 ** e, 3) for e in range(-1, 4) for m in E12})
    below = [v for v in vals if v < ohm - 1e-9 and v >= 0.1]
    return below[-1] if below else None


def fit(doc, path, prof_doc, a):
    """Check the site against the derived bounds and adjust what is ours to choose. Returns
    (scenario, notes): notes say what was changed and why."""
    from host_sim.identify.site import charge_headroom, charge_warning
    notes = []
    sc = _load(doc, path, prof_doc)
    h = charge_headroom(sc.doc)
    kind = doc["drive"]["kind"]
    if a["gear"] is None and h is not None:
        # place the working EMF between what the battery needs and the soft zone's bottom, so
        # the loaded bus neither starves the battery nor sits in the dump's soft zone
        recover_v = prof_doc["bus"]["ovp_recover_v"]
        scale = (h["need_v"] + EMF_PLACE * (recover_v - h["need_v"])) / h["emf_working_v"]
        if a["ke"] is None and kind not in envelope.HUMAN_DRIVES:  # direct drive: the machine
            doc["machine"]["ke_v_per_krpm"] = round(doc["machine"]["ke_v_per_krpm"] * scale, 2)
        else:
            doc["gear"]["ratio"] = round(doc["gear"]["ratio"] * scale, 2)
        sc = _load(doc, path, prof_doc)
        h = charge_headroom(sc.doc)
    if h is not None and not h["charges_at_working"]:
        ratio = doc["gear"]["ratio"] * h["need_v"] * 1.15 / max(h["emf_working_v"], 1e-9)
        raise UserError("--ke-v-per-krpm %g with --gear-ratio %g: %s. A gear of about %.2f "
                        "(or 'auto') charges it" % (doc["machine"]["ke_v_per_krpm"],
                                                    doc["gear"]["ratio"], charge_warning(h),
                                                    ratio))
    for _ in range(60):
        held, what = sizing.drive_held(sc)
        if held:
            break
        smaller = _smaller_dump(doc["bus"]["dump_ohm"])
        if smaller is None:
            raise UserError("%s: no dump resistor down to 0.1 ohm holds this drive (%s); choose "
                            "a smaller gear ratio or K_e" % (path, what))
        notes.append("dump resistor %g -> %g ohm (%s)" % (doc["bus"]["dump_ohm"], smaller, what))
        doc["bus"]["dump_ohm"] = smaller
        sc = _load(doc, path, prof_doc)
    if doc["drive"]["kind"] in envelope.HUMAN_DRIVES:
        r = envelope.scenario_rise(sc)
        if not r["inside"]:
            cap = math.floor(r["torque_cap_nm"] * 100.0) / 100.0
            if cap < 0.5:
                raise UserError("--period-ms = %d: a person's torque rise is not held by a "
                                "controller acting once per period here (rise %.2f V, room "
                                "%.2f V); choose a shorter period" % (a["period_ms"],
                                                                       r["rise_v"], r["room_v"]))
            notes.append("person's torque limit %g -> %g N m (envelope.rise_hold: a once-per-"
                         "period controller holds the rise)" % (doc["drive"]["torque_max_nm"],
                                                                cap))
            doc["drive"]["torque_max_nm"] = cap
            sc = _load(doc, path, prof_doc)
    return sc, notes


def profile_path_for(site):
    p = Path(site)
    stem = p.name[:-5] if p.name.endswith(".json") else p.name
    return p.with_name(stem + ".profile.json"), stem


def init_site(args):
    site = Path(args.site)
    prof_path, stem = profile_path_for(site)
    if not args.force:
        for p in (site, prof_path):
            if p.exists():
                raise UserError("%s: exists; not overwritten (--force replaces it)" % p)
    a = gather(args)
    prof_doc, k = build_profile(a, stem)
    from controller import profile as _profile
    from controller.compat import ConfigError
    try:
        _profile.from_dict(copy.deepcopy(prof_doc))
    except ConfigError as e:
        raise UserError("not written: the profile for these answers fails the controller's "
                        "checks: %s" % e)
    doc = build_scenario(a, stem, prof_path.name, k)
    sc, notes = fit(doc, site, prof_doc, a)
    doc["description"] = describe(a, doc, prof_path.name)
    for p in (site, prof_path):
        try:
            os.makedirs(p.parent if str(p.parent) else ".", exist_ok=True)
        except OSError as e:
            raise UserError("%s: cannot create the folder (%s)" % (p.parent, e))
    try:
        write_json(prof_path, prof_doc)
        write_json(site, doc)
    except OSError as e:
        raise UserError("%s: cannot write (%s)" % (site, e.strerror or e))
    print("wrote %s and %s (%s drive, %d-cell %s %g Ah, %d-cell %g F bank, %d ms period)" % (
        site, prof_path, a["drive"], a["cells"], a["battery"], a["capacity_ah"], a["cap_cells"],
        a["cap_f"], a["period_ms"]))
    for n in notes:
        print("  chosen: " + n)
    if a["ke"] is None:
        print("  the machine is not measured: K_e %g V/krpm, R_a %g ohm are placeholders; "
              "measure it and run `spinrail identify machine LOG.csv --write %s`"
              % (doc["machine"]["ke_v_per_krpm"], doc["machine"]["ra_ohm"], site))
    print("  next: spinrail simulate %s --out OUT; spinrail size %s" % (site, site))
    return 0


# ---- board files -----------------------------------------------------------------------------
TEMPLATES = {"rp2040": "rp2040_pico", "esp32": "esp32_devkit"}


def _parse_pins(text):
    """'bus_mv=GP26,src_ma=mux:0,...' -> {field: pin text or ('mux', n)}."""
    out = {}
    for item in filter(None, (s.strip() for s in text.split(","))):
        if "=" not in item:
            raise UserError("--pins: %r: allowed FIELD=PIN or FIELD=mux:N, comma separated"
                            % item)
        k, v = (s.strip() for s in item.split("=", 1))
        if v.startswith("mux:"):
            try:
                out[k] = ("mux", int(v[4:]))
            except ValueError:
                raise UserError("--pins: %s = %s: allowed mux:0 to mux:7" % (k, v))
        else:
            out[k] = v
    return out


def init_board(args):
    from boards import board
    from controller.compat import ConfigError
    path = Path(args.board)
    if path.exists() and not args.force:
        raise UserError("%s: exists; not overwritten (--force replaces it)" % path)
    chip = args.chip or "rp2040"
    if chip not in TEMPLATES:
        raise UserError("--chip = %s: allowed one of %s" % (chip, ", ".join(sorted(TEMPLATES))))
    with open(board.BOARDS_DIR / (TEMPLATES[chip] + ".json")) as f:
        doc = json.load(f)
    stem = path.name[:-5] if path.name.endswith(".json") else path.name
    doc["name"] = args.board_name or stem[:16]
    doc["description"] = ("Board written by spinrail init from the %s template (%s) with the "
                          "pins given." % (chip, TEMPLATES[chip]))
    doc["notes"] = ("Scaling (dividers, current sensors, NTC) is the template's: set yours. "
                    "Every field: docs/boards.md.")
    for field, pin in _parse_pins(args.pins or "").items():
        if field in board.INPUTS:
            spec = {k: v for k, v in doc["inputs"][field].items() if k not in ("pin", "mux")}
            spec.update({"mux": pin[1]} if isinstance(pin, tuple) else {"pin": pin})
            doc["inputs"][field] = spec
        elif field in board.PWMS or field in board.ENABLES:
            if isinstance(pin, tuple):
                raise UserError("--pins: %s: an output needs a pin, not a mux channel" % field)
            doc["pwm" if field in board.PWMS else "enables"][field]["pin"] = pin
        elif field == "mux_common":
            doc["adc"]["mux"]["common"] = pin
        elif field.startswith("mux_select"):
            try:
                doc["adc"]["mux"]["select"][int(field[len("mux_select"):])] = pin
            except (ValueError, IndexError):
                raise UserError("--pins: %s: allowed mux_select0 to mux_select2" % field)
        else:
            raise UserError("--pins: %s: allowed fields %s, mux_common, mux_select0-2" % (
                field, ", ".join(board.INPUTS + board.PWMS + board.ENABLES)))
    try:
        board._Checker(copy.deepcopy(doc)).resolve()  # what board.load runs on a file
    except ConfigError as e:
        raise UserError("%s: not written: %s" % (path, e))
    write_json(path, doc)
    print("wrote %s (%s, %d inputs; checked as `spinrail board check` does)" % (
        path, chip, len(doc["inputs"])))
    return 0


def cmd_init(args):
    caution()
    if args.board:
        if args.site:
            raise UserError("init: give SITE.json or --board FILE, not both")
        return init_board(args)
    if not args.site:
        raise UserError("init: SITE.json is required (or --board FILE for a board file)")
    return init_site(args)


def register(sub):
    sp = sub.add_parser(
        "init", help="write a starter site (scenario + matching profile) or a board file",
        description="Write a starter site: SITE.json (a scenario) and SITE.profile.json (the "
                    "controller profile that matches it, the file the board is flashed with). "
                    "Answers come from the flags; on a terminal the missing ones are asked "
                    "(never when stdin is not a terminal: the defaults are used and listed on "
                    "stderr). The site is checked against the simulator's derived bounds "
                    "(charge headroom, dump hold, torque rise) so `spinrail simulate SITE.json` "
                    "holds every limit and raises no service warning. --board FILE writes a "
                    "board file from a chip template and a pin list instead. Exit 2 on a bad "
                    "answer, naming the flag and its range.")
    sp.add_argument("site", nargs="?", metavar="SITE.json", help="the scenario file to write")
    for dest, flag, question, parse in QUESTIONS:
        sp.add_argument(flag, dest=dest, metavar=dest.upper(), help=question)
    sp.add_argument("--machine-later", dest="machine_later", action="store_true",
                    help="the machine is not measured yet (same as --ke-v-per-krpm later "
                         "--ra-ohm later)")
    sp.add_argument("--force", action="store_true", help="replace existing files")
    sp.add_argument("--board", metavar="FILE", help="write a board file instead of a site")
    sp.add_argument("--chip", help="--board: the chip (%s; default rp2040)"
                    % ", ".join(sorted(TEMPLATES)))
    sp.add_argument("--pins", help="--board: FIELD=PIN,... (inputs may be FIELD=mux:N; also "
                    "mux_common, mux_select0-2); fields not named keep the template's pins")
    sp.add_argument("--board-name", help="--board: the board's name (1-16 characters; "
                    "default: the file name)")
    sp.set_defaults(func=cmd_init)
    return sp
