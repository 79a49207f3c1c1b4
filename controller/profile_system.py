# Supercap, USB, bus, sensor and control sections of a profile, and the checks across them.
from controller.compat import to_int
from controller.profile_fields import _choice, _fail, _flag, _num
from controller.profile_fields import SCHEMES


def supercap(p, c):
    s = "supercap"
    cells = _num(c, s, "cells", 1, 16, 6, "cells")
    if cells != int(cells):
        _fail(s + ".cells", cells, "a whole number from 1 to 16", "cells come whole")
    p.cap_cells = int(cells)
    rating = _num(c, s, "cell_rating_v", 2.3, 3.0, 2.7, "V")
    derate = _num(c, s, "clamp_derate_pct", 0, 30, 10, "%",
                  "the clamp may not exceed the bank rating; makers' notes give about x1.3 life "
                  "per 0.1 V below it")
    p.cap_cell_rating_mv = to_int(rating, 1000)
    p.cap_clamp_mv = (p.cap_cells * p.cap_cell_rating_mv * to_int(100 - derate, 10)) // 1000
    p.cap_hyst_mv = to_int(_num(c, s, "hysteresis_v", 0.02, 2.0, 0.3, "V"), 1000)
    lim = _num(c, s, "charge_limit_a", 0.05, 20, 2.0, "A")
    p.cap_limit_ma = to_int(lim, 1000)
    r = _num(c, s, "path_resistance_ohm", 0.005, 10, 0.25, "ohm")
    p.cap_headroom_mv = to_int(lim * r, 1000)
    p.cap_taps = _flag(c, s, "cell_taps", False)
    if p.cap_taps and p.cap_cells > 12:
        _fail(s + ".cells", p.cap_cells, "at most 12 with cell_taps", "the board senses 12 taps")
    p.cap_bal_mv = to_int(_num(c, s, "balance_threshold_mv", 5, 300, 40, "mV"), 1)


def usb(p, u):
    s = "usb"
    p.scheme = SCHEMES.index(_choice(u, s, "scheme", SCHEMES, "dcp"))
    vmin = _num(u, s, "vbus_min_v", 4.75, 5.0, 4.75, "V", "BC1.2 ch. 5: V_CHG 4.75-5.25 V")
    vmax = _num(u, s, "vbus_max_v", 5.0, 5.25, 5.25, "V", "BC1.2 ch. 5: V_CHG 4.75-5.25 V")
    if vmin >= vmax:
        _fail(s + ".vbus_min_v", vmin, "must be below vbus_max_v = %r" % vmax, "empty window")
    p.vbus_min_mv = to_int(vmin, 1000)
    p.vbus_max_mv = to_int(vmax, 1000)
    p.line_tol_pct = to_int(_num(u, s, "line_tolerance_pct", 1, 14, 8, "%",
                                 "wider windows would confuse the 2.0 V and 2.7 V levels"), 1)
    p.short_tol_mv = to_int(_num(u, s, "short_tolerance_mv", 10, 300, 100, "mV"), 1)
    p.usb_debounce_ms = to_int(_num(u, s, "debounce_ms", 10, 5000, 250, "ms",
                                    "BC1.2 ch. 5: T_DCD_DBNC is at least 10 ms"), 1)
    p.usb_bus_min_mv = to_int(_num(u, s, "bus_min_v", 5.5, 30, 7.0, "V"), 1000)
    p.usb_bus_hyst_mv = to_int(_num(u, s, "bus_hysteresis_v", 0.1, 3.0, 0.5, "V"), 1000)


def bus(p, b):
    s = "bus"
    trip = _num(b, s, "ovp_trip_v", 8, 60, 24, "V")
    rec = _num(b, s, "ovp_recover_v", 5, 60, 21, "V")
    if rec >= trip:
        _fail(s + ".ovp_recover_v", rec, "must be below ovp_trip_v = %r" % trip,
              "the latch needs a gap to clear")
    p.ovp_trip_mv = to_int(trip, 1000)
    p.ovp_recover_mv = to_int(rec, 1000)
    p.ovp_hold_ms = to_int(_num(b, s, "ovp_hold_ms", 50, 60000, 2000, "ms"), 1)
    p.trip_window_ms = to_int(_num(b, s, "trip_window_s", 1, 3600, 60, "s"), 1000)
    n = _num(b, s, "lockout_trips", 2, 50, 5, "trips")
    if n != int(n):
        _fail(s + ".lockout_trips", n, "a whole number from 2 to 50", "trips are counted")
    p.lockout_trips = int(n)
    floor = _num(b, s, "floor_v", 0, 60, 9.0, "V")
    if floor >= rec:
        _fail(s + ".floor_v", floor, "must be below ovp_recover_v = %r" % rec,
              "the converters would back off at every bus the guard allows")
    p.floor_mv = to_int(floor, 1000)


