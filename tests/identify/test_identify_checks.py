"""What the identifiers refuse, warn about and write: units outside physical ranges, values the
scenario would reject, the fields --write changed, a machine that cannot charge the site's
battery, --json on every part, printing to the precision of the interval, and the meter's
calibration tolerance in the intervals."""
import json
import re

import numpy as np
import pytest

from host_sim import scenario
from host_sim.identify import benchgen, site
from host_sim.identify.common import pm

BENCH = benchgen.BENCH_DIR
HUT = scenario.SCEN_DIR / "hut_wind.json"


def _machine_csv(path, scale_v=1.0, scale_a=1.0, ke=12.0, ra=1.5):
    rpm, v, i = benchgen.machine_log(np.random.default_rng(5),
                                     dict(benchgen.MACHINE, ke_v_per_krpm=ke, ra_ohm=ra),
                                     speeds_rpm=(400, 700, 1000, 1300), loads_ohm=(None, 12, 6, 3))
    benchgen.write_csv(path, ("rpm", "v_term", "i_a"), (rpm, v * scale_v, i * scale_a),
                       ("%.1f", "%.3f", "%.4f"))
    return path


def test_machine_log_in_millivolts_is_refused_naming_the_column(spinrail, tmp_path):
    target = tmp_path / "site.json"
    target.write_text(HUT.read_text())
    rc, out, err = spinrail("identify", "machine", _machine_csv(tmp_path / "mv.csv", 1000.0),
                            "--write", target)
    assert rc == 2 and out == ""
    assert "column 'v_term'" in err and "mV" in err
    assert target.read_text() == HUT.read_text()  # nothing written


def test_battery_current_in_milliamps_is_refused_naming_the_column(spinrail, tmp_path):
    _, _, t, v, i = benchgen.battery_log(np.random.default_rng(6))
    p = tmp_path / "ma.csv"
    benchgen.write_csv(p, ("t_s", "v", "i_a"), (t, v, 1000 * i), ("%.2f", "%.4f", "%.1f"))
    rc, out, err = spinrail("identify", "battery", p)
    assert rc == 2 and "column 'i_a'" in err and "mA" in err
    p2 = tmp_path / "mv.csv"
    benchgen.write_csv(p2, ("t_s", "v", "i_a"), (t, 1000 * v, i), ("%.2f", "%.1f", "%.3f"))
    rc, out, err = spinrail("identify", "battery", p2)
    assert rc == 2 and "column 'v'" in err and "mV" in err


def test_write_never_puts_a_value_the_scenario_rejects(spinrail, tmp_path):
    # a 600 V/krpm machine is a real reading in volts, but the scenario allows 0.5-500 V/krpm
    target = tmp_path / "site.json"
    target.write_text(HUT.read_text())
    rc, out, err = spinrail("identify", "machine", _machine_csv(tmp_path / "big.csv", ke=600.0),
                            "--write", target)
    assert rc == 2 and "not written" in err and "machine.ke_v_per_krpm" in err
    assert target.read_text() == HUT.read_text()


def test_write_lists_each_change_and_the_json_carries_it(spinrail, tmp_path):
    target = tmp_path / "site.json"
    target.write_text(HUT.read_text())
    rc, out, err = spinrail("identify", "machine", BENCH / "machine.csv", "--write", target,
                            "--json")
    assert rc == 0, err
    res = json.loads(out)
    ke = json.loads(target.read_text())["machine"]["ke_v_per_krpm"]
    assert "machine.ke_v_per_krpm: 50 -> %s" % ke in err.replace("50.0", "50")
    changes = {c["field"]: (c["old"], c["new"]) for c in res["written"]["changes"]}
    assert changes["machine.ke_v_per_krpm"] == (50, ke)
    assert res["written"]["headroom"]["charges_at_working"] is True
    assert not any("cannot charge" in w for w in res["warnings"])
    scenario.load_scenario(str(target))  # the written file loads


def test_a_machine_that_cannot_charge_the_battery_is_warned_about(spinrail, tmp_path):
    # the old walkthrough: a 12 V/krpm bench motor written into the direct-drive wind site
    target = tmp_path / "site.json"
    target.write_text(HUT.read_text())
    rc, out, err = spinrail("identify", "machine", _machine_csv(tmp_path / "m12.csv"),
                            "--write", target, "--json")
    assert rc == 0, err
    res = json.loads(out)
    assert any("cannot charge the battery" in w for w in res["warnings"])
    assert "warning: the machine cannot charge the battery" in err
    h = res["written"]["headroom"]
    assert not h["charges_at_working"] and not h["charges_at_top"]


