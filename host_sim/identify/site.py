# What `--write` does to a scenario: merge a section, validate the whole merged scenario with the
# scenario's own loader (so nothing the schema rejects is ever written), list each field it
# changed (old -> new), and check that the machine written can still charge the site's battery.
import math
import os

from host_sim.errors import UserError
from host_sim.fileio import load_json, write_json

# a stand-in drive for a fragment file that holds no drive (the scenario needs one to validate)
_STANDIN_DRIVE = {"kind": "scripted", "points": [[0, 0]]}
_CHARGE_A = 0.1  # the bridge drop is taken at a small charging current (the threshold case)


def drive_speeds_rpm(drive):
    """(working, top) speed of the drive shaft in rpm from the scenario's drive section
    (docs/scenario.md, drive sections): pedal/crank aim at cadence_rpm and give no torque above
    1.15 x cadence; wind turns at tip-speed ratio tsr_opt at the mean wind (the best-power
    speed) and at most runaway_ratio x that unloaded; hydro has its best power at half of
    runaway_rpm and runs away at runaway_rpm; scripted speed points give their largest value.
    None for a scripted torque drive (its speed is not set by the drive alone)."""
    k = drive["kind"]
    if k in ("pedal", "crank"):
        return drive["cadence_rpm"], 1.15 * drive["cadence_rpm"]
    if k == "wind":
        w = drive["tsr_opt"] * drive["wind_mean_ms"] / drive["rotor_radius_m"]  # rad/s
        rpm = w * 60 / (2 * math.pi)
        return rpm, drive["runaway_ratio"] * rpm
    if k == "hydro":
        return drive["runaway_rpm"] / 2, drive["runaway_rpm"]
    if k == "scripted" and drive.get("mode", "speed") == "speed":
        top = max(abs(v) for _, v in drive["points"])
        return top, top
    return None


def charge_headroom(doc):
    """Whether the machine can charge the battery through the battery buck, from a resolved
    scenario (host_sim.scenario Scenario.doc). A buck's output is at most max_duty x V_bus, and
    the bus is the machine's EMF E = K_e n (n the machine's rpm = drive rpm x gear ratio) less
    the two conducting bridge diodes (their SPICE curve at 0.1 A). Charging needs
        E - 2 V_F >= V_batt / max_duty,   V_batt = the block's open-circuit voltage at soc0
    (the plant's OCV curve, per cell). Returns None when the drive sets no speed or there is no
    battery, else a dict with the EMF and the need at the working and the top speed, in V."""
    from host_sim.plant.battery import ocv_block
    from host_sim.plant.diode import Diode
    b = doc["battery"]
    speeds = drive_speeds_rpm(doc["drive"])
    if speeds is None or not b.get("present", True):
        return None
    ratio = doc["gear"]["ratio"]
    ke = doc["machine"]["ke_v_per_krpm"]
    bridge = Diode.from_doc(doc["rectifier"]).bridge_drop(_CHARGE_A)
    v_batt = ocv_block(b["soc0"]) * b["cells"] / 6.0
    need = v_batt / doc["converters"]["batt"]["max_duty"] + bridge
    work, top = (ke * s * ratio / 1000.0 for s in speeds)
    return {"emf_working_v": round(work, 3), "emf_top_v": round(top, 3),
            "machine_rpm_working": round(speeds[0] * ratio, 1),
            "machine_rpm_top": round(speeds[1] * ratio, 1), "bridge_v": round(bridge, 3),
            "battery_ocv_v": round(v_batt, 3), "need_v": round(need, 3),
            "charges_at_working": work >= need, "charges_at_top": top >= need}


def charge_warning(h):
    """The warning text for a headroom dict, or None when the working speed clears the need."""
    if h is None or h["charges_at_working"]:
        return None
    if h["charges_at_top"]:
        tail = ("it charges only above the working speed, near its top of %.0f rpm (EMF %.2f V), "
                "off the drive's best point" % (h["machine_rpm_top"], h["emf_top_v"]))
    else:
        tail = ("even unloaded at the drive's top speed (%.0f machine rpm, EMF %.2f V) it does "
                "not: this site cannot charge its battery" % (h["machine_rpm_top"], h["emf_top_v"]))
    return ("the machine cannot charge the battery at the drive's working speed: EMF %.2f V at "
            "%.0f machine rpm, but the battery buck needs %.2f V (battery %.2f V / max_duty, plus "
            "%.2f V for two bridge diodes); %s. Check K_e and the gear ratio"
            % (h["emf_working_v"], h["machine_rpm_working"], h["need_v"], h["battery_ocv_v"],
               h["bridge_v"], tail))


def _resolved(doc, path):
    """The resolved scenario for doc (a stand-in drive when the file is a bare fragment), or
    raise ScenarioError."""
    from host_sim import scenario
    full = dict(doc)
    if "drive" not in full:
        full["drive"] = dict(_STANDIN_DRIVE)
    return scenario.load_doc(full, src=path, base_dir=os.path.dirname(os.path.abspath(path)))


def write_section(path, section, values):
    """Merge {section: values} into the JSON object in path (or a new file), validate the merged
    scenario, and write it whole. An existing file that is not a JSON object is refused, and
    nothing is written when the merged scenario would not load. Returns
    {"file", "section", "changes": [{"field", "old", "new"}], "headroom", "warnings"}."""
    from host_sim.scenario import ScenarioError
    doc = {}
    if os.path.exists(path):
        try:
            doc = load_json(path)  # the project's strict reader: duplicate keys, depth, size
        except (OSError, ValueError) as e:
            raise UserError("%s: exists and is not readable JSON (%s); not overwritten" % (path, e))
        if not isinstance(doc, dict):
            raise UserError("%s: exists and is not a JSON object; not overwritten" % path)
    try:
        old = _resolved(doc, path).doc.get(section, {})
    except ScenarioError:
        old = doc.get(section) if isinstance(doc.get(section), dict) else {}
    new_doc = dict(doc)
    prev = doc.get(section)
    new_doc[section] = dict(prev, **values) if isinstance(prev, dict) else dict(values)
    try:
        scn = _resolved(new_doc, path)
    except ScenarioError as e:
        raise UserError("%s: not written: the merged scenario would not load (%s)" % (path, e))
    changes = []
    for k, v in values.items():
        o = old.get(k) if isinstance(old, dict) else None
        if o != v:
            changes.append({"field": "%s.%s" % (section, k), "old": o, "new": v})
    try:
        write_json(path, new_doc)
    except OSError as e:
        raise UserError("%s: cannot write (%s)" % (path, e.strerror or e))
    out = {"file": str(path), "section": section, "changes": changes, "headroom": None,
           "warnings": []}
    if "drive" in doc:
        out["headroom"] = h = charge_headroom(scn.doc)
        w = charge_warning(h)
        if w:
            out["warnings"].append(w)
    return out


def describe(written):
    """Lines for stderr: what --write changed."""
    lines = ["wrote section '%s' of %s" % (written["section"], written["file"])]
    for c in written["changes"]:
        lines.append("  %s: %s -> %s" % (c["field"], "(unset)" if c["old"] is None else c["old"],
                                         c["new"]))
    if not written["changes"]:
        lines.append("  no field changed")
    return lines
