# Battery section of a profile: chemistry defaults, hard caps and conversion to integer units.
from controller.compat import to_int
from controller.profile_fields import _choice, _fail, _num
from controller.profile_fields import CHEMISTRIES

# Per-cell defaults at 25 C, from battery makers' published charging manuals and SLA
# datasheets (docs/profile.md names the source of each): absorption V/cell, float V/cell,
# equalize V/cell (flooded only), temperature coefficient mV/C/cell (-5: makers' manuals; AGM's
# -4 lies inside the -3 (Battery University BU-403) to -5 range), charge limit in C, tail in C.
_CHEM_DEFAULTS = {
    "flooded": (2.45, 2.23, 2.58, -5.0, 0.125, 0.02),
    "agm": (2.42, 2.27, None, -4.0, 0.2, 0.02),
    "gel": (2.37, 2.25, None, -5.0, 0.05, 0.01),
}


def battery(p, b):
    s = "battery"
    chem = _choice(b, s, "chemistry", CHEMISTRIES, "agm")
    d_abs, d_flt, d_eq, d_tc, d_lim_c, d_tail_c = _CHEM_DEFAULTS[chem]
    p.chemistry = chem
    cells = _num(b, s, "cells", 1, 12, 6, "cells")
    if cells != int(cells):
        _fail(s + ".cells", cells, "a whole number from 1 to 12", "cells come whole")
    p.cells = int(cells)
    cap_ah = _num(b, s, "capacity_ah", 1, 1000, 7.0, "Ah")
    p.capacity_mah = to_int(cap_ah, 1000)
    v_abs = _num(b, s, "absorption_v_per_cell", 2.20, 2.50, d_abs, "V/cell",
                 "hard cap 2.50 V/cell: above it a lead-acid cell gasses heavily and dries out")
    v_flt = _num(b, s, "float_v_per_cell", 2.10, 2.35, d_flt, "V/cell",
                 "hard cap 2.35 V/cell: a float above it overcharges continuously")
    if v_flt >= v_abs:
        _fail(s + ".float_v_per_cell", v_flt, "must be below absorption_v_per_cell = %r" % v_abs,
              "float is the lower, continuous holding voltage")
    v_eq = b.get("equalize_v_per_cell", d_eq)
    if v_eq is not None:
        if chem != "flooded":
            _fail(s + ".equalize_v_per_cell", v_eq, "allowed only for chemistry flooded",
                  "equalizing a sealed AGM or gel battery vents and dries it")
        v_eq = _num(b, s, "equalize_v_per_cell", v_abs, 2.60, v_eq, "V/cell",
                    "hard cap 2.60 V/cell, and not below absorption")
        p.eq_cell_mv = to_int(v_eq, 1000)
    p.eq_ms = to_int(_num(b, s, "equalize_minutes", 10, 240, 120, "min"), 60000)
    tc = _num(b, s, "temp_coeff_mv_per_c_per_cell", -8.0, 0.0, d_tc, "mV/C/cell",
              "lead-acid voltage falls with temperature; makers give -3 to -5 mV/C/cell")
    p.tc_uv_dc_cell = to_int(tc, 100)  # mV/C -> uV per deci-degree: x1000 / 10
    p.ref_temp_dc = to_int(_num(b, s, "ref_temp_c", 0, 40, 25, "C"), 10)
    p.abs_cell_mv = to_int(v_abs, 1000)
    p.float_cell_mv = to_int(v_flt, 1000)
    lim = _num(b, s, "charge_limit_a", 0.05, 30.0, round(d_lim_c * cap_ah, 3), "A")
    if lim > 0.4 * cap_ah:
        _fail(s + ".charge_limit_a", lim, "at most 0.4 C = %.3g A for capacity_ah = %r"
              % (0.4 * cap_ah, cap_ah), "common practice: faster charging overheats lead-acid")
    p.chg_limit_ma = to_int(lim, 1000)
    tail = _num(b, s, "tail_current_a", 0.001, 10.0, round(d_tail_c * cap_ah, 4), "A")
    if tail >= lim:
        _fail(s + ".tail_current_a", tail, "must be below charge_limit_a = %r" % lim,
              "absorption could never end")
    p.tail_ma = to_int(tail, 1000)
    p.tail_hold_ms = to_int(_num(b, s, "tail_hold_s", 1, 3600, 60, "s"), 1000)
    p.abs_max_ms = to_int(_num(b, s, "absorption_max_minutes", 10, 600, 240, "min"), 60000)
    t_min = _num(b, s, "charge_temp_min_c", -10, 20, 0, "C",
                 "hard cap -10 C: never charge a frozen battery")
    t_max = _num(b, s, "charge_temp_max_c", 25, 50, 45, "C",
                 "hard cap 50 C: charging a hot battery speeds dry-out and thermal runaway")
    p.temp_min_dc = to_int(t_min, 10)
    p.temp_max_dc = to_int(t_max, 10)
    rb = _num(b, s, "rebulk_v_per_cell", 1.90, 2.20, 2.10, "V/cell")
    if rb >= v_flt:
        _fail(s + ".rebulk_v_per_cell", rb, "must be below float_v_per_cell = %r" % v_flt,
              "a battery on float would bounce back to bulk at once")
    p.rebulk_cell_mv = to_int(rb, 1000)
    p.rebulk_hold_ms = to_int(_num(b, s, "rebulk_hold_s", 1, 3600, 30, "s"), 1000)
    absent = _num(b, s, "absent_v_per_cell", 0.5, 1.75, 1.0, "V/cell")
    p.absent_mv = to_int(absent * p.cells, 1000)
    p.over_margin_mv = (100 * p.cells) // 6
    lvd = _num(b, s, "disconnect_v_per_cell", 1.60, 1.95, 1.75, "V/cell",
               "makers' discharge tables end at 1.75 V/cell at C/10; deeper sulphates the plates")
    lvr = _num(b, s, "reconnect_v_per_cell", 1.90, 2.20, 2.10, "V/cell")
    if lvr <= lvd:
        _fail(s + ".reconnect_v_per_cell", lvr, "must be above disconnect_v_per_cell = %r" % lvd,
              "the discharge switch would chatter")
    p.lvd_mv = to_int(lvd * p.cells, 1000)
    p.lvr_mv = to_int(lvr * p.cells, 1000)
