# Corrupted MEAS bodies against the board's checks: how many pass CRC-16, how many of those the
# board then accepts (value ranges, the seq and t_ms windows) and with changed measurements,
# and how many a 32-bit CRC (zlib.crc32 over the same bytes) would have let through. A
# benchmark that prints its figures (docs/reliability.md), not a unit test.
# Usage: .venv/bin/python tests/link/bench_crc.py [bodies per model] [seed]
import random
import struct
import sys
import zlib

from controller import link as L
from controller.cobs import Framer
from controller.crc16 import crc16
from controller.signals import Measurements

VALS = (15000, 0, 12400, 800, 250, 12000, 0, 5000, 600, 600)


def body_of(seq, t_ms, vals):
    payload = struct.pack(L.MEAS_FMT, 0, t_ms, *vals, 0, *([0] * 12))
    return bytearray([L.T_MEAS]) + struct.pack("<H", seq) + payload


def corrupt(rng, data, model):
    b = bytearray(data)
    n = len(b)
    if model == "bytes":  # 2 to 8 bytes replaced by random values
        for i in rng.sample(range(n), rng.randrange(2, 9)):
            b[i] = rng.randrange(256)
    elif model == "bits":  # 2 to 8 single-bit flips anywhere
        for k in rng.sample(range(8 * n), rng.randrange(2, 9)):
            b[k >> 3] ^= 1 << (k & 7)
    else:  # a burst: 17 to 64 consecutive bits randomised
        nbits = rng.randrange(17, 65)
        start = rng.randrange(8 * n - nbits)
        for k in range(start, start + nbits):
            if rng.random() < 0.5:
                b[k >> 3] ^= 1 << (k & 7)
    return b


def accepted(body, seq0, t0):
    """Push the framed body into a board link that is up (last frame seq0 - 1 at t0 - 50):
    the decoded measurements if the board takes it, else None."""
    m = Measurements()
    link = L.BoardLink(500, bytes(39), m)
    link.lost = 0
    link.rx_seq = (seq0 - 1) & 0xFFFF
    link.rx_t = t0 - 50
    fr = Framer(L.MAX_BODY)
    n = fr.frame(body, len(body))
    for x in fr.out[:n]:
        ev = link.push(x, 0)
        if ev in (L.EV_MEAS, L.EV_STEP):
            return [getattr(m, f) for f in L.MEAS_FIELDS]
    return None


def main(count=200000, seed=14):
    rng = random.Random(seed)
    print("model   bodies  crc16-pass  accepted  accepted-with-changed-values  crc32-pass")
    tot = [0, 0, 0, 0, 0]
    for model in ("bytes", "bits", "burst"):
        c16 = acc = changed = c32 = 0
        for i in range(count):
            seq = rng.randrange(1, 0x10000)
            t0 = rng.randrange(1000, 1 << 29)
            vals = [v + rng.randrange(-500, 500) for v in VALS]
            good = body_of(seq, t0, vals)
            good16 = good + struct.pack("<H", crc16(good))
            bad16 = corrupt(rng, good16, model)
            if bad16 == good16:
                continue
            n = len(bad16) - 2
            if crc16(bad16, 0, n) == L.get16(bad16, n):
                c16 += 1
                got = accepted(bad16, seq, t0)
                if got is not None:
                    acc += 1
                    if got != vals:
                        changed += 1
            good32 = good + struct.pack("<I", zlib.crc32(good))
            bad32 = corrupt(rng, good32, model)
            if bad32 != good32 and zlib.crc32(bad32[:-4]) == struct.unpack("<I", bad32[-4:])[0]:
                c32 += 1
        print("%-6s %7d %11d %9d %29d %11d" % (model, count, c16, acc, changed, c32))
        for k, v in enumerate((count, c16, acc, changed, c32)):
            tot[k] += v
    print("all    %7d %11d %9d %29d %11d" % tuple(tot))


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
