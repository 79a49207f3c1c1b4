# CRC-16 and COBS: published check values and round trips.
import binascii

from hypothesis import given
from hypothesis import strategies as st

from controller import cobs
from controller.crc16 import crc16


def test_crc16_check_value():
    # CRC-16/CCITT-FALSE (poly 0x1021, init 0xFFFF, refin/refout false, xorout 0): check value
    # 0x29B1 for b"123456789" (Greg Cook, "Catalogue of parametrised CRC algorithms",
    # CRC-16/IBM-3740, alias CRC-16/CCITT-FALSE).
    assert crc16(b"123456789") == 0x29B1


@given(st.binary(max_size=300), st.integers(0, 0xFFFF))
def test_crc16_matches_an_independent_implementation(data, init):
    # binascii.crc_hqx is CPython's own CRC-CCITT (poly 0x1021, MSB first), with the initial
    # value as a parameter: with 0xFFFF it is the same CRC, computed by different code.
    assert crc16(data, 0, len(data), init) == binascii.crc_hqx(data, init)


def test_crc16_of_a_slice():
    buf = b"xx123456789yy"
    assert crc16(buf, 2, 11) == 0x29B1


# Encodings from Cheshire and Baker, "Consistent Overhead Byte Stuffing" (IEEE/ACM Trans. on
# Networking, 1999) as tabulated in the Wikipedia article's examples (from memory; each one
# also follows from the algorithm by hand).
VECTORS = [
    (b"", b"\x01"),
    (b"\x00", b"\x01\x01"),
    (b"\x00\x00", b"\x01\x01\x01"),
    (b"\x00\x11\x00", b"\x01\x02\x11\x01"),
    (b"\x11\x22\x00\x33", b"\x03\x11\x22\x02\x33"),
    (b"\x11\x22\x33\x44", b"\x05\x11\x22\x33\x44"),
    (b"\x11\x00\x00\x00", b"\x02\x11\x01\x01\x01"),
    (bytes(range(1, 255)), b"\xff" + bytes(range(1, 255))),
    (bytes(range(0, 255)), b"\x01\xff" + bytes(range(1, 255))),
    (bytes(range(1, 256)), b"\xff" + bytes(range(1, 255)) + b"\x02\xff"),
    (bytes(range(2, 256)) + b"\x00", b"\xff" + bytes(range(2, 256)) + b"\x01\x01"),
    (bytes(range(3, 256)) + b"\x00\x01", b"\xfe" + bytes(range(3, 256)) + b"\x02\x01"),
]


def test_cobs_reference_vectors():
    for data, enc in VECTORS:
        assert cobs.encode(data) == enc, data.hex()
        assert cobs.decode(enc) == data


zero_heavy = st.lists(st.sampled_from([0, 0, 0, 0, 1, 0xFF, 0x03, 0x10]), max_size=600).map(bytes)
long_runs = st.lists(st.tuples(st.integers(0, 600), st.booleans()), max_size=4).map(
    lambda parts: b"".join((b"\x00" if z else b"") + b"\x5a" * n for n, z in parts))


@given(st.one_of(st.binary(max_size=700), zero_heavy, long_runs))
def test_cobs_round_trip(data):
    enc = cobs.encode(data)
    assert 0 not in enc
    assert len(enc) <= cobs.max_encoded(len(data))
    assert cobs.decode(enc) == data


@given(st.binary(min_size=1, max_size=200))
def test_cobs_decode_rejects_or_returns_without_raising_on_junk(junk):
    buf = bytearray(300)
    n = cobs.decode_into(junk, 0, len(junk), buf)
    if 0 in junk:
        assert n == cobs.MALFORMED  # a zero can only be a delimiter
    elif n >= 0:
        # only well-formed blocks decode; the one non-canonical form is a trailing empty block
        again = cobs.encode(bytes(buf[:n]))
        assert junk in (again, again + b"\x01")


def test_cobs_decode_too_long_for_buffer():
    enc = cobs.encode(b"\x01" * 50)
    assert cobs.decode_into(enc, 0, len(enc), bytearray(49)) == cobs.TOO_LONG
    assert cobs.decode_into(enc, 0, len(enc), bytearray(50)) == 50


@given(st.binary(max_size=cobs.max_encoded(101)))
def test_wire_framing_keeps_interrupt_character_off_the_wire(body):
    body = body[:101]
    f = cobs.Framer(101)
    n = f.frame(body, len(body))
    wire = bytes(f.out[:n])
    assert 0x03 not in wire  # Ctrl-C stays free for mpremote
    assert wire[0] == 0 and wire[-1] == 0 and 0 not in wire[1:-1]
    d = cobs.Deframer(101)
    got = [bytes(d.body[:d.blen]) for b in wire if d.push(b)]
    assert got == [body]
