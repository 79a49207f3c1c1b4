# Service figures and verdicts (host_sim/service.py): each warning fires on a scenario built to
# trigger it and not on the demo; the figures agree with the energy ledger; the bulk
# acceptance, the offered energy and the time to absorption are re-judged from timeseries.csv
# alone, apart from the meter. CLI tests go through host_sim.cli.main.
import copy
import csv
import json
import math
from pathlib import Path

import pytest

from controller import leadacid as la
from controller.signals import F_TEMP_WINDOW, ST_BLOCKED
from controller.supervisor import Supervisor
from host_sim import cli, runner, service
from host_sim.scenario import load_doc, load_scenario
from host_sim.simulate import EXIT_CROSSED, EXIT_SERVICE, finish

SCEN = Path(__file__).resolve().parents[2] / "host_sim" / "scenarios"
PROF = Path(__file__).resolve().parents[2] / "controller" / "default_profile.json"


def base(name, **top):
    d = json.loads((SCEN / (name + ".json")).read_text())
    d.update(top)
    return d


def write(tmp_path, doc, name):
    path = tmp_path / (name + ".json")
    path.write_text(json.dumps(doc))
    return path


def simulate(tmp_path, path, name):
    out = tmp_path / ("out_" + name)
    rc = cli.main(["simulate", str(path), "--out", str(out), "--quiet"])
    return rc, json.loads((out / "summary.json").read_text()), out


def codes(summ_or_service):
    sv = summ_or_service.get("service", summ_or_service)
    return [w["code"] for w in sv["warnings"]]


def rows(out):
    with open(out / "timeseries.csv") as f:
        return list(csv.DictReader(f))


# ---- the demo does its job; its figures agree with the ledger and with timeseries.csv ----------

@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    rc = cli.main(["demo", "--out", str(out), "--quiet"])
    return rc, json.loads((out / "summary.json").read_text()), out


def test_demo_raises_no_service_warning(demo):
    rc, summ, _ = demo
    assert rc == 0
    assert summ["service"]["warnings"] == []
    assert summ["verdict"] == "held"


def test_figures_agree_with_the_energy_ledger(demo):
    _, summ, _ = demo
    e = summ["energy_j"]
    wh = summ["service"]["energy_wh"]
    for key, led in (("drive_in", "drive_in_j"), ("battery", "batt_stored_j"),
                     ("supercap", "cap_stored_j"), ("usb", "usb_out_j"), ("loads", "loads_out_j"),
                     ("dump", "loss_dump_j")):
        assert abs(wh[key] * 3600.0 - e[led]) < 1.0, key  # Wh kept to 4 decimals: 0.36 J
    losses = sum(v for k, v in e.items() if k.startswith("loss_") and k != "loss_dump_j")
    assert abs(wh["losses"] * 3600.0 - losses) < 1.0
    # every joule in is somewhere: stores, loads, dump, losses, rotor and bus capacitor
    total = (wh["battery"] + wh["supercap"] + wh["usb"] + wh["loads"] + wh["dump"] + wh["losses"]
             + wh["rotor_and_bus_cap"])
    assert abs(total - wh["drive_in"] - wh["surge_in"]) < 0.005 * wh["drive_in"]
    assert abs(sum(wh["loads_each"].values()) - wh["loads"]) < 1e-3
    sc = load_scenario("demo")
    net = (summ["final"]["batt_soc"] - sc.doc["battery"]["soc0"]) * sc.doc["battery"]["capacity_ah"]
    assert abs(summ["service"]["battery_ah"]["net"] - net) < 2e-3  # final SOC kept to 4 decimals
    h = summ["service"]["harvest"]
    assert h["ratio"] == pytest.approx(h["delivered_wh"] / h["offered_wh"], abs=1e-3)


