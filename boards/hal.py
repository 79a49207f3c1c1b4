# Hardware layer of the firmware (runs on the board): the dispatch from the resolved board table
# (hw.json, written by `spinrail flash` from the board file) to a hardware layer and a link
# stream, the REPL's channel as a stream, and the virtual board's stub layer. A real chip's
# layer (machine.ADC, PWM, Pin, WDT; a separate UART) is in hal_machine.py, imported only on a
# real chip: the virtual board and the heap floor never load its code.


class StdioStream:
    """The REPL's own channel as the link: USB-CDC on the Pico, UART0 behind the USB bridge on
    ESP32 devkits, the pty of the virtual board. boards/main.py turns the interrupt character
    off while the loop runs on it (shares_repl): a host breaks in with a BREAK frame."""

    shares_repl = 1

    def __init__(self):
        import select
        import sys
        self.inp = sys.stdin.buffer
        self.out = sys.stdout.buffer
        self.poller = select.poll()
        self.poller.register(sys.stdin, select.POLLIN)
        self.one = bytearray(1)  # read one byte at a time: stdin reads block until full

    def wait(self, ms):
        """Block up to ms for input; 1 if bytes are waiting."""
        for _ in self.poller.ipoll(ms):
            return 1
        return 0

    def read_into(self, buf):
        n = 0
        one = self.one
        while n < len(buf) and self.wait(0):
            if self.inp.readinto(one) != 1:
                break
            buf[n] = one[0]
            n += 1
        return n

    def write(self, buf, n):
        self.out.write(buf, n)


class VirtualHal:
    """The unix port: no pins. Measurements come only over the link; the outputs are only
    counted (the host sees them in the command frames)."""

    def __init__(self, hw):
        self.applied = 0  # apply() calls
        self.wdt = None

    def read(self, m):
        pass

    def read_bus(self, m):
        pass

    def apply(self, c):
        self.applied += 1

    def safe(self, dump_on):
        self.applied += 1

    def feed(self):
        pass

    def reboot_to_repl(self):
        pass


def make(hw):
    """The hardware layer for a resolved board table."""
    if hw["chip"] in ("unix", "mps2_an385"):  # the virtual and the emulated board: no pins
        return VirtualHal(hw)
    import machine
    from boards.hal_machine import MachineHal
    return MachineHal(hw, machine)


def make_stream(hw):
    spec = hw["link"]
    if spec["kind"] == "uart":
        import machine
        from boards.hal_machine import UartStream
        return UartStream(machine, spec)
    return StdioStream()
