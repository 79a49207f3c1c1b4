"""The example logs in host_sim/data/bench/ are what the generator writes (seed 2024), and each
identifies back to the demo parts it was written from (host_sim/identify/benchgen.py)."""
import json

import pytest

from host_sim.identify import benchgen


def test_shipped_logs_are_reproducible(tmp_path):
    for new in benchgen.write_examples(tmp_path):
        shipped = benchgen.BENCH_DIR / new.name
        assert new.read_bytes() == shipped.read_bytes(), (
            "%s differs from a fresh run: regenerate with python -m host_sim.identify.benchgen"
            % shipped)


def test_bench_to_scenario_fragment(spinrail, tmp_path):
    frag = tmp_path / "site.json"
    for part, extra in (("machine", ()), ("supercap", ()), ("battery", ("--capacity-ah", 12))):
        rc, out, err = spinrail("identify", part, benchgen.BENCH_DIR / (part + ".csv"),
                                "--write", frag, *extra)
        assert rc == 0, err
    doc = json.loads(frag.read_text())
    m, s, b = doc["machine"], doc["supercap"], doc["battery"]
    assert m["ke_v_per_krpm"] == pytest.approx(benchgen.MACHINE["ke_v_per_krpm"], rel=0.01)
    assert m["ra_ohm"] == pytest.approx(benchgen.MACHINE["ra_ohm"], rel=0.03)
    assert s["cells"] == benchgen.SUPERCAP["cells"]
    # cell_f: the mean of six cells drawn with a 3 % spread around 50 F
    assert s["cell_f"] == pytest.approx(benchgen.SUPERCAP["cell_f"], rel=0.03)
    assert s["esr_mohm"] == pytest.approx(benchgen.SUPERCAP["esr_mohm"], rel=0.10)
    assert b["r0_mohm_ah"] == pytest.approx(benchgen.BATTERY["r0_mohm_ah"], rel=0.03)
    assert b["rp_dis_ohm_ah"] == pytest.approx(benchgen.BATTERY["rp_dis_ohm_ah"], rel=0.05)
    assert b["soc0"] == pytest.approx(benchgen.BATTERY["soc0"], abs=0.02)
