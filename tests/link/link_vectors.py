# Deterministic link workout, run unchanged by CPython and by the MicroPython unix port; the two
# outputs must match byte for byte (tests/link/test_dual_target.py). Frames built by the board
# code (HELLO reply, CMD, TELEM) are printed as hex; a stream of MEAS frames with drops, flips
# and inserted garbage is decoded and every event and counter printed.
import sys

sys.path.insert(0, ".")
from controller import link as L  # noqa: E402
from controller.cobs import Framer  # noqa: E402
from controller.crc16 import crc16  # noqa: E402
from controller.signals import Commands, Measurements  # noqa: E402

_seed = [12345]


def rnd(n):
    # 31-bit LCG (same numbers on both interpreters, small ints on a 64-bit unix port)
    _seed[0] = (_seed[0] * 1103515245 + 12345) & 0x7FFFFFFF
    return (_seed[0] >> 8) % n


def hexs(buf, n):
    return "".join("%02x" % buf[i] for i in range(n))


def meas_wire(framer, seq, vals, flags, t_ms):
    body = bytearray(L.HEAD + L.MEAS_LEN + L.CRC_LEN)
    body[0] = L.T_MEAS
    L.put16(body, 1, seq)
    o = L.HEAD
    body[o] = flags
    L.put32(body, o + 1, t_ms)
    for k in range(10):
        L.put32(body, o + 5 + 4 * k, vals[k])
    body[o + 45] = 0
    n = L.HEAD + L.MEAS_LEN
    L.put16(body, n, crc16(body, 0, n))
    k = framer.frame(body, n + L.CRC_LEN)
    return bytes(framer.out[:k])


def main():
    m = Measurements()
    c = Commands()
    ident = L.make_ident(b"\x01\x02\x03\x04\x05\x06\x07\x08", b"\xa0\x00\x10\x03\x00\xff\x7f\x80",
                         L.MODE_LINK, 50, 500, 500, "virtual")
    link = L.BoardLink(500, ident, m)
    for i in range(20):
        c.batt_duty = rnd(10001)
        c.cap_duty = rnd(10001)
        c.dump_duty = rnd(10001)
        c.usb_conv = rnd(2)
        c.usb_on = rnd(2)
        c.usb_probe = rnd(2)
        c.batt_out = rnd(2)
        c.bal_mask = rnd(4096)
        c.stage = rnd(5)
        c.usb_match = rnd(6)
        c.fault = rnd(32768)
        m.bus_mv = rnd(60000) - 1000
        m.batt_ma = rnd(60000) - 30000
        m.batt_temp_dc = rnd(1200) - 400
        n = link.cmd_frame(c, rnd(1 << 30), rnd(1 << 30))
        print("cmd", hexs(link.tx.out, n))
        n = link.telem_frame(m, c, rnd(1 << 30), rnd(1 << 30), rnd(70000), rnd(70000))
        print("telem", hexs(link.tx.out, n))
    link.nonce = 0xBEEF
    n = link.hello_frame()
    print("hello", hexs(link.tx.out, n))

    framer = Framer(L.MAX_BODY)
    now = 0
    events = [0, 0, 0, 0, 0, 0]

    def feed(data):
        for b in data:
            ev = link.push(b, now)
            events[ev] += 1
            if ev == L.EV_MEAS or ev == L.EV_STEP:
                print("meas", link.meas_seq, ev, m.bus_mv, m.src_ma, m.batt_mv, m.batt_ma,
                      m.batt_temp_dc, m.cap_mv, m.cap_ma, m.usb_vbus_mv, m.usb_dp_mv,
                      m.usb_dm_mv, m.eq_req, m.reset_req, link.step_ms)

    for seq in range(200):
        vals = [rnd(1 << 20) - (1 << 19) for _ in range(10)]
        s = seq - 5 if seq % 37 == 36 else seq  # now and then an old sequence number
        w = bytearray(meas_wire(framer, s, vals, rnd(8), 50 * s + rnd(50)))  # t_ms advances
        op = rnd(10)
        if op == 0 and len(w) > 3:  # drop a byte inside the frame
            i = 1 + rnd(len(w) - 2)
            w = w[:i] + w[i + 1:]
        elif op == 1:  # flip a byte inside the frame
            i = 1 + rnd(len(w) - 2)
            w[i] ^= 1 + rnd(255)
        elif op == 2:  # garbage before the frame
            feed(bytes([rnd(256) for _ in range(rnd(300))]))
        elif op == 3:  # send it twice
            feed(w)
        feed(w)
        now = (now + 20) & 0x3FFFFFFF
    print("events", events)
    print("counters", link.rx_ok, link.rx_crc, link.rx_short, link.rx_order, link.rx_gaps,
          link.rx.frames, link.rx.malformed, link.rx.oversized)


main()