def test_charge_headroom_physics():
    # hut_wind: 0.9 m rotor at tip-speed ratio 6 in 6.5 m/s turns 6 x 6.5 / 0.9 rad/s
    # = 413.8 rpm, direct drive; runaway 1.6 x; 50 V/krpm gives 20.7 V there
    doc = scenario.load_scenario(str(HUT)).doc
    h = site.charge_headroom(doc)
    rpm = 6 * 6.5 / 0.9 * 60 / (2 * np.pi)
    assert h["machine_rpm_working"] == pytest.approx(rpm, abs=0.1)
    assert h["emf_working_v"] == pytest.approx(50 * rpm / 1000, abs=1e-3)
    assert h["emf_top_v"] == pytest.approx(1.6 * 50 * rpm / 1000, abs=1e-3)
    # the need: the block's OCV at soc0 over the buck's largest duty, plus the bridge
    assert h["need_v"] == pytest.approx(h["battery_ocv_v"] / 0.95 + h["bridge_v"], abs=2e-3)
    assert h["charges_at_working"] and site.charge_warning(h) is None
    doc["machine"]["ke_v_per_krpm"] = 25.0  # 10.3 V working, 16.6 V at the top
    h = site.charge_headroom(doc)
    assert not h["charges_at_working"] and h["charges_at_top"]
    assert "only above the working speed" in site.charge_warning(h)
    doc["drive"] = {"kind": "scripted", "mode": "torque", "points": [[0, 1]]}
    assert site.charge_headroom(doc) is None  # a torque drive sets no speed


@pytest.mark.parametrize("part, extra", [("machine", ()), ("supercap", ()),
                                         ("battery", ("--capacity-ah", 100))])
def test_json_on_every_part(spinrail, part, extra):
    rc, out, err = spinrail("identify", part, BENCH / (part + ".csv"), "--json", *extra)
    assert rc == 0, err
    res = json.loads(out)
    assert {"part", "values", "method", "source", "calibration", "warnings"} <= set(res)
    assert res["part"] == part and res["method"] and res["source"]
    for q in res["values"].values():
        if isinstance(q, dict) and q.get("value") is not None and "ci95" in q:
            assert q["ci95"] > 0 and q["unit"]


def test_values_print_to_the_precision_of_their_interval():
    assert pm(12.130123, 0.0704) == ("12.130", "+/- 0.070")
    assert pm(34.7123, 9.71) == ("34.7", "+/- 9.7")
    assert pm(0.0031517, 0.000203) == ("0.00315", "+/- 0.00020")
    assert pm(1234.5, 56.0) == ("1234", "+/- 56")


def test_calibration_tolerance_widens_the_intervals(spinrail):
    widths = []
    for tol in ("0", "0.5", "2"):
        rc, out, err = spinrail("identify", "battery", BENCH / "battery.csv", "--json",
                                "--gain-tol-pct", tol)
        v = json.loads(out)["values"]
        widths.append((v["ocv_v"]["ci95"], v["ocv_v"]["ci95_noise"], v["r0_ohm"]["ci95"]))
    assert widths[0][0] == pytest.approx(widths[0][1])  # no tolerance: noise alone
    assert widths[0][0] < widths[1][0] < widths[2][0]
    # a gain error of g on a 12.1 V reading moves it by 12.1 g: 2 x 12.1 x 0.02 / sqrt 3
    assert widths[2][0] == pytest.approx(np.hypot(widths[2][1], 2 * 12.13 * 0.02 / 3 ** 0.5),
                                         rel=0.02)
    rc, out, err = spinrail("identify", "battery", BENCH / "battery.csv", "--gain-tol-pct", "50")
    assert rc == 2 and "--gain-tol-pct" in err


def test_clipped_and_held_readings_are_named(spinrail, tmp_path):
    rpm, v, i = benchgen.machine_log(np.random.default_rng(8))
    v = np.minimum(v, np.sort(v)[-5])  # a meter range below the top four readings
    p = tmp_path / "clip.csv"
    benchgen.write_csv(p, ("rpm", "v_term", "i_a"), (rpm, v, i), ("%.1f", "%.3f", "%.3f"))
    rc, out, err = spinrail("identify", "machine", p)
    assert rc == 0 and "column 'v_term' reads exactly" in err and "full scale" in err
    _, t, v, i, _ = benchgen.supercap_log(np.random.default_rng(9))
    v[100:112] = v[100]  # a reading stuck for 12 rows in the middle of the discharge
    p = tmp_path / "held.csv"
    benchgen.write_csv(p, ("t_s", "v", "i_a"), (t, v, i), ("%.2f", "%.4f", "%.4f"))
    rc, out, err = spinrail("identify", "supercap", p, "--cells", 6)
    assert rc == 0 and "unchanged for 12 rows" in err


@pytest.mark.parametrize("part", ["machine", "supercap", "battery"])
def test_help_prints_and_names_method_and_sources(part, capsys):
    from tests.identify.conftest import _parser
    with pytest.raises(SystemExit) as e:
        _parser().parse_args(["identify", part, "--help"])
    assert e.value.code == 0
    text = capsys.readouterr().out
    assert "--json" in text and "--gain-tol-pct" in text and "0.5 %" in text
    # no pointer to files outside the repository (the values' list or the engineering guide)
    assert "until checked" not in text and not re.search(r"check.values|shared[/]|GUIDE", text)
    assert {"machine": "HC3", "supercap": "IEC 62391-1", "battery": "Battery Council"}[part] in text
