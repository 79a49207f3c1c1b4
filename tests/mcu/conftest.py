# Fixtures for the emulated 32-bit boards (host_sim/emulate.py): the firmware, built once per
# test session (and cached across runs, keyed by the source and build options), and one board
# of each kind flashed as `spinrail flash` does. Without a MicroPython source (a clone without
# a source tarball beside the checkout and no SPINRAIL_MICROPYTHON_SRC) or without the Debian toolchain,
# every test here is skipped, loudly: the 32-bit claims are then NOT tested on this machine.
import os

import pytest

from host_sim import emulate
from host_sim.errors import UserError

BOARDS = ("qemu_m0", "qemu_m3")


def _why_not():
    try:
        emulate.source()
    except UserError as e:
        return "emulated 32-bit board NOT tested: %s" % e
    try:
        emulate.check_tools()
    except UserError as e:
        return "emulated 32-bit board NOT tested: %s" % e
    return None


@pytest.fixture(scope="session")
def emu_fw():
    why = _why_not()
    if why:
        if os.environ.get("CI") and os.environ.get("SPINRAIL_REQUIRE_EMULATED"):
            pytest.fail(why)
        pytest.skip(why)
    return emulate.build(log=lambda m: print("emulate: " + m))


@pytest.fixture(scope="session")
def flashed_image(emu_fw, tmp_path_factory):
    """board name -> folder holding the flash.img of a board flashed with the default profile."""
    from host_sim import mcu_bench
    done = {}

    def get(name):
        if name not in done:
            d = tmp_path_factory.mktemp("emu_" + name)
            r = mcu_bench.flash_image(emu_fw, name, str(d))
            done[name] = (str(d), r)
        return done[name]
    return get
