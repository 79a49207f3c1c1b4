# The firmware's hardware layer (boards/hal.py, boards/hal_machine.py) on CPython against a
# stand-in `machine` module: ADC scaling through dividers, current sensors, the NTC table and
# the multiplexer, PWM duty, active-low outputs, the safe state and the watchdog.
import pytest

from boards import board, hal, hal_machine
from controller.signals import DUTY_MAX, Commands, Measurements


class FakeMachine:
    """Records what the HAL asks of the pins; ADC readings come from self.volts_mv."""

    def __init__(self, uv=False):
        self.volts_mv = {}  # pin -> pin voltage, mV (for the mux common pin: by channel)
        self.mux_mv = {}
        self.pins = {}
        self.pwms = {}
        self.wdt = None
        self.resets = 0
        m = self

        class Pin:
            OUT = 1

            def __init__(self, n, mode=None, value=None):
                self.n = n
                self.v = value
                m.pins[n] = self

            def value(self, v=None):
                if v is None:
                    return self.v
                self.v = v

        class ADC:
            ATTN_11DB = 3

            def __init__(self, pin):
                self.n = pin.n
                self.att = None

            def atten(self, a):
                self.att = a

            def _mv(self):
                if self.n in m.mux_common:
                    ch = sum(m.pins[p].v << i for i, p in enumerate(m.mux_select))
                    return m.mux_mv.get(ch, 0)
                return m.volts_mv.get(self.n, 0)

            def read_u16(self):
                return min(65535, int(self._mv() * 65536 / m.fs_mv))

            def read_uv(self):
                return int(self._mv() * 1000)

        class PWM:
            def __init__(self, pin, freq=None, duty_u16=None):
                assert pin.v is not None  # the pin was driven to its inactive level first
                self.n = pin.n
                self.f = freq
                self.d = duty_u16
                m.pwms[pin.n] = self

            def freq(self, f):
                self.f = f

            def duty_u16(self, d):
                self.d = d

        class WDT:
            def __init__(self, timeout):
                self.timeout = timeout
                self.fed = 0
                m.wdt = self

            def feed(self):
                self.fed += 1

        self.Pin, self.ADC, self.PWM, self.WDT = Pin, ADC, PWM, WDT
        self.mux_common = ()
        self.mux_select = ()
        self.fs_mv = 3300

    def reset(self):
        self.resets += 1


class FakeTime:
    @staticmethod
    def sleep_us(us):
        pass

    @staticmethod
    def sleep_ms(ms):
        pass


@pytest.fixture(autouse=True)
def fake_time(monkeypatch):
    monkeypatch.setattr(hal_machine, "time", FakeTime)


def make(name):
    b = board.load(name)
    mach = FakeMachine()
    mach.fs_mv = b.hw["adc_fs_mv"]
    if b.hw["mux"]:
        mach.mux_common = (b.hw["mux"]["common"],)
        mach.mux_select = tuple(b.hw["mux"]["select"])
    return b, mach, hal_machine.MachineHal(b.hw, mach)


def test_pico_readings_through_dividers_sensors_ntc_and_mux():
    b, mach, h = make("rp2040_pico")
    mach.volts_mv = {26: 1000.0, 27: 1550.0}  # bus 16 V (divider 16), battery 12.4 V (8)
    mach.mux_mv = {0: 1650.0, 1: 1690.0, 2: 1650.0, 3: 1500.0, 5: 2500.0, 6: 600.0, 7: 610.0}
    m = Measurements()
    h.read(m)
    assert abs(m.bus_mv - 16000) <= 16 and abs(m.batt_mv - 12400) <= 8  # 1 mV at the pin
    assert abs(m.src_ma) <= 10  # 1.65 V: zero current
    assert abs(m.batt_ma - 800) <= 20  # 40 mV above mid at 20 mA/mV
    assert m.batt_temp_dc == 250  # half the supply: the NTC at R25
    assert abs(m.cap_mv - 12000) <= 8 and abs(m.usb_vbus_mv - 5000) <= 2
    assert abs(m.usb_dp_mv - 600) <= 1 and abs(m.usb_dm_mv - 610) <= 1


