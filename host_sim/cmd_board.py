# Command line for boards: `spinrail flash`, `spinrail board list|check|virtual`,
# `spinrail monitor`. register(subparsers) adds them to the one `spinrail` parser.
import os
import signal
import sys

from controller.compat import ConfigError
from host_sim.errors import UserError


def _err(msg):
    print(msg, file=sys.stderr, flush=True)


def cmd_flash(args):
    from host_sim import deploy
    r = deploy.flash(args.port, args.board, args.profile, mode=args.mode, timeout_s=args.timeout,
                     start=not args.no_start, check=args.check, log=None if args.quiet else (lambda m: _err("flash: " + m)))
    print("flashed %s on %s: slot %s (was %s), mode %s, %d files, %d bytes, %.1f s" % (
        r.board, r.port, r.slot, r.previous or "empty", r.mode, r.files, r.bytes, r.seconds))
    print("firmware sha256 %s" % r.fw_sha256)
    print("profile  sha256 %s" % r.profile_sha256)
    if args.no_start or not args.check:
        return 0
    from host_sim.seriallink import SerialLink
    with SerialLink(args.port) as link:
        h = link.hello(timeout_s=args.timeout)
    same = h.fw_hash == r.fw_sha256[:16] and h.profile_hash == r.profile_sha256[:16]
    print("board answers: %r" % h)
    if not same:
        raise UserError("the board runs firmware %s / profile %s, not the one just flashed"
                        % (h.fw_hash, h.profile_hash))
    return 0


def cmd_board_list(args):
    from boards import board
    for name in board.list_boards():
        try:
            b = board.load(name)
            print("%-16s %-7s %-10s %s" % (name, b.chip, b.mode, b.doc.get("description", "")[:90]))
        except ConfigError as e:
            print("%-16s INVALID: %s" % (name, e))
    return 0


def cmd_board_check(args):
    from boards import board
    bad = 0
    for name in args.boards:
        try:
            b = board.load(name)
            print("%s: ok (%s, %d inputs, %d PWM, %d enables, link %s)" % (
                b.path, b.chip, len(b.hw["inputs"]), len(b.hw["pwm"]), len(b.hw["enables"]),
                b.hw["link"]["kind"]))
        except ConfigError as e:
            _err("spinrail: %s" % e)
            bad += 1
    if bad:
        raise UserError("%d of %d board files failed validation" % (bad, len(args.boards)))
    return 0


def default_virtual_dir():
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return os.path.join(base, "spinrail", "virtual_board")


def cmd_board_virtual(args):
    from boards import board
    from host_sim.virtualboard import VirtualBoard
    folder = args.dir or default_virtual_dir()
    os.makedirs(folder, exist_ok=True)
    heap_kb = args.heap_kb or board.load("virtual").heap_kb
    vb = VirtualBoard(folder, heap_kb=heap_kb,
                      log=(lambda m: _err("virtual board: " + m)) if args.verbose else None)
    def _term(signum, frame):
        raise KeyboardInterrupt
    signal.signal(signal.SIGTERM, _term)  # stop cleanly (and reap the interpreter) on kill
    # Ctrl-C stops it even when started where SIGINT is ignored (a shell's background job)
    signal.signal(signal.SIGINT, signal.default_int_handler)
    port = vb.start()
    print(port, flush=True)
    _err("virtual board: port %s, filesystem %s, heap %d KB, interpreter %s; Ctrl-C stops it"
         % (port, folder, heap_kb, vb.exe))
    try:
        vb.wait()
    except KeyboardInterrupt:
        pass
    return 0


def default_emulated_dir(name):
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return os.path.join(base, "spinrail", "emulated", name)


