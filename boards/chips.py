# What each chip's pins can do, for validating board files on the host (CPython only).
# Sources: RP2040 datasheet (Raspberry Pi Ltd), sections 1.4.3 GPIO functions, 4.5 PWM,
# 4.9 ADC, 4.7 watchdog; ESP32 technical reference manual and datasheet (Espressif),
# sections on IO_MUX/GPIO, ADC and LEDC; MicroPython's port documentation for the limits of
# machine.WDT. Pin tables are from memory of those documents: check them against the
# datasheet of your exact module before trusting a new board file.


def _rp2040_pin(text):
    """'GP26' or 26 -> 26."""
    if isinstance(text, bool):
        return None
    if isinstance(text, int):
        return text
    if isinstance(text, str) and text.upper().startswith("GP") and text[2:].isdigit():
        return int(text[2:])
    return None


def _esp32_pin(text):
    """'GPIO34', 'IO34' or 34 -> 34."""
    if isinstance(text, bool):
        return None
    if isinstance(text, int):
        return text
    if isinstance(text, str):
        t = text.upper()
        for pre in ("GPIO", "IO"):
            if t.startswith(pre) and t[len(pre):].isdigit():
                return int(t[len(pre):])
    return None


RP2040 = {
    "name": "rp2040",
    "pin_format": "GP0 .. GP29",
    "parse": _rp2040_pin,
    "gpio": set(range(30)),
    "adc": {26: 0, 27: 1, 28: 2, 29: 3},  # ADC0-3 (ADC4 is the internal temperature sensor)
    "input_only": set(),
    "adc_read": ("u16",),  # 12-bit conversions, scaled to 0..65535 by read_u16
    "mpy_arch": ("armv6m",),  # Cortex-M0+
    "wdt_ms": (1, 8388),  # 24-bit counter in microseconds (MicroPython rp2 docs)
    # PWM: 8 slices of 2 channels; GPn drives slice (n >> 1) & 7, channel n & 1. Both
    # channels of a slice share one frequency; two pins on the same slice and channel carry
    # the same signal.
    "pwm_slice": lambda pin: ((pin >> 1) & 7, pin & 1),
    "uart": {0: ({0, 12, 16, 28}, {1, 13, 17, 29}), 1: ({4, 8, 20, 24}, {5, 9, 21, 25})},
    "uart_ids": (0, 1),
    "modes": ("standalone", "link"),
}

ESP32 = {
    "name": "esp32",
    "pin_format": "GPIO0 .. GPIO39 (or a plain number)",
    "parse": _esp32_pin,
    # 6-11 drive the SPI flash on modules; 20, 24 and 28-31 do not exist.
    "gpio": set(range(0, 6)) | set(range(12, 20)) | {21, 22, 23, 25, 26, 27} | set(range(32, 40)),
    # ADC1 only: ADC2 cannot be read while Wi-Fi runs.
    "adc": {36: 0, 37: 1, 38: 2, 39: 3, 32: 4, 33: 5, 34: 6, 35: 7},
    "input_only": set(range(34, 40)),  # no output driver: never PWM or an enable
    "adc_read": ("uv", "u16"),  # read_uv applies the chip's factory calibration
    "mpy_arch": ("xtensawin",),
    "wdt_ms": (1, 3600000),
    "pwm_slice": None,  # LEDC: any output pin, frequencies set per timer
    "uart": None,  # the GPIO matrix routes a UART to any pin
    "uart_ids": (1, 2),  # UART0 carries the REPL
    "modes": ("standalone", "link"),
}

UNIX = {
    "name": "unix",
    "pin_format": "(no pins)",
    "parse": lambda text: None,
    "gpio": set(),
    "adc": {},
    "input_only": set(),
    "adc_read": (),
    "mpy_arch": (None, "host"),
    "wdt_ms": (0, 0),
    "pwm_slice": None,
    "uart": None,
    "uart_ids": (),
    "modes": ("link",),  # no sensors: measurements come only over the link
}

# The emulated board (`spinrail board emulate`): MicroPython's qemu port on qemu's mps2-an385
# machine, a Cortex-M3. It runs armv7m code (qemu_m3) or armv6m code (qemu_m0: the RP2040's
# Cortex-M0+ instruction set, Thumb-1, a subset of the M3's). No ADC or PWM is modelled:
# measurements arrive over the link and the commands go back over it, as on the virtual board.
MPS2_AN385 = dict(UNIX, name="mps2_an385", mpy_arch=("armv7m", "armv6m"))

CHIPS = {"rp2040": RP2040, "esp32": ESP32, "unix": UNIX, "mps2_an385": MPS2_AN385}
# chips without pins: measurements only over the link, the stub hardware layer on the board
LINK_ONLY = ("unix", "mps2_an385")
# heap_kb allowed per link-only chip: the unix port's -X heapsize; the emulated board's heap at
# start-up (at most the 140 KiB its firmware is built with)
HEAP_KB = {"unix": (32, 4096, 192), "mps2_an385": (32, 140, 140)}
