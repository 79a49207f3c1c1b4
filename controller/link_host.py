# The link's layout as the host reads it (CPython only: the board never imports this module).
# controller.link calls publish() at import, so host code keeps writing L.MEAS_FMT, L.T_TELEM.
# The struct formats are the layout spec (docs/link.md); the board packs the same fields by
# hand. The constants stay defined once, in link.py, where the board keeps them private.
from controller import host_names


HELLO_FMT = "<BH"  # proto, nonce
HELLO_R_FMT = "<BH8s8sBHHH16s"  # proto, nonce, fw hash, profile hash, mode, period_ms,
#                                 link_timeout_ms, telemetry_ms, board name (NUL-padded)
MEAS_FMT = "<BI10iB12h"  # flags, t_ms, MEAS_FIELDS, n_taps, cell_mv[12]
CMD_FMT = "<HIIHHHBHBBH"  # ack seq, ticks, now_ms, batt/cap/dump duty, switches, bal_mask,
#                           stage, usb_match, fault
TELEM_FMT = "<IIBH10i3HB9H"  # now_ms, ticks, stage, fault, MEAS_FIELDS, duties, switches,
#                              TELEM_COUNTERS
MEAS_FIELDS = ("bus_mv", "src_ma", "batt_mv", "batt_ma", "batt_temp_dc", "cap_mv", "cap_ma",
               "usb_vbus_mv", "usb_dp_mv", "usb_dm_mv")
TELEM_COUNTERS = ("rx_ok", "rx_crc", "rx_malformed", "rx_oversized", "rx_order", "rx_gaps",
                  "link_losses", "exceptions", "late_ticks")

LAYOUT = ("HELLO_FMT", "HELLO_R_FMT", "MEAS_FMT", "CMD_FMT", "TELEM_FMT", "MEAS_FIELDS",
          "TELEM_COUNTERS")
PRIVATE = ("PROTO", "T_HELLO", "T_HELLO_R", "T_TELEM", "MAX_PAYLOAD", "TELEM_LEN", "HELLO_LEN",
           "HELLO_R_LEN", "N_CELLS", "F_EQ", "F_RESET", "SW_USB_CONV", "SW_USB_ON",
           "SW_USB_PROBE", "SW_BATT_OUT", "EV_NONE", "T_BREAK", "BREAK_LEN", "CHAIN_SEQ",
           "SEQ_WIN")


def publish(ns):
    """Add the layout, and link.py's private constants under their public names, to the
    namespace ns (link.py's globals)."""
    host_names.publish(ns, globals(), LAYOUT, PRIVATE)
