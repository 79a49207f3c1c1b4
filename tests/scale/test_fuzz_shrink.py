# A controller broken on purpose (the hidden --break-controller no_cap_clamp: the supercap clamp
# is ignored, installed in each worker process) must be caught by `spinrail fuzz`: it finds the
# crossing, shrinks the scenario, writes a file that replays the same crossing with the same
# breakage, while the real controller holds that limit on the same file.
import json

import pytest

from host_sim import fuzz
from host_sim.scenario_gen import Shrinker

from .conftest import run_cli

CAP_LIMITS = ("cap_clamp", "cap_cell")


def test_fuzz_finds_shrinks_and_writes_a_replayable_failure(tmp_path, short_crank, capsys):
    out = tmp_path / "out"
    rc = run_cli(["fuzz", short_crank, "--examples", 10, "--seed", 2, "--max-duration", 20,
                  "--workers", 2, "--out", out, "--quiet", "--break-controller", "no_cap_clamp"])
    printed = capsys.readouterr().out
    assert rc == 1
    summ = json.loads((out / "fuzz_summary.json").read_text())
    caught = [f for f in summ["failed_examples"] if f["failed"] in CAP_LIMITS]
    assert caught, summ["failed_examples"]
    rows = {int(r.split(",")[0]): r for r in (out / "fuzz.csv").read_text().splitlines()[1:]}
    for f in caught:
        path = f["file"]
        assert "spinrail simulate %s --out" % path in printed
        doc = json.loads(open(path).read())
        sh = f["shrink"]
        assert sh["runs"] >= 1
        orig = rows[f["i"]].split(",")
        assert doc["duration_s"] <= float(orig[3])  # shortened or kept, never longer
        assert len(doc.get("events", [])) <= int(orig[4])
        with fuzz.mutation("no_cap_clamp"):
            broken = fuzz.run_doc(doc)
        assert not broken.limits[f["failed"]].held  # the file replays the crossing ...
        real = fuzz.run_doc(doc)
        assert real.limits[f["failed"]].held  # ... and it is the breakage that crosses it


def test_mutation_is_undone_after_use():
    from controller import supercap
    orig = supercap.CapClamp.update
    with fuzz.mutation("no_cap_clamp"):
        assert supercap.CapClamp.update is not orig
    assert supercap.CapClamp.update is orig


def test_shrinker_is_deterministic_and_keeps_the_failure():
    """The shrinker on a synthetic predicate (no simulation): a document 'fails' while its
    ambient is above 40 C and it has a bus_surge event. The result keeps exactly what the
    failure needs, and two shrinks give the same document."""
    base = {"raw": {"duration_s": 100, "drive": {"kind": "pedal"}, "battery": {"soc0": 0.5}},
            "resolved": {"battery": {"soc0": 0.5, "ambient_c": 25.0}}}
    doc = {"duration_s": 100.0, "drive": {"kind": "pedal", "effort": 1.3},
           "battery": {"soc0": 0.9, "ambient_c": 48.0},
           "events": [{"t_s": 10.0, "kind": "drive_stop"},
                      {"t_s": 20.0, "kind": "bus_surge"},
                      {"t_s": 30.0, "kind": "sensor_open", "sensor": "bus_v"}]}

    def fails(d):
        bad = (d.get("battery", {}).get("ambient_c", 25.0) > 40.0
               and any(e["kind"] == "bus_surge" for e in d.get("events", []))
               and d["duration_s"] > 20.0)
        return bad, (20.0 if bad else None)

    a = Shrinker(fails, base, 100).shrink(doc, 20.0)
    b = Shrinker(fails, base, 100).shrink(doc, 20.0)
    assert a == b
    assert fails(a)[0]
    assert [e["kind"] for e in a["events"]] == ["bus_surge"]
    assert a["duration_s"] == 21.0
    assert a["battery"].get("soc0") == 0.5 and "effort" not in a["drive"]
    assert 40.0 < a["battery"]["ambient_c"] < 48.0  # moved toward 25 C while still failing


@pytest.mark.parametrize("argv, words", [
    (["fuzz", "no_such_scenario"], ["no_such_scenario"]),
    (["fuzz", "demo", "--examples", 0], ["--examples", "0"]),
    (["fuzz", "demo", "--break-controller", "nope"], ["--break-controller", "no_cap_clamp"]),
])
def test_fuzz_bad_input_exits_2(tmp_path, capsys, argv, words):
    assert run_cli(argv + ["--out", tmp_path]) == 2
    err = capsys.readouterr().err
    assert err.startswith("spinrail: ")
    for w in words:
        assert w in err
