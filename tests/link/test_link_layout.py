# The struct formats in controller.link are the wire spec. The board packs and unpacks field by
# field; the host uses struct. These tests hold the two against each other.
import struct

from hypothesis import given
from hypothesis import strategies as st

from controller import link as L
from controller.crc16 import crc16
from controller.signals import Commands, Measurements
from host_sim.seriallink import CmdFrame, Hello, Telemetry

from .fakes import up_link

i29 = st.integers(-(1 << 29), (1 << 29) - 1)
u16 = st.integers(0, 0xFFFF)
u30 = st.integers(0, (1 << 30) - 1)


def test_lengths_match_struct():
    assert struct.calcsize(L.HELLO_FMT) == L.HELLO_LEN
    assert struct.calcsize(L.HELLO_R_FMT) == L.HELLO_R_LEN
    assert struct.calcsize(L.MEAS_FMT) == L.MEAS_LEN
    assert struct.calcsize(L.CMD_FMT) == L.CMD_LEN
    assert struct.calcsize(L.TELEM_FMT) == L.TELEM_LEN
    assert L.HEAD + max(L.MEAS_LEN, L.TELEM_LEN, L.HELLO_R_LEN) + L.CRC_LEN <= L.MAX_BODY
    assert L.MAX_BODY == L.HEAD + L.MAX_PAYLOAD + L.CRC_LEN


def body_of(ftype, seq, payload):
    b = bytearray([ftype]) + struct.pack("<H", seq) + payload
    return b + struct.pack("<H", crc16(b))


def push_all(link, body, now_ms=0):
    from controller.cobs import Framer
    f = Framer(L.MAX_BODY)
    n = f.frame(body, len(body))
    evs = [link.push(b, now_ms) for b in f.out[:n]]
    return [e for e in evs if e]


@given(st.lists(i29, min_size=10, max_size=10), st.integers(0, 12),
       st.lists(st.integers(-32768, 32767), min_size=12, max_size=12), st.integers(0, 7), u30, u16)
def test_host_meas_decodes_on_the_board(vals, n_taps, cells, flags, t_ms, seq):
    m = Measurements()
    link = up_link(m)
    payload = struct.pack(L.MEAS_FMT, flags, t_ms, *vals, n_taps, *cells)
    evs = push_all(link, body_of(L.T_MEAS, seq, payload))
    assert evs == [L.EV_STEP if flags & L.F_STEP else L.EV_MEAS]
    assert [getattr(m, f) for f in L.MEAS_FIELDS] == vals
    assert m.n_taps == n_taps and m.cell_mv == cells
    assert m.eq_req == (1 if flags & L.F_EQ else 0) and m.reset_req == (1 if flags & L.F_RESET else 0)
    assert link.meas_seq == seq and link.lost == 0
    if flags & L.F_STEP:
        assert link.step_ms == t_ms


@given(st.integers(0, 9), st.sampled_from([1 << 29, (1 << 31) - 1, -(1 << 29) - 1, -(1 << 31)]))
def test_meas_values_beyond_small_int_range_are_dropped(k, bad):
    m = Measurements()
    link = up_link(m)
    vals = [0] * 10
    vals[k] = bad
    payload = struct.pack(L.MEAS_FMT, 0, 0, *vals, 0, *([0] * 12))
    assert push_all(link, body_of(L.T_MEAS, 1, payload)) == []
    assert link.rx_short == 1 and m.bus_mv == 0


def test_meas_wrong_length_unknown_type_and_bad_crc_are_counted():
    m = Measurements()
    link = up_link(m)
    good = struct.pack(L.MEAS_FMT, 0, 0, *([1] * 10), 0, *([0] * 12))
    assert push_all(link, body_of(L.T_MEAS, 1, good[:-1])) == []
    assert push_all(link, body_of(0x55, 2, good)) == []
    b = body_of(L.T_MEAS, 3, good)
    b[-1] ^= 0x40
    assert push_all(link, b) == []
    assert (link.rx_short, link.rx_crc, link.rx_ok) == (2, 1, 0)
    assert push_all(link, body_of(L.T_MEAS, 4, good)) == [L.EV_MEAS]


