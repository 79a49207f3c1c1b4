# The oracle's battery-current rule: a current above limit x 1.1 counts as a crossing once it
# has lasted longer than one control period; a single-period spike is let pass, but its peak is
# reported beside the worst value (summary.json "peak", and a line in `spinrail simulate`).
import io

from controller.signals import ST_BULK
from host_sim.limitcheck import BATT_A_TOL, CAP_A_TOL, DocLimits, LimitChecker
from host_sim.scenario import load_scenario
from host_sim.simulate import print_table

PERIOD_S = 0.05


def _snap(batt_a, cap_a=0.0):
    return {"batt_a": batt_a, "batt_connected": 1, "batt_v": 12.5, "batt_temp_c": 25.0,
            "cap_v": 10.0, "cap_v_int": 10.0, "cap_a": cap_a, "cell_v_max": 2.0, "bus_v": 15.0}


class _Cmds:
    pass


def _run(currents, name="batt_current"):
    doc = load_scenario("demo").profile_doc
    chk = LimitChecker(doc, 28.0)
    assert chk.period_s == PERIOD_S
    for k, a in enumerate(currents):
        snap = _snap(a) if name == "batt_current" else _snap(0.0, a)
        chk.check((k + 1) * PERIOD_S, snap, _Cmds(), ST_BULK)
    lims = DocLimits(doc)
    band = (lims.chg_limit_a * BATT_A_TOL if name == "batt_current"
            else lims.cap_limit_a * CAP_A_TOL)
    return chk.lim[name], band


def test_one_period_spike_passes_but_its_peak_is_reported():
    lim, band = _run([2.0, 2.0, 3.14, 2.0, 2.0])
    assert lim.held
    assert lim.worst <= band  # the worst value the rule judges is clipped at the band
    d = lim.as_dict()
    assert d["peak"] == 3.14 and d["t_peak_s"] == round(3 * PERIOD_S, 4)


def test_two_period_excursion_crosses():
    band = _run([])[1]
    lim, _ = _run([2.0, band + 0.2, band + 0.3, 2.0])
    assert not lim.held
    assert lim.crossed_at_s == 3 * PERIOD_S
    assert lim.peak == band + 0.3


def test_supercap_current_is_judged_like_the_batterys():
    # the supercap's charge current (2.0 A in the default profile) under the same rule: the
    # 3.1-3.2 A single-period spikes seen in campaigns pass but show as the peak; two periods
    # above 2.2 A cross
    lim, band = _run([1.9, 3.14, 1.9], "cap_current")
    assert band == 2.0 * 1.1
    assert lim.held and lim.worst <= band
    assert lim.as_dict()["peak"] == 3.14
    lim, _ = _run([1.9, 2.3, 2.4, 1.9], "cap_current")
    assert not lim.held
    assert lim.crossed_at_s == 3 * PERIOD_S and lim.worst == 2.4
    # a discharging bank (current out of it) is no charge current
    lim, _ = _run([-5.0, -5.0, -5.0], "cap_current")
    assert lim.held


def test_simulate_prints_the_spike_it_let_pass():
    lim, band = _run([2.0, 3.14, 2.0])
    summ = {"scenario": "t", "duration_s": 1.0, "wall_s": 1.0, "sim_speedup": 1.0,
            "limits": {"batt_current": lim.as_dict()}, "energy_j": {}, "balance_error_pct": 0.0,
            "stage_time_s": {}, "final": {"batt_soc": 0.5}, "faults_seen": []}
    out = io.StringIO()
    print_table(summ, out)
    assert "peak 3.140 A at 0.1 s" in out.getvalue()
    # within the band: no such line
    lim, band = _run([2.0, 2.2, 2.0])
    summ["limits"] = {"batt_current": lim.as_dict()}
    out = io.StringIO()
    print_table(summ, out)
    assert "peak" not in out.getvalue()


def test_a_campaign_reports_its_largest_spike():
    """fuzz: the campaign summary carries the largest raw battery current over its examples,
    relative to each example's own band (the one-period spikes the rule lets pass), and the
    printout names it when it is above that band."""
    from host_sim.fuzz import Campaign, print_summary, summary_doc

    def rec(i, currents):
        lim, _ = _run(currents)
        return {"i": i, "base": "demo", "failed": None, "error": None, "duration_s": 1.0,
                "limits": {"batt_current": lim.as_dict()}}
    big = rec(3, [2.0])  # another base: a 12.5 A limit, a 13.0 A spike is under its band
    big["base"] = "hut"
    big["limits"]["batt_current"].update(peak=13.0, limit=13.75)
    camp = Campaign([rec(0, [2.0, 2.5]), rec(1, [2.0, 3.14, 2.0]), rec(2, [2.2]), big], 1.0,
                    "this process", 1, [{"name": "demo"}])
    assert summary_doc(camp, [])["peak"] == {"batt_current": {
        "peak": 3.14, "limit": 2.64, "example": 1, "base": "demo"}}
    out = io.StringIO()
    print_summary(camp, [], "out", out)
    assert "largest one-period spike 3.14 against its band of 2.64 A (example 1, demo)" in \
        out.getvalue()


# ---- the checker stands apart from the controller's profile conversion ----------------------
# A planted conversion bug: half the temperature compensation. The controller then regulates a
# warm battery to a ceiling too high; a checker that took its limits from the converted Profile
# moved with the bug and saw nothing. The checker works from the profile document, so the
# closed loop reports the crossing.
def _warm_demo(temp_c, soc0, seconds):
    import copy

    from host_sim.scenario import load_doc
    demo = load_scenario("demo")
    doc = copy.deepcopy(demo.doc)
    doc["profile"] = copy.deepcopy(demo.profile_doc)
    doc["battery"].update(ambient_c=temp_c, temp0_c=temp_c, soc0=soc0)
    doc["duration_s"] = seconds
    return load_doc(doc, demo.source)


def test_a_planted_conversion_bug_shows_as_a_closed_loop_crossing(monkeypatch):
    import controller.profile_battery as pb
    from host_sim import runner

    def run():
        sc = _warm_demo(40.0, 0.9, 400.0)
        return sc, runner.run(sc, progress=False).limits["batt_ceiling"]

    sc, lim = run()
    assert lim.held, lim.as_dict()  # the right conversion holds the ceiling ...
    good_tc = sc.profile.tc_uv_dc_cell
    convert = pb.battery

    def half_compensation(p, b):
        convert(p, b)
        p.tc_uv_dc_cell //= 2

    monkeypatch.setattr(pb, "battery", half_compensation)
    sc, lim = run()
    assert sc.profile.tc_uv_dc_cell * 2 == good_tc  # the bug is in place
    assert not lim.held, lim.as_dict()  # ... the planted bug crosses it
    # the document's ceiling at 40 C: 6 x (2.42 V - 4 mV x 15) + 0.1 V = 14.26 V (the battery
    # warms a little while charging, so the limit at the worst point is a few mV lower)
    assert 14.2 < lim.limit <= 14.26 + 1e-9
    # a limit taken from the bugged Profile would have let it pass: 6 x (2.42 - 0.002 x 15) + 0.1
    p = sc.profile
    bugged_limit_v = p.cells * (p.abs_cell_mv / 1000.0 + p.tc_uv_dc_cell * 1e-5 * (
        40.0 - p.ref_temp_dc / 10.0)) + p.over_margin_mv / 1000.0
    assert lim.worst < bugged_limit_v
