# Heap allocation of the firmware loop on MicroPython: MEAS frames in, tick, CMD and telemetry
# frames out, through a scripted stream. Prints "alloc <bytes> ticks <n> frames <n>" for the
# measured stretch, after a warm-up. Usage: micropython mp_alloc.py lockstep|realtime
import gc
import sys

sys.path.insert(0, ".")
from boards.firmware import Firmware  # noqa: E402
from boards.hal import VirtualHal  # noqa: E402
from controller import link as L  # noqa: E402
from controller.cobs import Framer  # noqa: E402
from controller.crc16 import crc16  # noqa: E402
from controller.profile import default_path, load  # noqa: E402


class Script:
    """A stream whose input is a prepared byte string, handed out per pass."""

    def __init__(self, data):
        self.data = data
        self.pos = 0
        self.limit = 0  # bytes made available so far
        self.sent = 0

    def read_into(self, buf):
        n = self.limit - self.pos
        if n > len(buf):
            n = len(buf)
        d = self.data
        p = self.pos
        for i in range(n):
            buf[i] = d[p + i]
        self.pos = p + n
        return n

    def write(self, buf, n):
        self.sent += n

    def wait(self, ms):
        return 0


def frames(count, flags):
    fr = Framer(L.MAX_BODY)
    out = bytearray()
    ends = []
    body = bytearray(L.HEAD + L.MEAS_LEN + L.CRC_LEN)
    for s in range(count):
        body[0] = L.T_MEAS
        L.put16(body, 1, s)
        o = L.HEAD
        body[o] = flags
        L.put32(body, o + 1, s * 50)
        vals = (15000, 0, 12400, 800, 250, 12000, 0, 5000, 600, 600)
        for k in range(10):
            L.put32(body, o + 5 + 4 * k, vals[k] + (s % 7) * 10)
        n = L.HEAD + L.MEAS_LEN
        L.put16(body, n, crc16(body, 0, n))
        k = fr.frame(body, n + L.CRC_LEN)
        out.extend(fr.out[:k])
        ends.append(len(out))
    return out, ends


def main(mode):
    lockstep = mode == "lockstep"
    p = load(default_path())
    n = 300
    data, ends = frames(n, L.F_STEP if lockstep else 0)
    st = Script(data)
    ident = L.make_ident(bytes(8), bytes(8), L.MODE_LINK, p.period_ms, 500, 100, "virtual")
    fw = Firmware(p, VirtualHal({}), st, L.MODE_LINK, ident, 500, 100)
    now = 0
    i = 0
    measured = False
    a0 = t0 = 0
    while i < n:
        if i == 50 and not measured:
            gc.collect()
            gc.disable()
            a0 = gc.mem_alloc()
            t0 = fw.sup.ticks
            measured = True
        st.limit = ends[i]  # the next frame arrives
        i += 1
        for _ in range(10):  # 10 passes of 5 ms per frame: 50 ms, the profile's period
            fw.step(now)
            now = (now + 5) & 0x3FFFFFFF
    a1 = gc.mem_alloc()
    gc.enable()
    print("alloc", a1 - a0, "ticks", fw.sup.ticks - t0, "frames", fw.link.rx_ok,
          "lost", fw.link.losses, "sent", st.sent)


main(sys.argv[1] if len(sys.argv) > 1 else "lockstep")
