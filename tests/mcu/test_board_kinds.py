# The emulated board kinds are validated like the other board files: qemu_m3 compiles for
# armv7m, qemu_m0 for armv6m (the RP2040's), both link-only with no pins, heap_kb within what
# the emulated firmware is built with; the firmware picks the stub hardware layer for them.
import json

import pytest

from boards import board, hal
from controller.compat import ConfigError


def _check(tmp_path, doc):
    p = tmp_path / "b.json"
    p.write_text(json.dumps(doc))
    return board.load(str(p))


def _shipped(name):
    return json.loads(board.board_path(name).read_text())


@pytest.mark.parametrize("name,arch", [("qemu_m3", "armv7m"), ("qemu_m0", "armv6m")])
def test_shipped_emulated_boards_validate(name, arch):
    b = board.load(name)
    assert b.emulated and not b.virtual and b.chip == "mps2_an385"
    assert b.mpy_arch == arch and b.mode == "link" and b.hw["inputs"] == [] and b.hw["pwm"] == []
    assert b.heap_kb == 140
    assert isinstance(hal.make(b.hw), hal.VirtualHal)  # no machine module, no pins


@pytest.mark.parametrize("field,value,words", [
    ("mpy_arch", "xtensawin", "for mps2_an385: armv7m or armv6m"),
    ("mode", "standalone", "for mps2_an385: link"),
    ("heap_kb", 141, "allowed 32 to 140"),
    ("heap_kb", 16, "allowed 32 to 140"),
    ("pwm", {"batt_duty": {"pin": 1, "freq_hz": 1000}}, "must be empty on an emulated board"),
])
def test_bad_emulated_board_fields_are_named(tmp_path, field, value, words):
    d = _shipped("qemu_m0")
    d[field] = value
    with pytest.raises(ConfigError) as e:
        _check(tmp_path, d)
    assert "%s = %r" % (field, value) in str(e.value) and words in str(e.value), str(e.value)
