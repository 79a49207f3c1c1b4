# Emulated 32-bit boards: MicroPython's qemu port on an emulated Cortex-M3 (qemu's mps2-an385
# machine), built here from a MicroPython source tree, with an overlay board that makes it
# behave like a real board for flash, hil and monitor:
#  - a writable littlefs2 root on a 1 MiB RAM disk (boot.py / main.py run on soft reset);
#  - Ctrl-C raises KeyboardInterrupt in running code (the stock port polls its UART and never
#    sees it);
#  - the heap's size can be lowered at start-up without a rebuild (a word qemu's loader writes
#    at HEAP_WORD_ADDR before reset), for the heap floor;
#  - the RAM disk is saved to DIR/flash.img when the board stops and loaded when it starts, so
#    a flashed board keeps its files between runs, like a board's flash.
# The build is cached under cache_dir() keyed by the source's hash and the build options.
# The MicroPython source is never part of this project: it comes from --micropython-src,
# SPINRAIL_MICROPYTHON_SRC (source()).
import hashlib
import json
import os
import re
import shutil
import signal
import socket
import subprocess
import sys
import tarfile
import tempfile
import time
from pathlib import Path

from host_sim.common import ROOT
from host_sim.errors import UserError

# The MicroPython commit the overlay was written and tested against (from the trimmed source
# archive's COMMIT file); any tree whose ports/qemu has the same main.c and mphalport.c works.
PINNED_COMMIT = "1c3c201149f37fe8d81246191b3127bb198d6306"
ENV_SRC = "SPINRAIL_MICROPYTHON_SRC"

MACHINE = "mps2-an385"
FW_BOARD = "MPS2_AN385_FS"
HEAP_BYTES = 143360  # the stock qemu port's MICROPY_HEAP_SIZE for this machine (140 KiB)
HEAP_WORD_ADDR = 0x21500000  # board PSRAM above the RAM disk: heap bytes for this start
ROMFS_ADDR = 0x21000000  # the port's read-only ROMFS partition (4 MiB), mounted at /rom
DISK_ADDR = 0x21400000  # RAM disk: 2048 blocks of 512 bytes (must match _BOOT_PY)
DISK_BYTES = 2048 * 512
_PORT_RE = re.compile(rb"char device redirected to (/dev/pts/\d+)")

_MPCONFIGBOARD_MK = """\
# MPS2_AN385 (Cortex-M3) plus a writable littlefs2 root on a RAM disk outside the GC heap
# (survives soft resets), boot.py/main.py run on soft reset, Ctrl-C raises KeyboardInterrupt.
include boards/MPS2_AN385/mpconfigboard.mk
MICROPY_VFS_LFS2 = 1
CFLAGS += -DQEMU_BOOT_SCRIPTS=1 -DQEMU_HEAP_WORD=0x%08x
FROZEN_MANIFEST ?= $(BOARD_DIR)/manifest.py
SRC_C += boards/MPS2_AN385_FS/time_ns.c
""" % HEAP_WORD_ADDR

_TIME_NS_C = """\
// littlefs2 stores a modification time: the board has no RTC, so "now" is the time since boot.
#include "py/mphal.h"

uint64_t mp_hal_time_ns(void) {
    return (uint64_t)mp_hal_ticks_ms() * 1000000ULL;
}
"""

_BOOT_PY = """\
# Frozen, run after every (soft) reset: littlefs2 at / on a 1 MiB RAM disk at 0x21400000 (the
# board's PSRAM), outside the GC heap: files survive soft resets; the host saves and reloads
# the disk across emulator runs. Blank RAM -> mkfs.
import vfs, uctypes


class RAMDisk:
    def __init__(self, addr, bs, nb):
        self.bs = bs
        self.nb = nb
        self.mv = memoryview(uctypes.bytearray_at(addr, bs * nb))

    def readblocks(self, n, buf, off=0):
        a = n * self.bs + off
        buf[:] = self.mv[a:a + len(buf)]

    def writeblocks(self, n, buf, off=0):
        a = n * self.bs + (off or 0)
        self.mv[a:a + len(buf)] = buf

    def ioctl(self, op, arg):
        if op == 4:
            return self.nb
        if op == 5:
            return self.bs
        if op == 6:
            return 0
        return None


def _mount():
    bdev = RAMDisk(0x21400000, 512, 2048)
    try:
        vfs.mount(vfs.VfsLfs2(bdev), "/")
    except OSError:
        vfs.VfsLfs2.mkfs(bdev)
        vfs.mount(vfs.VfsLfs2(bdev), "/")


_mount()
del _mount, RAMDisk
"""

