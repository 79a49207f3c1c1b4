# Board files on the host (CPython only): load a boards/*.json definition, validate it against
# what the chip's pins can do, and resolve it into the integer table the firmware's hardware
# layer reads (hw.json), so the board does no floating point and no logarithms.
# Every error names the file, the field, the value and what is allowed. docs/boards.md
# describes each field.
import json
import math
from pathlib import Path

from boards.chips import CHIPS, HEAP_KB, LINK_ONLY
from controller.compat import ConfigError, to_int

BOARDS_DIR = Path(__file__).resolve().parent

VOLTAGES = ("bus_mv", "batt_mv", "cap_mv", "usb_vbus_mv", "usb_dp_mv", "usb_dm_mv")
CURRENTS = ("src_ma", "batt_ma", "cap_ma")
TEMPERATURES = ("batt_temp_dc",)
INPUTS = VOLTAGES + CURRENTS + TEMPERATURES
OPTIONAL_INPUTS = ("src_ma", "cap_ma")  # 0 where the board does not sense them
PWMS = ("batt_duty", "cap_duty", "dump_duty")
ENABLES = ("usb_conv", "usb_on", "usb_probe", "batt_out")
TOP = ("name", "description", "chip", "mpy_arch", "mode", "adc", "inputs", "pwm", "enables",
       "link", "watchdog_ms", "telemetry_ms", "link_timeout_ms", "reserved_pins", "heap_kb",
       "notes")
NTC_POINTS = 33  # table entries over the ADC's full scale (32 linear segments)
_T0_K = 273.15
_NTC_CLAMP_DC = (-999, 1999)  # beyond the controller's plausibility window either way


class Board:
    """A validated board file. doc: the parsed JSON; hw: the resolved integer table."""

    def __init__(self, path, doc, hw):
        self.path = str(path)
        self.doc = doc
        self.hw = hw
        self.name = doc["name"]
        self.chip = doc["chip"]
        self.mode = doc.get("mode", "standalone")
        self.mpy_arch = doc.get("mpy_arch")
        self.heap_kb = doc.get("heap_kb", HEAP_KB.get(self.chip, (0, 0, None))[2])
        self.link_timeout_ms = hw["link_timeout_ms"]
        self.virtual = self.chip == "unix"
        self.emulated = self.chip == "mps2_an385"  # `spinrail board emulate`


def board_path(name_or_path):
    """A board name (rp2040_pico) or a path to a board file."""
    p = Path(name_or_path)
    if p.suffix == ".json" or p.exists():
        return p
    return BOARDS_DIR / (str(name_or_path) + ".json")


def list_boards():
    return sorted(p.stem for p in BOARDS_DIR.glob("*.json"))


def load(name_or_path):
    """Read, validate and resolve a board file. Raises ConfigError naming the file."""
    from host_sim.fileio import JsonError, load_json
    path = board_path(name_or_path)
    try:
        doc = load_json(path)  # the strict loader: duplicate keys, deep nesting refused
    except JsonError as e:
        raise ConfigError(str(e))
    except FileNotFoundError:
        raise ConfigError("%s: no such board file (shipped boards: %s)"
                          % (path, ", ".join(list_boards())))
    except OSError as e:
        raise ConfigError("%s: cannot read board file (%s)" % (path, e))
    except ValueError as e:
        raise ConfigError("%s: not valid JSON (%s)" % (path, e))
    try:
        return Board(path, doc, _Checker(doc).resolve())
    except ConfigError as e:
        raise ConfigError("%s: %s" % (path, e))


def _bad(field, value, allowed):
    raise ConfigError("%s = %r: %s" % (field, value, allowed))


def _num(sec, prefix, key, lo, hi, default=None, integer=False):
    v = sec.get(key, default)
    field = prefix + key
    if v is None or isinstance(v, bool) or not isinstance(v, (int, float)) or v != v:
        _bad(field, v, "expected a number from %s to %s" % (lo, hi))
    if v < lo or v > hi:
        _bad(field, v, "allowed %s to %s" % (lo, hi))
    if integer and v != int(v):
        _bad(field, v, "expected a whole number from %s to %s" % (lo, hi))
    return v


def _obj(doc, field, allowed_keys):
    v = doc.get(field.rsplit(".", 1)[-1], {}) if isinstance(doc, dict) else None
    if not isinstance(v, dict):
        _bad(field, v, "expected an object")
    for k in v:
        if k not in allowed_keys:
            _bad(field + "." + k, v[k], "unknown field; allowed: " + ", ".join(allowed_keys))
    return v


