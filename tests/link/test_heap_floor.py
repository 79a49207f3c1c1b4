# The firmware entry's heap floor (issue 5). Flashed to a virtual board as `spinrail flash`
# does, the firmware boots from its stub (main.py -> boards/main.py: load phase, then the
# loop) and answers 1,000 lock-step ticks over the pty, each equal to the Supervisor on
# CPython, within the heap `spinrail bench` measured (host_sim/bench.py heap_floor_kb).
# The heap a run needs does not depend on timing on the unix port, so a fixed budget is a
# regression guard on memory, not a timing target.
import pytest

from host_sim import bench

pytestmark = pytest.mark.micropython

# Measured with heap_floor_kb() on the 64-bit unix port (docs/boards.md, "Heap"): 49 KiB since
# the step-off dump and the soft zone's room rule grew the tick (48 KiB before): issue 5's goal,
# at most 48 KiB, is now missed by 1 KiB. A tick module that grows further fails here.
FLOOR_KB = 49
TICKS = 1000


@pytest.fixture(scope="module")
def folder(micropython, tmp_path_factory):
    d = tmp_path_factory.mktemp("floor_fs")
    bench.flash_virtual_folder(str(d))
    return str(d)


@pytest.fixture(scope="module")
def expected():
    return bench.reference_commands(TICKS)


def test_firmware_entry_runs_1000_ticks_at_the_measured_floor(folder, expected, micropython):
    r = bench.entry_runs(folder, FLOOR_KB, expected, micropython)
    assert r.ok and r.ticks == TICKS, r


def test_a_heap_below_the_floor_does_not_boot(folder, expected, micropython):
    # the heap setting really bounds the firmware (else the test above proves nothing)
    r = bench.entry_runs(folder, FLOOR_KB - 8, expected, micropython)
    assert not r.ok and r.ticks == 0, r


def test_a_reply_that_differs_from_cpython_fails_the_run(folder, expected, micropython):
    wrong = [dict(c) for c in expected]
    wrong[500]["batt_duty"] += 1
    r = bench.entry_runs(folder, 2 * FLOOR_KB, wrong, micropython)
    assert not r.ok and r.ticks == 500 and "differs" in r.why, r


@pytest.mark.slow
def test_bisected_floor_is_within_the_budget():
    assert bench.heap_floor_kb(TICKS) <= FLOOR_KB