def test_acceptance_offered_energy_and_absorption_rejudged_from_the_timeseries(demo):
    """An independent judge: only timeseries.csv, the profile's charge limit and the
    scenario's converter efficiencies."""
    _, summ, out = demo
    sc = load_scenario("demo")
    lim = sc.profile.chg_limit_ma / 1000.0
    eta_b = sc.doc["converters"]["batt"]["efficiency"]
    eta_u = sc.doc["usb"]["converter"]["efficiency"]
    dt = sc.profile.period_ms / 1000.0
    got = poss = 0.0
    offered = 0.0
    t_abs = None
    for r in rows(out):
        offered += float(r["p_best_w"]) * dt
        if t_abs is None and r["stage"] == "absorption":
            t_abs = float(r["t_s"]) - dt
        if r["stage"] != "bulk":
            continue
        vb = float(r["batt_v"])
        x = ((float(r["p_best_w"]) - float(r["usb_vbus_v"]) * float(r["usb_a"]) / eta_u) * eta_b
             - float(r["loads_w"])) / vb
        poss += max(0.0, min(lim, x))
        got += float(r["batt_a"])
    acc = summ["service"]["acceptance"]
    assert acc["ratio"] == pytest.approx(got / poss, abs=2e-3)
    assert summ["service"]["harvest"]["offered_wh"] == pytest.approx(offered / 3600.0, rel=1e-3)
    assert summ["service"]["time_to_absorption_s"] == pytest.approx(t_abs, abs=1e-3)


# ---- source_below_battery and no_charge -------------------------------------------------------

def test_dead_wind_site_is_not_doing_its_job(tmp_path):
    """The README walkthrough's bench motor (12 V/krpm) on the wind site: the bus never reaches
    the battery. Every limit holds; exit 3 with source_below_battery, the margin in the message;
    no_charge is not raised beside it (the cause is named once)."""
    d = base("hut_wind", duration_s=60)
    d["machine"]["ke_v_per_krpm"] = 12
    rc, summ, out = simulate(tmp_path, write(tmp_path, d, "dead_wind"), "dead_wind")
    assert summ["all_held"]
    assert rc == EXIT_SERVICE
    assert summ["verdict"] == "not_doing_its_job"
    assert "source_below_battery" in codes(summ)
    assert not {"no_charge", "loads_exceed_source", "charge_blocked"} & set(codes(summ))
    msg = next(w["message"] for w in summ["service"]["warnings"]
               if w["code"] == "source_below_battery")
    assert "short by" in msg
    # the EMF the meter judged is K_e times the true top speed in the timeseries
    rpm = max(abs(float(r["machine_rpm"])) for r in rows(out))
    assert summ["service"]["source"]["emf_max_v"] == pytest.approx(12.0 * rpm / 1000.0, rel=1e-3)
    vb_min = min(float(r["batt_v"]) for r in rows(out))
    assert summ["service"]["source"]["emf_max_v"] < vb_min / 0.95
    assert summ["service"]["battery_ah"]["net"] <= 0.0


def test_no_charge_spares_a_battery_that_started_full():
    """A full block has nothing to gain; the same site half full and the source cut off
    still gains nothing and is warned (the verdict is not simply switched off)."""
    d = demo_short(30)
    d["battery"]["soc0"] = 1.0
    assert "no_charge" not in codes(run(d).service)
    d["battery"]["soc0"] = 0.5
    assert "no_charge" in codes(run(d, after=no_batt_duty).service)


def no_batt_duty(c, n):
    c.batt_duty = 0  # a controller that never drives its battery converter


def test_no_charge_is_the_controllers_failure_with_a_source_that_could_charge():
    res = run(demo_short(60), after=no_batt_duty)
    msg = next(w["message"] for w in res.service["warnings"] if w["code"] == "no_charge")
    assert "could have covered the loads" in msg
    assert not {"loads_exceed_source", "charge_blocked"} & set(codes(res.service))


def test_loads_exceed_source_names_a_site_too_weak_for_its_loads():
    """A rider too weak for a 60 W lamp on the battery: the battery discharges, and the
    warning says the site, not the controller, is short."""
    d = demo_short(60)
    d["drive"].update(power_start_w=20, power_sustained_w=20)
    d["loads"] = [{"name": "big lamp", "kind": "resistive", "ohm": 2.4}]
    res = run(d)
    sv = res.service
    assert "loads_exceed_source" in codes(sv) and "no_charge" not in codes(sv)
    msg = next(w["message"] for w in sv["warnings"] if w["code"] == "loads_exceed_source")
    assert "the loads took more than the source gave" in msg
    e = sv["energy_wh"]
    assert e["loads"] + e["usb"] > sv["harvest"]["offered_wh"] * 0.9
    assert sv["battery_ah"]["net"] < 0


def test_charge_blocked_is_a_refusal_not_a_charging_failure():
    """A battery held blocked by its temperature window the whole run (fuzz seed 303 drew many
    cold sites): charge_blocked with the reason, not no_charge."""
    def cold(c, n):
        c.stage = ST_BLOCKED
        c.fault |= F_TEMP_WINDOW
        c.batt_duty = 0
    res = run(demo_short(40), after=cold)
    assert "charge_blocked" in codes(res.service) and "no_charge" not in codes(res.service)
    msg = next(w["message"] for w in res.service["warnings"] if w["code"] == "charge_blocked")
    assert "temp_window" in msg and "protective" in msg