class _Checker:
    def __init__(self, doc):
        if not isinstance(doc, dict):
            raise ConfigError("expected a JSON object at the top level")
        self.doc = doc
        self.used = {}  # pin -> field that claimed it
        self.slices = {}  # rp2040 PWM (slice, channel) -> field; slice -> (freq, field)

    def resolve(self):
        d = self.doc
        for k in d:
            if k not in TOP:
                _bad(k, d[k], "unknown field; allowed: " + ", ".join(TOP))
        name = d.get("name")
        if not isinstance(name, str) or not name or len(name.encode()) > 16:
            _bad("name", name, "expected a name of 1 to 16 characters")
        chip_name = d.get("chip")
        if chip_name not in CHIPS:
            _bad("chip", chip_name, "allowed one of " + ", ".join(sorted(CHIPS)))
        self.chip = chip = CHIPS[chip_name]
        arch = d.get("mpy_arch")
        if arch not in chip["mpy_arch"]:
            _bad("mpy_arch", arch, "for %s: %s" % (chip_name, " or ".join(
                "null" if a is None else a for a in chip["mpy_arch"])))
        mode = d.get("mode", "standalone")
        if mode not in chip["modes"]:
            _bad("mode", mode, "for %s: %s" % (chip_name, " or ".join(chip["modes"])))
        for i, r in enumerate(d.get("reserved_pins", [])):
            pin = self._pin("reserved_pins[%d]" % i, r)
            self.used[pin] = "reserved_pins"
        hw = {"board": name, "chip": chip_name, "mode": mode}
        lo, hi = chip["wdt_ms"]
        wdt = _num(d, "", "watchdog_ms", 0, hi, 0, integer=True)
        if 0 < wdt < max(lo, 100):
            _bad("watchdog_ms", wdt, "0 (none) or %d to %d ms" % (max(lo, 100), hi))
        hw["watchdog_ms"] = int(wdt)
        hw["telemetry_ms"] = int(_num(d, "", "telemetry_ms", 0, 60000, 500, integer=True))
        hw["link_timeout_ms"] = int(_num(d, "", "link_timeout_ms", 50, 60000, 500, integer=True))
        if chip_name in LINK_ONLY:
            lo, hi, default = HEAP_KB[chip_name]
            _num(d, "", "heap_kb", lo, hi, default, integer=True)
            for sec in ("adc", "inputs", "pwm", "enables"):
                if d.get(sec):
                    _bad(sec, d[sec], "must be empty on %s (no pins)" % (
                        "the virtual board" if chip_name == "unix" else "an emulated board"))
            hw.update(adc_read="none", adc_fs_mv=0, atten=-1, mux=None, inputs=[], ntc=[],
                      pwm=[], enables=[])
        else:
            if "heap_kb" in d:
                _bad("heap_kb", d["heap_kb"], "only for the virtual and emulated boards (a real "
                     "board's heap "
                     "is what its firmware leaves)")
            self._adc(hw)
            self._inputs(hw)
            self._pwm(hw)
            self._enables(hw)
        hw["link"] = self._link()
        return hw

    # -- pins ---------------------------------------------------------------------------------
    def _pin(self, field, text):
        chip = self.chip
        pin = chip["parse"](text)
        if pin is None or pin not in chip["gpio"]:
            _bad(field, text, "not a usable pin on %s; allowed %s" % (chip["name"], chip["pin_format"]))
        return pin

    def _claim(self, field, text, adc=False, output=False):
        pin = self._pin(field, text)
        chip = self.chip
        if pin in self.used:
            _bad(field, text, "pin already used by %s" % self.used[pin])
        if adc and pin not in chip["adc"]:
            _bad(field, text, "not ADC-capable on %s; ADC pins: %s" % (
                chip["name"], ", ".join(str(p) for p in sorted(chip["adc"]))))
        if output and pin in chip["input_only"]:
            _bad(field, text, "input-only on %s (pins %d-%d have no output driver)" % (
                chip["name"], min(chip["input_only"]), max(chip["input_only"])))
        self.used[pin] = field
        return pin

    # -- sections -----------------------------------------------------------------------------
    def _adc(self, hw):
        a = _obj(self.doc, "adc", ("full_scale_mv", "read", "attenuation_db", "mux"))
        fs = _num(a, "adc.", "full_scale_mv", 500, 5000, None, integer=True)
        mode = a.get("read", self.chip["adc_read"][0])
        if mode not in self.chip["adc_read"]:
            _bad("adc.read", mode, "for %s: %s" % (self.chip["name"], " or ".join(self.chip["adc_read"])))
        atten = -1
        if self.chip["name"] == "esp32":
            db = a.get("attenuation_db", 11)
            steps = {0: 0, 2.5: 1, 6: 2, 11: 3}  # machine.ADC.ATTN_0DB .. ATTN_11DB
            if db not in steps:
                _bad("adc.attenuation_db", db, "allowed 0, 2.5, 6 or 11")
            atten = steps[db]
        elif "attenuation_db" in a:
            _bad("adc.attenuation_db", a["attenuation_db"], "only for esp32")
        mux = None
        if "mux" in a:
            m = _obj(a, "adc.mux", ("common", "select", "settle_us"))
            common = self._claim("adc.mux.common", m.get("common"), adc=True)
            sel = m.get("select")
            if not isinstance(sel, list) or not 1 <= len(sel) <= 4:
                _bad("adc.mux.select", sel, "expected a list of 1 to 4 select pins")
            sel_pins = [self._claim("adc.mux.select[%d]" % i, s, output=True)
                        for i, s in enumerate(sel)]
            settle = _num(m, "adc.mux.", "settle_us", 0, 1000, 20, integer=True)
            mux = {"common": common, "select": sel_pins, "settle_us": int(settle)}
        hw.update(adc_read=mode, adc_fs_mv=int(fs), atten=atten, mux=mux)

    def _inputs(self, hw):
        ins = _obj(self.doc, "inputs", INPUTS)
        out, tables = [], []
        for name in INPUTS:
            if name not in ins:
                if name in OPTIONAL_INPUTS:
                    continue
                _bad("inputs." + name, None, "missing; every board senses " + ", ".join(
                    n for n in INPUTS if n not in OPTIONAL_INPUTS))
            f = "inputs." + name
            kind = ("divider",) if name in VOLTAGES else ("ma_per_mv",) if name in CURRENTS else ("ntc",)
            spec = _obj(ins, f, ("pin", "mux") + kind + ("offset_mv",))
            if ("pin" in spec) == ("mux" in spec):
                _bad(f, spec, "give exactly one of pin (a direct ADC pin) or mux (a channel of "
                     "adc.mux)")
            pin, ch = -1, -1
            if "pin" in spec:
                pin = self._claim(f + ".pin", spec["pin"], adc=True)
            else:
                if hw["mux"] is None:
                    _bad(f + ".mux", spec["mux"], "no adc.mux defined")
                n = 1 << len(hw["mux"]["select"])
                ch = int(_num(spec, f + ".", "mux", 0, n - 1, integer=True))
                for other in out:
                    if other[2] == ch:
                        _bad(f + ".mux", ch, "mux channel already used by inputs." + other[0])
            fs = hw["adc_fs_mv"]
            offset = _num(spec, f + ".", "offset_mv", 0, fs, 0, integer=True)
            ntc = -1
            if name in VOLTAGES:
                scale = _num(spec, f + ".", "divider", 1.0, 100.0)
            elif name in CURRENTS:
                scale = _num(spec, f + ".", "ma_per_mv", 0.01, 1000.0)
            else:
                if offset:
                    _bad(f + ".offset_mv", offset, "not used with an NTC (0 only)")
                scale = 1.0
                ntc = len(tables)
                tables.append(self._ntc(f + ".ntc", spec, fs))
            k, shift = _fixed(scale, fs)
            out.append([name, pin, ch, int(offset), k, shift, ntc])
        hw["inputs"] = out
        hw["ntc"] = tables

    def _ntc(self, field, spec, fs_mv):
        n = _obj(spec, field, ("beta", "r25_ohm", "series_ohm", "supply_mv"))
        beta = _num(n, field + ".", "beta", 2000, 6000)
        r25 = _num(n, field + ".", "r25_ohm", 100, 1e6)
        rs = _num(n, field + ".", "series_ohm", 100, 1e6)
        vs = _num(n, field + ".", "supply_mv", 500, 5000, fs_mv)
        return ntc_table(beta, r25, rs, vs, fs_mv)

    def _pwm(self, hw):
        sec = _obj(self.doc, "pwm", PWMS)
        out = []
        for name in PWMS:
            f = "pwm." + name
            if name not in sec:
                _bad(f, None, "missing; every board drives " + ", ".join(PWMS))
            spec = _obj(sec, f, ("pin", "freq_hz", "active_low"))
            pin = self._claim(f + ".pin", spec.get("pin"), output=True)
            freq = int(_num(spec, f + ".", "freq_hz", 10, 200000, integer=True))
            low = spec.get("active_low", False)
            if not isinstance(low, bool):
                _bad(f + ".active_low", low, "expected true or false")
            self._slice(f, pin, freq)
            out.append([name, pin, freq, 1 if low else 0])
        hw["pwm"] = out

    def _slice(self, field, pin, freq):
        fn = self.chip["pwm_slice"]
        if fn is None:
            return
        sl, chn = fn(pin)
        if (sl, chn) in self.slices:
            _bad(field + ".pin", pin, "PWM slice %d channel %s already drives %s (same signal)"
                 % (sl, "AB"[chn], self.slices[(sl, chn)]))
        if sl in self.slices and self.slices[sl][0] != freq:
            _bad(field + ".freq_hz", freq, "PWM slice %d also drives %s at %d Hz; one frequency "
                 "per slice" % (sl, self.slices[sl][1], self.slices[sl][0]))
        self.slices[(sl, chn)] = field
        self.slices[sl] = (freq, field)

    def _enables(self, hw):
        sec = _obj(self.doc, "enables", ENABLES)
        out = []
        for name in ENABLES:
            f = "enables." + name
            if name not in sec:
                _bad(f, None, "missing; every board switches " + ", ".join(ENABLES))
            spec = _obj(sec, f, ("pin", "active_low"))
            pin = self._claim(f + ".pin", spec.get("pin"), output=True)
            low = spec.get("active_low", False)
            if not isinstance(low, bool):
                _bad(f + ".active_low", low, "expected true or false")
            out.append([name, pin, 1 if low else 0])
        hw["enables"] = out

    def _link(self):
        spec = _obj(self.doc, "link", ("kind", "id", "tx", "rx", "baud"))
        kind = spec.get("kind", "stdio")
        if kind == "stdio":
            for k in ("id", "tx", "rx"):
                if k in spec:
                    _bad("link." + k, spec[k], "only for kind uart")
            return {"kind": "stdio"}
        if kind != "uart" or not self.chip["uart_ids"]:
            _bad("link.kind", kind, "for %s: %s" % (self.chip["name"], "stdio or uart"
                                                    if self.chip["uart_ids"] else "stdio"))
        uid = spec.get("id")
        if uid not in self.chip["uart_ids"]:
            _bad("link.id", uid, "allowed " + ", ".join(str(i) for i in self.chip["uart_ids"]))
        tx = self._claim("link.tx", spec.get("tx"), output=True)
        rx = self._claim("link.rx", spec.get("rx"))
        table = self.chip["uart"]
        if table is not None:
            if tx not in table[uid][0]:
                _bad("link.tx", spec["tx"], "UART%d TX is on pins %s" % (uid, sorted(table[uid][0])))
            if rx not in table[uid][1]:
                _bad("link.rx", spec["rx"], "UART%d RX is on pins %s" % (uid, sorted(table[uid][1])))
        baud = int(_num(spec, "link.", "baud", 9600, 1000000, 115200, integer=True))
        return {"kind": "uart", "id": uid, "tx": tx, "rx": rx, "baud": baud}


