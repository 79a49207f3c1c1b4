# `spinrail bench --json` prints every key issue 5 names, each a figure (no value is judged here:
# speed and memory are measured by the bench and recorded in docs/performance.md, never asserted
# in a test). --quick keeps it to about half a minute.
import json
import os
import shutil

import pytest

from host_sim.cli import main

KEYS = ("alloc_bytes_per_tick", "instructions_per_tick", "heap_floor_kb", "cpython_ticks_per_s",
        "sim_speedup", "vs_ngspice", "vs_ngspice_error_pct", "batch_scenarios_per_s")


@pytest.mark.skipif(shutil.which("valgrind") is None, reason="valgrind missing (./run.sh test "
                    "installs it)")
def test_bench_json_prints_every_key(capsys, micropython):
    rc = main(["bench", "--quick", "--json"])
    out = capsys.readouterr().out
    assert rc == 0
    res = json.loads(out)
    for k in KEYS:
        assert k in res, k
        if k.startswith("vs_ngspice") and shutil.which("ngspice") is None:
            assert not os.environ.get("CI"), "ngspice missing on CI: ./run.sh test installs it"
            assert res[k] is None  # said so, not faked
            continue
        assert isinstance(res[k], (int, float)) and res[k] >= 0, (k, res[k])
    assert len(res["sim_speedup_runs"]) == 2
    assert res["machine"]
    from host_sim import emulate
    if not emulate.source_available():  # said so, not faked
        assert "mcu_skipped" in res and "mcu_instructions_per_tick" not in res
        return
    for k in ("mcu_instructions_per_tick", "mcu_instructions_per_tick_mppt",
              "mcu_alloc_bytes_per_tick", "mcu_share_10ms_pct_est", "mcu_share_50ms_pct_est"):
        assert isinstance(res[k], (int, float)) and res[k] >= 0, (k, res[k])
    assert res["mcu_instructions_per_tick"] > 1000  # counted, not a stand-in zero
    assert res["mcu_heap_floor_kb"] is None  # --quick does not bisect it
