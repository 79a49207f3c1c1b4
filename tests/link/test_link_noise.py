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

from .fakes import up_link

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
    link = up_link(Measurements())
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
    link = up_link(Measurements())
    assert run(link, junk) == []  # a valid frame by chance needs a CRC match: not in 2000 bytes


def test_oversized_frame_is_dropped_and_the_next_decodes():
    link = up_link(Measurements())
    vals = list(range(10))
    stream = b"\x00" + b"\x07" * 1000 + meas_wire(5, vals)
    assert run(link, stream) == [(5, vals)]
    assert link.rx.oversized == 1


def test_duplicates_and_old_frames_are_dropped_and_counted():
    link = up_link(Measurements())
    vals = [0] * 10
    stream = b"".join(meas_wire(s, vals) for s in (1, 2, 3, 3, 2, 5, 4, 6))
    assert [s for s, _ in run(link, stream)] == [1, 2, 3, 5, 6]
    assert link.rx_order == 3 and link.rx_gaps == 1


def test_sequence_wraps_at_16_bits():
    link = up_link(Measurements())
    vals = [0] * 10
    stream = b"".join(meas_wire(s, vals) for s in (0xFFFE, 0xFFFF, 0, 1))
    assert [s for s, _ in run(link, stream)] == [0xFFFE, 0xFFFF, 0, 1]
    assert link.rx_order == 0 and link.rx_gaps == 0


def test_a_hello_reopens_the_sequence_check():
    link = up_link(Measurements())
    vals = [0] * 10
    assert [s for s, _ in run(link, meas_wire(1000, vals, t_ms=5000))] == [1000]
    assert run(link, meas_wire(3, vals)) == []  # a restarted host, without a HELLO: old
    run(link, hello_wire(2))
    assert [s for s, _ in run(link, meas_wire(3, vals, t_ms=7))] == [3]  # seq and t afresh
    assert link.lost == 0


def recover(link, seqs, t0, now_ms, dt=50):
    """MEAS frames with these seqs, t_ms advancing by dt from t0; the seqs accepted."""
    return [s for k, s in enumerate(seqs)
            for s, _ in run(link, meas_wire(s, [0] * 10, t_ms=t0 + dt * k), now_ms=now_ms)]


def lost_link():
    """A link that was up (seq 1000 at t_ms 50,000) and went silent past its timeout."""
    link = up_link(Measurements())
    assert [s for s, _ in run(link, meas_wire(1000, [0] * 10, t_ms=50000))] == [1000]
    assert link.check(600) == 1 and link.losses == 1
    return link


def test_one_replayed_old_frame_does_not_end_the_link_fault():
    # issue 14, finding 3: after a silence, one old MEAS (old seq, old t_ms) cleared the fault
    link = lost_link()
    for seq, t in ((999, 49950), (990, 49500), (1000, 50000), (1001, 49000), (500, 60000)):
        assert run(link, meas_wire(seq, [0] * 10, t_ms=t), now_ms=600) == []
        assert link.check(600) == 1
    assert link.rx_order == 5
    # even a run of RECOVER_FRAMES replayed old frames in order stays out
    assert recover(link, [990, 991, 992], 49500, 600) == [] and link.lost == 1


def test_a_frame_far_ahead_is_not_enough_and_fresh_frames_end_the_fault():
    link = lost_link()
    # 32,767 ahead: fresh-looking, but one frame alone is no chain
    assert run(link, meas_wire(1000 + 32767, [0] * 10, t_ms=51000), now_ms=600) == []
    assert link.lost == 1
    # a live host: RECOVER_FRAMES frames in a row, seq and t_ms advancing; the last one counts
    got = recover(link, [1200, 1201, 1202], 60000, 700)
    assert got == [1202] and link.lost == 0 and L.RECOVER_FRAMES == 3
    assert link.rx_seq == 1202 and link.rx_t == 60100


def test_a_chain_breaks_on_a_jump_in_seq_or_t_ms():
    link = lost_link()
    assert recover(link, [1200, 1201], 60000, 700) == []
    # next frame jumps 100 ahead in seq: the chain starts again from it
    assert recover(link, [1301], 60100, 700) == [] and link.chain == 1
    # t_ms jumps more than 2 x timeout: starts again
    assert recover(link, [1302], 60100 + 5000, 700) == [] and link.chain == 1
    assert recover(link, [1303, 1304], 65150, 700) == [1304] and link.lost == 0


def test_while_up_a_frame_far_ahead_or_back_in_time_is_refused():
    link = up_link(Measurements())
    assert recover(link, [10, 11], 1000, 0) == [10, 11]
    assert recover(link, [11 + L.SEQ_WIN + 1], 1100, 0) == []  # would hide 32 frames
    assert recover(link, [12], 1050 - 51, 0) == []  # t_ms goes backwards
    assert recover(link, [13], 1050 + 2 * 500 + 1, 0) == []  # t_ms jumps beyond 2 x timeout
    assert recover(link, [14], 1100, 0) == [14]
    assert link.rx_order == 3 and link.rx_gaps == 2


def test_break_frame_is_recognised_and_its_wire_holds_no_repl_control_bytes():
    from host_sim.seriallink import break_wire
    w = break_wire()
    link = up_link(Measurements())
    assert [ev for ev in (link.push(b, 0) for b in w) if ev] == [L.EV_BREAK]
    # none of Ctrl-A/B/C/D/E, LF, CR (raw REPL, exit, interrupt, execute/reset, paste, enter)
    assert not set(w) & {1, 2, 3, 4, 5, 10, 13}
    bad = bytearray(w)
    bad[5] ^= 1  # a damaged magic (CRC fails) or a wrong one is no break
    assert all(link.push(b, 0) != L.EV_BREAK for b in bad)
