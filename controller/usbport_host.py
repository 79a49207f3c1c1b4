# The USB match codes' names as the host reads them. The firmware never imports this module;
# controller.usbport calls publish() at import on CPython, so host code keeps writing
# usbport.M_DCP and usbport.MATCH_NAMES (on the board these would be module-dict entries, RAM
# the tick never reads). The codes stay defined once, in usbport.py, as private constants.
# controller/replay.py, which also runs on the unix port, imports MATCH_NAMES from here.
from controller import host_names


# index: the usb_match code (M_*)
MATCH_NAMES = ("none", "dcp", "div_2v0_2v7", "div_2v7_2v0", "div_2v7_2v7", "short_1v2")

PRIVATE = ("M_NONE", "M_DCP", "M_DIV_2V0_2V7", "M_DIV_2V7_2V0", "M_DIV_2V7_2V7", "M_SHORT_1V2")


def publish(ns):
    """Add MATCH_NAMES, and usbport.py's private match codes under their public names, to the
    namespace ns (usbport.py's globals)."""
    host_names.publish(ns, globals(), ("MATCH_NAMES",), PRIVATE)