def _fixed(scale, fs_mv):
    """scale (units per pin millivolt) as k / 2**shift, with k * full scale well inside the
    small-int range (2**29) so the board's integer scaling never allocates."""
    shift = 16
    while shift > 0 and round(scale * (1 << shift)) * fs_mv >= (1 << 29):
        shift -= 1
    k = int(round(scale * (1 << shift)))
    if k * fs_mv >= (1 << 29):
        raise ConfigError("scale %r: too large for integer scaling at %d mV full scale" % (scale, fs_mv))
    return k, shift


def ntc_table(beta, r25_ohm, series_ohm, supply_mv, fs_mv):
    """Deci-degrees C at pin voltages i * fs_mv / 32 (i = 0..32) for an NTC between the pin
    and ground, fed through series_ohm from supply_mv. Beta model:
    1/T = 1/T25 + ln(R/R25)/beta. A shorted NTC reads hot, an open one cold, both beyond
    the controller's plausible range."""
    out = []
    for i in range(NTC_POINTS):
        v = fs_mv * i / (NTC_POINTS - 1)
        if v <= 0:
            t_dc = _NTC_CLAMP_DC[1]
        elif v >= supply_mv:
            t_dc = _NTC_CLAMP_DC[0]
        else:
            r = series_ohm * v / (supply_mv - v)
            t_k = 1.0 / (1.0 / (_T0_K + 25.0) + math.log(r / r25_ohm) / beta)
            t_dc = to_int((t_k - _T0_K) * 10, 1)
            t_dc = max(_NTC_CLAMP_DC[0], min(_NTC_CLAMP_DC[1], t_dc))
        out.append(t_dc)
    return out
