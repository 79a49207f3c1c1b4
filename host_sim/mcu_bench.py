# Figures and checks on the emulated 32-bit board (host_sim/emulate.py), for `spinrail bench`
# (the mcu_* keys) and tests/mcu. Every run boots the firmware exactly as `spinrail flash` left
# it: a board flashed once, its RAM disk saved to flash.img, then booted again per run.
#   mcu_instructions_per_tick  qemu -icount shift=0 (one guest instruction per ns of board
#                              time): mp_bench.py "us" on the board, N ticks minus the same
#                              loop without the tick call, x 1000 / N
#   mcu_heap_floor_kb          smallest heap (KiB, set at start-up through the heap word) at
#                              which the firmware entry boots from its stub and answers n
#                              lock-step ticks over the UART, every reply equal to CPython's
#   mcu_alloc_bytes_per_tick   mp_bench.py "alloc" on the board (gc disabled, net growth)
import hashlib
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

from host_sim import emulate
from host_sim.common import ROOT
from host_sim.errors import UserError

SCRIPT = ROOT / "host_sim" / "mp_bench.py"
_HELLO_S = 15.0  # boot and profile load on the emulated core: about 1 s, far more on a busy machine
_REPLY_S = 10.0  # a lock-step reply takes about 12 ms; a busy machine stalls qemu for seconds


def flash_image(fw, board_name, folder, profile=None, log=None):
    """Flash an emulated board whose disk lives in folder/flash.img (kept on stop)."""
    from host_sim import deploy
    eb = emulate.EmulatedBoard(fw, folder)
    port = eb.start()
    try:
        return deploy.flash(port, board_name, profile, start=False, timeout_s=15.0, log=log)
    finally:
        eb.stop()


def board_exec(port, code, timeout_s=15.0):
    """Break in (raw REPL, soft reset: main.py is skipped) and run code; its output."""
    from host_sim import deploy
    t = deploy.connect(port, timeout_s)
    try:
        return deploy._exec(t, code, "running a measurement")
    finally:
        t.close()


def _slot_exec(fw, folder, code, icount=False, heap_kb=None, files=()):
    """Boot the flashed image (not saved back), copy files into the active slot, run code there."""
    from host_sim import deploy
    with emulate.EmulatedBoard(fw, folder, icount=icount, heap_kb=heap_kb, save=False) as eb:
        t = deploy.connect(eb.port, 15.0)
        try:
            slot = deploy.active_slot(t)
            if not slot:
                raise UserError("%s: the emulated board holds no flashed slot" % folder)
            for rel, data in files:
                t.fs_writefile(slot + "/" + rel, data, chunk_size=1024)
            return deploy._exec(t, "import os\nos.chdir(%r)\n%s" % ("/" + slot, code),
                                "running a measurement")
        finally:
            t.close()


def alloc_bytes_per_tick(fw, folder, n=2000, profile="profile.json"):
    """Net heap growth per tick on the board, gc disabled, steady state (mp_bench alloc)."""
    out = _slot_exec(fw, folder, "import mp_bench\nmp_bench.main(['', 'alloc', '%d', %r])"
                     % (n, profile), files=_files(profile))
    _, b, ticks = out.split()
    return int(b) / int(ticks)


def _files(profile):
    files = [("mp_bench.py", SCRIPT.read_bytes())]
    shipped = ROOT / "host_sim" / "profiles" / profile
    if shipped.exists():  # a shipped profile beside the flashed one (profile.json)
        files.append((profile, shipped.read_bytes()))
    return files


def instructions_per_tick(fw, folder, n=2000, profile="profile.json"):
    """Guest instructions per supervisor tick under qemu -icount shift=0: board time of n ticks
    minus the same loop without the tick call (one instruction = 1 ns)."""
    out = _slot_exec(fw, folder, "import mp_bench\nmp_bench.main(['', 'us', '%d', %r])"
                     % (n, profile), icount=True, files=_files(profile))
    _, us_ticks, us_loop, ticks = out.split()
    return (int(us_ticks) - int(us_loop)) * 1000 / int(ticks)


def entry_runs(fw, folder, heap_kb, expected):
    """bench.entry_runs on the emulated board: boot the flashed image with heap_kb, HELLO,
    then one lock-step MEAS per expected tick; every reply must equal CPython's."""
    from host_sim.bench import lockstep_run
    with emulate.EmulatedBoard(fw, folder, heap_kb=heap_kb, save=False) as eb:
        return lockstep_run(eb.port, heap_kb, expected)


def heap_floor_kb(fw, folder, n=1000, lo_kb=24, hi_kb=140, log=None):
    from host_sim.bench import reference_commands
    say = log or (lambda msg: None)
    expected = reference_commands(n)
    top = entry_runs(fw, folder, hi_kb, expected)
    if not top.ok:
        raise UserError("bench: the firmware entry does not run on the emulated board even in "
                        "%d KiB: %s" % (hi_kb, top.why), exit_code=1)
    lo, hi = lo_kb, hi_kb
    while lo < hi:
        mid = (lo + hi) // 2
        r = entry_runs(fw, folder, mid, expected)
        say("  emulated heap %3d KiB: %s" % (mid, r.why))
        if r.ok:
            hi = mid
        else:
            lo = mid + 1
    return lo


