# Run a CSV of per-tick measurements through the supervisor and write one row of commands per
# tick. The same code runs on CPython and on the MicroPython unix port, so the two outputs can
# be compared byte for byte. Parsing allocates; the tick itself does not.
# The names come from the host-side modules: the board modules keep only the codes.
from controller.compat import TICKS_MASK
from controller.signals_host import STAGE_NAMES
from controller.supervisor import Supervisor
from controller.usbport_host import MATCH_NAMES

REQUIRED = ("t_ms", "bus_mv", "batt_mv", "batt_ma", "batt_temp_dc", "cap_mv", "usb_vbus_mv",
            "usb_dp_mv", "usb_dm_mv")
OPTIONAL = ("src_ma", "cap_ma", "eq_req", "reset_req")
N_CELLS = 12  # optional cell1 .. cell12 supercap tap columns, mV
OUT_HEADER = ("t_ms,batt_duty,cap_duty,dump_duty,usb_conv,usb_on,usb_probe,batt_out,bal_mask,"
              "stage,usb_match,fault\n")


class VectorError(ValueError):
    """A vector file is wrong; the message names the line and the column."""


def columns(header):
    """Map a header line to (index of each REQUIRED+OPTIONAL field or -1, cell indexes)."""
    names = [h.strip() for h in header.strip().split(",")]
    idx = []
    for f in REQUIRED:
        if f not in names:
            raise VectorError("line 1: missing column %s (required: %s)" % (f, ", ".join(REQUIRED)))
        idx.append(names.index(f))
    for f in OPTIONAL:
        idx.append(names.index(f) if f in names else -1)
    cells = []
    for i in range(N_CELLS):
        name = "cell%d" % (i + 1)
        if name in names:
            cells.append(names.index(name))
        else:
            break
    return names, idx, cells


def parse_row(names, fields, lineno, idx, cells, out):
    """Integers of one data line into out (a list, len(REQUIRED)+len(OPTIONAL)+len(cells))."""
    if len(fields) < len(names):
        raise VectorError("line %d: %d fields, header has %d" % (lineno, len(fields), len(names)))
    k = 0
    for j in idx + cells:
        if j < 0:
            out[k] = 0
        else:
            s = fields[j].strip()
            try:
                out[k] = int(s)
            except ValueError:
                raise VectorError("line %d: column %s = %r is not an integer" % (lineno, names[j], s))
        k += 1
    return out


def load_row(m, v, n_cells):
    """Copy a parsed row into the Measurements object. Returns t_ms."""
    m.bus_mv = v[1]
    m.batt_mv = v[2]
    m.batt_ma = v[3]
    m.batt_temp_dc = v[4]
    m.cap_mv = v[5]
    m.usb_vbus_mv = v[6]
    m.usb_dp_mv = v[7]
    m.usb_dm_mv = v[8]
    m.src_ma = v[9]
    m.cap_ma = v[10]
    m.eq_req = v[11]
    m.reset_req = v[12]
    m.n_taps = n_cells
    for i in range(n_cells):
        m.cell_mv[i] = v[13 + i]
    return v[0] & TICKS_MASK


def format_row(t_ms, c):
    return "%d,%d,%d,%d,%d,%d,%d,%d,%d,%s,%s,%d\n" % (
        t_ms, c.batt_duty, c.cap_duty, c.dump_duty, c.usb_conv, c.usb_on, c.usb_probe,
        c.batt_out, c.bal_mask, STAGE_NAMES[c.stage], MATCH_NAMES[c.usb_match], c.fault)


def run(p, lines, write):
    """Replay lines (an iterable of CSV text lines, header first) under profile p; write(str)
    receives the output CSV. Returns the number of ticks run."""
    sup = Supervisor(p)
    it = iter(lines)
    names, idx, cells = columns(next(it))
    v = [0] * (len(idx) + len(cells))
    write(OUT_HEADER)
    n = 0
    lineno = 1
    for line in it:
        lineno += 1
        if not line.strip():
            continue
        parse_row(names, line.split(","), lineno, idx, cells, v)
        t = load_row(sup.m, v, len(cells))
        sup.tick(t)
        write(format_row(t, sup.c))
        n += 1
    return n


def run_files(profile_path, in_path, out_path):
    """Entry for the MicroPython side: profile file, vector file in, command file out."""
    from controller import profile
    p = profile.load(profile_path) if profile_path else profile.load(profile.default_path())
    with open(in_path) as fin:
        with open(out_path, "w") as fout:
            return run(p, fin, fout.write)