# main.c: run _boot.py, boot.py, main.py after each (soft) reset; the heap's size from a word
# the host may set (a smaller heap without a rebuild, as MICROPY_HEAP_SIZE would give).
_MAIN_EDITS = (
    ("    gc_init(gc_heap, (char *)gc_heap + MICROPY_HEAP_SIZE);\n",
     """    #if QEMU_BOOT_SCRIPTS
    {
        uint32_t n = *(volatile uint32_t *)QEMU_HEAP_WORD;
        if (n < 8192 || n > MICROPY_HEAP_SIZE) {
            n = MICROPY_HEAP_SIZE;
        }
        gc_init(gc_heap, (char *)gc_heap + (n & ~7u));
    }
    #else
    gc_init(gc_heap, (char *)gc_heap + MICROPY_HEAP_SIZE);
    #endif
"""),
    ("        mp_init();\n",
     """        mp_init();
        #if QEMU_BOOT_SCRIPTS
        pyexec_frozen_module("_boot.py", false);
        if (pyexec_mode_kind == PYEXEC_MODE_FRIENDLY_REPL) {
            if (pyexec_file_if_exists("boot.py") & PYEXEC_FORCED_EXIT) {
                goto soft_reset_exit;
            }
            if (pyexec_file_if_exists("main.py") & PYEXEC_FORCED_EXIT) {
                goto soft_reset_exit;
            }
        }
        #endif
"""),
    ('        mp_printf(&mp_plat_print, "MPY: soft reboot\\n");',
     '        #if QEMU_BOOT_SCRIPTS\n    soft_reset_exit:\n        #endif\n'
     '        mp_printf(&mp_plat_print, "MPY: soft reboot\\n");'),
)

# mphalport.c: the port polls its UART and never checks the interrupt character; read one byte
# ahead and raise KeyboardInterrupt on Ctrl-C while code runs (a real board's RX IRQ does this).
# micropython.kbd_intr(-1) turns it off, as on a real board.
_HAL_EDITS = (
    ("""uintptr_t mp_hal_stdio_poll(uintptr_t poll_flags) {
    #if USE_UART
    if ((poll_flags & MP_STREAM_POLL_RD) && uart_rx_any()) {""",
     """#if QEMU_BOOT_SCRIPTS
static int rx_ahead = -1;

static void rx_check(void) {
    if (rx_ahead < 0) {
        int c = uart_rx_chr();
        if (c >= 0) {
            if (c == mp_interrupt_char) {
                mp_sched_keyboard_interrupt();
            } else {
                rx_ahead = c;
            }
        }
    }
}
#endif

uintptr_t mp_hal_stdio_poll(uintptr_t poll_flags) {
    #if QEMU_BOOT_SCRIPTS
    rx_check();
    if ((poll_flags & MP_STREAM_POLL_RD) && rx_ahead >= 0) {
        return MP_STREAM_POLL_RD;
    }
    #elif USE_UART
    if ((poll_flags & MP_STREAM_POLL_RD) && uart_rx_any()) {"""),
    ("int mp_hal_stdin_rx_chr(void) {\n    for (;;) {\n",
     """int mp_hal_stdin_rx_chr(void) {
    for (;;) {
        #if QEMU_BOOT_SCRIPTS
        rx_check();
        if (rx_ahead >= 0) {
            int c = rx_ahead;
            rx_ahead = -1;
            return c;
        }
        if (mp_interrupt_char >= 0) {
            mp_handle_pending(true);
        }
        continue;
        #endif
"""),
)


def _overlay_version():
    """Everything the overlay adds, hashed: a change to it is a new build."""
    h = hashlib.sha256()
    for part in (_MPCONFIGBOARD_MK, _TIME_NS_C, _BOOT_PY, repr(_MAIN_EDITS), repr(_HAL_EDITS)):
        h.update(part.encode())
    return h.hexdigest()[:16]


# -- the source ------------------------------------------------------------------------------
def missing_source_message():
    return ("no MicroPython source for the emulated board: give --micropython-src PATH or set "
            "%s to a MicroPython source tree or tarball (ports/qemu, py/, extmod/, shared/, "
            "mpy-cross/, lib/littlefs, lib/libm and what they include), tested at commit %s: "
            "git clone https://github.com/micropython/micropython && git -C micropython checkout "
            "%s (no submodules are needed for the qemu port)" % (ENV_SRC, PINNED_COMMIT,
                                                               PINNED_COMMIT))


