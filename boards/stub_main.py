# spinrail boot stub: `spinrail flash` copies this file to the board's root as main.py.
# It runs the firmware in the slot named by boot_target.txt (the confirmed slot). A flash
# writes and verifies the new slot, then names it in boot_trial.txt: the stub boots a trial
# slot once (the file is removed before the slot runs), and the flash makes it the boot
# target (boot_target.new, renamed over boot_target.txt) only after the new firmware has
# answered HELLO with the new hashes. A trial that fails at start-up goes back to the
# confirmed slot in the same boot (boards/failsafe.py); after a trial that hangs, any later
# boot (a reset, the watchdog, a power cycle) runs the confirmed slot again. hold.txt (left by
# the firmware when a watchdog board is interrupted) skips the firmware once, leaving the
# REPL free. Kept small: its code stays in RAM while the firmware runs (the heap floor).
import sys


def _f(name, rm=0):
    """The file's text ("" if missing); rm: remove it too ("" if that fails)."""
    try:
        with open(name) as f:
            s = f.read().strip()
        if rm:
            import os
            os.remove(name)
        return s
    except OSError:
        return ""


if not _f("hold.txt", 1):
    _slot = _f("boot_trial.txt", 1) or _f("boot_target.txt") or _f("boot_target.new")
    if _slot:
        sys.path.insert(0, _slot)
        from boards import main as _fw
        _fw.run(_slot)
