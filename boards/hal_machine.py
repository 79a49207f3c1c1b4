# A real chip's hardware layer (runs on the board; imported by hal.make only for a real chip):
# binds the resolved board table to machine.ADC, PWM, Pin and WDT, and a separate UART as the
# link. The machine module is passed in (hal.make imports it), so the host tests can pass a
# stand-in. Scaling is integer-only: pin_mv -> ((pin_mv - offset_mv) * k) >> shift, k and shift
# chosen on the host so nothing leaves the small-int range; the NTC is a 33-point table.
import time  # the host tests replace hal_machine.time

from controller.compat import const
from controller.signals import DUTY_MAX

_NTC_SEGMENTS = const(32)
_U16 = const(65535)


class UartStream:
    """A separate UART for the link, leaving the REPL's channel free."""

    def __init__(self, machine, spec):
        self.uart = machine.UART(spec["id"], baudrate=spec["baud"], tx=machine.Pin(spec["tx"]),
                                 rx=machine.Pin(spec["rx"]), timeout=0)

    def wait(self, ms):
        if self.uart.any():
            return 1
        time.sleep_ms(ms if ms < 2 else 2)
        return self.uart.any()

    def read_into(self, buf):
        if not self.uart.any():
            return 0
        n = self.uart.readinto(buf)
        return n or 0

    def write(self, buf, n):
        self.uart.write(buf, n)


class MachineHal:
    """A real board: ADC inputs (direct or through an analog multiplexer), PWM outputs, enable
    pins and the watchdog, all from the hw table."""

    def __init__(self, hw, machine):
        self.machine = machine
        Pin = machine.Pin
        self.fs_mv = hw["adc_fs_mv"]
        self.uv = hw["adc_read"] == "uv"
        atten = hw["atten"]
        mux = hw["mux"]
        self.mux_adc = None
        self.sel = []
        self.settle_us = 0
        if mux:
            self.mux_adc = self._adc(machine, mux["common"], atten)
            self.sel = [Pin(p, Pin.OUT, value=0) for p in mux["select"]]
            self.settle_us = mux["settle_us"]
        self.ntc = hw["ntc"]
        # inputs: [field, adc or None (mux), mux channel, offset_mv, k, shift, ntc table]
        self.inputs = []
        for name, pin, ch, off, k, shift, ntc in hw["inputs"]:
            adc = self._adc(machine, pin, atten) if pin >= 0 else None
            self.inputs.append([name, adc, ch, off, k, shift, self.ntc[ntc] if ntc >= 0 else None])
        self.bus = None
        for e in self.inputs:
            if e[0] == "bus_mv":
                self.bus = e
        # outputs: [field, PWM, active_low] and [field, Pin, active_low]; all start off
        self.pwms = []
        for name, pin, freq, low in hw["pwm"]:
            off = _U16 if low else 0
            p = Pin(pin, Pin.OUT, value=1 if low else 0)  # inactive before PWM takes the pin
            try:
                pwm = machine.PWM(p, freq=freq, duty_u16=off)  # no default-duty pulse
            except TypeError:  # older ports: no keyword arguments
                pwm = machine.PWM(p)
                pwm.duty_u16(off)
                pwm.freq(freq)
            self.pwms.append([name, pwm, low])
        self.pins = []
        for name, pin, low in hw["enables"]:
            self.pins.append([name, Pin(pin, Pin.OUT, value=1 if low else 0), low])
        self.wdt = machine.WDT(timeout=hw["watchdog_ms"]) if hw["watchdog_ms"] else None

    @staticmethod
    def _adc(machine, pin, atten):
        adc = machine.ADC(machine.Pin(pin))
        if atten >= 0:
            adc.atten(atten)
        return adc

    def _pin_mv(self, e):
        adc = e[1]
        if adc is None:
            ch = e[2]
            for i in range(len(self.sel)):
                self.sel[i].value((ch >> i) & 1)
            if self.settle_us:
                time.sleep_us(self.settle_us)
            adc = self.mux_adc
        if self.uv:
            return adc.read_uv() // 1000
        return (adc.read_u16() * self.fs_mv) >> 16

    def _value(self, e):
        mv = self._pin_mv(e)
        t = e[6]
        if t is None:
            return ((mv - e[3]) * e[4]) >> e[5]
        if mv <= 0:
            return t[0]
        if mv >= self.fs_mv:
            return t[_NTC_SEGMENTS]
        x = mv * _NTC_SEGMENTS  # position in table segments, scaled by fs_mv
        i = x // self.fs_mv
        frac = x - i * self.fs_mv
        return t[i] + ((t[i + 1] - t[i]) * frac) // self.fs_mv

    def read(self, m):
        for e in self.inputs:
            setattr(m, e[0], self._value(e))

    def read_bus(self, m):
        if self.bus is not None:
            m.bus_mv = self._value(self.bus)

    def apply(self, c):
        for e in self.pwms:
            d = getattr(c, e[0])
            if d < 0:
                d = 0
            elif d > DUTY_MAX:
                d = DUTY_MAX
            u = (d * _U16) // DUTY_MAX
            e[1].duty_u16(_U16 - u if e[2] else u)
        for e in self.pins:
            v = 1 if getattr(c, e[0]) else 0
            e[1].value(v ^ e[2])

    def safe(self, dump_on):
        """Everything off; the dump load full on if asked (the bus is left to it)."""
        for e in self.pwms:
            u = _U16 if (dump_on and e[0] == "dump_duty") else 0
            e[1].duty_u16(_U16 - u if e[2] else u)
        for e in self.pins:
            e[1].value(e[2])

    def feed(self):
        if self.wdt is not None:
            self.wdt.feed()

    def reboot_to_repl(self):
        """A watchdog cannot be stopped: after Ctrl-C it would reset the board under mpremote.
        Leave a hold file (the boot stub then skips the firmware once) and reset now."""
        if self.wdt is None:
            return
        try:
            with open("hold.txt", "w") as f:
                f.write("1")
        except OSError:
            pass
        self.machine.reset()
