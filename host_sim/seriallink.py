# Host side of the serial link (CPython, pyserial). Frames with the same COBS and CRC code the
# board runs (controller.cobs, controller.crc16); packs and unpacks payloads with struct and
# the layouts in controller.link, which are the specification the board's hand-written
# packers are tested against. Ports open by URL: a device path, a pty, loop://, socket://.
import select
import struct
import time

import serial

from controller import link as L
from controller.cobs import Deframer, Framer
from controller.crc16 import crc16
from controller.signals import F_LINK, FAULT_NAMES, STAGE_NAMES, Commands
from host_sim.errors import UserError


def break_wire():
    """The BREAK frame on the wire (fixed bytes: seq 0x2121, see controller.link)."""
    body = bytearray([L.T_BREAK]) + struct.pack("<H", 0x2121) + L.BREAK_MAGIC
    body += struct.pack("<H", crc16(body))
    f = Framer(L.MAX_BODY)
    return bytes(f.out[:f.frame(body, len(body))])


def fault_names(bits):
    return "+".join(n for i, n in enumerate(FAULT_NAMES) if bits >> i & 1) or "-"


def stage_name(code):
    return STAGE_NAMES[code] if 0 <= code < len(STAGE_NAMES) else str(code)


class Hello:
    """The board's identity (HELLO reply)."""

    def __init__(self, payload):
        (self.proto, self.nonce, fw, prof, self.mode, self.period_ms, self.link_timeout_ms,
         self.telemetry_ms, name) = struct.unpack(L.HELLO_R_FMT, payload)
        self.fw_hash = fw.hex()  # first 8 bytes of the manifest's fw_sha256
        self.profile_hash = prof.hex()
        self.board = name.rstrip(b"\0").decode(errors="replace")
        self.mode_name = "link" if self.mode == L.MODE_LINK else "standalone"

    def __repr__(self):
        return ("Hello(board=%s, mode=%s, proto=%d, fw=%s, profile=%s, period_ms=%d, "
                "link_timeout_ms=%d, telemetry_ms=%d)" % (
                    self.board, self.mode_name, self.proto, self.fw_hash, self.profile_hash,
                    self.period_ms, self.link_timeout_ms, self.telemetry_ms))


class CmdFrame:
    """Commands and state after one board tick. c is a controller.signals.Commands."""

    def __init__(self, seq, payload):
        self.seq = seq
        (self.ack_seq, self.ticks, self.now_ms, bd, cd, dd, sw, bal, stage, match,
         fault) = struct.unpack(L.CMD_FMT, payload)
        c = self.c = Commands()
        c.batt_duty, c.cap_duty, c.dump_duty = bd, cd, dd
        c.usb_conv = 1 if sw & L.SW_USB_CONV else 0
        c.usb_on = 1 if sw & L.SW_USB_ON else 0
        c.usb_probe = 1 if sw & L.SW_USB_PROBE else 0
        c.batt_out = 1 if sw & L.SW_BATT_OUT else 0
        c.bal_mask, c.stage, c.usb_match, c.fault = bal, stage, match, fault


class Telemetry:
    """One telemetry frame as a flat dict of named integers (see TELEM_FMT)."""

    COLUMNS = (("now_ms", "ticks", "stage", "fault") + L.MEAS_FIELDS
               + ("batt_duty", "cap_duty", "dump_duty", "switches") + L.TELEM_COUNTERS)

    def __init__(self, seq, payload):
        self.seq = seq
        self.values = dict(zip(self.COLUMNS, struct.unpack(L.TELEM_FMT, payload)))

    def __getitem__(self, k):
        return self.values[k]