def test_esp32_reads_calibrated_microvolts_at_11_db():
    b, mach, h = make("esp32_devkit")
    mach.volts_mv = {36: 700.0}  # bus divider 22
    m = Measurements()
    h.read(m)
    assert m.bus_mv == 15400
    assert all(a.att == 3 for a in [e[1] for e in h.inputs if e[1] is not None])


def test_outputs_duty_switches_safe_and_watchdog():
    b, mach, h = make("rp2040_pico")
    assert {n: p.d for n, p in mach.pwms.items()} == {6: 0, 8: 0, 10: 0}  # all off at start
    c = Commands()
    c.batt_duty, c.cap_duty, c.dump_duty = 5000, DUTY_MAX, 0
    c.usb_conv, c.usb_on, c.usb_probe, c.batt_out = 1, 0, 1, 1
    h.apply(c)
    assert (mach.pwms[6].d, mach.pwms[8].d, mach.pwms[10].d) == (32767, 65535, 0)
    assert [mach.pins[p].v for p in (12, 13, 14, 15)] == [1, 0, 1, 1]
    assert mach.pwms[6].f == 40000 and mach.pwms[10].f == 500
    h.safe(True)
    assert (mach.pwms[6].d, mach.pwms[8].d, mach.pwms[10].d) == (0, 0, 65535)
    assert [mach.pins[p].v for p in (12, 13, 14, 15)] == [0, 0, 0, 0]
    assert mach.wdt.timeout == 4000
    h.feed()
    assert mach.wdt.fed == 1


def test_active_low_outputs_are_inverted(tmp_path):
    import json
    with open(board.board_path("rp2040_pico")) as f:
        doc = json.load(f)
    doc["pwm"]["dump_duty"]["active_low"] = True
    doc["enables"]["batt_out"]["active_low"] = True
    p = tmp_path / "low.json"
    p.write_text(json.dumps(doc))
    b = board.load(str(p))
    mach = FakeMachine()
    h = hal_machine.MachineHal(b.hw, mach)
    assert mach.pwms[10].d == 65535 and mach.pins[15].v == 1  # off, in active-low terms
    c = Commands()
    c.dump_duty = DUTY_MAX
    c.batt_out = 1
    h.apply(c)
    assert mach.pwms[10].d == 0 and mach.pins[15].v == 0


def test_out_of_range_duties_are_clamped():
    b, mach, h = make("rp2040_pico")
    c = Commands()
    c.batt_duty, c.cap_duty = -5, DUTY_MAX + 99
    h.apply(c)
    assert (mach.pwms[6].d, mach.pwms[8].d) == (0, 65535)


def test_virtual_board_gets_the_stub_layer():
    h = hal.make(board.load("virtual").hw)
    assert isinstance(h, hal.VirtualHal)
    m = Measurements()
    h.read(m)
    assert m.bus_mv == 0


def test_an_error_at_start_up_still_reaches_the_safe_state(tmp_path, monkeypatch):
    # issue 14, finding 2: MemoryError in profile_load before the HAL existed left the pins
    # as they were; now storage and USB go off and the dump load on, and fault.log says why
    import json

    from boards import main as fw_main
    from controller.compat import ConfigError
    slot = tmp_path / "sr_b"
    slot.mkdir()
    hw = dict(board.load("virtual").hw, mode="link")
    (slot / "hw.json").write_text(json.dumps(hw))
    (slot / "manifest.json").write_text("{}")
    (slot / "profile.json").write_text('{"battery": {"float_v_per_cell": 9}}')
    calls = []

    class Hal:
        def __init__(self, hw):
            calls.append(("make", hw["watchdog_ms"]))

        def safe(self, dump_on):
            calls.append(("safe", dump_on))

    monkeypatch.setattr(hal, "make", Hal)
    monkeypatch.chdir(tmp_path)  # no boot_target.txt here: nothing to fall back to
    with pytest.raises(ConfigError, match="float_v_per_cell"):
        fw_main.run(str(slot))
    assert calls == [("make", 0), ("safe", True)]  # no watchdog started, dump load on
    assert "start-up failed" in (slot / "fault.log").read_text()
