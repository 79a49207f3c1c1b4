# The closed-loop limits have teeth: the same scenarios that the real controller gets through
# with every limit held cross a limit as soon as the controller is broken on purpose (the
# mutations live in host_sim/fuzz.py, where `spinrail fuzz --break-controller` uses them too).
import copy
import json
from pathlib import Path

import pytest

from host_sim import fuzz, runner
from host_sim.scenario import load_doc

SCEN = Path(__file__).resolve().parents[2] / "host_sim" / "scenarios"


def demo_near_full():
    d = json.loads((SCEN / "demo.json").read_text())
    d["duration_s"] = 240
    d["supercap"]["v0_per_cell"] = 2.3  # bank starts near its clamp
    d["battery"]["soc0"] = 0.97  # battery reaches absorption within the run
    return d


def hut_gusty():
    d = json.loads((SCEN / "hut_wind.json").read_text())
    d["duration_s"] = 400
    d["drive"]["wind_mean_ms"] = 8.0  # the 300 s gust then takes the bus to the trip
    return d


def limits(doc, mutation=None):
    with fuzz.mutation(mutation):
        res = runner.run(load_doc(copy.deepcopy(doc), "<broken>", str(SCEN)), progress=False,
                         every=50)
    return res.limits


@pytest.mark.parametrize("make, mutation, limit", [
    (demo_near_full, "no_cap_clamp", "cap_clamp"),
    (demo_near_full, "raised_ceiling", "batt_ceiling"),
    # (the overspeed dump alone now holds this gust: the guard is a backstop behind it, so
    # break both; no_ovp alone is shown at the controller level, tests/controller)
    (hut_gusty, "no_dump", "bus"),
])
def test_a_broken_controller_crosses_the_limit_the_real_one_holds(make, mutation, limit):
    doc = make()
    real = limits(doc)
    assert all(v.held for v in real.values()), {k: v.as_dict() for k, v in real.items()
                                                 if not v.held}
    broken = limits(doc, mutation)
    assert not broken[limit].held, (mutation, broken[limit].as_dict())