def source(arg=None):
    """The MicroPython source to build from (a folder or a .tar.gz), or UserError (exit 2)."""
    for cand, what in ((arg, "--micropython-src"), (os.environ.get(ENV_SRC), ENV_SRC)):
        if cand:
            p = Path(cand).expanduser()
            if not p.exists():
                raise UserError("%s %s: no such file or folder" % (what, p))
            return p
    raise UserError(missing_source_message())


def source_available(arg=None):
    try:
        source(arg)
        return True
    except UserError:
        return False


_TREE_PARTS = ("py", "extmod", "shared", "mpy-cross", "ports/qemu", "lib/littlefs", "lib/libm",
               "lib/cmsis", "lib/uzlib", "lib/berkeley-db-1.xx", "drivers")


def source_hash(src):
    """sha256 of a tarball, or of the build-relevant files of a folder (paths and contents,
    build output skipped)."""
    src = Path(src)
    h = hashlib.sha256()
    if src.is_file():
        with open(src, "rb") as f:
            for block in iter(lambda: f.read(1 << 20), b""):
                h.update(block)
        return h.hexdigest()
    for part in _TREE_PARTS:
        base = src / part
        if not base.exists():
            continue
        for dirpath, dirnames, filenames in os.walk(base):
            dirnames[:] = sorted(d for d in dirnames if not d.startswith("build") and d != ".git")
            for name in sorted(filenames):
                p = Path(dirpath) / name
                h.update(str(p.relative_to(src)).encode() + b"\0")
                h.update(hashlib.sha256(p.read_bytes()).digest())
    return h.hexdigest()


# -- the build ---------------------------------------------------------------------------------
def cache_dir():
    """Where built firmware is kept: $SPINRAIL_CACHE or $XDG_CACHE_HOME/spinrail (default
    ~/.cache/spinrail), under emulated/."""
    base = os.environ.get("SPINRAIL_CACHE")
    if not base:
        xdg = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
        base = os.path.join(xdg, "spinrail")
    return Path(base) / "emulated"


def _tool_version(exe):
    try:
        r = subprocess.run([exe, "--version"], capture_output=True, text=True)
        return (r.stdout or r.stderr).splitlines()[0]
    except (OSError, IndexError):
        return None


def check_tools(need_gcc=True):
    missing = []
    if need_gcc:
        if shutil.which("arm-none-eabi-gcc") is None:
            missing.append("gcc-arm-none-eabi")
        if not Path("/usr/lib/arm-none-eabi/include/stdio.h").exists() and \
                not Path("/usr/include/newlib/stdio.h").exists():
            missing.append("libnewlib-arm-none-eabi")
        if shutil.which("make") is None:
            missing.append("make")
    if shutil.which("qemu-system-arm") is None:
        missing.append("qemu-system-arm")
    if missing:
        raise UserError("the emulated board needs %s (Debian: apt-get install %s; ./run.sh test "
                        "installs them where it may)" % (", ".join(missing), " ".join(missing)))


class Firmware:
    def __init__(self, folder):
        self.folder = Path(folder)
        self.elf = self.folder / "firmware.elf"
        self.mpy_cross = self.folder / "mpy-cross"
        self.info = json.loads((self.folder / "build.json").read_text())


def build_key(src_hash):
    opts = {"source": src_hash, "overlay": _overlay_version(), "board": FW_BOARD,
            "heap_bytes": HEAP_BYTES, "gcc": _tool_version("arm-none-eabi-gcc")}
    return hashlib.sha256(json.dumps(opts, sort_keys=True).encode()).hexdigest()[:20], opts


