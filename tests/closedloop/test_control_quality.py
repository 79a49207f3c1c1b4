# Closed-loop control quality: the controller does its job, not only holds its limits. Each
# test runs a regression scenario (tests/plant/regressions/ctl_*.json and ctl2_*.json, each
# built from a site that showed the fault) and judges an invariant on the run's own series and
# ledger, worked out here from batt_a, stage, dump_duty, fault and the profile's limits (no
# service module; the last test, over the built-in scenarios, judges them as `spinrail
# simulate` does).
from pathlib import Path

import numpy as np
import pytest

from controller.signals import F_OVP, ST_ABSORPTION, ST_BULK, ST_FLOAT
from host_sim import runner, simulate
from host_sim.limitcheck import bus_limit_v
from host_sim.scenario import builtin_names, load_scenario
from host_sim.simulate import summary

REGRESSIONS = Path(__file__).resolve().parents[1] / "plant" / "regressions"


def run(name):
    sc = load_scenario(str(REGRESSIONS / (name + ".json")))
    res = runner.run(sc, progress=False)
    crossed = {k: v.as_dict() for k, v in res.limits.items() if not v.held}
    assert not crossed, crossed  # every limit holds as well
    return sc, res


def one_period_spikes(batt_a, limit_a):
    """Periods over the band (1.1 x limit): with every limit held (run() checks), each is a
    one-period transient the limit check let pass (two in a row fail it)."""
    over = batt_a > 1.1 * limit_a
    return int(np.sum(over))


def test_a_strong_source_charges_the_battery_at_its_acceptance_with_no_limit_cycle():
    """Invariant: on a source with more power than the stores take (a micro-hydro giving about
    107 W at the runner into a gel battery limited to 1.2 A and a full bank), the battery's
    time-weighted bulk current is at least 90 % of its acceptance, min(limit, what the source
    gives after the loads: here the limit), and one-period spikes over the band are at most
    one per minute of bulk. Regression: the overspeed dump's attack and release sawed the bus
    and the battery converter cut and overshot in turn (0.50 A mean, 84 spikes in 10 min)."""
    sc, res = run("ctl_hydro_dump_limit_cycle")
    s = res.series
    p = sc.profile
    dt_s = p.period_ms / 1000.0
    limit_a = p.chg_limit_ma / 1000.0
    bulk = s["stage"] == ST_BULK
    bulk_min = bulk.sum() * dt_s / 60.0
    assert bulk_min > 5  # the run is a bulk charge
    # the source's surplus after the battery: the plant's own ideal power is several times
    # what the battery takes at its limit, so the acceptance is the limit
    p_batt_w = limit_a * s["batt_v"][bulk]
    assert np.all(s["p_ideal_w"][bulk][200:] > 3 * p_batt_w[200:])
    mean_a = float(np.mean(s["batt_a"][bulk]))
    assert mean_a >= 0.9 * limit_a, mean_a
    spikes = one_period_spikes(s["batt_a"][bulk], limit_a)
    assert spikes <= bulk_min, (spikes, bulk_min)


def test_the_soft_zone_dump_does_not_load_a_human_drive_parked_under_the_trip():
    """Invariant: the dump takes only what the stores and loads cannot, except in a trip or an
    overspeed. A pedal rig whose EMF at cadence sits above the recovery level (no trip in the
    run) loses under 1 % of the rider's input to the dump, and the battery stores as much as
    it did when the dump took 29 % (8.54 kJ, within 2 %)."""
    sc, res = run("ctl_pedal_soft_zone_dump")
    s = res.series
    led = res.ledger
    assert not np.any(s["fault"].astype(int) & F_OVP)  # no trip: the dump has no excuse
    assert led["loss_dump_j"] < 0.01 * led["drive_in_j"], led
    assert led["batt_stored_j"] > 0.98 * 8544.0, led


def test_absorption_ends_on_its_tail_under_pulsing_loads():
    """Invariant: absorption ends (on its tail or its time limit) under pulsing loads. A nearly
    full AGM block with a lamp switched 2 s in 6 s and a USB device 4 s in 120 s reaches float
    within 10 minutes of entering absorption (the tail hold is 60 s). Regression: every pulse
    restarted the tail timer and absorption had not ended after 1,157 s. Every limit holds,
    the energy ledger at a full block's state of charge included."""
    sc = load_scenario(str(REGRESSIONS / "ctl_absorption_pulsing_loads.json"))
    res = runner.run(sc, progress=False)
    crossed = {k: v.as_dict() for k, v in res.limits.items() if not v.held}
    assert not crossed, crossed
    st = res.series["stage"].astype(int)
    t = res.series["t_s"]
    assert np.any(st == ST_ABSORPTION)
    t_abs = t[np.argmax(st == ST_ABSORPTION)]
    assert np.any(st == ST_FLOAT), "absorption never ended"
    t_float = t[np.argmax(st == ST_FLOAT)]
    assert t_float - t_abs <= 600, (t_abs, t_float)