# ---- profile_mismatch and its opt-out ---------------------------------------------------------

def flooded_35ah(**top):
    d = base("demo", duration_s=20, **top)
    d["battery"].update(chemistry="flooded", capacity_ah=35)
    return d


def test_35ah_flooded_block_on_the_default_profile(tmp_path):
    rc, summ, _ = simulate(tmp_path, write(tmp_path, flooded_35ah(), "f35"), "f35")
    assert rc == EXIT_SERVICE
    msgs = [w["message"] for w in summ["service"]["warnings"] if w["code"] == "profile_mismatch"]
    assert any("35 Ah on a 12 Ah profile" in m for m in msgs)
    assert any("flooded" in m and "agm" in m for m in msgs)


def test_opt_out_by_name(tmp_path):
    doc = flooded_35ah(accept_mismatch=["chemistry", "capacity_ah"])
    rc, summ, _ = simulate(tmp_path, write(tmp_path, doc, "f35ok"), "f35ok")
    assert "profile_mismatch" not in codes(summ)
    assert rc == 0
    # opting out of one name keeps the other
    doc = flooded_35ah(accept_mismatch=["capacity_ah"])
    assert [m for c, m in service.mismatches(load_doc(doc)) if "flooded" in m]
    assert not [m for c, m in service.mismatches(load_doc(doc)) if "35 Ah" in m]


def test_unknown_opt_out_name_is_refused_with_the_allowed_set(tmp_path, capsys):
    path = write(tmp_path, flooded_35ah(accept_mismatch=["capacity"]), "bad")
    rc = cli.main(["simulate", str(path), "--out", str(tmp_path / "o"), "--quiet"])
    assert rc == 2
    err = capsys.readouterr().err
    assert "accept_mismatch[0]" in err and '"capacity"' in err
    for name in ("chemistry", "cells", "capacity_ah", "supercap_cells"):
        assert name in err


def test_cell_counts_of_battery_and_bank_are_judged():
    d = base("demo")
    d["battery"]["cells"] = 12
    d["supercap"]["cells"] = 5
    msgs = [m for _, m in service.mismatches(load_doc(d))]
    assert any("12 cells on a 6-cell profile" in m for m in msgs)
    assert any("supercap bank of 5 cells on a 6-cell profile" in m for m in msgs)
    assert service.mismatches(load_scenario("demo")) == []  # defaults come from the profile
    d["accept_mismatch"] = ["cells", "supercap_cells"]
    assert service.mismatches(load_doc(d)) == []


# ---- verdicts on controllers broken on purpose --------------------------------------------------

class Broken:
    """The real Supervisor with one thing wrong (the runner takes any controller with .m, .c
    and .tick, as hil does)."""

    def __init__(self, p, after=None, slots=None):
        self.sup = Supervisor(p)
        self.m = self.sup.m
        self.c = self.sup.c
        self.after = after
        self.n = 0
        for slot, value in (slots or {}).items():
            self.sup.charger.cfg[slot] = value

    def tick(self, now_ms):
        self.sup.tick(now_ms)
        self.n += 1
        if self.after:
            self.after(self.c, self.n)


def run(doc, **broken):
    sc = load_doc(copy.deepcopy(doc), "<service test>", str(SCEN))
    return runner.run(sc, progress=False, every=20, controller=Broken(sc.profile, **broken))


def demo_short(seconds):
    d = base("demo", duration_s=seconds)
    d["drive"]["pauses"] = []
    d["drive"]["stop_s"] = None
    return d


def test_dump_waste_fires_on_a_dump_that_works_against_the_stores():
    def dump_on(c, n):
        # 70 % of the dump on, whatever the bus (30 % took 3.2 % of the input from a battery
        # with room, too near the 3 % threshold: a battery converter that holds its current on
        # the loaded bus, as it now does, brought that to 2.4 %; 70 % takes 5.7 %)
        c.dump_duty = max(c.dump_duty, 7000)
    res = run(demo_short(60), after=dump_on)
    assert "dump_waste" in codes(res.service)
    room = res.service["dump"]["while_store_had_room_share"]
    assert room > service.DUMP_WASTE_SHARE
    ref = run(demo_short(60))
    assert "dump_waste" not in codes(ref.service)


