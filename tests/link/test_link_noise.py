# Framing under noise: dropped, flipped and inserted bytes and garbage between frames never
# crash the board's decoder; damaged frames are counted as dropped; intact frames around them
# decode. Sequence rules: duplicates and old frames are dropped and counted.
import struct

from hypothesis import given
from hypothesis import strategies as st

from controller import link as L
from controller.cobs import Framer
from controller.crc16 import crc16
from controller.signals import Measurements

_framer = Framer(L.MAX_BODY)


def meas_wire(seq, vals, flags=0, t_ms=0):
    payload = struct.pack(L.MEAS_FMT, flags, t_ms, *vals, 0, *([0] * 12))
    body = bytearray([L.T_MEAS]) + struct.pack("<H", seq & 0xFFFF) + payload
    body += struct.pack("<H", crc16(body))
    n = _framer.frame(body, len(body))
    return bytearray(_framer.out[:n])


def hello_wire(seq):
    body = bytearray([L.T_HELLO]) + struct.pack("<H", seq) + struct.pack(L.HELLO_FMT, L.PROTO, 1)
    body += struct.pack("<H", crc16(body))
    n = _framer.frame(body, len(body))
    return bytearray(_framer.out[:n])


def run(link, stream, now_ms=0):
    accepted = []
    for b in stream:
        ev = link.push(b, now_ms)
        if ev in (L.EV_MEAS, L.EV_STEP):
            accepted.append((link.meas_seq, [getattr(link.m, f) for f in L.MEAS_FIELDS]))
    return accepted


def dropped(link):
    return link.rx_crc + link.rx_short + link.rx.malformed + link.rx.oversized


damage = st.one_of(
    st.just(("ok",)),
    st.tuples(st.just("garbage"), st.one_of(st.binary(max_size=40), st.binary(min_size=150, max_size=400))),
    st.tuples(st.just("drop"), st.integers(0, 10_000)),
    st.tuples(st.just("flip"), st.integers(0, 10_000), st.integers(1, 255)),
    st.tuples(st.just("insert"), st.integers(0, 10_000), st.integers(0, 255)),
)
values = st.lists(st.integers(-(1 << 20), 1 << 20), min_size=10, max_size=10)


@given(st.lists(st.tuples(values, damage), min_size=1, max_size=25))
def test_noise_drops_damaged_frames_and_keeps_the_rest(frames):
    link = L.BoardLink(500, bytes(39), Measurements())
    stream = bytearray()
    intact = []
    damaged = 0
    for i, (vals, op) in enumerate(frames):
        seq = i + 1
        w = meas_wire(seq, vals)
        inner = len(w) - 2  # damage lands between the frame's two delimiters
        if op[0] == "garbage":
            stream += op[1]
        elif op[0] == "drop":
            del w[1 + op[1] % inner]
        elif op[0] == "flip":
            w[1 + op[1] % inner] ^= op[2]
        elif op[0] == "insert":
            at = 1 + op[1] % (inner + 1)
            w.insert(at, op[2])
            if op[2] == 0 and at in (1, inner + 1):
                op = ("ok",)  # an extra delimiter beside a delimiter is idle line, no damage
        if op[0] in ("ok", "garbage"):
            intact.append((seq, vals))
        else:
            damaged += 1
        stream += w
    got = run(link, stream)
    assert got == intact
    assert dropped(link) >= damaged
    seqs = [s for s, _ in got]
    assert link.rx_gaps == sum(b - a - 1 for a, b in zip(seqs, seqs[1:]))
    assert link.rx_order == 0


@given(st.binary(max_size=2000))
def test_pure_garbage_never_raises_and_never_delivers(junk):
    link = L.BoardLink(500, bytes(39), Measurements())
    assert run(link, junk) == []  # a valid frame by chance needs a CRC match: not in 2000 bytes


def test_oversized_frame_is_dropped_and_the_next_decodes():
    link = L.BoardLink(500, bytes(39), Measurements())
    vals = list(range(10))
    stream = b"\x00" + b"\x07" * 1000 + meas_wire(5, vals)
    assert run(link, stream) == [(5, vals)]
    assert link.rx.oversized == 1


def test_duplicates_and_old_frames_are_dropped_and_counted():
    link = L.BoardLink(500, bytes(39), Measurements())
    vals = [0] * 10
    stream = b"".join(meas_wire(s, vals) for s in (1, 2, 3, 3, 2, 5, 4, 6))
    assert [s for s, _ in run(link, stream)] == [1, 2, 3, 5, 6]
    assert link.rx_order == 3 and link.rx_gaps == 1


def test_sequence_wraps_at_16_bits():
    link = L.BoardLink(500, bytes(39), Measurements())
    vals = [0] * 10
    stream = b"".join(meas_wire(s, vals) for s in (0xFFFE, 0xFFFF, 0, 1))
    assert [s for s, _ in run(link, stream)] == [0xFFFE, 0xFFFF, 0, 1]
    assert link.rx_order == 0 and link.rx_gaps == 0


def test_hello_and_a_silence_reopen_the_sequence_check():
    link = L.BoardLink(500, bytes(39), Measurements())
    vals = [0] * 10
    assert [s for s, _ in run(link, meas_wire(1000, vals))] == [1000]
    assert run(link, meas_wire(3, vals)) == []  # a restarted host, without a HELLO: old
    run(link, hello_wire(2))
    assert [s for s, _ in run(link, meas_wire(3, vals))] == [3]
    run(link, meas_wire(900, vals))
    assert link.check(600) == 1  # silent for 600 ms > 500 ms: lost, sequence check re-opened
    assert [s for s, _ in run(link, meas_wire(4, vals), now_ms=600)] == [4]
    assert link.lost == 0 and link.losses == 1