def build(src_arg=None, cache=None, log=None, jobs=2):
    """The firmware for the emulated boards, built once per source and options (cached)."""
    say = log or (lambda m: None)
    src = source(src_arg)
    check_tools()
    key, opts = build_key(source_hash(src))
    cache = Path(cache) if cache else cache_dir()
    out = cache / ("fw-" + key)
    if (out / "build.json").exists() and (out / "firmware.elf").exists():
        return Firmware(out)
    cache.mkdir(parents=True, exist_ok=True)
    work = Path(tempfile.mkdtemp(prefix=".build-", dir=str(cache)))
    t0 = time.monotonic()
    try:
        tree = work / "mpy"
        if src.is_file():
            say("unpacking %s" % src)
            tree.mkdir()
            with tarfile.open(src) as tf:
                members = tf.getmembers()
                top = members[0].name.split("/")[0] if members else ""
                for m in members:  # strip the archive's top folder
                    parts = m.name.split("/", 1)
                    if len(parts) < 2 or parts[0] != top or ".." in parts[1].split("/"):
                        continue
                    m.name = parts[1]
                    tf.extract(m, tree, filter="data") if sys.version_info >= (3, 12) \
                        else tf.extract(m, tree)
        else:
            say("copying %s" % src)
            shutil.copytree(src, tree, symlinks=True, ignore=shutil.ignore_patterns(
                ".git", "build*"))
        _apply_overlay(tree, work)
        env = dict(os.environ)
        for step, cmd in (
                ("mpy-cross", ["make", "-C", str(tree / "mpy-cross"), "-j%d" % jobs]),
                ("firmware", ["make", "-C", str(tree / "ports" / "qemu"), "-j%d" % jobs,
                              "BOARD=" + FW_BOARD, "MICROPY_HEAP_SIZE=%d" % HEAP_BYTES,
                              "MPY_LIB_DIR=" + str(work / "no-micropython-lib")])):
            say("building %s (%s) ..." % (step, " ".join(cmd[3:]) or "host"))
            r = subprocess.run(cmd, capture_output=True, text=True, env=env)
            if r.returncode:
                raise UserError("building the emulated board's %s failed:\n%s" % (
                    step, (r.stdout + r.stderr)[-2000:]), exit_code=1)
        stage = work / "out"
        stage.mkdir()
        shutil.copy2(tree / "ports" / "qemu" / ("build-" + FW_BOARD) / "firmware.elf", stage)
        shutil.copy2(tree / "mpy-cross" / "build" / "mpy-cross", stage)
        snap = tree / "SNAPSHOT"
        opts["commit"] = snap.read_text().split()[0] if snap.exists() else None
        opts["source_path"] = str(src)
        opts["seconds"] = round(time.monotonic() - t0, 1)
        (stage / "build.json").write_text(json.dumps(opts, indent=1, sort_keys=True))
        try:
            os.rename(stage, out)  # whole or not at all; a parallel build may have won
        except OSError:
            if not (out / "build.json").exists():
                raise
        say("built in %.0f s: %s" % (time.monotonic() - t0, out))
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return Firmware(out)


def _edit(path, edits, marker="QEMU_BOOT_SCRIPTS"):
    s = path.read_text()
    if marker in s:
        return
    for old, new in edits:
        if s.count(old) != 1:
            raise UserError("%s: this MicroPython source differs from the one the emulated board "
                            "was written for (commit %s): cannot apply the overlay"
                            % (path, PINNED_COMMIT), exit_code=2)
        s = s.replace(old, new)
    path.write_text(s)


def _apply_overlay(tree, work):
    b = tree / "ports" / "qemu" / "boards" / FW_BOARD
    if not (tree / "ports" / "qemu" / "main.c").exists():
        raise UserError("%s: no ports/qemu/main.c: not a MicroPython source tree (commit %s "
                        "expected)" % (tree, PINNED_COMMIT))
    b.mkdir(parents=True, exist_ok=True)
    stand_in = work / "no-micropython-lib"
    stand_in.mkdir(exist_ok=True)
    # py/manifest.mk insists on micropython-lib's README even when nothing is frozen from it
    (stand_in / "README.md").write_text("stand-in: nothing is frozen from micropython-lib\n")
    (b / "mpconfigboard.mk").write_text(_MPCONFIGBOARD_MK)
    (b / "manifest.py").write_text('freeze("$(BOARD_DIR)", "_boot.py")\n')
    (b / "time_ns.c").write_text(_TIME_NS_C)
    (b / "_boot.py").write_text(_BOOT_PY)
    _edit(tree / "ports" / "qemu" / "main.c", _MAIN_EDITS)
    _edit(tree / "ports" / "qemu" / "mphalport.c", _HAL_EDITS)


# -- running it ---------------------------------------------------------------------------------
# Started through this shim: the emulator dies with the process that started it (a killed
# `spinrail board emulate` leaves no qemu behind), and runs in its own process group, so a
# terminal's Ctrl-C reaches only us and we can save the disk before stopping it.
_SHIM = ("import ctypes, os, signal, sys; ctypes.CDLL(None).prctl(1, signal.SIGTERM); "
         "os.execvp(sys.argv[1], sys.argv[1:])")


