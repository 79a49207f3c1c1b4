"""Property tests: every invariant holds on every tick of arbitrary measurement sequences.

The sequences (ctl_scen.scenarios) are slowly varying physical signals with noise, spikes,
step changes, stuck values and out-of-range glitches, tick periods of 10-250 ms with jitter and
late ticks, clocks started just before the 2**30 wrap, over five profile variants (flooded /
AGM / gel, 3, 6 and 12 cells, every USB scheme, MPPT on and off, cell taps on and off). The
oracles (ctl_props) work from the profile document's numbers, never from the controller.
A failure prints the Scenario(...) to paste into a regression test and the reproduction blob,
and leaves the failing run as files in spinrail-out/controller-failures/ (the scenario, its
profile, and the readings as a vector CSV that `controller.replay` runs on either interpreter).
"""
from array import array

import pytest
from ctl_bench import ROOT, write_doc
from ctl_props import (
    ST_BLOCKED,
    ST_EQUALIZE,
    Limits,
    check_i1,
    check_i2,
    check_i3,
    check_i4,
    check_i5,
    check_i6,
    check_i7,
)
from ctl_scen import run, scenario_doc, scenarios, vector_lines
from hypothesis import HealthCheck, Phase, event, find, given, note, settings
from hypothesis.control import current_build_context

from controller.signals import (
    F_BATT_SENSOR,
    F_BUS_SENSOR,
    F_CAP_SENSOR,
    F_OVP,
    F_OVP_LOCKOUT,
    F_TEMP_SENSOR,
    F_USB_SENSOR,
)

FAILURES = ROOT / "spinrail-out" / "controller-failures"  # ours alone


def write_whole(path, text):
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(text)
    tmp.replace(path)


def save_failure(name, scn, ticks):
    """The failing run as replayable files: scenario, profile and vector CSV."""
    FAILURES.mkdir(parents=True, exist_ok=True)
    base = FAILURES / name
    write_whole(base.with_suffix(".scenario.txt"), repr(scn) + "\n")
    write_doc(scenario_doc(scn), base.with_suffix(".profile.json"))
    write_whole(base.with_suffix(".vectors.csv"), "".join(vector_lines(ticks)))
    return base


def judged(scn):
    ticks = run(scn)
    L = Limits(scenario_doc(scn))
    event("variant %s" % scn.variant)
    return ticks, L


def holds(check, scn, ticks, L):
    """Run an invariant's check; on the final (shrunk) failing example keep it as files."""
    try:
        check(ticks, L)
    except AssertionError:
        if current_build_context().is_final:
            base = save_failure(check.__name__, scn, ticks)
            note("failing run kept as %s.{scenario.txt,profile.json,vectors.csv}" % base)
        raise


@given(scenarios())
def test_i1_battery_duty_under_the_compensated_ceiling(scn):
    """I1: batt_duty is 0 whenever batt_mv exceeds the active stage's compensated ceiling by
    more than 0.1 V per 12 V block (100 mV x cells / 6), and never rises while batt_mv is at or
    above the ceiling. The ceiling is cells x min(V_stage + coeff x (T - T_ref), cap) with T
    clamped to the charging window, from the profile's numbers (docs/profile.md); the stage is
    the one c.stage reports."""
    ticks, L = judged(scn)
    if any(t.c.stage != ST_BLOCKED and t.m.batt_mv >= L.ceiling_mv(t.c.stage, t.m.batt_temp_dc)
           for t in ticks):
        event("battery at or above its ceiling")
    holds(check_i1, scn, ticks, L)


@given(scenarios())
def test_i2_no_charging_outside_the_temperature_window(scn):
    """I2: batt_duty is 0 outside the charging temperature window, and with an implausible
    temperature reading (which lies outside it)."""
    ticks, L = judged(scn)
    if any(not L.temp_ok(t.m.batt_temp_dc) for t in ticks):
        event("temperature outside the window")
    holds(check_i2, scn, ticks, L)


@given(scenarios())
def test_i3_supercap_never_charged_at_the_clamp(scn):
    """I3: cap_duty is 0 at or above the clamp (cells x rating x (1 - derate)), and while a
    sensed cell is at or above its rating."""
    ticks, L = judged(scn)
    if any(t.m.cap_mv >= L.clamp_mv for t in ticks):
        event("bank at or above the clamp")
    holds(check_i3, scn, ticks, L)


