# Determinism of `spinrail fuzz` and `spinrail sweep`: example i comes from (seed, i) alone, so
# the verdicts, the margins and the shrunk scenarios are the same whatever the number of
# workers, and the generator gives valid scenarios (validated by host_sim.scenario.load_doc).
import csv
import json

from host_sim import fuzz, scenario_gen
from host_sim.scenario import load_doc

from .conftest import run_cli


def test_generator_gives_valid_scenarios_from_seed_and_index_alone():
    """Invariant: every generated example validates, and example i is the same whether or not
    other examples were drawn before it (no shared generator state)."""
    bases = fuzz.load_bases([])
    docs = [scenario_gen.generate(bases, 5, i, 120.0)[0] for i in range(150)]
    for i, doc in enumerate(docs):
        load_doc(doc, "<example %d>" % i)
        assert doc["duration_s"] <= 120.0
        amb = doc["battery"]["ambient_c"]
        assert -10.0 <= amb <= 50.0, amb
    again = [scenario_gen.generate(bases, 5, i, 120.0)[0] for i in (149, 17, 0)]
    assert again == [docs[149], docs[17], docs[0]]
    other_seed = scenario_gen.generate(bases, 6, 17, 120.0)[0]
    assert other_seed != docs[17]


def test_fuzz_one_worker_and_two_workers_agree(tmp_path):
    """Same seed, 1 worker (in this process) vs 2 worker processes: the same verdicts, the same
    worst margins per example and the same shrunk failure files."""
    outs = {}
    for w in (1, 2):
        out = tmp_path / ("w%d" % w)
        rc = run_cli(["fuzz", "crank_relief", "demo", "--examples", 6, "--seed", 4,
                      "--max-duration", 20, "--workers", w, "--out", out, "--quiet"])
        assert rc in (0, 1)
        summ = json.loads((out / "fuzz_summary.json").read_text())
        rows = list(csv.DictReader((out / "fuzz.csv").open()))
        files = {p.name: json.loads(p.read_text()) for p in out.glob("fuzz_s4_i*.json")}
        outs[w] = (rc, rows, summ["worst"], summ["crossed"], files)
    assert len(outs[1][1]) == 6
    assert outs[1] == outs[2]


def test_sweep_one_worker_and_two_workers_agree(tmp_path, short_crank):
    outs = []
    for w in (1, 2):
        out = tmp_path / ("w%d" % w)
        rc = run_cli(["sweep", short_crank, "--vary", "supercap.v0_per_cell=uniform(0,2)",
                      "--vary", "drive.effort=pct(20)", "--samples", 6, "--seed", 9,
                      "--workers", w, "--out", out, "--quiet"])
        outs.append((rc, (out / "sweep.csv").read_text()))
    assert outs[0] == outs[1]