# -- golden check and vectors from a ROMFS image ------------------------------------------------
def stage_romfs(board_name, out_img, work):
    """A ROMFS image with the controller compiled as `spinrail flash` compiles it for the board
    (deploy.build_bundle), the shipped profiles, the demo vectors and golden_check.py: the
    board reads them from /rom, without a slow copy over the UART."""
    from host_sim import deploy
    b = deploy.build_bundle(board_name)
    stage = Path(work) / "stage"
    for rel, data in b.files:
        if rel.startswith("controller/"):
            p = stage / rel
            p.parent.mkdir(parents=True, exist_ok=True)
            p.write_bytes(data)
    (stage / "host_sim" / "profiles").mkdir(parents=True)
    (stage / "data").mkdir()
    shutil.copy2(ROOT / "controller" / "default_profile.json", stage / "controller")
    for p in (ROOT / "host_sim" / "profiles").glob("*.json"):
        shutil.copy2(p, stage / "host_sim" / "profiles")
    shutil.copy2(ROOT / "host_sim" / "data" / "demo_vectors.csv", stage / "data")
    shutil.copy2(ROOT / "host_sim" / "golden_check.py", stage)
    mpremote = Path(sys.executable).parent / "mpremote"
    cmd = [str(mpremote)] if mpremote.exists() else [sys.executable, "-m", "mpremote"]
    r = subprocess.run(cmd + ["romfs", "--no-mpy", "-o", str(out_img), "build", str(stage)],
                       capture_output=True, text=True)
    if r.returncode:
        raise UserError("building the ROMFS image failed: %s" % (r.stderr or r.stdout)[-800:],
                        exit_code=1)
    return out_img


VECTOR_PROFILES = ("controller/default_profile.json", "host_sim/profiles/hut_wind.json")

_ON_BOARD = """
import os, sys, hashlib, vfs
try:
    os.stat('/rom')
except OSError:
    vfs.mount(vfs.VfsRom(vfs.rom_ioctl(2, 0)), '/rom')
os.chdir('/rom')
sys.path.insert(0, '/rom')
print('MACHINE', sys.implementation._machine, sys.maxsize)
import golden_check
golden_check.main(['', '%d'])
from controller import replay, profile
for path in %r:
    h = hashlib.sha256()
    with open('data/demo_vectors.csv') as f:
        n = replay.run(profile.load(path), f, lambda s: h.update(s.encode()))
    print('VEC', ''.join('%%02x' %% b for b in h.digest()), n, path)
"""


def board_golden_and_vectors(fw, romfs_img, golden_ticks):
    """(machine line, golden lines, {profile: (sha256, ticks)}) from the emulated board."""
    from host_sim import deploy
    with tempfile.TemporaryDirectory() as d:
        with emulate.EmulatedBoard(fw, d, romfs=romfs_img, save=False) as eb:
            t = deploy.connect(eb.port, 15.0)
            try:
                out = deploy._exec(t, _ON_BOARD % (golden_ticks, VECTOR_PROFILES),
                                   "running the golden check")
            finally:
                t.close()
    return _parse(out)


def cpython_golden_and_vectors(golden_ticks):
    r = subprocess.run([sys.executable, "host_sim/golden_check.py", str(golden_ticks)],
                       cwd=str(ROOT), capture_output=True, text=True, check=True)
    from controller import profile, replay
    vec = {}
    for path in VECTOR_PROFILES:
        h = hashlib.sha256()
        with open(ROOT / "host_sim" / "data" / "demo_vectors.csv") as f:
            n = replay.run(profile.load(str(ROOT / path)), f, lambda s: h.update(s.encode()))
        vec[path] = (h.hexdigest(), n)
    return [ln for ln in r.stdout.splitlines() if "ticks=" in ln], vec


def _parse(out):
    machine, golden, vec = None, [], {}
    for line in out.replace("\r", "").splitlines():
        if line.startswith("MACHINE"):
            machine = line
        elif line.startswith("VEC"):
            _, h, n, path = line.split()
            vec[path] = (h, int(n))
        elif "ticks=" in line:
            golden.append(line)
    return machine, golden, vec


def collect(log=None, src=None, quick=False):
    """The mcu_* figures for `spinrail bench` (armv6m code, the qemu_m0 board), or a reason.
    quick: the heap floor is not bisected (mcu_heap_floor_kb None: about two minutes)."""
    say = log or (lambda m: None)
    try:
        fw = emulate.build(src, log=say)
    except UserError as e:
        return {"mcu_skipped": str(e)}
    res = {}
    with tempfile.TemporaryDirectory() as d:
        flash_image(fw, "qemu_m0", d)
        say("bench: instructions per tick on the emulated Cortex-M3 (armv6m code) ...")
        res["mcu_instructions_per_tick"] = round(instructions_per_tick(fw, d))
        res["mcu_instructions_per_tick_mppt"] = round(instructions_per_tick(
            fw, d, profile="hut_wind.json"))
        res["mcu_alloc_bytes_per_tick"] = alloc_bytes_per_tick(fw, d)
        say("bench: heap floor on the emulated board (about two minutes) ...")
        res["mcu_heap_floor_kb"] = None if quick else heap_floor_kb(fw, d, log=say)
    ipt = res["mcu_instructions_per_tick"]
    # an estimate: one instruction per cycle at 125 MHz (flash wait states, the M0+'s slower
    # multi-cycle loads and branches make a real RP2040 slower than this)
    for period_ms in (10, 50):
        res["mcu_share_%dms_pct_est" % period_ms] = round(100.0 * ipt / (125e6 * period_ms / 1000), 2)
    res["mcu_firmware"] = fw.info.get("source", "")[:16]
    return res