def test_one_lsb_of_temperature_noise_gives_at_most_two_stage_changes_per_edge_crossing():
    """Invariant: with 1 LSB (rms) of noise on the battery temperature, each crossing of a
    charging-window edge by the true temperature causes at most 2 stage changes (blocked, then
    charging again). A battery warming from -1 C through the 0 C edge and cooling back through
    it, read through a 0.5 C-per-LSB channel. Regression: 342 stage changes in 11 minutes."""
    sc, res = run("ctl_cold_noisy_ntc")
    s = res.series
    crossings = int(np.sum(np.diff(np.sign(s["batt_temp_c"] - sc.profile.temp_min_dc / 10.0))
                           != 0))
    assert crossings >= 2  # it did cross the edge both ways
    changes = int(np.sum(np.diff(s["stage"].astype(int)) != 0))
    assert changes <= 2 * crossings, (changes, crossings)


def test_the_usb_port_stays_off_at_a_true_vbus_under_the_window_with_a_sensor_reading_high():
    """Invariant: with the VBUS sensor reading high inside its tolerance (8 LSB, about
    0.33 %) and a 0.1 ohm converter that a phone pulls to a true 4.745 V, the port is never
    switched on at a true VBUS outside 4.75-5.25 V (the limit judged at the deciding tick), and
    once on, a VBUS that leaves the window under the load turns it off within one period.
    Regression: the port stayed on for 115 of 120 s at 4.745 V (the site: 41 s)."""
    sc, res = run("ctl_usb_vbus_sensor_high")
    s = res.series
    on = s["usb_on"] > 0
    v = s["usb_vbus_v"]
    out = on & ((v < 4.75) | (v > 5.25))
    assert not np.any(out[1:] & out[:-1])  # never two periods running
    # and it then stays open 5 s (usbport._HOLD_OFF_MS): at most one such period per 5 s
    # (before the hold, 384 in 120 s: on at the unloaded VBUS, off under the phone's load)
    assert out.sum() <= sc.duration_s / 5.0 + 1, out.sum()


def test_a_fast_torque_rise_from_rest_holds_the_bus_on_the_20ms_profile():
    """Invariant: on the crank kit's 20 ms profile, a rider at 66 % of the power the full dump
    holds (150 W of 225 W), whose torque builds within 0.05 s from rest, keeps the bus under
    the trip plus the clamp margin. Regression: at the start the battery's converter stepped
    off its 6.4 A start on a bus running up, nothing loaded the machine, and the bus went
    14.8 -> 28.3 V in one period (limit 28.0 V); a converter stepping off carrying current on
    a bus running up now hands the machine to the dump load."""
    sc, res = run("ctl_crank_torque_rise")  # (run() checks the bus limit with the others)
    assert sc.profile.period_ms == 20
    assert float(np.max(res.series["bus_v"])) < bus_limit_v(sc.profile_doc, sc.clamp_margin_v)


def dump_j_with_room(sc, s, limit_a, overspeed_v):
    """Dump energy (J) the battery could have taken: in each period where it had room (in
    bulk, under 95 % of its limit, the bus under the overspeed level, and neither a trip nor
    the ten periods of its release, overvolt.py _RELEASE_STEP, under way) the dump's power
    (duty x bus^2 / R) up to that room ((limit - current) x battery voltage)."""
    dt_s = sc.profile.period_ms / 1000.0
    p_dump = s["dump_duty"] / 10000.0 * s["bus_v"] ** 2 / sc.doc["bus"]["dump_ohm"]
    trip = (s["fault"].astype(int) & F_OVP) > 0
    excused = trip.copy()
    for k in range(1, 11):
        excused[k:] |= trip[:-k]
    room = ((s["stage"] == ST_BULK) & (s["batt_a"] < 0.95 * limit_a)
            & (s["bus_v"] < overspeed_v) & ~excused)
    p_room = np.clip((limit_a - s["batt_a"]) * s["batt_v"], 0.0, None)
    return float(np.sum(np.minimum(p_dump, p_room)[room]) * dt_s)


