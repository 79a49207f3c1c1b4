# The firmware entry's heap floor on the emulated 32-bit board (qemu_m0: armv6m code; qemu_m3:
# armv7m; native and viper code sits inside the GC heap on this port, as on an RP2040, from
# memory).
# Flashed as `spinrail flash` does, booted from its stub with the heap set at start-up, it
# must answer lock-step ticks over the UART, every reply equal to CPython's, at the floor
# `spinrail bench` measured (mcu_heap_floor_kb), and must not boot well below it.
import pytest

from host_sim import mcu_bench
from host_sim.bench import reference_commands

pytestmark = pytest.mark.micropython

# Bisected with mcu_bench.heap_floor_kb (1,000 ticks) on the emulated board: armv6m code 55 KiB
# passes, 54 gives no HELLO; armv7m code (denser Thumb-2) 51 passes, 50 does not. Issue 13's
# goal is 48 KiB: NOT met on either (docs/performance.md says why).
FLOOR_KB = {"qemu_m0": 55, "qemu_m3": 51}
TICKS = 300


@pytest.fixture(scope="module")
def expected():
    return reference_commands(TICKS)


@pytest.mark.parametrize("board", sorted(FLOOR_KB))
def test_firmware_entry_runs_at_the_measured_floor(board, emu_fw, flashed_image, expected):
    folder, _ = flashed_image(board)
    r = mcu_bench.entry_runs(emu_fw, folder, FLOOR_KB[board], expected)
    assert r.ok and r.ticks == TICKS, r


def test_a_heap_below_the_floor_does_not_boot(emu_fw, flashed_image, expected):
    folder, _ = flashed_image("qemu_m0")
    r = mcu_bench.entry_runs(emu_fw, folder, FLOOR_KB["qemu_m0"] - 8, expected)
    assert not r.ok and r.ticks == 0, r
