# The oracle's battery-current rule: a current above limit x 1.1 counts as a crossing once it
# has lasted longer than one control period; a single-period spike is let pass, but its peak is
# reported beside the worst value (summary.json "peak", and a line in `spinrail simulate`).
import io

from controller.signals import ST_BULK
from host_sim.limitcheck import BATT_A_TOL, LimitChecker
from host_sim.scenario import load_scenario
from host_sim.simulate import print_table

PERIOD_S = 0.05


def _snap(batt_a):
    return {"batt_a": batt_a, "batt_connected": 1, "batt_v": 12.5, "batt_temp_c": 25.0,
            "cap_v": 10.0, "cap_v_int": 10.0, "cell_v_max": 2.0, "bus_v": 15.0}


class _Cmds:
    pass


def _run(currents):
    p = load_scenario("demo").profile
    chk = LimitChecker(p, PERIOD_S, 28.0)
    for k, a in enumerate(currents):
        chk.check((k + 1) * PERIOD_S, _snap(a), _Cmds(), ST_BULK)
    return chk.lim["batt_current"], p.chg_limit_ma / 1000.0 * BATT_A_TOL


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
