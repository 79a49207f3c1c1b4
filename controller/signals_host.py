# Names of signals.py's codes as the host reads them. The firmware never imports this module;
# controller.signals calls publish() at import on CPython, so host code keeps writing
# signals.STAGE_NAMES, signals.FAULT_NAMES and signals.MAX_CELL_TAPS (on the board these would
# be module-dict entries, RAM the tick never reads). controller/replay.py, which also runs on
# the unix port, imports the names from here directly.
from controller import host_names


STAGE_NAMES = ("blocked", "bulk", "absorption", "float", "equalize")  # index: ST_* code
FAULT_NAMES = (  # index i: fault bit 1 << i (F_*)
    "ovp", "ovp_lockout", "bus_sensor", "batt_sensor", "temp_sensor", "cap_sensor",
    "usb_sensor", "batt_absent", "batt_reversed", "temp_window", "batt_over", "cap_cell",
    "usb_lines", "firmware", "link",
)

NAMES = ("STAGE_NAMES", "FAULT_NAMES")
PRIVATE = ("MAX_CELL_TAPS",)


def publish(ns):
    """Add the names, and signals.py's private constants under their public names, to the
    namespace ns (signals.py's globals)."""
    host_names.publish(ns, globals(), NAMES, PRIVATE)
