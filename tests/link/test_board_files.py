# Board files: the shipped ones load; bad ones fail with the file, the field, the value and
# what is allowed.
import json
import math

import pytest

from boards import board
from controller.compat import ConfigError


def shipped(name):
    with open(board.board_path(name)) as f:
        return json.load(f)


def load_doc(tmp_path, doc, name="b.json"):
    p = tmp_path / name
    p.write_text(json.dumps(doc))
    return board.load(str(p))


def error_of(tmp_path, doc):
    with pytest.raises(ConfigError) as e:
        load_doc(tmp_path, doc)
    return str(e.value)


def test_shipped_boards_load():
    names = board.list_boards()
    assert {"rp2040_pico", "esp32_devkit", "virtual"} <= set(names)
    for n in names:
        b = board.load(n)
        assert b.name == n
    pico = board.load("rp2040_pico")
    assert pico.mpy_arch == "armv6m" and len(pico.hw["inputs"]) == 10
    assert board.load("esp32_devkit").mpy_arch == "xtensawin"
    v = board.load("virtual")
    assert v.virtual and v.hw["inputs"] == [] and v.mode == "link"


def test_same_pin_twice(tmp_path):
    d = shipped("rp2040_pico")
    d["enables"]["usb_on"]["pin"] = "GP12"  # already usb_conv
    msg = error_of(tmp_path, d)
    assert "b.json" in msg and "enables.usb_on.pin = 'GP12'" in msg
    assert "already used by enables.usb_conv.pin" in msg


def test_adc_on_a_pin_without_adc_rp2040(tmp_path):
    d = shipped("rp2040_pico")
    d["inputs"]["batt_mv"]["pin"] = "GP5"
    msg = error_of(tmp_path, d)
    assert "inputs.batt_mv.pin = 'GP5'" in msg and "not ADC-capable on rp2040" in msg
    assert "26, 27, 28, 29" in msg


def test_adc2_pin_refused_on_esp32(tmp_path):
    d = shipped("esp32_devkit")
    d["inputs"]["bus_mv"]["pin"] = "GPIO4"  # ADC2: unusable while Wi-Fi runs
    msg = error_of(tmp_path, d)
    assert "inputs.bus_mv.pin = 'GPIO4'" in msg and "not ADC-capable on esp32" in msg


def test_input_only_pin_as_output_on_esp32(tmp_path):
    d = shipped("esp32_devkit")
    d["inputs"]["usb_vbus_mv"]["pin"] = "GPIO32"
    d["pwm"]["dump_duty"]["pin"] = "GPIO37"
    msg = error_of(tmp_path, d)
    assert "pwm.dump_duty.pin = 'GPIO37'" in msg and "input-only" in msg


def test_reserved_pin(tmp_path):
    d = shipped("rp2040_pico")
    d["enables"]["batt_out"]["pin"] = "GP25"
    msg = error_of(tmp_path, d)
    assert "enables.batt_out.pin = 'GP25'" in msg and "reserved_pins" in msg


def test_rp2040_pwm_slice_rules(tmp_path):
    d = shipped("rp2040_pico")
    d["pwm"]["cap_duty"]["pin"] = "GP7"  # slice 3 channel B, beside batt_duty on GP6
    d["pwm"]["cap_duty"]["freq_hz"] = 20000
    msg = error_of(tmp_path, d)
    assert "pwm.cap_duty.freq_hz = 20000" in msg and "one frequency per slice" in msg
    d["pwm"]["cap_duty"]["freq_hz"] = 40000
    load_doc(tmp_path, d)  # same slice, same frequency: fine
    d["pwm"]["cap_duty"]["pin"] = "GP22"  # slice 3 channel A again: the same signal as GP6
    msg = error_of(tmp_path, d)
    assert "pwm.cap_duty.pin = 22" in msg and "same signal" in msg


@pytest.mark.parametrize("path, value, words", [
    (("inputs", "bus_mv", "divider"), 0.5, "allowed 1.0 to 100.0"),
    (("pwm", "batt_duty", "freq_hz"), 500000, "allowed 10 to 200000"),
    (("watchdog_ms",), 9000, "allowed 0 to 8388"),
    (("mpy_arch",), "xtensawin", "for rp2040: armv6m"),
    (("chip",), "rp2350", "allowed one of esp32, mps2_an385, rp2040, unix"),
    (("inputs", "batt_ma", "mux"), 8, "allowed 0 to 7"),
    (("inputs", "batt_temp_dc", "ntc", "beta"), 100, "allowed 2000 to 6000"),
    (("link", "kind"), "spi", "stdio or uart"),
    (("mode",), "bench", "standalone or link"),
])
def test_field_errors_name_field_value_and_range(tmp_path, path, value, words):
    d = shipped("rp2040_pico")
    node = d
    for k in path[:-1]:
        node = node[k]
    node[path[-1]] = value
    msg = error_of(tmp_path, d)
    assert msg.startswith(str(tmp_path / "b.json") + ": ")
    assert "%s = %r" % (".".join(path), value) in msg
    assert words in msg


