# CRC-16/CCITT-FALSE over part of a buffer: polynomial 0x1021, initial value 0xFFFF, no
# reflection, no final XOR. Check value: crc16(b"123456789") == 0x29B1 (the catalogue's
# "check" entry for this parameter set). Table-driven; the table is built once at import and
# a call allocates nothing.
from array import array

from controller.compat import const

_POLY = const(0x1021)
_INIT = const(0xFFFF)


def _make_table():
    t = array("H", [0] * 256)
    for i in range(256):
        c = i << 8
        for _ in range(8):
            c = ((c << 1) ^ _POLY) if c & 0x8000 else (c << 1)
        t[i] = c & 0xFFFF
    return t


_TABLE = _make_table()


def crc16(buf, start=0, end=-1, crc=_INIT):
    """CRC of buf[start:end] (end -1: to the end), continuing from crc."""
    if end < 0:
        end = len(buf)
    t = _TABLE
    for i in range(start, end):
        crc = ((crc << 8) & 0xFFFF) ^ t[((crc >> 8) ^ buf[i]) & 0xFF]
    return crc
