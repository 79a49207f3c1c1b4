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


# What each column may hold (docs: `spinrail vectors run --help`). The same bounds on both
# interpreters: a measurement within +/-2**29, as on the link (a small int on a 32-bit port);
# t_ms 0 .. 2**31 - 1 (masked to the 30-bit clock); the request flags 0 or 1.
V_MIN = -(1 << 29)
V_MAX = (1 << 29) - 1
T_MAX = (1 << 31) - 1
FLAGS = ("eq_req", "reset_req")
_DIGITS_MAX = 10  # digits in the longest value allowed (2**31 - 1)


class VectorError(ValueError):
    """A vector file is wrong; the message names the line and the column."""


def clean_line(text, lineno):
    """A line without its line end; a CR anywhere else is refused (CR-only line ends would
    be one line on MicroPython and many on CPython, so both refuse them)."""
    if text.endswith("\n"):
        text = text[:-1]
    if text.endswith("\r"):
        text = text[:-1]
    if "\r" in text:
        raise VectorError("line %d: CR-only line ends (a carriage return inside a line): save "
                          "the file with LF or CRLF line ends" % lineno)
    return text


def columns(header):
    """Map a header line to (index of each REQUIRED+OPTIONAL field or -1, cell indexes)."""
    header = clean_line(header, 1)
    if header.startswith("\ufeff"):
        header = header[1:]  # a byte-order mark (spreadsheet exports): accepted
    names = [h.strip() for h in header.split(",")]
    for i in range(len(names)):
        if names[i] in names[:i]:
            raise VectorError("line 1: column %s appears twice" % names[i])
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


def _integer(s):
    """An optional minus sign and ASCII digits, else None (int() accepts more on CPython
    than on MicroPython: '+5', '1_000', other scripts' digits). More than _DIGITS_MAX digits
    give T_MAX + 1 (out of every range) without making a big integer."""
    n = len(s)
    i = 1 if n and s[0] == "-" else 0
    if n == i:
        return None
    for c in s[i:]:
        if c < "0" or c > "9":
            return None
    if n - i > _DIGITS_MAX:
        return -T_MAX - 1 if i else T_MAX + 1
    return int(s)


def parse_row(names, fields, lineno, idx, cells, out):
    """Integers of one data line into out (a list, len(REQUIRED)+len(OPTIONAL)+len(cells))."""
    if len(fields) != len(names):
        raise VectorError("line %d: %d fields, header has %d" % (lineno, len(fields), len(names)))
    k = 0
    for j in idx + cells:
        if j < 0:
            out[k] = 0
        else:
            s = fields[j].strip()
            name = names[j]
            v = _integer(s)
            if v is None:
                if len(s) > 40:
                    s = s[:40] + "..."
                raise VectorError("line %d: column %s = %r is not an integer" % (lineno, name, s))
            if name == "t_ms":
                lo, hi = 0, T_MAX
            elif name in FLAGS:
                lo, hi = 0, 1
            else:
                lo, hi = V_MIN, V_MAX
            if v < lo or v > hi:
                if len(s) > 40:
                    s = s[:40] + "..."
                raise VectorError("line %d: column %s = %s: allowed %d to %d" % (
                    lineno, name, s, lo, hi))
            out[k] = v
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
        line = clean_line(line, lineno)
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
