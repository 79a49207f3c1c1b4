# Long runs keep a bounded series: with no --every the runner keeps every period up to
# runner.MAX_ROWS rows and then one row in auto_every(n), while the limit check and the
# service meter still see every period. (The memory figure of a 7-day run is measured by
# `python -m host_sim.mem_bench`, a benchmark that prints it, not here.)
import json

import numpy as np

from host_sim import runner
from host_sim.scenario import load_scenario


def _scenario(tmp_path, duration_s):
    p = tmp_path / "s.json"
    p.write_text(json.dumps({"drive": {"kind": "pedal"}, "duration_s": duration_s, "seed": 3}))
    return load_scenario(str(p))


def test_auto_every_keeps_a_week_within_max_rows():
    """Invariant: the kept rows never pass MAX_ROWS, and a run that fits keeps every period."""
    week_periods = 7 * 86400 * 1000 // 5  # the shortest control period, 5 ms
    for n in (1, runner.MAX_ROWS, runner.MAX_ROWS + 1, week_periods):
        e = runner.auto_every(n)
        assert -(-n // e) <= runner.MAX_ROWS
        assert (e == 1) == (n <= runner.MAX_ROWS)


def test_a_decimated_run_judges_every_period_and_keeps_few_rows(tmp_path, monkeypatch):
    """Invariant: decimating the series changes what is kept, not what is judged: the limits'
    worst values and the service figures are those of the undecimated run."""
    sc = _scenario(tmp_path, 30)
    full = runner.run(sc, progress=False, every=1)
    monkeypatch.setattr(runner, "MAX_ROWS", 50)
    thin = runner.run(_scenario(tmp_path, 30), progress=False)
    n = full.ticks
    assert thin.every == -(-n // 50) and len(thin.series["t_s"]) <= 50
    assert len(full.series["t_s"]) == n and full.every == 1
    np.testing.assert_array_equal(thin.series["bus_v"], full.series["bus_v"][::thin.every])
    for name, lim in full.limits.items():
        assert thin.limits[name].as_dict() == lim.as_dict(), name
    assert thin.service["energy_wh"] == full.service["energy_wh"]
