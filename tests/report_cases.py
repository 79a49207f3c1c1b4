# Short closed-loop runs for the report tests (tests/test_report*.py): one of each verdict,
# a run with fault bits, and a wind and a hydro drive. Each is run once per test session.
import copy
import functools
import json
from pathlib import Path

from host_sim import fuzz, runner, simulate
from host_sim.scenario import load_doc

SCEN = Path(__file__).resolve().parents[1] / "host_sim" / "scenarios"

HYDRO = {"name": "hydro_test", "duration_s": 30,
         "drive": {"kind": "hydro", "head_m": 6, "flow_lps": 4, "runaway_rpm": 900,
                   "flow_points": [[0, 4], [15, 2], [30, 3]]},
         "machine": {"ke_v_per_krpm": 30, "ra_ohm": 0.6}, "profile": "hut_wind",
         "battery": {"soc0": 0.4}}


def builtin(name, duration_s, **patch):
    d = json.loads((SCEN / ("%s.json" % name)).read_text())
    d["duration_s"] = duration_s
    for path, v in patch.items():
        node = d
        keys = path.split("__")
        for k in keys[:-1]:
            node = node[k]
        node[keys[-1]] = v
    return d


def docs():
    return {
        "held": builtin("demo", 60),
        # a battery half the profile's capacity: profile_mismatch, every limit held
        "not_doing_its_job": builtin("demo", 60, battery__capacity_ah=20),
        # the ceiling raised by a broken controller (tests/closedloop/test_broken_controller.py)
        "crossed": builtin("demo", 200, supercap__v0_per_cell=2.3, battery__soc0=0.97),
        "faults": builtin("fault_parade", 70),
        "wind": builtin("hut_wind", 30),
        "hydro": copy.deepcopy(HYDRO),
    }


MUTATION = {"crossed": "raised_ceiling"}


@functools.lru_cache(maxsize=None)
def case(name):
    """(RunResult, summary dict) of the named case."""
    doc = docs()[name]
    with fuzz.mutation(MUTATION.get(name)):
        res = runner.run(load_doc(doc, "<%s>" % name, str(SCEN)), progress=False)
    return res, simulate.summary(res)