def test_stage_chatter_fires_on_a_flickering_temperature_block():
    def flicker(c, n):
        if n % 20 < 10:  # a block that comes and goes every half second, no true crossing
            c.stage = ST_BLOCKED
            c.fault |= F_TEMP_WINDOW
            c.batt_duty = 0
    res = run(demo_short(30), after=flicker)
    assert "stage_chatter" in codes(res.service)
    st = res.service["stage_changes"]
    assert st["temp_edge_crossings"] == 0 and st["temp_window_flips"] > 2
    assert "stage_chatter" not in codes(run(demo_short(30)).service)


def profile_doc(**battery):
    p = json.loads(PROF.read_text())
    p["battery"].update(battery)
    return p


def test_absorption_stuck_past_its_time_limit():
    d = demo_short(900)
    d["battery"]["soc0"] = 0.95
    d["profile"] = profile_doc(absorption_max_minutes=10)
    res = run(d, slots={la._C_ABS_MAX_MS: 2 ** 29})  # the charger's time limit never ends it
    msgs = [w["message"] for w in res.service["warnings"] if w["code"] == "absorption_stuck"]
    assert msgs and "past its time limit of 600 s" in msgs[0]
    ref = run(d)
    assert ref.service["time_to_float_s"] is not None
    assert "absorption_stuck" not in codes(ref.service)


def test_absorption_stuck_with_the_tail_met():
    d = demo_short(600)
    d["battery"]["soc0"] = 0.99
    res = run(d, slots={la._C_TAIL_HOLD_MS: 2 ** 29})  # the tail never ends it
    msgs = [w["message"] for w in res.service["warnings"] if w["code"] == "absorption_stuck"]
    assert msgs and "tail condition" in msgs[0]
    assert res.service["absorption"]["longest_tail_met_s"] >= service.TAIL_HOLDS * 60.0


# ---- exit statuses --------------------------------------------------------------------------------

def test_a_crossed_limit_wins_over_a_service_warning(tmp_path, capsys):
    held = {"held": True, "worst": 1.0, "limit": 2.0, "t_worst_s": 1.0, "margin": 1.0,
            "first_crossed_s": None, "unit": "V"}
    crossed = dict(held, held=False, worst=3.0, margin=-1.0, first_crossed_s=1.0)
    warn = {"warnings": [{"code": "no_charge", "message": "m"}]}
    ok = {"warnings": []}
    for limits, sv, want in (({"a": held}, ok, 0), ({"a": held}, warn, EXIT_SERVICE),
                             ({"a": crossed}, warn, EXIT_CROSSED), ({"a": crossed}, ok, EXIT_CROSSED)):
        summ = {"limits": limits, "service": sv}
        assert finish_quiet(summ, tmp_path) == want
    err = capsys.readouterr().err
    assert "service warning no_charge: m" in err


def finish_quiet(summ, out):
    import host_sim.simulate as sim
    keep = sim.print_table
    sim.print_table = lambda s, out=None: None
    try:
        return finish(None, summ, out)
    finally:
        sim.print_table = keep


# ---- campaigns report warnings apart from crossings -----------------------------------------------

def test_sweep_counts_service_warnings_without_failing(tmp_path):
    d = base("hut_wind", duration_s=30)
    d["machine"]["ke_v_per_krpm"] = 12
    path = write(tmp_path, d, "dead")
    out = tmp_path / "sw"
    rc = cli.main(["sweep", str(path), "--vary", "battery.ambient_c=uniform(10,20)", "--samples",
                   "2", "--workers", "1", "--out", str(out), "--quiet"])
    summ = json.loads((out / "sweep_summary.json").read_text())
    assert rc == 0 and summ["crossed_samples"] == 0
    assert summ["service"]["warnings"]["source_below_battery"] == 2
    with open(out / "sweep.csv") as f:
        assert all("source_below_battery" in r["service_warnings"] for r in csv.DictReader(f))


def test_fuzz_counts_service_warnings_apart(tmp_path):
    out = tmp_path / "fz"
    rc = cli.main(["fuzz", "--examples", "3", "--seed", "3", "--workers", "1", "--max-duration",
                   "20", "--out", str(out), "--quiet"])
    summ = json.loads((out / "fuzz_summary.json").read_text())
    with open(out / "fuzz.csv") as f:
        recs = list(csv.DictReader(f))
    n = {}
    for r in recs:
        for code in r["service_warnings"].split():
            n[code] = n.get(code, 0) + 1
    assert summ["service"]["warnings"] == dict(sorted(n.items()))
    assert rc == (1 if summ["failures"] else 0)  # warnings alone never fail a campaign
    for k, w in summ["service"]["worst"].items():
        vals = [float(r[k]) for r in recs if r[k] != ""]
        assert w["value"] == (min(vals) if k.endswith("ratio") else max(vals))