class SerialLink:
    """The host's end of the link.

    link = SerialLink(port); link.hello(); link.step(m, t_ms) (lock-step) or
    link.send_meas(m) (realtime) and link.poll(); link.close()."""

    def __init__(self, port, baud=115200):
        try:
            self.ser = serial.serial_for_url(port, baudrate=baud, timeout=0)
        except (serial.SerialException, OSError, ValueError) as e:
            raise UserError("port %s: cannot open (%s)" % (port, e))
        self.port = port
        self.rx = Deframer(L.MAX_BODY)
        self.tx = Framer(L.MAX_BODY)
        self.seq = 0  # next host seq
        self.nonce = 0
        self.board_seq = -1  # last board seq seen
        self.sent = 0  # frames written
        self.received = 0  # good frames from the board
        self.crc_errors = 0
        self.bad_frames = 0  # wrong length or unknown type
        self.board_gaps = 0  # board frames missing, by sequence number
        self.rtt_s = []  # lock-step round trips
        self.held = 0  # lock-step frames answered with the link fault (sent again)
        self.queue = []  # decoded messages not yet taken
        try:
            self._fd = self.ser.fileno()
        except Exception:
            self._fd = None  # loop:// and friends: poll instead of select
        try:
            self.ser.reset_input_buffer()
        except Exception:
            pass

    def close(self):
        self.ser.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # -- sending ------------------------------------------------------------------------------
    def send(self, ftype, payload):
        body = bytearray(L.HEAD + len(payload) + L.CRC_LEN)
        body[0] = ftype
        seq = self.seq
        L.put16(body, 1, seq)
        body[L.HEAD:L.HEAD + len(payload)] = payload
        L.put16(body, L.HEAD + len(payload), crc16(body, 0, L.HEAD + len(payload)))
        n = self.tx.frame(body, len(body))
        self.ser.write(bytes(self.tx.out[:n]))
        self.seq = (seq + 1) & 0xFFFF
        self.sent += 1
        return seq

    def send_meas(self, m, t_ms=None, step=False):
        """One MEAS frame. t_ms: the host's clock (30 bits; default: this host's monotonic
        milliseconds). The board refuses a t_ms that goes backwards (docs/link.md)."""
        if t_ms is None:
            t_ms = int(time.monotonic() * 1000)
        flags = ((L.F_STEP if step else 0) | (L.F_EQ if m.eq_req else 0)
                 | (L.F_RESET if m.reset_req else 0))
        cells = list(m.cell_mv[:L.N_CELLS]) + [0] * (L.N_CELLS - len(m.cell_mv))
        payload = struct.pack(L.MEAS_FMT, flags, t_ms & 0x3FFFFFFF,
                              *[getattr(m, f) for f in L.MEAS_FIELDS], m.n_taps, *cells)
        return self.send(L.T_MEAS, payload)

    # -- receiving ----------------------------------------------------------------------------
    def _read_some(self, timeout_s):
        n = self.ser.in_waiting
        if not n:
            if self._fd is not None:
                select.select([self._fd], [], [], max(0.0, timeout_s))
            else:
                time.sleep(min(max(0.0, timeout_s), 0.001))
            n = self.ser.in_waiting
        return self.ser.read(n) if n else b""

    def _decode(self, body):
        n = len(body)
        if n < L.HEAD + L.CRC_LEN:
            self.bad_frames += 1
            return None
        if crc16(body, 0, n - L.CRC_LEN) != L.get16(body, n - L.CRC_LEN):
            self.crc_errors += 1
            return None
        t = body[0]
        seq = L.get16(body, 1)
        payload = bytes(body[L.HEAD:n - L.CRC_LEN])
        kinds = {L.T_HELLO_R: (L.HELLO_R_LEN, lambda: Hello(payload)),
                 L.T_CMD: (L.CMD_LEN, lambda: CmdFrame(seq, payload)),
                 L.T_TELEM: (L.TELEM_LEN, lambda: Telemetry(seq, payload))}
        if t not in kinds or len(payload) != kinds[t][0]:
            self.bad_frames += 1
            return None
        if self.board_seq >= 0:
            d = (seq - self.board_seq) & 0xFFFF
            if 0 < d < 0x8000:
                self.board_gaps += d - 1
        self.board_seq = seq
        self.received += 1
        return kinds[t][1]()

    def poll(self, timeout_s=0.0):
        """Messages that arrived within timeout_s (returns as soon as one is there)."""
        deadline = time.monotonic() + timeout_s
        while True:
            data = self._read_some(deadline - time.monotonic())
            for b in data:
                if self.rx.push(b):
                    msg = self._decode(self.rx.body[:self.rx.blen])
                    if msg is not None:
                        self.queue.append(msg)
            if self.queue or time.monotonic() >= deadline:
                out, self.queue = self.queue, []
                return out

    def wait_for(self, pred, timeout_s):
        """The first message with pred(msg) true, or None after timeout_s; the others stay
        queued, in order, for poll() (at most QUEUE_MAX, oldest dropped)."""
        deadline = time.monotonic() + timeout_s
        kept = []
        try:
            while True:
                left = deadline - time.monotonic()
                if left <= 0:
                    return None
                msgs = self.poll(left)
                for i, msg in enumerate(msgs):
                    if pred(msg):
                        kept.extend(msgs[i + 1:])
                        return msg
                    kept.append(msg)
        finally:
            self.queue = (kept + self.queue)[-self.QUEUE_MAX:]

    QUEUE_MAX = 1000

    # -- requests -----------------------------------------------------------------------------
    def hello(self, timeout_s=2.0, tries=3):
        """Ask the board who it is. Raises UserError if the firmware does not answer."""
        for _ in range(tries):
            self.nonce = (self.nonce + 1) & 0xFFFF
            self.send(L.T_HELLO, struct.pack(L.HELLO_FMT, L.PROTO, self.nonce))
            msg = self.wait_for(lambda m: isinstance(m, Hello) and m.nonce == self.nonce,
                                timeout_s / tries)
            if msg is not None:
                if msg.proto != L.PROTO:
                    raise UserError("port %s: board speaks link protocol %d, this host %d: "
                                    "reflash it" % (self.port, msg.proto, L.PROTO))
                return msg
        raise UserError("port %s: no answer to HELLO within %.1f s: is the spinrail firmware "
                        "running? (flash it, or soft-reset the board)" % (self.port, timeout_s))

    def step(self, m, t_ms, timeout_s=1.0):
        """Lock-step: send m for host time t_ms, wait for the CMD frame of that tick.
        Returns a CmdFrame, or None on timeout (the frame or its answer was lost).
        A board in the link fault (at start, after a silence) ticks only after
        L.RECOVER_FRAMES fresh frames in a row; until then it answers with the safe state and
        F_LINK, and the frame is sent again (same t_ms, next seq), so the caller sees ticks."""
        for _ in range(L.RECOVER_FRAMES):
            t0 = time.perf_counter()
            seq = self.send_meas(m, t_ms, step=True)
            msg = self.wait_for(lambda x: isinstance(x, CmdFrame) and x.ack_seq == seq
                                and x.now_ms == (t_ms & 0x3FFFFFFF), timeout_s)
            if msg is None or not msg.c.fault & F_LINK:
                break
            self.held += 1
        if msg is not None:
            self.rtt_s.append(time.perf_counter() - t0)
        return msg

    def send_break(self, wait_s=0.3):
        """Stop the firmware (a BREAK frame, then Ctrl-C for a board whose interrupt
        character is on) and give it wait_s to reach the REPL. Harmless at a plain REPL:
        the frame's bytes are only typed there, and the Ctrl-C clears them."""
        self.ser.write(break_wire() + b"\x03")
        self.ser.flush()
        time.sleep(wait_s)
