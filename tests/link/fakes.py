# In-process stand-ins for the board's stream and hardware, and a host link wired to them, so
# the firmware's loop runs on CPython with a fake clock.
from boards.firmware import Firmware
from controller import link as L
from controller.profile import default_path, load
from controller.signals import Measurements
from host_sim.seriallink import SerialLink

SWITCHES = ("usb_conv", "usb_on", "usb_probe", "batt_out")
OUTPUTS = ("batt_duty", "cap_duty", "dump_duty") + SWITCHES


class FakeStream:
    """The board's end: bytes from the host in inbox, bytes to the host in outbox."""

    def __init__(self):
        self.inbox = bytearray()
        self.outbox = bytearray()

    def read_into(self, buf):
        n = min(len(buf), len(self.inbox))
        buf[:n] = self.inbox[:n]
        del self.inbox[:n]
        return n

    def write(self, buf, n):
        self.outbox += bytes(buf[:n])

    def wait(self, ms):
        return 0


class FakeSerial:
    """pyserial's face for SerialLink, wired to a FakeStream."""

    def __init__(self, stream):
        self.s = stream

    @property
    def in_waiting(self):
        return len(self.s.outbox)

    def read(self, n):
        out = bytes(self.s.outbox[:n])
        del self.s.outbox[:n]
        return out

    def write(self, data):
        self.s.inbox += data

    def close(self):
        pass


class FakeHal:
    """Sensors from a dict; every apply() recorded."""

    def __init__(self, values=None):
        self.values = dict(values or {})
        self.applied = []  # (outputs dict) per apply()
        self.safe_calls = []
        self.feeds = 0
        self.fail_read = None  # an exception to raise from read()

    def read(self, m):
        if self.fail_read is not None:
            raise self.fail_read
        for k, v in self.values.items():
            setattr(m, k, v)

    def read_bus(self, m):
        m.bus_mv = self.values.get("bus_mv", m.bus_mv)

    def apply(self, c):
        self.applied.append({k: getattr(c, k) for k in OUTPUTS + ("fault",)})

    def safe(self, dump_on):
        self.safe_calls.append(dump_on)

    def feed(self):
        self.feeds += 1


def make(mode=L.MODE_LINK, values=None, log_path=None, timeout_ms=500, telemetry_ms=500):
    p = load(default_path())
    stream = FakeStream()
    hal = FakeHal(values)
    ident = L.make_ident(b"\x11" * 8, b"\x22" * 8, mode, p.period_ms, timeout_ms, telemetry_ms,
                         "fake")
    fw = Firmware(p, hal, stream, mode, ident, timeout_ms, telemetry_ms, log_path)
    host = SerialLink("loop://")
    host.ser = FakeSerial(stream)
    host._fd = None
    return p, fw, hal, host


def up_link(m, timeout_ms=500, ident=bytes(39)):
    """A BoardLink whose link is already up (past the RECOVER_FRAMES that end the start-up
    link fault): for tests of decoding, not of the session rules."""
    link = L.BoardLink(timeout_ms, ident, m)
    link.lost = 0
    return link


def charging_measurements():
    """A healthy plant: bus 15 V, AGM block at 12.4 V taking 0.8 A at 25 C, supercap at 12 V,
    USB converter up with a dedicated-port short on the data lines."""
    m = Measurements()
    m.bus_mv = 15000
    m.batt_mv = 12400
    m.batt_ma = 800
    m.batt_temp_dc = 250
    m.cap_mv = 12000
    m.usb_vbus_mv = 5000
    m.usb_dp_mv = 600
    m.usb_dm_mv = 600
    return m


SENSOR_VALUES = {"bus_mv": 15000, "batt_mv": 12400, "batt_ma": 800, "batt_temp_dc": 250,
                 "cap_mv": 12000, "usb_vbus_mv": 5000, "usb_dp_mv": 600, "usb_dm_mv": 600}
