# Bytes on the wire <-> frame bodies. A body is COBS-encoded (Consistent Overhead Byte
# Stuffing: no 0x00 inside), then the REPL's interrupt character 0x03 and the escape byte
# 0x10 are each sent as 0x10, b ^ 0x20, and the frame goes out as 0x00 + bytes + 0x00.
#
# Why the second stuffing: on a board the link often shares the REPL's channel (USB-CDC, or
# UART0 behind a USB bridge), where a 0x03 byte is Ctrl-C. Keeping 0x03 off the wire lets the
# firmware leave Ctrl-C enabled, so mpremote can always break in to reflash. The leading 0x00
# ends any garbage before a frame, so noise costs at most the frame it touches.
# Runs on MicroPython and CPython; the encoder and the streaming decoder allocate nothing.
from controller.compat import const

_DELIM = const(0x00)  # private constants: inlined, no RAM on the board
_ESC = const(0x10)
_INTR = const(0x03)
_FLIP = const(0x20)
TOO_LONG = const(-2)  # decode_into: the body does not fit the output buffer
MALFORMED = const(-1)  # decode_into: not valid COBS


def max_encoded(n):
    """COBS bytes for an n-byte body, at most (one code byte per 254 data bytes, plus one)."""
    return n + n // 254 + 1


def encode_into(src, n, dst, off=0):
    """COBS-encode src[:n] into dst from index off; returns the index after the last byte.
    dst needs max_encoded(n) bytes from off. A body ending in a full 254-byte block gets no
    trailing code byte (the canonical encoding)."""
    code_i = off  # where the current block's code byte goes
    o = off + 1
    code = 1
    last = n - 1
    for i in range(n):
        b = src[i]
        if b:
            dst[o] = b
            o += 1
            code += 1
        if b == 0 or code == 0xFF:
            dst[code_i] = code
            code = 1
            code_i = o
            if b == 0 or i < last:
                o += 1
    if code_i < o:
        dst[code_i] = code
    return o


def decode_into(src, start, end, dst):
    """Decode the COBS bytes src[start:end] (no delimiter) into dst. Returns the body length,
    MALFORMED or TOO_LONG."""
    i = start
    o = 0
    cap = len(dst)
    while i < end:
        code = src[i]
        i += 1
        if code == 0:
            return MALFORMED
        j = i + code - 1
        if j > end:
            return MALFORMED  # the block claims more bytes than the frame has
        if o + code - 1 > cap:
            return TOO_LONG
        while i < j:
            b = src[i]
            if b == 0:
                return MALFORMED
            dst[o] = b
            o += 1
            i += 1
        if code < 0xFF and i < end:
            if o >= cap:
                return TOO_LONG
            dst[o] = 0
            o += 1
    return o


class Framer:
    """Frame bodies onto the wire. frame(body, n) leaves the wire bytes in self.out[:result]."""

    def __init__(self, max_body):
        self.cobs = bytearray(max_encoded(max_body))  # scratch: the COBS form of one body
        self.out = bytearray(2 * len(self.cobs) + 2)  # one frame as sent: 0x00, stuffed, 0x00

    def frame(self, body, n):
        k = encode_into(body, n, self.cobs, 0)
        out = self.out
        out[0] = _DELIM
        o = 1
        c = self.cobs
        for i in range(k):
            b = c[i]
            if b == _INTR or b == _ESC:
                out[o] = _ESC
                out[o + 1] = b ^ _FLIP
                o += 2
            else:
                out[o] = b
                o += 1
        out[o] = _DELIM
        return o + 1


class Deframer:
    """Streaming decoder, one byte at a time: push(b) returns 1 when a frame body is complete
    in self.body[:self.blen]. Broken frames are dropped and counted; it never raises."""

    def __init__(self, max_body):
        self.cobs = bytearray(max_encoded(max_body))  # unstuffed COBS bytes of this frame
        self.body = bytearray(max_body)  # the last complete body
        self.n = 0  # COBS bytes held for the frame being received
        self.esc = 0  # 1: the previous byte was the escape byte
        self.bad = 0  # 1: this frame is already lost, skip to the next delimiter
        self.blen = 0  # length of the body in self.body after push() returned 1
        self.frames = 0  # bodies delivered
        self.oversized = 0  # frames dropped for being longer than the buffers
        self.malformed = 0  # frames dropped for bad COBS or a bad escape

    def push(self, b):
        if b == _DELIM:
            n = self.n
            self.n = 0
            if self.bad:
                self.bad = 0
                self.esc = 0
                return 0
            if self.esc:
                self.esc = 0
                self.malformed += 1
                return 0
            if n == 0:
                return 0  # idle delimiters between frames
            k = decode_into(self.cobs, 0, n, self.body)
            if k < 0:
                if k == TOO_LONG:
                    self.oversized += 1
                else:
                    self.malformed += 1
                return 0
            self.blen = k
            self.frames += 1
            return 1
        if self.bad:
            return 0
        if self.esc:
            self.esc = 0
            b ^= _FLIP
            if b != _INTR and b != _ESC:
                self.bad = 1
                self.malformed += 1
                return 0
        elif b == _ESC:
            self.esc = 1
            return 0
        elif b == _INTR:
            self.bad = 1  # never sent bare: the frame was damaged on the way
            self.malformed += 1
            return 0
        if self.n >= len(self.cobs):
            self.bad = 1
            self.oversized += 1
            return 0
        self.cobs[self.n] = b
        self.n += 1
        return 0


# Host conveniences (allocate; not for the control loop).
def encode(data):
    """COBS form of data (bytes, no delimiter)."""
    buf = bytearray(max_encoded(len(data)))
    return bytes(buf[:encode_into(data, len(data), buf, 0)])


def decode(data):
    """Body of a COBS block (no delimiter); raises ValueError if it is not valid COBS."""
    buf = bytearray(len(data))
    n = decode_into(data, 0, len(data), buf)
    if n < 0:
        raise ValueError("not valid COBS")
    return bytes(buf[:n])