def cmd_board_emulate(args):
    from boards import board
    from host_sim import emulate
    try:
        b = board.load(args.board)
    except ConfigError as e:
        raise UserError(str(e))
    if not b.emulated:
        raise UserError("%s: chip %s is not an emulated board (emulated: qemu_m3, qemu_m0)"
                        % (b.path, b.chip))
    folder = args.dir or default_emulated_dir(b.name)
    fw = emulate.build(args.micropython_src, log=lambda m: _err("emulate: " + m))
    heap_kb = args.heap_kb or b.heap_kb
    eb = emulate.EmulatedBoard(fw, folder, heap_kb=heap_kb, icount=args.icount,
                               log=lambda m: _err("emulate: " + m))

    def _term(signum, frame):
        raise KeyboardInterrupt
    signal.signal(signal.SIGTERM, _term)  # stop cleanly (save the disk, stop qemu) on kill
    signal.signal(signal.SIGINT, _term)  # also when started in the background (SIGINT ignored)
    try:
        port = eb.start()
        print(port, flush=True)
        _err("emulated board %s: port %s, %s code on a Cortex-M3 (qemu %s), heap %d KB, flash "
             "image %s, firmware %s; Ctrl-C stops it" % (b.name, port, b.mpy_arch,
                                                        emulate.MACHINE, heap_kb, eb.image,
                                                        fw.folder))
        eb.wait()
    except KeyboardInterrupt:
        pass
    finally:
        eb.stop()
    return 0


def cmd_board_restart(args):
    from host_sim import deploy
    deploy.restart(args.port, timeout_s=args.timeout)
    print("restarted the firmware on %s" % args.port)
    return 0


def cmd_board_stop(args):
    from host_sim import deploy
    if not deploy.stop(args.port, timeout_s=args.timeout):
        raise UserError("port %s: no REPL prompt within %.0f s after the BREAK frame (is a "
                        "MicroPython board on it?)" % (args.port, args.timeout))
    print("stopped the firmware on %s: the REPL is free (mpremote, a terminal); "
          "`spinrail board restart` starts it again" % args.port)
    return 0


def cmd_monitor(args):
    from host_sim.monitor import monitor, parse_feed
    feed = parse_feed(args.feed) if args.feed is not None else None
    monitor(args.port, csv_path=args.csv, seconds=args.seconds, feed=feed)
    return 0