def test_unknown_and_missing_fields(tmp_path):
    d = shipped("rp2040_pico")
    d["pwm"]["batt_duty"]["freq"] = 1000
    assert "pwm.batt_duty.freq = 1000: unknown field" in error_of(tmp_path, d)
    d = shipped("rp2040_pico")
    del d["inputs"]["batt_ma"]
    assert "inputs.batt_ma = None: missing" in error_of(tmp_path, d)
    d = shipped("rp2040_pico")
    del d["inputs"]["src_ma"]  # optional: 0 where not sensed
    assert len(load_doc(tmp_path, d).hw["inputs"]) == 9
    d = shipped("rp2040_pico")
    d["inputs"]["cap_mv"] = {"mux": 3, "pin": "GP26", "divider": 8}
    assert "give exactly one of pin" in error_of(tmp_path, d)
    d = shipped("rp2040_pico")
    d["inputs"]["cap_ma"]["mux"] = 1
    assert "inputs.cap_ma.mux = 1: mux channel already used by inputs.batt_ma" in error_of(tmp_path, d)


def test_uart_link_pins(tmp_path):
    d = shipped("rp2040_pico")
    d["link"] = {"kind": "uart", "id": 1, "tx": "GP20", "rx": "GP21", "baud": 115200}
    assert load_doc(tmp_path, d).hw["link"] == {"kind": "uart", "id": 1, "tx": 20, "rx": 21,
                                                "baud": 115200}
    d["link"]["tx"] = "GP16"  # a UART0 pin (RP2040 datasheet, GPIO function table)
    assert "link.tx = 'GP16': UART1 TX is on pins [4, 8, 20, 24]" in error_of(tmp_path, d)
    d["link"]["tx"] = "GP4"  # UART1 TX, but a mux select line on this board
    assert "link.tx = 'GP4': pin already used by adc.mux.select[2]" in error_of(tmp_path, d)


def test_virtual_board_has_no_pins(tmp_path):
    d = shipped("virtual")
    d["inputs"] = {"bus_mv": {"pin": 1, "divider": 2}}
    assert "inputs = " in error_of(tmp_path, d) and "virtual board" in error_of(tmp_path, d)
    d = shipped("virtual")
    d["mode"] = "standalone"
    assert "mode = 'standalone': for unix: link" in error_of(tmp_path, d)


def test_bad_json_and_missing_file(tmp_path):
    p = tmp_path / "x.json"
    p.write_text("{")
    with pytest.raises(ConfigError, match="x.json: not valid JSON"):
        board.load(str(p))
    with pytest.raises(ConfigError, match="no such board file"):
        board.load("no_such_board")


def test_integer_scaling_matches_the_divider():
    b = board.load("rp2040_pico")
    for name, pin, ch, off, k, shift, ntc in b.hw["inputs"]:
        if ntc >= 0:
            continue
        assert k * b.hw["adc_fs_mv"] < 1 << 29  # stays a small int on a 32-bit port
        spec = b.doc["inputs"][name]
        scale = spec.get("divider", spec.get("ma_per_mv"))
        for pin_mv in (0, 1000, 1650, 3300):
            exact = (pin_mv - off) * scale
            assert abs(((pin_mv - off) * k >> shift) - exact) <= 1 + abs(exact) * 2e-4


def test_ntc_table_follows_the_beta_equation():
    # Beta model: R(T) = R25 exp(B (1/T - 1/T25)) (derived). 10 k, B 3950: at 25 C the divider
    # with a 10 k series resistor sits at half the supply; at 0 C R = 33.62 k (derived).
    t = board.ntc_table(3950, 10000, 10000, 3300, 3300)
    assert len(t) == board.NTC_POINTS and t[16] == 250
    r0 = 10000 * math.exp(3950 * (1 / 273.15 - 1 / 298.15))
    assert abs(r0 - 33620) < 10
    v0 = 3300 * r0 / (r0 + 10000)  # pin voltage at 0 C
    i = int(v0 * 32 / 3300)
    frac = v0 * 32 / 3300 - i
    t_interp = t[i] + (t[i + 1] - t[i]) * frac
    assert abs(t_interp - 0) < 5  # within 0.5 C after linear interpolation
    assert t[0] > 850 and t[-1] < -400  # shorted / open NTC: beyond the plausible range
    assert all(a > b for a, b in zip(t, t[1:]))
