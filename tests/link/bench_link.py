# Link and firmware figures against the virtual board (a benchmark, not a test; it prints).
#   .venv/bin/python tests/link/bench_link.py [--steps 2000] [--seconds 5]
# Figures: flash time; lock-step round trip over the pty; a realtime 20 Hz stream and a flood
# (frames sent, received, dropped, by the board's own counters); heap allocation per loop
# pass on MicroPython; the heap floor of the firmware entry (smallest -X heapsize at which
# the flashed .mpy firmware builds and runs 200 passes). Medians and ratios, one run, one
# machine: absolute times drift on shared machines.
import argparse
import re
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from controller.signals import F_LINK  # noqa: E402
from host_sim import deploy  # noqa: E402
from host_sim.common import find_micropython  # noqa: E402
from host_sim.seriallink import CmdFrame, SerialLink, Telemetry  # noqa: E402
from host_sim.virtualboard import VirtualBoard  # noqa: E402
from tests.link.fakes import charging_measurements  # noqa: E402


def pct(xs, q):
    xs = sorted(xs)
    return xs[min(len(xs) - 1, int(len(xs) * q))]


def last_telemetry(link, timeout_s=1.5):
    t = None
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        for msg in link.poll(0.1):
            if isinstance(msg, Telemetry):
                t = msg
        if t is not None:
            return t
    return t


def lockstep(port, steps):
    m = charging_measurements()
    with SerialLink(port) as link:
        link.hello()
        t_ms = 0
        lost = 0
        t0 = time.perf_counter()
        for i in range(steps):
            m.bus_mv = 15000 + (i % 17) * 300
            if link.step(m, t_ms) is None:
                lost += 1
            t_ms = (t_ms + 50) & 0x3FFFFFFF
        wall = time.perf_counter() - t0
        rtt = [x * 1e3 for x in link.rtt_s]
        print("lock-step over the pty: %d steps in %.2f s (%.0f steps/s, %.0f simulated s per "
              "wall s at 50 ms), round trip median %.2f ms, p95 %.2f ms, max %.2f ms, "
              "unanswered %d" % (steps, wall, steps / wall, steps * 0.05 / wall,
                                 statistics.median(rtt), pct(rtt, 0.95), max(rtt), lost))
        print("  host: sent %d, received %d, crc errors %d, bad frames %d, board frames missing %d"
              % (link.sent, link.received, link.crc_errors, link.bad_frames, link.board_gaps))


def stream(port, seconds, rate_hz):
    """Realtime MEAS at rate_hz (None: as fast as the port takes them). Board counters are
    read from telemetry before and after, once the board has drained its input."""
    m = charging_measurements()
    with SerialLink(port) as link:
        link.hello()
        t_end = time.monotonic() + 0.7  # get the link up (and past any loss) first
        while time.monotonic() < t_end:
            link.send_meas(m)
            link.poll(0.05)
        before = last_telemetry(link)
        n = cmds = flagged = 0
        during = before
        t0 = time.monotonic()
        next_t = t0
        while time.monotonic() - t0 < seconds:
            if rate_hz is None or time.monotonic() >= next_t:
                link.send_meas(m)
                n += 1
                next_t += 1.0 / rate_hz if rate_hz else 0
            for msg in link.poll(0 if rate_hz is None else max(0.0, next_t - time.monotonic())):
                if isinstance(msg, CmdFrame):
                    cmds += 1
                    flagged += 1 if msg.c.fault & F_LINK else 0
                elif isinstance(msg, Telemetry):
                    during = msg
        wall = time.monotonic() - t0
        after = last_telemetry(link)
        while True:  # the board may still hold a backlog: wait until it stops counting
            nxt = last_telemetry(link)
            if nxt is None or nxt["rx_ok"] == after["rx_ok"]:
                break
            after = nxt
        drained = time.monotonic() - t0 - wall
        d = {k: (after[k] - before[k]) & 0xFFFF for k in (
            "rx_ok", "rx_crc", "rx_malformed", "rx_oversized", "rx_order", "rx_gaps",
            "late_ticks")}
        # losses while streaming (waiting for the drain afterwards is itself a silence)
        d["link_losses"] = (during["link_losses"] - before["link_losses"]) & 0xFFFF
        label = "%d Hz" % rate_hz if rate_hz else "flood"
        print("realtime %s for %.1f s: host sent %d MEAS (%.0f/s); board accepted %d (drained "
              "%.1f s after the last), crc %d, malformed %d, oversized %d, out of order %d, "
              "missing by seq %d, link losses %d, late ticks %d; CMD frames back %d (%d with "
              "the link fault)" % (
                  label, wall, n, n / wall, d["rx_ok"], drained, d["rx_crc"], d["rx_malformed"],
                  d["rx_oversized"], d["rx_order"], d["rx_gaps"], d["link_losses"],
                  d["late_ticks"], cmds, flagged))


def alloc(exe):
    for mode in ("lockstep", "realtime"):
        r = subprocess.run([exe, "-X", "heapsize=256k", "tests/link/mp_alloc.py", mode], cwd=ROOT,
                           capture_output=True, text=True)
        print("allocation, %s (MicroPython unix port): %s" % (mode, r.stdout.strip()))


_FLOOR = ("import sys\nsys.path.insert(0, 'sr_a')\nfrom boards import main\n"
          "fw = main.build('sr_a')\nfor i in range(200):\n    fw.step(i * 5)\nprint('ok', fw.sup.ticks)")


def heap_floor(exe, folder):
    def ok(kb):
        r = subprocess.run([exe, "-X", "heapsize=%dk" % kb, "-c", _FLOOR], cwd=folder,
                           capture_output=True, stdin=subprocess.DEVNULL)
        return re.search(rb"ok \d+\s*$", r.stdout) is not None  # after the firmware's frames
    lo, hi = 8, 256
    if not ok(hi):
        print("heap floor: does not run in %d KB" % hi)
        return
    while hi - lo > 1:
        mid = (lo + hi) // 2
        lo, hi = (lo, mid) if ok(mid) else (mid, hi)
    print("heap floor of the flashed firmware entry (build + 200 passes): %d KB "
          "(MicroPython unix port, 64-bit: a 32-bit board needs less)" % hi)


def main():
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--steps", type=int, default=2000)
    ap.add_argument("--seconds", type=float, default=5.0)
    a = ap.parse_args()
    exe = find_micropython()
    with tempfile.TemporaryDirectory() as d:
        with VirtualBoard(d, exe=exe) as vb:
            t0 = time.perf_counter()
            r = deploy.flash(vb.port, "virtual")
            print("flash to the virtual board: %d files, %d bytes, %.2f s" % (
                r.files, r.bytes, time.perf_counter() - t0))
            lockstep(vb.port, a.steps)
            stream(vb.port, a.seconds, 20)
            stream(vb.port, min(a.seconds, 2.0), None)
        alloc(exe)
        heap_floor(exe, d)


if __name__ == "__main__":
    main()
