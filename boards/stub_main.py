# spinrail boot stub: `spinrail flash` copies this file to the board's root as main.py.
# It runs the firmware in the slot folder named by boot_target.txt. A flash writes the new
# slot first and rewrites boot_target.txt last (write boot_target.new, then rename), so an
# interrupted flash still boots the previous slot. hold.txt (left by the firmware when a
# watchdog board is interrupted) skips the firmware once, leaving the REPL free.
import sys


def _target():
    for name in ("boot_target.txt", "boot_target.new"):
        try:
            with open(name) as f:
                slot = f.read().strip()
            if slot:
                return slot
        except OSError:
            pass
    return ""


def _hold():
    import os
    try:
        os.remove("hold.txt")
        return True
    except OSError:
        return False


_slot = _target()
if _slot and not _hold():
    sys.path.insert(0, _slot)
    from boards import main as _fw
    _fw.run(_slot)
