# Firmware entry (runs on the board; the boot stub calls run(slot)). Two phases, so the heap
# never holds the validation code and the control loop at once:
#  1. load (boards/load.py): hw.json, manifest.json and profile.json from the slot folder; the
#     profile is validated, then the validation modules and load.py itself are dropped and the
#     parsed documents freed;
#  2. run: only now the control loop is imported (boards/firmware.py: link, supervisor, the
#     hardware layer), built and run at the profile's period on the wrapping millisecond clock.
# Nothing heavy is imported at module level: the stub imports this module before phase 1.
from controller.compat import const

_GC_STEP_B = const(1024)  # bytes allocated between collections while building


def build(slot=".", stream=None):
    """Everything run() needs, from the slot folder written by `spinrail flash`. stream: the
    link's byte stream (read_into, write, wait); None: the one the board file names."""
    import gc
    if not hasattr(gc, "threshold"):  # CPython
        return _build(slot, stream)
    # Collect after every KB allocated while building: the garbage each step leaves (the
    # validation code, parsed JSON, the loader's scratch) is freed before the next module's
    # code and objects are placed, so they fill its holes instead of stranding them
    # (fragmentation; on the unix port this lowered the heap floor by 6 KiB).
    before = gc.threshold()
    gc.threshold(_GC_STEP_B)
    try:
        return _build(slot, stream)
    finally:
        gc.threshold(before)  # the tick allocates nothing: no need to collect early then


def _build(slot, stream):
    import gc
    import sys
    from boards import load
    hw, fw_h, prof_h, p = load.settings(slot)
    del sys.modules["boards.load"]  # phase 1 is over: its code goes with the garbage
    import boards
    if hasattr(boards, "load"):
        del boards.load
    load = None
    gc.collect()  # the validation code and the parsed documents, before the loop's code loads
    from boards import hal as H
    from boards.firmware import Firmware
    from controller import link as L
    mode = L.MODE_LINK if hw["mode"] == "link" else L.MODE_STANDALONE
    timeout_ms = hw["link_timeout_ms"]
    telemetry_ms = hw["telemetry_ms"]
    ident = L.make_ident(fw_h, prof_h, mode, p.period_ms, timeout_ms, telemetry_ms, hw["board"])
    hal = H.make(hw)  # on a chip this starts the watchdog: as before, after the imports above
    stream = stream or H.make_stream(hw)
    hw = None
    # the board table is read: free it before the loop's objects are placed (the build's last
    # allocations, the link's buffers, are where a tight heap gave out; 1 KiB lower floor)
    gc.collect()
    return Firmware(p, hal, stream, mode, ident, timeout_ms, telemetry_ms, slot + "/fault.log")


def _kbd_intr(ch):
    try:
        import micropython
        micropython.kbd_intr(ch)
    except (ImportError, AttributeError):
        pass  # CPython (tests)


def run(slot=".", stream=None):
    import gc
    try:
        fw = build(slot, stream)
    except Exception as e:
        from boards import failsafe  # only now: its code costs no RAM in a good boot
        failsafe.startup_failed(slot, e)
        if not failsafe.fall_back(slot):
            raise
        return
    gc.collect()
    # On the REPL's channel a stray 0x03 would be Ctrl-C and stop the charger: turn the
    # interrupt character off while the loop runs; the host breaks in with a BREAK frame
    # (docs/link.md). A separate UART link leaves Ctrl-C to the REPL.
    shared = getattr(fw.stream, "shares_repl", 0)
    if shared:
        _kbd_intr(-1)
    try:
        fw.loop()
    except KeyboardInterrupt:
        fw.hal.safe(True)
        fw.hal.reboot_to_repl()
        raise
    finally:
        if shared:
            _kbd_intr(3)