class EmulatedBoard:
    """qemu-system-arm running the emulated board's firmware, its UART on a pty.

    eb = EmulatedBoard(fw, folder); port = eb.start(); ...; eb.stop()  (or a context manager).
    folder holds flash.img (the RAM disk, saved on stop, loaded on start). heap_kb: the GC heap
    for this start (default: the build's whole heap). icount: one guest instruction per
    nanosecond of board time (time.ticks_us counts instructions / 1000)."""

    def __init__(self, fw, folder, heap_kb=None, icount=False, save=True, romfs=None, log=None):
        self.fw = fw
        self.romfs = romfs  # a ROMFS image for /rom (read-only, at 0x21000000), or None
        self.folder = Path(folder).resolve()
        self.heap_kb = heap_kb
        self.icount = icount
        self.save = save
        self.log = log
        self.port = None
        self.proc = None
        self._tmp = None

    @property
    def image(self):
        return self.folder / "flash.img"

    def start(self, timeout_s=10.0):
        check_tools(need_gcc=False)
        self.folder.mkdir(parents=True, exist_ok=True)
        self._tmp = tempfile.mkdtemp(prefix="sr-qemu-")  # short path for the monitor socket
        self._sock = os.path.join(self._tmp, "mon")
        logf = os.path.join(self._tmp, "qemu.log")
        cmd = ["qemu-system-arm", "-machine", MACHINE, "-nographic", "-semihosting",
               "-monitor", "unix:%s,server=on,wait=off" % self._sock, "-serial", "pty",
               "-kernel", str(self.fw.elf)]
        if self.image.exists():
            cmd += ["-device", "loader,file=%s,addr=0x%x,force-raw=on" % (self.image, DISK_ADDR)]
        if self.romfs:
            cmd += ["-device", "loader,file=%s,addr=0x%x,force-raw=on" % (
                Path(self.romfs).resolve(), ROMFS_ADDR)]
        if self.heap_kb:
            cmd += ["-device", "loader,addr=0x%x,data=%d,data-len=4" % (
                HEAP_WORD_ADDR, int(self.heap_kb) * 1024)]
        if self.icount:
            cmd += ["-icount", "shift=0"]
        with open(logf, "wb") as lf:
            self.proc = subprocess.Popen([sys.executable, "-c", _SHIM] + cmd, stdin=subprocess.DEVNULL,
                                         stdout=lf, stderr=subprocess.STDOUT,
                                         start_new_session=True)
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            with open(logf, "rb") as f:
                m = _PORT_RE.search(f.read())
            if m:
                self.port = m.group(1).decode()
                return self.port
            if self.proc.poll() is not None:
                break
            time.sleep(0.05)
        with open(logf, "rb") as f:
            text = f.read().decode(errors="replace")
        self.stop(save=False)
        raise UserError("qemu-system-arm did not start the emulated board: %s" % text[-800:],
                        exit_code=1)

    def _monitor(self, commands, timeout_s=10.0):
        """Run qemu monitor commands one by one, each to its answer (the next prompt)."""
        s = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
        s.settimeout(timeout_s)
        s.connect(self._sock)

        def prompt(after_newline):
            buf = b""
            while not (buf.endswith(b"(qemu) ") and (b"\n" in buf or not after_newline)):
                data = s.recv(4096)
                if not data:
                    return
                buf += data
        try:
            prompt(False)  # banner
            for c in commands:
                s.sendall(c.encode() + b"\n")
                prompt(True)  # for quit: until qemu closes the socket
        finally:
            s.close()

    def save_image(self):
        """The RAM disk, written whole to flash.img (an emulator stopped mid-write leaves a
        littlefs image as a power cut would: littlefs is built to survive that)."""
        tmp = self.image.with_suffix(".img.new")
        self._monitor(["stop", "pmemsave 0x%x %d \"%s\"" % (DISK_ADDR, DISK_BYTES, tmp), "cont"])
        if tmp.exists() and tmp.stat().st_size == DISK_BYTES:
            os.replace(tmp, self.image)

    def stop(self, save=None):
        save = self.save if save is None else save
        p = self.proc
        if p is not None and p.poll() is None:
            if save:
                try:
                    self.save_image()
                except OSError as e:
                    if self.log:
                        self.log("could not save %s: %s" % (self.image, e))
            try:
                self._monitor(["quit"], timeout_s=3.0)
                p.wait(timeout=5)
            except (OSError, subprocess.TimeoutExpired):
                pass
            if p.poll() is None:
                try:
                    os.killpg(p.pid, signal.SIGKILL)
                except OSError:
                    p.kill()
                p.wait(timeout=5)
        self.proc = None
        if self._tmp:
            shutil.rmtree(self._tmp, ignore_errors=True)
            self._tmp = None

    def __enter__(self):
        self.start()
        return self

    def __exit__(self, *exc):
        self.stop()

    def wait(self):
        """Until the emulator exits, stop() or KeyboardInterrupt."""
        try:
            while self.proc is not None and self.proc.poll() is None:
                time.sleep(0.2)
        finally:
            self.stop()
