# Scenario files: defaults filled in, and every bad field named with its file, path, value and
# allowed range (unknown fields are errors so typos never pass silently).
import json

import pytest

from host_sim.scenario import ScenarioError, builtin_names, load_doc, load_scenario


def _write(tmp_path, doc, name="s.json"):
    p = tmp_path / name
    p.write_text(json.dumps(doc))
    return str(p)


def test_builtins_present_and_valid():
    names = builtin_names()
    for n in ("demo", "hut_wind", "crank_relief", "fault_parade"):
        assert n in names
    for n in names:
        sc = load_scenario(n)
        assert sc.name == n
        assert sc.source.endswith(n + ".json")
        json.dumps(sc.doc)  # JSON-able
        json.dumps(sc.profile_doc)


def test_minimal_scenario_gets_every_default(tmp_path):
    sc = load_scenario(_write(tmp_path, {"drive": {"kind": "pedal"}}))
    d = sc.doc
    assert d["duration_s"] == 600 and d["seed"] == 1
    assert d["drive"]["cadence_rpm"] == 70
    assert d["battery"]["chemistry"] == "agm"  # from the default profile
    assert d["battery"]["capacity_ah"] == 12
    assert d["supercap"]["cells"] == 6
    assert d["usb"]["network"]["scheme"] == "dcp"
    assert d["solver"]["max_substep_ms"] == 25
    assert sc.profile.cells == 6
    assert sc.name == "s"


def test_hut_wind_uses_its_profile():
    sc = load_scenario("hut_wind")
    assert sc.profile.mppt and sc.profile.overspeed_mv == 22000
    assert sc.doc["battery"]["chemistry"] == "flooded"


@pytest.mark.parametrize("doc,path,value,allowed", [
    ({"drive": {"kind": "pedal", "cadence_rpm": 500}}, "drive.cadence_rpm", "500", "10 to 200 rpm"),
    ({"drive": {"kind": "pedal"}, "machine": {"ra_ohm": -1}}, "machine.ra_ohm", "-1",
     "0.005 to 100 ohm"),
    ({"drive": {"kind": "wind", "cp_max": 0.7}}, "drive.cp_max", "0.7", "0.05 to 0.593"),
    ({"drive": {"kind": "pedal"}, "battery": {"soc0": 1.2}}, "battery.soc0", "1.2", "0 to 1"),
    ({"drive": {"kind": "pedal"}, "bus": {"capacitance": 1000}}, "bus.capacitance", "1000",
     "no such field"),
    ({"drive": {"kind": "pedal"}, "gear": {"ratio": "16"}}, "gear.ratio", '"16"', "a number"),
    ({"drive": {"kind": "rowing"}}, "drive.kind", '"rowing"', "one of pedal, crank"),
    ({"drive": {"kind": "pedal"}, "colour": "red"}, "colour", '"red"', "no such top-level"),
    ({"drive": {"kind": "pedal"}, "events": [{"t_s": 5, "kind": "sensor_stuck",
                                               "sensor": "bus_v"}]},
     "events[0].value", "null", "a value"),
    ({"drive": {"kind": "pedal", "pauses": [[10, 5]]}}, "drive.pauses[0][1]", "5",
     "an end after the start"),
    ({"drive": {"kind": "pedal"}, "usb": {"devices": [{"max_a": 9}]}}, "usb.devices[0].max_a",
     "9", "0.05 to 5 A"),
    ({"seed": 1.5, "drive": {"kind": "pedal"}}, "seed", "1.5", "a whole number"),
    ({"drive": {"kind": "pedal"}, "usb": {"network": {"dcp_short_ohm": 500}}},
     "usb.network.dcp_short_ohm", "500", "BC1.2 ch. 5 resistances table"),
])
def test_bad_field_named_with_file_value_and_range(tmp_path, doc, path, value, allowed):
    f = _write(tmp_path, doc)
    with pytest.raises(ScenarioError) as e:
        load_scenario(f)
    msg = str(e.value)
    assert msg.startswith(f + ": " + path + " = " + value + ": allowed"), msg
    assert allowed in msg


def test_missing_drive(tmp_path):
    f = _write(tmp_path, {"seed": 3})
    with pytest.raises(ScenarioError, match=r"s\.json: drive = null: allowed an object with a kind"):
        load_scenario(f)


def test_bad_profile_is_reported_with_the_scenario(tmp_path):
    f = _write(tmp_path, {"drive": {"kind": "pedal"},
                          "profile": {"battery": {"absorption_v_per_cell": 2.9}}})
    with pytest.raises(ScenarioError) as e:
        load_scenario(f)
    assert str(e.value).startswith(f + ": profile: battery.absorption_v_per_cell = 2.9")


def test_profile_by_relative_path(tmp_path):
    prof = {"battery": {"capacity_ah": 40, "charge_limit_a": 8}}
    (tmp_path / "p.json").write_text(json.dumps(prof))
    sc = load_scenario(_write(tmp_path, {"drive": {"kind": "crank"}, "profile": "p.json"}))
    assert sc.profile.capacity_mah == 40000
    assert sc.doc["battery"]["capacity_ah"] == 40
    assert sc.doc["drive"]["cadence_rpm"] == 60  # crank defaults differ from pedal


def test_unknown_builtin_names_the_choices():
    with pytest.raises(ScenarioError, match="built-ins: .*demo"):
        load_scenario("no_such_scenario")


def test_not_json(tmp_path):
    p = tmp_path / "x.json"
    p.write_text("{drive: pedal")
    with pytest.raises(ScenarioError, match="x.json: not valid JSON"):
        load_scenario(str(p))


def test_inline_doc_is_not_mutated():
    doc = {"drive": {"kind": "pedal"}}
    load_doc(doc)
    assert doc == {"drive": {"kind": "pedal"}}


def test_docs_field_tables_match_the_schema():
    from pathlib import Path

    from host_sim.scenario import schema_markdown

    text = (Path(__file__).resolve().parents[2] / "docs" / "scenario.md").read_text()
    a = text.index("<!-- fields:begin -->\n") + len("<!-- fields:begin -->\n")
    b = text.index("\n<!-- fields:end -->")
    assert text[a:b] == schema_markdown(), "regenerate the tables in docs/scenario.md"