def test_best_power_of_a_person_is_the_best_steady_speed():
    """BestPower for a pedal drive against a brute-force scan of the same steady state."""
    from host_sim.plant.plant import Plant
    sc = load_scenario("demo")
    pl = Plant(sc)
    d = pl.drive
    d.begin_period(10.0, 0.05)
    bp = service.BestPower(pl)
    best = 0.0
    for j in range(1, 20001):
        v = 1.15 * d.w_target * j / 20000
        best = max(best, bp.elec_at(d, v))
    assert bp.human_best(d) == pytest.approx(best, rel=1e-4)
    assert 0.0 < best < d.p_avail  # less than the person gives: gear, friction, winding


def test_harvest_is_null_with_a_reason_where_not_defined():
    d = {"name": "torque", "duration_s": 5, "drive": {"kind": "scripted", "mode": "torque",
                                                      "points": [[0, 2.0]]}}
    res = runner.run(load_doc(d), progress=False, every=20)
    h = res.service["harvest"]
    assert h["ratio"] is None and "torque" in h["null_reason"]
    assert res.service["acceptance"]["ratio"] is None
    assert math.isnan(res.series["p_best_w"][0])
    # a speed-scripted drive: the matched load, E^2 / (4 R_a), at the true speed
    d["drive"] = {"kind": "scripted", "mode": "speed", "points": [[0, 1000.0]]}
    res = runner.run(load_doc(d), progress=False, every=1)
    m = load_doc(d).doc["machine"]
    e = m["ke_v_per_krpm"] * abs(res.series["machine_rpm"][-1]) / 1000.0
    assert res.series["p_best_w"][-1] == pytest.approx(e * e / (4 * m["ra_ohm"]), rel=1e-9)


def test_docs_name_every_column_and_service_key(demo):
    """docs/simulate.md documents every timeseries.csv column and every service key."""
    text = (Path(__file__).resolve().parents[2] / "docs" / "simulate.md").read_text()
    for name in runner.COLUMN_NAMES:
        assert "`%s`" % name in text, name
    _, summ, _ = demo
    for k in summ:
        assert "`%s" % k in text, k

    def leaves(d, path):
        for k, v in d.items():
            if isinstance(v, dict) and k not in ("loads_each", "reasons_s"):
                yield from leaves(v, path + [k])
            else:
                yield path + [k]
    for path in leaves(summ["service"], []):
        assert path[-1] in text, ".".join(path)


# ---- figures bounded as defined; the causes of nonsense figures found by fuzz seed 303 ----------

def test_dump_from_storage_is_its_own_figure_and_warning():
    """Fuzz seed 303 example 239 (hut_wind): a wrong bus divider tripped the guard at a true bus
    of 4.7 V and the dump, fully on, drained the supercap through its OR-ing diode; dump/input
    read 3.5. Here the rider stops and a broken controller keeps the dump on: the stores feed
    it. The drained energy is dump_from_storage, not the source's dump share nor dump_waste."""
    d = demo_short(40)
    d["drive"]["stop_s"] = 5.0

    def dump_on(c, n):
        c.dump_duty = 10000
        c.batt_out = 1
    sv = run(d, after=dump_on).service
    assert "dump_from_storage" in codes(sv)
    assert sv["dump"]["from_storage_wh"] > service.STORAGE_DUMP_J / 3600.0
    assert 0.0 <= sv["dump_share"] <= 1.0
    assert sv["dump"]["while_store_had_room_share"] <= sv["dump_share"] + 1e-9
    # what the source fed the dump plus what the stores did is the whole dump
    src = sv["dump_share"] * (sv["energy_wh"]["drive_in"] + max(0.0, -sv["energy_wh"]["rotor_and_bus_cap"]))
    assert src + sv["dump"]["from_storage_wh"] == pytest.approx(sv["energy_wh"]["dump"], abs=2e-3)
    assert "dump_from_storage" not in codes(run(demo_short(40)).service)


