# `spinrail monitor`: live telemetry from a board, one line per frame on stdout and one CSV row
# per frame (flushed as it arrives). The CSV grows in a temporary file beside the target and is
# renamed over it when monitoring ends (after --seconds, or Ctrl-C), so the named file is
# always whole; a monitor killed outright leaves its rows in the temporary file.
import csv
import os
import sys
import time

from controller import link as L
from controller.signals import Measurements
from host_sim.errors import UserError
from host_sim.fileio import atomic_open
from host_sim.seriallink import SerialLink, Telemetry, fault_names, stage_name

CSV_COLUMNS = ("t_s",) + Telemetry.COLUMNS + ("stage_name", "faults")


def parse_feed(text):
    """'bus_mv=15000,batt_mv=12400' -> Measurements (fields not named keep their defaults)."""
    m = Measurements()
    for item in text.split(","):
        item = item.strip()
        if not item:
            continue
        if "=" not in item:
            raise UserError("--feed %r: expected name=value pairs, e.g. bus_mv=15000" % item)
        k, v = item.split("=", 1)
        k = k.strip()
        if k not in L.MEAS_FIELDS:
            raise UserError("--feed %s: unknown measurement; allowed: %s" % (k, ", ".join(L.MEAS_FIELDS)))
        try:
            val = int(v)
        except ValueError:
            raise UserError("--feed %s = %r: expected a whole number (mV, mA or deci-degrees C)"
                            % (k, v))
        if not -(1 << 29) <= val < (1 << 29):
            raise UserError("--feed %s = %d: allowed %d to %d" % (k, val, -(1 << 29), (1 << 29) - 1))
        setattr(m, k, val)
    return m


def line(v):
    return ("%7d ms %-10s bus %6.2f V  batt %6.2f V %6.2f A %5.1f C  cap %6.2f V  usb %5.2f V  "
            "duty b/c/d %5d/%5d/%5d  rx %d ok %d bad  faults %s" % (
                v["now_ms"], stage_name(v["stage"]), v["bus_mv"] / 1000, v["batt_mv"] / 1000,
                v["batt_ma"] / 1000, v["batt_temp_dc"] / 10, v["cap_mv"] / 1000,
                v["usb_vbus_mv"] / 1000, v["batt_duty"], v["cap_duty"], v["dump_duty"],
                v["rx_ok"], v["rx_crc"] + v["rx_malformed"] + v["rx_oversized"] + v["rx_order"],
                fault_names(v["fault"])))


def monitor(port, csv_path=None, seconds=None, feed=None, out=None, err=None):
    """Print telemetry until seconds pass (None: until Ctrl-C). feed: Measurements sent as
    realtime MEAS frames every period (a link-mode board then runs on them). Returns the
    number of telemetry frames seen."""
    out = out or sys.stdout
    err = err or sys.stderr
    rows = 0
    with SerialLink(port) as link:
        hello = link.hello()
        print("monitor: %r" % hello, file=err)
        if hello.mode == L.MODE_LINK and feed is None:
            print("monitor: the board is in link mode and nothing feeds it measurements: expect "
                  "the link fault (give --feed, or run hil)", file=err)
        period_s = hello.period_ms / 1000
        ctx = atomic_open(csv_path, "w", newline="") if csv_path else _NoFile()
        with ctx as f:
            w = csv.writer(f) if csv_path else None
            if w:
                w.writerow(CSV_COLUMNS)
                f.flush()
            t0 = time.monotonic()
            next_feed = t0
            try:
                while seconds is None or time.monotonic() - t0 < seconds:
                    now = time.monotonic()
                    if feed is not None and now >= next_feed:
                        link.send_meas(feed)
                        next_feed += period_s
                        if next_feed < now:
                            next_feed = now + period_s
                    wait = 0.05 if feed is None else max(0.0, min(0.05, next_feed - now))
                    for msg in link.poll(wait):
                        if not isinstance(msg, Telemetry):
                            continue
                        v = msg.values
                        rows += 1
                        print(line(v), file=out, flush=True)
                        if w:
                            w.writerow(["%.3f" % (time.monotonic() - t0)]
                                       + [v[c] for c in Telemetry.COLUMNS]
                                       + [stage_name(v["stage"]), fault_names(v["fault"])])
                            f.flush()
                            os.fsync(f.fileno())
            except KeyboardInterrupt:
                pass  # the normal way to stop: keep the rows, close the file whole
        print("monitor: %d telemetry frames; link: sent %d, received %d, crc errors %d, bad "
              "frames %d, board frames missing %d" % (rows, link.sent, link.received,
                                                      link.crc_errors, link.bad_frames,
                                                      link.board_gaps), file=err)
    return rows


class _NoFile:
    def __enter__(self):
        return None

    def __exit__(self, *exc):
        return False