def test_a_gust_on_a_wind_site_is_taken_by_the_battery_with_room_not_by_the_dump():
    """Invariant: the dump takes only what the stores cannot, except in a trip or an
    overspeed. On the hut's wind site (MPPT, overspeed dump at 22 V, a 100 Ah flooded block in
    bulk under its 12 A limit) two gusts lift the bus 16 -> 20 V in a few periods; the dump
    takes under 3 % of the input while the battery is under 95 % of its limit and the bus under
    the overspeed level. Regression: the soft zone read each gust's rise ahead and dumped; the
    bus fell under the battery converter's duty, its current fell to nothing, and the dump's
    release lifted the bus into the zone again (7.5 % of the input, acceptance 0.70)."""
    sc, res = run("ctl2_wind_gusts_soft_zone")
    s = res.series
    p = sc.profile
    limit_a = p.chg_limit_ma / 1000.0
    assert np.all(s["stage"] == ST_BULK)  # the run is a bulk charge
    in_j = res.ledger["drive_in_j"]
    waste_j = dump_j_with_room(sc, s, limit_a, p.overspeed_mv / 1000.0)
    assert waste_j < 0.03 * in_j, (waste_j, in_j)


def test_the_dump_is_never_driven_from_the_stores_by_a_rise_they_made_at_power_up():
    """Invariant: the dump load never runs on storage energy because of a bus rise the stores
    themselves made. On a still day (the hut's wind site at 1 m/s: the machine never reaches
    the battery) the bus is charged at power-up from the stores alone, read 3 LSB high; the
    dump stays off the whole run and takes nothing. Regression: the guard read the first
    0 -> 11.8 V as a run-up, put the full dump on and drew 22 A from the battery (5 A from the
    bank) through the 0.4 ohm dump for a second."""
    sc, res = run("ctl2_dead_wind_start")
    s = res.series
    assert float(np.max(s["src_a"])) < 0.05  # the source gives nothing: every joule is stored
    assert float(np.max(s["dump_duty"])) == 0.0
    assert res.ledger["loss_dump_j"] < 0.01, res.ledger["loss_dump_j"]


def test_a_small_block_keeps_its_ceiling_when_the_bank_steps_off_beside_it():
    """Invariant: a 3-cell block (50 mV of margin over its ceiling) stays within its ceiling
    plus margin on every charging period, through the bank's converter stepping off carrying
    current beside it (the bus rises within the period, after the battery's duty was set).
    Regression (fuzz seed 101, example 153): 7.327 V against 7.324 V one period after the
    bank's converter dropped to duty 0 with the bus up 0.11 V and the battery's duty raised."""
    sc, res = run("ctl2_small_block_bank_steps_off")  # (run() judges batt_ceiling as well)
    s = res.series
    assert sc.profile.cells == 3
    margin_v = 0.1 * 3 / 6  # 0.1 V per 12 V block (limitcheck, docs/simulate.md)
    charging = np.isfinite(s["ceiling_v"])
    over = s["batt_v"][charging] - s["ceiling_v"][charging]
    assert float(np.max(over)) <= margin_v, float(np.max(over))
    # the bank did step off beside it while the battery was near its ceiling
    steps = (s["cap_duty"][:-1] > 0) & (s["cap_duty"][1:] == 0)
    assert int(np.sum(steps)) >= 10


# hut_wind: its battery now runs at its 12 A limit through the 300 s gust; a cut of a small
# overcurrent lets the bus jump into a trip, and the trip's release ramp runs the dump on a bus
# fallen below the bank, which feeds it (dump_from_storage, 0.047 Wh). An open controller
# finding; strict, so a fix shows here.
KNOWN_SERVICE = {"hut_wind": "dump_from_storage after a trip's release ramp (controller)"}


@pytest.mark.parametrize("name", [
    pytest.param(n, marks=[pytest.mark.xfail(strict=True, reason=KNOWN_SERVICE[n])]
                 if n in KNOWN_SERVICE else []) for n in builtin_names()])
def test_every_built_in_scenario_holds_its_limits_and_does_its_job(name):
    """Invariant: every built-in scenario passes `spinrail simulate` with exit status 0: every
    limit held and no service warning (host_sim/service.py, thresholds unchanged). Regression:
    hut_wind and crank_relief exited 3 on dump_waste (8.1 % and 4.5 % of the input)."""
    sc = load_scenario(name)
    res = runner.run(sc, progress=False)
    summ = summary(res)
    crossed = [k for k, d in summ["limits"].items() if not d["held"]]
    warnings = [w["code"] for w in summ["service"]["warnings"]]
    assert (crossed, warnings) == ([], [])
    assert simulate.finish(res, summ, "<test>") == 0  # the status simulate exits with
