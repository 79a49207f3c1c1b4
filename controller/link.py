# The serial link, board side: frame bodies, message layouts and the session rules (sequence
# numbers, silence timeout). Wire framing is in cobs.py, the checksum in crc16.py; the
# protocol is specified in docs/link.md.
#
# Body = type u8, seq u16, payload, crc u16 (CRC-16/CCITT-FALSE over type..payload); all
# fields little-endian. The struct formats in link_host.py are the layout spec: the host packs
# and unpacks with struct, the board packs field by field into preallocated buffers (struct's
# unpack would allocate a tuple per frame), and the tests hold the two against each other.
# RAM on the board: constants used only here are private (`_NAME = const(...)`: inlined, no
# global, no name string); the host sees them under their public names through link_host.py,
# which the board never imports. Public constants are the ones other board code reads.
from controller.compat import MICROPYTHON, const, ticks_diff
from controller.cobs import Deframer, Framer
from controller.crc16 import crc16

_PROTO = const(1)  # bumped on any layout change; the HELLO reply carries it

_T_HELLO = const(0x01)  # host -> board: who are you (resets the sequence check)
T_MEAS = const(0x02)  # host -> board: one set of measurements
_T_BREAK = const(0x42)  # host -> board: stop the firmware, leave the REPL to the host
_T_HELLO_R = const(0x81)  # board -> host: identity
T_CMD = const(0x82)  # board -> host: commands and state after a tick
_T_TELEM = const(0x83)  # board -> host: periodic telemetry (both modes)

HEAD = const(3)  # type, seq
CRC_LEN = const(2)
_MAX_PAYLOAD = const(96)
MAX_BODY = const(101)  # HEAD + _MAX_PAYLOAD + CRC_LEN

MEAS_LEN = const(70)
CMD_LEN = const(23)
_TELEM_LEN = const(76)
_HELLO_LEN = const(3)
_HELLO_R_LEN = const(42)
_N_CELLS = const(12)
_BREAK_LEN = const(8)
# The BREAK payload. With the link on the REPL's channel the firmware turns the interrupt
# character off (boards/main.py), so this frame is how a host breaks in: its wire bytes hold
# none of the REPL's control characters, so at a plain REPL they are only typed and cleared.
BREAK_MAGIC = b"SPIN!sah"  # with seq 0x2121: the CRC bytes are printable too

# Leaving the link fault (docs/link.md, "Sequence numbers"): RECOVER_FRAMES accepted-looking
# MEAS frames in a row, each within _CHAIN_SEQ sequence numbers and link_timeout_ms of
# the one before, the first ahead of the last frame accepted before the loss in both seq and
# t_ms. A replayed old frame is behind; one stray or forged frame is not a chain.
RECOVER_FRAMES = const(3)
_CHAIN_SEQ = const(4)
_SEQ_WIN = const(32)  # while the link is up: at most this far ahead (31 frames missing)

F_STEP = const(1)  # MEAS flags: tick now with now_ms = t_ms (lock-step), reply CMD
_F_EQ = const(2)  # eq_req
_F_RESET = const(4)  # reset_req
_SW_USB_CONV = const(1)  # switches byte
_SW_USB_ON = const(2)
_SW_USB_PROBE = const(4)
_SW_BATT_OUT = const(8)

MODE_STANDALONE = const(0)
MODE_LINK = const(1)

_EV_NONE = const(0)
EV_HELLO = const(1)  # send hello_frame()
EV_MEAS = const(2)  # self.m holds new measurements (realtime: tick on the board's period)
EV_STEP = const(3)  # as EV_MEAS, and tick now with now_ms = self.step_ms, then cmd_frame()
EV_HOLD_STEP = const(4)  # a lock-step MEAS while the link fault holds: answer, do not tick
EV_BREAK = const(5)  # a BREAK frame: stop the firmware

_V_TOP_MAX = const(31)  # a measurement's top byte: keeps values within +/-2**29 (small ints)


def put16(b, o, v):
    b[o] = v & 0xFF
    b[o + 1] = (v >> 8) & 0xFF