commands = st.fixed_dictionaries({
    "batt_duty": st.integers(0, 10000), "cap_duty": st.integers(0, 10000),
    "dump_duty": st.integers(0, 10000), "usb_conv": st.integers(0, 1),
    "usb_on": st.integers(0, 1), "usb_probe": st.integers(0, 1), "batt_out": st.integers(0, 1),
    "bal_mask": st.integers(0, 4095), "stage": st.integers(0, 4), "usb_match": st.integers(0, 5),
    "fault": st.integers(0, 0x7FFF)})


def decode_wire(out, n):
    from controller.cobs import Deframer
    d = Deframer(L.MAX_BODY)
    bodies = [bytes(d.body[:d.blen]) for b in out[:n] if d.push(b)]
    assert len(bodies) == 1
    body = bodies[0]
    assert crc16(body, 0, len(body) - 2) == struct.unpack("<H", body[-2:])[0]
    return body[0], struct.unpack("<H", body[1:3])[0], body[3:-2]


@given(commands, u30, u30, u16)
def test_board_cmd_frame_reads_back_with_struct(cd, ticks, now_ms, ack):
    c = Commands()
    for k, v in cd.items():
        setattr(c, k, v)
    link = up_link(Measurements())
    link.meas_seq = ack
    t, seq, payload = decode_wire(link.tx.out, link.cmd_frame(c, ticks, now_ms))
    assert t == L.T_CMD and seq == 0
    f = CmdFrame(seq, payload)
    assert (f.ack_seq, f.ticks, f.now_ms) == (ack, ticks, now_ms)
    assert {k: getattr(f.c, k) for k in cd} == cd


@given(commands, st.lists(i29, min_size=10, max_size=10), u30, u30,
       st.integers(0, 1 << 20), st.integers(0, 1 << 20))
def test_board_telemetry_reads_back_with_struct(cd, vals, ticks, now_ms, exc, late):
    c = Commands()
    for k, v in cd.items():
        setattr(c, k, v)
    m = Measurements()
    for k, v in zip(L.MEAS_FIELDS, vals):
        setattr(m, k, v)
    link = up_link(m)
    link.rx_crc = 70000  # counters wrap at 16 bits on the wire
    t, seq, payload = decode_wire(link.tx.out, link.telem_frame(m, c, ticks, now_ms, exc, late))
    v = Telemetry(seq, payload).values
    assert t == L.T_TELEM
    assert [v[k] for k in L.MEAS_FIELDS] == vals
    assert (v["now_ms"], v["ticks"], v["stage"], v["fault"]) == (now_ms, ticks, c.stage, c.fault)
    assert (v["batt_duty"], v["cap_duty"], v["dump_duty"]) == (c.batt_duty, c.cap_duty, c.dump_duty)
    assert v["rx_crc"] == 70000 & 0xFFFF
    assert (v["exceptions"], v["late_ticks"]) == (exc & 0xFFFF, late & 0xFFFF)


def test_hello_round_trip():
    ident = L.make_ident(bytes.fromhex("0123456789abcdef00"), bytes.fromhex("fedcba9876543210"),
                         L.MODE_LINK, 50, 500, 250, "rp2040_pico")
    link = up_link(Measurements(), ident=ident)
    payload = struct.pack(L.HELLO_FMT, L.PROTO, 0xBEEF)
    assert push_all(link, body_of(L.T_HELLO, 77, payload)) == [L.EV_HELLO]
    t, seq, out = decode_wire(link.tx.out, link.hello_frame())
    h = Hello(out)
    assert t == L.T_HELLO_R
    assert (h.proto, h.nonce, h.fw_hash, h.profile_hash) == (L.PROTO, 0xBEEF, "0123456789abcdef",
                                                             "fedcba9876543210")
    assert (h.board, h.mode_name, h.period_ms, h.link_timeout_ms, h.telemetry_ms) == (
        "rp2040_pico", "link", 50, 500, 250)