def test_acceptance_judges_only_periods_with_something_to_accept():
    """Fuzz seed 303 example 182 (demo): the rider stopped for good at 10.8 s and the battery
    served the USB port in bulk for 140 s: mean -1.26 A over a possible 0.0085 A read -148. A
    period where the source could give the battery almost nothing judges nothing; a battery
    that gave charge where it could have taken some accepted none (0, not negative)."""
    d = demo_short(60)
    d["drive"]["stop_s"] = 3.0
    acc = run(d).service["acceptance"]
    assert acc["ratio"] is None and "only" in acc["null_reason"]
    assert acc["mean_a"] < 0.0  # the battery did discharge in bulk: the mean says so
    acc = run(demo_short(30)).service["acceptance"]
    assert 0.0 <= acc["ratio"] <= 1.0 and acc["judged_s"] >= service.ACCEPT_MIN_S


def test_harvest_is_null_where_the_stores_gave_more_than_was_delivered():
    d = demo_short(40)
    d["drive"]["stop_s"] = 3.0  # the port drains the battery after a 3 s ride
    h = run(d).service["harvest"]
    assert h["delivered_wh"] < 0 and h["ratio"] is None and "stores gave out" in h["null_reason"]


def test_a_full_battery_has_no_room_for_the_dump_to_waste():
    """Fuzz seed 303 example 136 (demo, a 3-cell block at state of charge 1.0): the battery sat in
    bulk taking nothing while the dump burnt the surplus, and its room was counted at the full
    charge limit (dump_waste). A full block has only a taper left: no room."""
    d = demo_short(60)
    d["battery"]["soc0"] = 1.0
    sv = run(d).service
    assert "dump_waste" not in codes(sv)
    keep = service.FULL_SOC
    service.FULL_SOC = 1.01  # the same run judged without the full-battery guard
    try:
        sv2 = run(d).service
    finally:
        service.FULL_SOC = keep
    assert sv2["dump"]["while_store_had_room_wh"] > sv["dump"]["while_store_had_room_wh"]


def test_service_figures_stay_within_their_bounds_on_generated_sites():
    """Invariant over 20 generated examples (fuzz's generator, 20 s each): 0 <= dump_share <= 1
    and the room share <= dump_share (shares of what the source fed, the rotor's given-back
    energy counted as input); 0 <= harvest <= 1 + 5 % + the rotor's given-back energy over the
    offered (the best power is a steady-state figure; a slowing rotor or a transient can give
    more for a while; 5 % ours); 0 <= acceptance <= 1.05 (the bank can feed the battery beside
    the source); the storage drain is not negative."""
    from host_sim import fuzz, scenario_gen
    from host_sim.scenario import load_doc as ld
    bases = fuzz.load_bases([])
    for i in range(20):
        doc, _ = scenario_gen.generate(bases, 303, i, 20.0)
        res = runner.run(ld(doc, "<bounds %d>" % i), progress=False, every=1 << 30)
        sv = res.service
        e = sv["energy_wh"]
        if sv["dump_share"] is not None:
            assert 0.0 <= sv["dump_share"] <= 1.0 + 1e-6, i
            assert sv["dump"]["while_store_had_room_share"] <= sv["dump_share"] + 1e-6, i
        assert sv["dump"]["from_storage_wh"] >= 0.0
        h = sv["harvest"]
        if h["ratio"] is not None:
            given = max(0.0, -e["rotor_and_bus_cap"])
            assert 0.0 <= h["ratio"] <= 1.05 + given / h["offered_wh"], i
        a = sv["acceptance"]
        if a["ratio"] is not None:
            assert 0.0 <= a["ratio"] <= 1.05, i


def _die(ctx, t):
    import os
    os._exit(9)  # a worker process that dies mid-campaign


def test_a_campaign_that_could_not_finish_exits_4_not_3():
    """3 is simulate's "limits held, but the system did not do its job"; a campaign whose worker
    died is an internal failure: 4, like every internal error (cli.INTERNAL_ERROR)."""
    from host_sim import distrib
    from host_sim.errors import UserError
    assert distrib.EXIT_LOST == cli.INTERNAL_ERROR == 4 != EXIT_SERVICE
    with pytest.raises(UserError) as e:
        with distrib.Pool(2) as pool:
            list(pool.imap(_die, {}, [(0, 1), (1, 2)]))
    assert e.value.exit_code == 4 and "worker process died" in str(e.value)
    for mod in ("fuzz", "sweep"):
        ap = cli.build_parser()
        sub = next(a for a in ap._actions if a.dest == "cmd").choices[mod]
        assert "4: the" in sub.description and "3: the" not in sub.description
