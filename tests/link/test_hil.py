# Hardware in the loop against the virtual board: the plant here, the controller in the
# MicroPython unix port behind the pty and the framed link. The board's commands must equal
# the in-process CPython supervisor's, tick for tick, for the same scenario and seed.
import json

from controller.supervisor import Supervisor
from host_sim import runner
from host_sim.hil import run_hil
from host_sim.scenario import load_doc

from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


class Recording(Supervisor):
    """The CPython supervisor, keeping every tick's commands like hil's LinkController."""

    def __init__(self, p):
        super().__init__(p)
        self.commands = []

    def tick(self, now_ms):
        super().tick(now_ms)
        c = self.c
        self.commands.append((now_ms, c.batt_duty, c.cap_duty, c.dump_duty, c.usb_conv, c.usb_on,
                              c.usb_probe, c.batt_out, c.bal_mask, c.stage, c.usb_match, c.fault))


def short_demo(seconds=12.0):
    doc = json.loads((ROOT / "host_sim" / "scenarios" / "demo.json").read_text())
    doc["duration_s"] = seconds
    return load_doc(doc, "<hil>", str(ROOT / "host_sim" / "scenarios"))


def test_hil_on_the_virtual_board_equals_simulate_tick_for_tick(flashed):
    _, port, _ = flashed
    sc = short_demo()
    res_hil, figures, ctl = run_hil(sc, port, progress=False)
    ref = Recording(sc.profile)
    res_sim = runner.run(short_demo(), progress=False, controller=ref)
    assert len(ctl.commands) == len(ref.commands) == res_sim.ticks
    for a, b in zip(ctl.commands, ref.commands):
        assert a == b, "first difference at now_ms %d: board %s, CPython %s" % (a[0], a, b)
    assert figures["frames_resent"] == 0
    print("hil: %d ticks equal; round trip median %.2f ms, p95 %.2f ms" % (
        figures["ticks"], figures["rtt_median_ms"], figures["rtt_p95_ms"]))
    assert res_hil.all_held == res_sim.all_held
