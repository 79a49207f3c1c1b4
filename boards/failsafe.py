# An error before the firmware's loop runs (boards/main.py imports this only then): a profile
# too big for the heap, a broken slot. Runs on the board.


def startup_failed(slot, e):
    """An error before the loop runs (a profile too big for the heap, a broken slot): the
    documented safe state still holds (storage and USB off, dump load on), from a fresh look
    at the board table, and the traceback goes to the slot's fault.log."""
    import gc
    gc.collect()  # what the failed build held (a MemoryError leaves it all to garbage)
    try:
        import sys
        with open(slot + "/fault.log", "w") as f:
            f.write("start-up failed\n")
            if hasattr(sys, "print_exception"):
                sys.print_exception(e, f)
            else:
                import traceback
                traceback.print_exception(type(e), e, e.__traceback__, file=f)
    except Exception:
        pass
    try:
        import json
        with open(slot + "/hw.json") as f:
            hw = json.load(f)
        hw["watchdog_ms"] = 0  # no watchdog: it would reset the board in the safe state
        from boards import hal as H
        H.make(hw).safe(True)
    except Exception:
        pass  # nothing more can be done from here; the pins' pull resistors hold (docs)


def fall_back(slot):
    """A trial slot (boot_trial.txt named it; the stub has removed the file) failed at
    start-up: run the confirmed slot of boot_target.txt in this same boot, with its own
    modules. Returns False when there is no other slot to run."""
    import sys
    other = ""
    for name in ("boot_target.txt", "boot_target.new"):
        try:
            with open(name) as f:
                other = f.read().strip()
        except OSError:
            pass
        if other:
            break
    if not other or other == slot:
        return False
    print("spinrail: slot %s failed at start-up; booting %s" % (slot, other))
    for name in list(sys.modules):
        if name.split(".")[0] in ("boards", "controller"):
            del sys.modules[name]
    while slot in sys.path:
        sys.path.remove(slot)
    sys.path.insert(0, other)
    import gc
    gc.collect()
    from boards import main
    main.run(other)
    return True
