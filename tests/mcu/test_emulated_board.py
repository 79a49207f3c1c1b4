# The controller on an emulated 32-bit Cortex-M3 (qemu mps2-an385): qemu_m3 runs armv7m code,
# qemu_m0 armv6m code (the RP2040's instruction set). Invariants: the golden check and the
# vectors replay give exactly CPython's hashes (same integer arithmetic on 32-bit words and
# 31-bit small ints); a board flashed by `spinrail flash` (both slots, sha256 read-back, switch
# last) boots its firmware and, under `spinrail hil`, answers with CPython's commands tick for
# tick; the steady-state tick allocates nothing on the board.
import json
from pathlib import Path

import pytest

from controller.supervisor import Supervisor
from host_sim import emulate, mcu_bench, runner
from host_sim.hil import run_hil
from host_sim.scenario import load_doc

from tests.mcu.conftest import BOARDS

pytestmark = pytest.mark.micropython
ROOT = Path(__file__).resolve().parents[2]
GOLDEN_TICKS = 2000


@pytest.fixture(scope="module")
def cpython_refs():
    return mcu_bench.cpython_golden_and_vectors(GOLDEN_TICKS)


@pytest.mark.parametrize("board", BOARDS)
def test_golden_and_vectors_equal_cpython(board, emu_fw, cpython_refs, tmp_path):
    img = mcu_bench.stage_romfs(board, tmp_path / "rom.img", tmp_path)
    machine, golden, vec = mcu_bench.board_golden_and_vectors(emu_fw, img, GOLDEN_TICKS)
    print(machine)
    assert "Cortex-M3" in machine and machine.endswith(" 2147483647"), machine  # 32-bit words
    ref_golden, ref_vec = cpython_refs
    assert len(golden) == len(ref_golden) == 5
    assert golden == ref_golden
    assert vec == ref_vec


class Recording(Supervisor):
    def __init__(self, p):
        super().__init__(p)
        self.commands = []

    def tick(self, now_ms):
        super().tick(now_ms)
        c = self.c
        self.commands.append((now_ms, c.batt_duty, c.cap_duty, c.dump_duty, c.usb_conv, c.usb_on,
                              c.usb_probe, c.batt_out, c.bal_mask, c.stage, c.usb_match, c.fault))


def _short(name, seconds):
    doc = json.loads((ROOT / "host_sim" / "scenarios" / (name + ".json")).read_text())
    doc["duration_s"] = seconds
    return load_doc(doc, "<hil>", str(ROOT / "host_sim" / "scenarios"))


@pytest.mark.parametrize("board", BOARDS)
def test_flashed_board_boots_and_hil_equals_simulate(board, emu_fw, flashed_image):
    # flashed_image: `spinrail flash` to an empty board (slot sr_a, verified, switched last);
    # the emulator was stopped, its disk saved, and now boots from that flash image
    from host_sim.seriallink import SerialLink
    folder, flashed = flashed_image(board)
    assert (flashed.slot, flashed.previous) == ("sr_a", "")
    with emulate.EmulatedBoard(emu_fw, folder, save=False) as eb:
        with SerialLink(eb.port) as link:
            h = link.hello(timeout_s=15.0)
        assert h.board == board and h.fw_hash == flashed.fw_sha256[:16]
        sc = _short("demo", 8.0)
        _, figures, ctl = run_hil(sc, eb.port, progress=False)
    ref = Recording(sc.profile)
    runner.run(_short("demo", 8.0), progress=False, controller=ref)
    assert len(ctl.commands) == len(ref.commands) > 100
    for a, b in zip(ctl.commands, ref.commands):
        assert a == b, "first difference at now_ms %d: board %s, CPython %s" % (a[0], a, b)
    assert figures["frames_resent"] == 0


@pytest.mark.parametrize("board", BOARDS)
def test_tick_allocates_nothing_on_the_board(board, emu_fw, flashed_image):
    folder, _ = flashed_image(board)
    for profile in ("profile.json", "hut_wind.json"):
        assert mcu_bench.alloc_bytes_per_tick(emu_fw, folder, 1000, profile) == 0, profile


def test_a_second_flash_after_a_restart_takes_the_other_slot(emu_fw, flashed_image, tmp_path):
    # the RAM disk is saved to flash.img on stop and loaded on start (the first flash is in
    # it): a second flash writes sr_b, switches last, and the board boots it
    import shutil
    from host_sim import deploy
    from host_sim.seriallink import SerialLink
    folder, first = flashed_image("qemu_m0")
    shutil.copy2(folder + "/flash.img", tmp_path / "flash.img")  # the shared image stays as is
    with emulate.EmulatedBoard(emu_fw, tmp_path) as eb:
        again = deploy.flash(eb.port, "qemu_m0", timeout_s=15.0)
        assert (again.slot, again.previous) == ("sr_b", "sr_a")
    assert (tmp_path / "flash.img").stat().st_size == emulate.DISK_BYTES
    with emulate.EmulatedBoard(emu_fw, tmp_path, save=False) as eb:
        with SerialLink(eb.port) as link:
            h = link.hello(timeout_s=15.0)
    assert h.fw_hash == again.fw_sha256[:16] and h.board == "qemu_m0"