def register(sub):
    f = sub.add_parser("flash", help="validate, compile and copy the firmware to a board",
                       description="Validate the profile and the board file, compile the "
                       "controller with mpy-cross, copy it into the board's inactive slot with "
                       "mpremote, verify every file by sha256 on the board, then boot it once as a "
                       "trial: it becomes the boot target only when it answers HELLO with the "
                       "new hashes, else the board goes back to the previous version (exit 2). "
                       "An interrupted flash leaves the previous version booting.")
    f.add_argument("--board", required=True, help="board name (boards/NAME.json) or board file")
    f.add_argument("--port", required=True, help="serial port or pyserial URL (/dev/ttyACM0, "
                   "the path `spinrail board virtual` prints)")
    f.add_argument("--profile", default=None, help="profile file or built-in name (default: the "
                   "shipped default)")
    f.add_argument("--mode", choices=("standalone", "link"), default=None,
                   help="firmware mode (default: the board file's)")
    f.add_argument("--timeout", type=float, default=10.0, help="seconds to wait for the board "
                   "(default: %(default)s)")
    f.add_argument("--no-start", action="store_true", help="do not soft-reset into the new "
                   "firmware afterwards (no trial boot: the boot target switches at once)")
    f.add_argument("--no-check", dest="check", action="store_false",
                   help="skip the HELLO handshake that confirms the running firmware's hashes "
                   "(no trial boot: the boot target switches at once)")
    f.add_argument("-q", "--quiet", action="store_true", help="no progress on stderr")
    f.set_defaults(func=cmd_flash)

    b = sub.add_parser("board", help="board files and the virtual board")
    bs = b.add_subparsers(dest="board_cmd", metavar="ACTION", required=True)
    bl = bs.add_parser("list", help="list the shipped board files")
    bl.set_defaults(func=cmd_board_list)
    bc = bs.add_parser("check", help="validate board files")
    bc.add_argument("boards", nargs="+", help="board names or files")
    bc.set_defaults(func=cmd_board_check)
    bv = bs.add_parser("virtual", help="start a virtual board and print its port",
                       description="Start the MicroPython unix port behind a pseudo-terminal, "
                       "with a folder as its filesystem, and print the port path. flash, "
                       "monitor and hil use it like a real board. Runs until Ctrl-C.")
    bv.add_argument("--dir", default=None, help="the board's filesystem folder (default: "
                    "%s)" % default_virtual_dir())
    bv.add_argument("--heap-kb", type=int, default=None, help="interpreter heap (default: the "
                    "virtual board file's heap_kb)")
    bv.add_argument("-v", "--verbose", action="store_true", help="log soft reboots on stderr")
    bv.set_defaults(func=cmd_board_virtual)

    be = bs.add_parser("emulate", help="build and start an emulated 32-bit board; print its port",
                       description="Build MicroPython's qemu port with a writable filesystem "
                       "(cached, keyed by the source and the build options), start it on qemu's "
                       "emulated Cortex-M3 (mps2-an385) and print its serial port. flash, "
                       "monitor and hil use it like a real board. Its files are kept in "
                       "DIR/flash.img between runs. Runs until Ctrl-C or SIGTERM.")
    be.add_argument("board", metavar="BOARD", help="qemu_m3 (armv7m code) or qemu_m0 (armv6m "
                    "code, the RP2040's instruction set), or an emulated board file")
    be.add_argument("--dir", default=None, help="folder for the board's flash image (default: "
                    "%s)" % default_emulated_dir("BOARD"))
    be.add_argument("--micropython-src", default=None, metavar="PATH", help="MicroPython source "
                    "tree or .tar.gz at the pinned commit (default: $SPINRAIL_MICROPYTHON_SRC)")
    be.add_argument("--heap-kb", type=int, default=None, help="GC heap for this start, at most "
                    "140 (default: the board file's heap_kb)")
    be.add_argument("--icount", action="store_true", help="count instructions: one guest "
                    "instruction per nanosecond of board time (slower than real time)")
    be.set_defaults(func=cmd_board_emulate)

    br = bs.add_parser("restart", help="break in and soft-reset a board into its firmware")
    br.add_argument("--port", required=True, help="serial port or pyserial URL")
    br.add_argument("--timeout", type=float, default=10.0, help="seconds to wait for the board")
    br.set_defaults(func=cmd_board_restart)

    bp = bs.add_parser("stop", help="stop the firmware and leave the REPL free",
                       description="Send the link's BREAK frame: the firmware (which turns "
                       "Ctrl-C off while its link runs on the REPL's channel) leaves its loop "
                       "with storage and USB off and the dump load on, and the board waits at "
                       "its REPL for mpremote or a terminal. flash and restart do this "
                       "themselves.")
    bp.add_argument("--port", required=True, help="serial port or pyserial URL")
    bp.add_argument("--timeout", type=float, default=3.0, help="seconds to wait for the prompt")
    bp.set_defaults(func=cmd_board_stop)

    m = sub.add_parser("monitor", help="live telemetry from a board",
                       description="Print telemetry frames as they arrive; optionally write "
                       "them to CSV, one flushed row per frame.")
    m.add_argument("--port", required=True, help="serial port or pyserial URL")
    m.add_argument("--csv", default=None, help="CSV file to write")
    m.add_argument("--seconds", type=float, default=None, help="stop after this long (default: "
                   "until Ctrl-C)")
    m.add_argument("--feed", default=None, metavar="NAME=VALUE,...",
                   help="send these measurements every period (a link-mode board, e.g. the "
                   "virtual one, then runs on them), e.g. bus_mv=15000,batt_mv=12600")
    m.set_defaults(func=cmd_monitor)