@given(scenarios())
def test_i4_usb_port_on_only_for_the_right_lines(scn):
    """I4: usb_on is 1 only while VBUS is inside its window (BC1.2 V_CHG, ch. 5) and the data lines
    show the profile's scheme, judged by an oracle written from the BC1.2 numbers (V_DP_SRC,
    V_DAT_REF, V_LGC, D+ shorted to D-) and the ratiometric divider levels, with the probe state
    the lines were read in; only after the debounce time; only with the converter on."""
    ticks, L = judged(scn)
    if any(t.c.usb_on for t in ticks):
        event("port on")
    holds(check_i4, scn, ticks, L)


@given(scenarios())
def test_i5_overvoltage_guard(scn):
    """I5: at or above the trip (or a bus reading above full scale) the dump load is fully on,
    USB is off and both storage duties are 0, in that tick; the latch holds until the bus has
    read below recovery for the hold time (late ticks counting at most four periods), and
    lockout_trips trips within the window keep every output off until reset."""
    ticks, L = judged(scn)
    if any(t.c.fault & F_OVP for t in ticks):
        event("trip")
    if any(t.c.fault & F_OVP_LOCKOUT for t in ticks):
        event("lockout")
    holds(check_i5, scn, ticks, L)


@given(scenarios())
def test_i6_implausible_readings_give_the_safe_state(scn):
    """I6: an implausible reading gives the safe state for what it protects, with its fault
    bit: bus -> everything off; battery -> batt_duty 0 and batt_out 0; supercap (voltage,
    current, a cell tap) -> cap_duty 0; USB -> usb_on 0 and usb_conv 0; temperature ->
    batt_duty 0. No sensor fault bit without an implausible reading."""
    ticks, L = judged(scn)
    for bit, name in ((F_BUS_SENSOR, "bus"), (F_BATT_SENSOR, "battery"), (F_CAP_SENSOR, "cap"),
                      (F_USB_SENSOR, "usb"), (F_TEMP_SENSOR, "temperature")):
        if any(t.c.fault & bit for t in ticks):
            event("implausible %s" % name)
    holds(check_i6, scn, ticks, L)


@given(scenarios())
def test_i7_outputs_in_range(scn):
    """I7 (CPython half): duties within 0..DUTY_MAX, switches 0 or 1, stages and port matches
    from the documented sets, fault bits among the defined ones, bleeders only on sensed cells.
    The MicroPython half (identical outputs) is in test_dual_target.py."""
    ticks, L = judged(scn)
    holds(check_i7, scn, ticks, L)


SMALL_INT = 2 ** 30  # DEVELOPERS.md: a small int on 32-bit ports


def controller_state(sup):
    """Every object the supervisor keeps between ticks (its parts and their regulators)."""
    objs = [sup, sup.charger, sup.charger.loop, sup.clamp, sup.clamp.loop, sup.usb, sup.ovp]
    if sup.mppt is not None:
        objs.append(sup.mppt)
    return objs


@given(scenarios())
def test_i8_state_stays_within_the_small_int_range(scn):
    """I8 (DEVELOPERS.md, tick rules): every integer the controller keeps from one tick to the next
    (timers, counters, regulator state, trip times, accumulators) stays within +/-2**30, so a
    32-bit port never turns it into a heap-allocated long."""

    fields = []  # (object, attribute name) of every int the controller keeps

    def probe(sup, k):
        if not fields:
            for obj in controller_state(sup):
                for name, v in vars(obj).items():
                    # state and profile slots live in array('i') buffers (viper code)
                    if isinstance(v, (int, list, array)) and not isinstance(v, bool):
                        fields.append((obj, name))
        for obj, name in fields:
            v = getattr(obj, name)
            for x in (v if isinstance(v, (list, array)) else (v,)):
                assert -SMALL_INT <= x < SMALL_INT, (k, type(obj).__name__, name, x)

    run(scn, probe=probe)


def signed_slots():
    """(class name, array attribute) -> the slots the viper code reads back with the sign
    restore (compat.py): only these may hold a negative value."""
    from controller import buckloop, leadacid, mppt, supervisor
    return {("BuckLoop", "st"): {buckloop._U, buckloop._DUTY, buckloop._BUS_LAST},
            ("Supervisor", "st"): {supervisor._LIE_MV},
            ("HillClimb", "st"): {mppt._DIR, mppt._LAST_CW},
            ("LeadAcidCharger", "cfg"): {leadacid._C_TEMP_MIN, leadacid._C_TC_BLOCK}}


