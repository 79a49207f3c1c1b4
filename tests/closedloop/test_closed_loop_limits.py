# Closed-loop properties (issue 3): the real controller against the plant simulator over random
# scenarios — drives, temperatures from -10 to 50 C, tolerances, fault events. Judged on the
# plant's true values after every control period (host_sim/limitcheck.py):
#   battery terminal voltage never above the active compensated ceiling + 0.1 V per 12 V block
#   while charge current flows; battery current never above the limit by more than 10 % for
#   longer than one control period; supercap bank never above the clamp by more than 1 %, no cell
#   above its rating; VBUS inside 4.75-5.25 V whenever the port is on; bus below the trip plus the
#   surge clamp's margin; the energy ledger balances within 0.5 %.
# A failing example is written to spinrail-out/failures/ and the message gives the command that
# replays it.
import hashlib
import json
import os
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings

from host_sim import runner
from host_sim.scenario import load_doc

from .strategies import scenario_docs

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = {"ci": 25, "dev": 15, "deep": 400}.get(os.environ.get("HYPOTHESIS_PROFILE", ""), 15)


def save_failure(doc):
    text = json.dumps(doc, indent=2)
    name = hashlib.sha1(text.encode()).hexdigest()[:10]
    out = ROOT / "spinrail-out" / "failures"
    out.mkdir(parents=True, exist_ok=True)
    path = out / ("closed_loop_%s.json" % name)
    path.write_text(text + "\n")
    return path


def crossed_limits(doc):
    sc = load_doc(doc, "<fuzz>", str(ROOT / "host_sim" / "scenarios"))
    res = runner.run(sc, progress=False, every=50)
    return [(k, v.as_dict()) for k, v in res.limits.items() if not v.held], res


def assert_limits_hold(doc):
    crossed, res = crossed_limits(doc)
    if crossed:
        path = save_failure(doc)
        raise AssertionError("limits crossed: %s\nreplay: spinrail simulate %s --out /tmp/replay"
                             % ("; ".join("%s worst %s at %s s (limit %s)" % (
                                 k, d["worst"], d["t_worst_s"], d["limit"]) for k, d in crossed),
                                path))
    return res


@settings(max_examples=EXAMPLES, suppress_health_check=[HealthCheck.too_slow,
                                                         HealthCheck.data_too_large])
@given(scenario_docs())
def test_every_limit_holds_in_closed_loop(doc):
    """Invariant: over any perturbed built-in scenario with faults, every closed-loop limit of
    issue 3 holds on the plant's true values, and the ledger balances within 0.5 %."""
    assert_limits_hold(doc)


@pytest.mark.parametrize("name", ["demo", "hut_wind", "crank_relief", "fault_parade"])
def test_builtin_scenarios_hold_every_limit(name):
    """Invariant: each shipped scenario holds every limit (they are what users run first)."""
    from host_sim.scenario import load_scenario
    res = runner.run(load_scenario(name), progress=False, every=50)
    bad = [(k, v.as_dict()) for k, v in res.limits.items() if not v.held]
    assert not bad, bad