def sensors(p, x):
    s = "sensors"
    p.bus_fs_mv = to_int(_num(x, s, "bus_full_scale_v", 10, 100, 40, "V"), 1000)
    p.batt_fs_mv = to_int(_num(x, s, "batt_full_scale_v", 5, 60, 20, "V"), 1000)
    p.batt_fs_ma = to_int(_num(x, s, "batt_current_full_scale_a", 0.5, 100, 30, "A"), 1000)
    p.cap_fs_mv = to_int(_num(x, s, "cap_full_scale_v", 3, 60, 20, "V"), 1000)
    p.vbus_fs_mv = to_int(_num(x, s, "vbus_full_scale_v", 5.5, 20, 8.0, "V"), 1000)
    p.line_fs_mv = to_int(_num(x, s, "line_full_scale_v", 2.8, 5.5, 3.3, "V"), 1000)
    # the VBUS sensor's own tolerance: the port's window is shrunk by it (cross_checks)
    p.vbus_gain_tol_ppm = to_int(_num(x, s, "vbus_gain_tol_pct", 0, 5, 0.5, "%"), 10000)
    p.vbus_offset_tol_mv = to_int(_num(x, s, "vbus_offset_tol_mv", 0, 200, 4, "mV"), 1)
    # the battery temperature sensor's resolution: the window's re-entry hysteresis is sized
    # from it (leadacid.py)
    p.temp_lsb_dc = max(1, to_int(_num(x, s, "temp_lsb_c", 0.01, 2, 0.1, "C"), 10))


def control(p, c):
    s = "control"
    p.period_ms = to_int(_num(c, s, "period_ms", 5, 1000, 50, "ms"), 1)
    p.mppt = _flag(c, s, "mppt", False)
    p.mppt_step_mv = to_int(_num(c, s, "mppt_step_v", 0.02, 2.0, 0.2, "V"), 1000)
    p.mppt_interval_ms = to_int(_num(c, s, "mppt_interval_ms", 50, 10000, 500, "ms"), 1)
    ovs = c.get("overspeed_bus_v")
    p.overspeed_mv = 0 if ovs is None else to_int(
        _num(c, s, "overspeed_bus_v", 5, 60, ovs, "V"), 1000)


def cross_checks(p):
    top = p.cells * max(p.abs_cell_mv, p.eq_cell_mv)
    if top + p.over_margin_mv >= p.batt_fs_mv:
        _fail("sensors.batt_full_scale_v", p.batt_fs_mv / 1000,
              "must exceed the highest battery setpoint %.2f V plus margin" % (top / 1000),
              "the sensor must see an overcharge")
    if p.cap_clamp_mv >= p.cap_fs_mv:
        _fail("sensors.cap_full_scale_v", p.cap_fs_mv / 1000,
              "must exceed the supercap clamp %.2f V" % (p.cap_clamp_mv / 1000),
              "the sensor must see the bank above its clamp")
    if p.cap_clamp_mv >= p.ovp_recover_mv:
        _fail("bus.ovp_recover_v", p.ovp_recover_mv / 1000,
              "must be above the supercap clamp %.2f V" % (p.cap_clamp_mv / 1000),
              "the bank feeds the bus through its discharge diode; the latch could never clear")
    if p.ovp_trip_mv >= p.bus_fs_mv:
        _fail("sensors.bus_full_scale_v", p.bus_fs_mv / 1000,
              "must exceed bus.ovp_trip_v = %.2f V" % (p.ovp_trip_mv / 1000),
              "the sensor must see a trip")
    if p.usb_bus_min_mv - p.usb_bus_hyst_mv < 5500:
        _fail("usb.bus_hysteresis_v", p.usb_bus_hyst_mv / 1000,
              "bus_min_v - bus_hysteresis_v must be at least 5.5 V",
              "the 5 V converter needs input headroom")
    if p.usb_bus_min_mv >= p.ovp_recover_mv:
        _fail("usb.bus_min_v", p.usb_bus_min_mv / 1000,
              "must be below bus.ovp_recover_v = %.2f V" % (p.ovp_recover_mv / 1000),
              "the port could never run")
    if p.vbus_max_mv >= p.vbus_fs_mv:
        _fail("sensors.vbus_full_scale_v", p.vbus_fs_mv / 1000,
              "must exceed usb.vbus_max_v", "the sensor must see VBUS above its window")
    # the port switches on only with the reading inside the window shrunk by what the sensor
    # may be off (gain x reading + offset), so the true VBUS is inside the window
    p.vbus_on_min_mv = (p.vbus_min_mv + (p.vbus_min_mv * p.vbus_gain_tol_ppm + 999999) // 1000000
                        + p.vbus_offset_tol_mv)
    p.vbus_on_max_mv = (p.vbus_max_mv - (p.vbus_max_mv * p.vbus_gain_tol_ppm + 999999) // 1000000
                        - p.vbus_offset_tol_mv)
    if p.vbus_on_min_mv >= p.vbus_on_max_mv:
        _fail("sensors.vbus_gain_tol_pct", p.vbus_gain_tol_ppm / 10000,
              "with vbus_offset_tol_mv = %d the guard band leaves no VBUS window (%.3f-%.3f V)"
              % (p.vbus_offset_tol_mv, p.vbus_min_mv / 1000, p.vbus_max_mv / 1000),
              "the port could never switch on")
    if p.mppt and p.overspeed_mv and not (p.floor_mv < p.overspeed_mv < p.ovp_trip_mv):
        _fail("control.overspeed_bus_v", p.overspeed_mv / 1000,
              "must lie between bus.floor_v and bus.ovp_trip_v", "dump ramp below the trip")