@given(scenarios())
def test_i8_slots_read_as_unsigned_never_go_negative(scn):
    """I8 (DEVELOPERS.md, viper state): a ptr32 load zero-extends on a 64-bit port, so a slot
    read without the sign restore must never hold a negative value (else the unix port and
    CPython part ways: the loop's duty did, after a bus read below 0 V)."""
    signed = signed_slots()
    arrays = []  # (class name, attribute, array, slots that may be negative)

    def probe(sup, k):
        if not arrays:
            for obj in controller_state(sup):
                for name, v in vars(obj).items():
                    if isinstance(v, array):
                        cls = type(obj).__name__
                        arrays.append((cls, name, v, signed.get((cls, name), set())))
        for cls, name, v, may in arrays:
            for i, x in enumerate(v):
                assert x >= 0 or i in may, (k, cls, name, i, x)

    run(scn, probe=probe)


# --- the generator reaches what the invariants talk about ------------------------------------
def _ceiling_rise_tested(ticks, L):
    prev = 0
    for t in ticks:
        if (t.c.stage != ST_BLOCKED and prev > 0
                and t.m.batt_mv >= L.ceiling_mv(t.c.stage, t.m.batt_temp_dc)):
            return True
        prev = t.c.batt_duty
    return False


def _release(ticks, L):
    on = [bool(t.c.fault & F_OVP) for t in ticks]
    return any(a and not b for a, b in zip(on, on[1:]))


def _wrapped(ticks, L):
    return any(a.now_ms > b.now_ms for a, b in zip(ticks, ticks[1:]))


SITUATIONS = {
    "battery at its ceiling after a running tick (I1)": _ceiling_rise_tested,
    "battery over ceiling + margin (I1)": lambda ticks, L: any(
        t.c.stage != ST_BLOCKED
        and t.m.batt_mv > L.ceiling_mv(t.c.stage, t.m.batt_temp_dc) + L.margin_mv
        for t in ticks),
    "temperature outside the window (I2)": lambda ticks, L: any(
        not L.temp_ok(t.m.batt_temp_dc) and L.temp_plausible(t.m) for t in ticks),
    "bank at the clamp right after charging (I3)": lambda ticks, L: any(
        a.c.cap_duty > 0 and b.m.cap_mv >= L.clamp_mv for a, b in zip(ticks, ticks[1:])),
    "port on (I4)": lambda ticks, L: any(t.c.usb_on for t in ticks),
    "trip and release (I5)": _release,
    "lockout (I5)": lambda ticks, L: any(t.c.fault & F_OVP_LOCKOUT for t in ticks),
    "implausible bus (I6)": lambda ticks, L: any(not L.bus_plausible(t.m) for t in ticks),
    "implausible battery (I6)": lambda ticks, L: any(not L.batt_plausible(t.m) for t in ticks),
    "implausible supercap (I6)": lambda ticks, L: any(not L.cap_plausible(t.m, t.cells)
                                                      for t in ticks),
    "implausible USB (I6)": lambda ticks, L: any(not L.usb_plausible(t.m) for t in ticks),
    "implausible temperature (I6)": lambda ticks, L: any(not L.temp_plausible(t.m)
                                                         for t in ticks),
    "equalize (stages)": lambda ticks, L: any(t.c.stage == ST_EQUALIZE for t in ticks),
    "clock wrap": _wrapped,
}


@pytest.mark.parametrize("name", sorted(SITUATIONS))
def test_generator_reaches(name):
    """The properties are not vacuous: the scenario generator reaches each situation an
    invariant is about, within a few hundred examples."""
    pred = SITUATIONS[name]

    def hit(scn):
        ticks = run(scn)
        return pred(ticks, Limits(scenario_doc(scn)))

    found = find(scenarios(), hit, settings=settings(
        max_examples=600, database=None, derandomize=True, phases=[Phase.generate],
        suppress_health_check=list(HealthCheck)))
    # find raises when no example reaches the situation; the one found reaches it again
    # (the closed loop is deterministic)
    assert hit(found)
