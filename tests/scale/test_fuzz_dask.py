# `spinrail fuzz --scheduler` on a Dask cluster the test starts itself (LocalCluster with two
# worker processes): the workers import the project, run the examples, and give the same
# results as a run in this process.
import json

import pytest

from .conftest import run_cli

distributed = pytest.importorskip("distributed")


@pytest.fixture(scope="module")
def cluster():
    c = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                 dashboard_address="127.0.0.1:0")
    yield c
    c.close()


def test_fuzz_on_a_local_dask_cluster_matches_this_process(tmp_path, cluster, capsys):
    args = ["fuzz", "crank_relief", "hut_wind", "--examples", 6, "--seed", 12,
            "--max-duration", 30, "--shrink-runs", 10, "--quiet"]
    rc_dask = run_cli(args + ["--scheduler", cluster.scheduler_address,
                              "--out", tmp_path / "dask"])
    printed = capsys.readouterr().out
    assert "Dask cluster %s (2 workers" % cluster.scheduler_address in printed
    rc_here = run_cli(args + ["--workers", 1, "--out", tmp_path / "here"])
    assert rc_dask == rc_here and rc_dask in (0, 1)
    d = json.loads((tmp_path / "dask" / "fuzz_summary.json").read_text())
    h = json.loads((tmp_path / "here" / "fuzz_summary.json").read_text())
    assert d["examples"] == h["examples"] == 6
    for key in ("worst", "crossed", "failures"):
        assert d[key] == h[key], key
    assert ((tmp_path / "dask" / "fuzz.csv").read_text()
            == (tmp_path / "here" / "fuzz.csv").read_text())


def test_sweep_on_a_local_dask_cluster(tmp_path, cluster, short_crank):
    args = ["sweep", short_crank, "--vary", "battery.ambient_c=uniform(-10,50)",
            "--samples", 4, "--seed", 3, "--quiet"]
    rc = run_cli(args + ["--scheduler", cluster.scheduler_address, "--out", tmp_path / "d"])
    rc1 = run_cli(args + ["--workers", 1, "--out", tmp_path / "h"])
    assert rc == rc1
    assert (tmp_path / "d" / "sweep.csv").read_text() == (tmp_path / "h" / "sweep.csv").read_text()


def test_fuzz_scheduler_local_starts_its_own_cluster(tmp_path, capsys):
    """--scheduler local: a Dask LocalCluster of --workers processes, started for the run and
    closed after it; same results as a run in this process."""
    args = ["fuzz", "crank_relief", "--examples", 4, "--seed", 5, "--max-duration", 20,
            "--shrink-runs", 0, "--quiet"]
    rc_local = run_cli(args + ["--scheduler", "local", "--workers", 2,
                               "--out", tmp_path / "local"])
    printed = capsys.readouterr().out
    assert "local Dask cluster tcp://" in printed and "(2 workers, 2 threads)" in printed
    rc_here = run_cli(args + ["--workers", 1, "--out", tmp_path / "here"])
    assert rc_local == rc_here and rc_local in (0, 1)
    assert ((tmp_path / "local" / "fuzz.csv").read_text()
            == (tmp_path / "here" / "fuzz.csv").read_text())