def put32(b, o, v):
    b[o] = v & 0xFF
    b[o + 1] = (v >> 8) & 0xFF
    b[o + 2] = (v >> 16) & 0xFF
    b[o + 3] = (v >> 24) & 0xFF


def get16(b, o):
    return b[o] | (b[o + 1] << 8)


def gets16(b, o):
    v = b[o] | (b[o + 1] << 8)
    return v - 0x10000 if v & 0x8000 else v


def gets32(b, o):
    """Signed 32-bit field; the caller has checked the top byte (see _V_TOP_MAX)."""
    top = b[o + 3]
    if top & 0x80:
        top -= 0x100
    return b[o] | (b[o + 1] << 8) | (b[o + 2] << 16) | (top << 24)


def _top_ok(b, o):
    top = b[o + 3]
    if top & 0x80:
        top -= 0x100
    return -_V_TOP_MAX - 1 <= top <= _V_TOP_MAX


class BoardLink:
    """The board's end of the link. push(byte, now_ms) decodes; *_frame() build replies into
    self.tx.out. Nothing here raises on bad input: bad frames are dropped and counted."""

    def __init__(self, timeout_ms, ident, m):
        self.rx = Deframer(MAX_BODY)
        self.tx = Framer(MAX_BODY)
        self.body = bytearray(MAX_BODY)  # outgoing body scratch
        self.ident = ident  # HELLO reply bytes after proto and nonce (39 bytes, built once)
        self.m = m  # Measurements filled by MEAS frames (None: standalone, MEAS ignored)
        self.timeout_ms = timeout_ms  # silence longer than this: link lost
        self.rx_seq = -1  # last accepted host seq; -1: accept any (at start, after HELLO)
        self.rx_t = -1  # t_ms of the last accepted MEAS (host clock); -1: not known
        self.t_win_ms = 2 * timeout_ms  # largest plausible t_ms step between two frames
        self.tx_seq = 0  # next board seq
        self.last_ms = 0  # board clock at the last accepted MEAS
        self.lost = 1  # 1 until the first MEAS, and again after a silence
        self.chain = 0  # fresh frames in a row while lost (RECOVER_FRAMES ends the fault)
        self.chain_seq = 0  # seq of the last frame in that chain
        self.chain_t = 0  # t_ms of the last frame in that chain
        self.meas_seq = 0  # seq of the last accepted MEAS (echoed in CMD)
        self.step_ms = 0  # t_ms of the last lock-step MEAS
        self.nonce = 0  # from the last HELLO
        self.rx_ok = 0  # frames accepted
        self.rx_crc = 0  # CRC failures
        self.rx_short = 0  # wrong length, unknown type, values out of range
        self.rx_order = 0  # duplicate, old or implausibly far ahead (seq or t_ms)
        self.rx_gaps = 0  # frames missing, by sequence number
        self.rx_ignored = 0  # MEAS in standalone mode
        self.losses = 0  # silences past the timeout

    def push(self, byte, now_ms):
        """Feed one received byte. Returns EV_NONE (0), EV_HELLO, EV_MEAS or EV_STEP."""
        rx = self.rx
        if not rx.push(byte):
            return _EV_NONE
        b = rx.body
        n = rx.blen
        if n < HEAD + CRC_LEN:
            self.rx_short += 1
            return _EV_NONE
        if crc16(b, 0, n - CRC_LEN) != get16(b, n - CRC_LEN):
            self.rx_crc += 1
            return _EV_NONE
        t = b[0]
        plen = n - HEAD - CRC_LEN
        seq = get16(b, 1)
        if t == _T_HELLO:
            if plen != _HELLO_LEN:
                self.rx_short += 1
                return _EV_NONE
            self.nonce = get16(b, HEAD + 1)
            self.rx_seq = seq  # a new session: seq and t_ms start afresh; the fault stays
            self.rx_t = -1
            self.chain = 0
            self.rx_ok += 1
            return EV_HELLO
        if t == _T_BREAK:
            if plen != _BREAK_LEN:
                self.rx_short += 1
                return _EV_NONE
            magic = BREAK_MAGIC
            for i in range(_BREAK_LEN):
                if b[HEAD + i] != magic[i]:
                    self.rx_short += 1
                    return _EV_NONE
            return EV_BREAK
        if t != T_MEAS or plen != MEAS_LEN:
            self.rx_short += 1
            return _EV_NONE
        if b[HEAD + 4] > 0x3F:
            self.rx_short += 1
            return _EV_NONE  # t_ms beyond the 30-bit clock
        t_ms = gets32(b, HEAD + 1)
        lost = self.lost
        d = 1
        if self.rx_seq >= 0:
            d = (seq - self.rx_seq) & 0xFFFF
            if d == 0 or d >= 0x8000 or (d > _SEQ_WIN and not lost):
                self.rx_order += 1
                return _EV_NONE
        if self.rx_t >= 0:
            dt = ticks_diff(t_ms, self.rx_t)
            if dt < 0 or (dt > self.t_win_ms and not lost):
                self.rx_order += 1
                return _EV_NONE
        if self.m is None:
            self.rx_ignored += 1
            self.rx_seq = seq
            return _EV_NONE
        if not self._decode_meas(b, HEAD):
            self.rx_short += 1
            return _EV_NONE
        if lost:
            # one link of the chain that ends the fault (see RECOVER_FRAMES)
            dc = (seq - self.chain_seq) & 0xFFFF
            if (self.chain and 0 < dc <= _CHAIN_SEQ
                    and 0 <= ticks_diff(t_ms, self.chain_t) <= self.t_win_ms):
                self.chain += 1
            else:
                self.chain = 1
            self.chain_seq = seq
            self.chain_t = t_ms
            if self.chain < RECOVER_FRAMES:
                self.meas_seq = seq
                if b[HEAD] & F_STEP:
                    self.step_ms = t_ms
                    return EV_HOLD_STEP
                return _EV_NONE
            self.chain = 0
        else:
            self.rx_gaps += d - 1
        self.rx_seq = seq
        self.rx_t = t_ms
        self.meas_seq = seq
        self.rx_ok += 1
        self.last_ms = now_ms
        self.lost = 0
        if b[HEAD] & F_STEP:
            self.step_ms = t_ms
            return EV_STEP
        return EV_MEAS

    def _decode_meas(self, b, o):
        for k in range(10):
            if not _top_ok(b, o + 5 + 4 * k):
                return 0
        nt = b[o + 45]
        if nt > _N_CELLS:
            return 0
        m = self.m
        fl = b[o]
        m.eq_req = 1 if fl & _F_EQ else 0
        m.reset_req = 1 if fl & _F_RESET else 0
        m.bus_mv = gets32(b, o + 5)
        m.src_ma = gets32(b, o + 9)
        m.batt_mv = gets32(b, o + 13)
        m.batt_ma = gets32(b, o + 17)
        m.batt_temp_dc = gets32(b, o + 21)
        m.cap_mv = gets32(b, o + 25)
        m.cap_ma = gets32(b, o + 29)
        m.usb_vbus_mv = gets32(b, o + 33)
        m.usb_dp_mv = gets32(b, o + 37)
        m.usb_dm_mv = gets32(b, o + 41)
        m.n_taps = nt
        cells = m.cell_mv
        for i in range(_N_CELLS):
            cells[i] = gets16(b, o + 46 + 2 * i)
        return 1

    def check(self, now_ms):
        """Silence check; returns 1 while the link is lost. The last accepted seq and t_ms
        stay: frames from before the loss cannot end it (a restarted host sends HELLO)."""
        if not self.lost and ticks_diff(now_ms, self.last_ms) > self.timeout_ms:
            self.lost = 1
            self.losses += 1
            self.chain = 0
        return self.lost

    # -- outgoing frames: each returns the wire length in self.tx.out --------------------------
    def _finish(self, t, plen):
        b = self.body
        b[0] = t
        put16(b, 1, self.tx_seq)
        self.tx_seq = (self.tx_seq + 1) & 0xFFFF
        n = HEAD + plen
        put16(b, n, crc16(b, 0, n))
        return self.tx.frame(b, n + CRC_LEN)

    def hello_frame(self):
        b = self.body
        b[HEAD] = _PROTO
        put16(b, HEAD + 1, self.nonce)
        ident = self.ident
        for i in range(len(ident)):
            b[HEAD + 3 + i] = ident[i]
        return self._finish(_T_HELLO_R, _HELLO_R_LEN)

    def cmd_frame(self, c, ticks, now_ms):
        b = self.body
        o = HEAD
        put16(b, o, self.meas_seq)
        put32(b, o + 2, ticks & 0x3FFFFFFF)
        put32(b, o + 6, now_ms)
        put16(b, o + 10, c.batt_duty)
        put16(b, o + 12, c.cap_duty)
        put16(b, o + 14, c.dump_duty)
        b[o + 16] = _switches(c)
        put16(b, o + 17, c.bal_mask)
        b[o + 19] = c.stage
        b[o + 20] = c.usb_match
        put16(b, o + 21, c.fault)
        return self._finish(T_CMD, CMD_LEN)

    def telem_frame(self, m, c, ticks, now_ms, exceptions, late):
        b = self.body
        o = HEAD
        put32(b, o, now_ms)
        put32(b, o + 4, ticks & 0x3FFFFFFF)
        b[o + 8] = c.stage
        put16(b, o + 9, c.fault)
        put32(b, o + 11, m.bus_mv)
        put32(b, o + 15, m.src_ma)
        put32(b, o + 19, m.batt_mv)
        put32(b, o + 23, m.batt_ma)
        put32(b, o + 27, m.batt_temp_dc)
        put32(b, o + 31, m.cap_mv)
        put32(b, o + 35, m.cap_ma)
        put32(b, o + 39, m.usb_vbus_mv)
        put32(b, o + 43, m.usb_dp_mv)
        put32(b, o + 47, m.usb_dm_mv)
        put16(b, o + 51, c.batt_duty)
        put16(b, o + 53, c.cap_duty)
        put16(b, o + 55, c.dump_duty)
        b[o + 57] = _switches(c)
        rx = self.rx
        put16(b, o + 58, self.rx_ok & 0xFFFF)
        put16(b, o + 60, self.rx_crc & 0xFFFF)
        put16(b, o + 62, (rx.malformed + self.rx_short) & 0xFFFF)
        put16(b, o + 64, rx.oversized & 0xFFFF)
        put16(b, o + 66, self.rx_order & 0xFFFF)
        put16(b, o + 68, self.rx_gaps & 0xFFFF)
        put16(b, o + 70, self.losses & 0xFFFF)
        put16(b, o + 72, exceptions & 0xFFFF)
        put16(b, o + 74, late & 0xFFFF)
        return self._finish(_T_TELEM, _TELEM_LEN)


def _switches(c):
    return ((_SW_USB_CONV if c.usb_conv else 0) | (_SW_USB_ON if c.usb_on else 0)
            | (_SW_USB_PROBE if c.usb_probe else 0) | (_SW_BATT_OUT if c.batt_out else 0))


def make_ident(fw_hash, profile_hash, mode, period_ms, timeout_ms, telemetry_ms, board):
    """The HELLO reply's fixed part (built once at start-up): hashes as bytes (first 8 used),
    board name as str (first 16 bytes used)."""
    out = bytearray(_HELLO_R_LEN - 3)
    for i in range(8):
        out[i] = fw_hash[i] if i < len(fw_hash) else 0
        out[8 + i] = profile_hash[i] if i < len(profile_hash) else 0
    out[16] = mode
    put16(out, 17, period_ms)
    put16(out, 19, timeout_ms)
    put16(out, 21, telemetry_ms)
    name = board.encode() if isinstance(board, str) else board
    for i in range(min(16, len(name))):
        out[23 + i] = name[i]
    return out


if not MICROPYTHON:  # the host's names: formats, field names, the private constants
    from controller import link_host as _host
    _host.publish(globals())
