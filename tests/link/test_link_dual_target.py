# The link code runs unchanged on the MicroPython unix port and gives the same bytes as on
# CPython; each framing module imports within a 64 KB heap.
import subprocess
import sys
from pathlib import Path

import pytest

from controller import link as L

ROOT = Path(__file__).resolve().parents[2]
SCRIPT = "tests/link/link_vectors.py"


def run(cmd):
    r = subprocess.run(cmd, cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr[-2000:] + r.stdout[-500:]
    return r.stdout


@pytest.mark.micropython
def test_same_bytes_on_micropython_and_cpython(micropython):
    cp = run([sys.executable, SCRIPT])
    mp = run([micropython, "-X", "heapsize=64k", SCRIPT])
    assert cp.count("\nmeas ") > 100 and "counters" in cp  # the workout really ran
    assert mp == cp


@pytest.mark.micropython
@pytest.mark.parametrize("module", ["controller.crc16", "controller.cobs", "controller.link"])
def test_module_imports_in_64k_heap(micropython, module):
    out = run([micropython, "-X", "heapsize=64k", "-c",
               "import sys; sys.path.insert(0, '.'); import %s; print('ok')" % module])
    assert out.strip() == "ok"


@pytest.mark.micropython
@pytest.mark.parametrize("mode", ["lockstep", "realtime"])
def test_firmware_loop_allocates_nothing_on_micropython(micropython, mode):
    # DEVELOPERS.md: gc.disable(), gc.mem_alloc() before and after; goal 0 bytes. The
    # measured stretch decodes 250 MEAS frames, ticks 250 times and sends CMD and telemetry.
    out = run([micropython, "-X", "heapsize=256k", "tests/link/mp_alloc.py", mode]).split()
    got = dict(zip(out[::2], (int(v) for v in out[1::2])))
    # frames accepted: all 300 but the first RECOVER_FRAMES - 1, held in the start-up link fault
    assert got["ticks"] == 250 and got["frames"] == 300 - (L.RECOVER_FRAMES - 1) and got["lost"] == 0
    assert got["alloc"] == 0
