# Sensors: what the controller reads. Each channel is a divider or shunt (gain with a
# tolerance drawn per seed), an ADC (bits, full scale, clipping), gaussian noise (drawn up
# front from the seeded Generator into a table, read in turn: no numpy in the hot path) and an
# offset; faults are injected by events: stuck at a value, an open input (reads 0 or full
# scale), a wrong divider resistor (the firmware still scales by the nominal ratio), the
# battery NTC open (reads far below -40 C, i.e. implausible to the controller).
# Full scales come from the profile's sensors section, so the controller's plausibility
# ranges and the ADC ranges agree (an over-range input clips at full scale).
from array import array

NOISE_N = 4099  # noise table length per channel (prime, so channel tables do not line up)
ADC_REF_V = 3.3  # the ADC's reference; voltage dividers scale full scale down to it
R_BOTTOM = 10e3  # divider bottom resistor, ohm
NTC_OPEN_DC = -800  # an open NTC reads -80.0 C (far below the -40 C plausibility floor)


def _table(x):
    """A noise table as packed doubles: 32 KiB a channel instead of 128 KiB of float objects,
    so a batch of hundreds of scenarios (22 tables each) stays cache-friendly. Same values."""
    return array("d", x.tobytes())


# channel -> (profile full-scale attribute (milli-units), bipolar, divider name or None)
CHANNELS = {
    "bus_v": ("bus_fs_mv", False, "bus"),
    "src_a": ("batt_fs_ma", True, None),
    "batt_v": ("batt_fs_mv", True, "batt"),
    "batt_a": ("batt_fs_ma", True, None),
    "cap_v": ("cap_fs_mv", False, "cap"),
    "cap_a": ("batt_fs_ma", True, None),
    "usb_vbus": ("vbus_fs_mv", False, "vbus"),
    "usb_dp": ("line_fs_mv", False, None),
    "usb_dm": ("line_fs_mv", False, None),
}


class Channel:
    def __init__(self, name, fs, bipolar, cfg, rng, divider):
        self.name = name
        self.fs = fs  # full scale, V or A
        self.bipolar = bipolar
        self.present = cfg["present"]
        n = 1 << cfg["bits"]
        self.lsb = (2.0 * fs if bipolar else fs) / n  # V or A per count
        self.lsb_m = self.lsb * 1000.0  # milli-units per count
        self.lo = -(n >> 1) if bipolar else 0  # counts
        self.hi = (n >> 1) - 1 if bipolar else n - 1
        self.gain = 1.0 + cfg["gain_tol_pct"] / 100.0 * float(rng.uniform(-1.0, 1.0))
        if cfg.get("gain_err_pct") is not None:  # fixed (the draw above still keeps the stream)
            self.gain = 1.0 + cfg["gain_err_pct"] / 100.0
        self.offset = cfg["offset_lsb"]
        self.noise = _table(rng.standard_normal(NOISE_N) * cfg["noise_lsb"])
        self.k = 0  # next noise sample
        self.divider = divider
        if divider:
            self.r_top_nom = R_BOTTOM * (fs / ADC_REF_V - 1.0)
            self.r_top = self.r_top_nom
            self.r_bottom = R_BOTTOM
        self.stuck = None  # a stuck reading (V or A), or None
        self.open = None  # "zero" or "full" while the input is open
        self._g = 0.0
        self._update_gain()

    def _update_gain(self):
        g = self.gain
        if self.divider:
            nom = R_BOTTOM / (self.r_top_nom + R_BOTTOM)
            act = self.r_bottom / (self.r_top + self.r_bottom)
            g *= act / nom
        self._g = g / self.lsb  # counts per unit

    def set_resistor(self, which, ohm):
        if which == "top":
            self.r_top = ohm
        else:
            self.r_bottom = ohm
        self._update_gain()

    def read(self, x):
        """Reading in milli-units (int) of a true value x (V or A)."""
        if not self.present:
            return 0
        if self.stuck is not None:
            return int(round(self.stuck * 1000.0))
        if self.open is not None:
            return 0 if self.open == "zero" else int(round(self.hi * self.lsb * 1000.0))
        k = self.k
        y = x * self._g + self.noise[k] + self.offset
        self.k = k + 1 if k + 1 < NOISE_N else 0
        c = int(y + 1048576.5) - 1048576  # round half up, also below zero
        if c > self.hi:
            c = self.hi
        elif c < self.lo:
            c = self.lo
        return int(c * self.lsb_m + (0.5 if c >= 0 else -0.5))


class TempSensor:
    def __init__(self, cfg, rng):
        self.noise = _table(rng.standard_normal(NOISE_N) * cfg["noise_c"])
        self.offset = cfg["offset_c"]
        self.k = 0
        self.open = False
        self.stuck = None

    def read(self, t_c):
        """Deci-degrees C."""
        if self.open:
            return NTC_OPEN_DC
        if self.stuck is not None:
            return int(round(self.stuck * 10.0))
        k = self.k
        self.k = k + 1 if k + 1 < NOISE_N else 0
        y = (t_c + self.offset + self.noise[k]) * 10.0
        if y > 1250.0:
            y = 1250.0
        elif y < -400.0:
            y = -400.0
        return int(y + 10000.5) - 10000


class Sensors:
    def __init__(self, cfg, p, rng):
        self.ch = {}
        for name, (attr, bip, div) in CHANNELS.items():
            fs = getattr(p, attr) / 1000.0
            self.ch[name] = Channel(name, fs, bip, cfg[name], rng, div)
        self.cell = [Channel("cell_v", 2.0 * p.cap_cell_rating_mv / 1000.0, False,
                             cfg["cell_v"], rng, None) for _ in range(12)]
        self.temp = TempSensor(cfg["batt_temp"], rng)
        self.n_taps = p.cap_cells if p.cap_taps else 0
        c = self.ch
        self._order = (c["bus_v"], c["src_a"], c["batt_v"], c["batt_a"], c["cap_v"], c["cap_a"],
                       c["usb_vbus"], c["usb_dp"], c["usb_dm"])
        self._out = [0] * len(self._order)

    def channel(self, name):
        if name == "cell_v":
            return self.cell
        return [self.ch[name]]

    def divider(self, resistor):
        """(channel, 'top' or 'bottom') for a sensor divider resistor name."""
        base, which = resistor.split("_")
        return self.ch[{"bus": "bus_v", "batt": "batt_v", "cap": "cap_v",
                        "vbus": "usb_vbus"}[base]], which

    def fill(self, m, vals, cells, temp_c):
        """vals: true values in CHANNELS order; cells: true cell voltages."""
        out = self._out
        j = 0
        for ch in self._order:
            if ch.stuck is None and ch.open is None and ch.present:
                # the common path of Channel.read, inline (called every control period)
                k = ch.k
                y = vals[j] * ch._g + ch.noise[k] + ch.offset
                ch.k = k + 1 if k + 1 < NOISE_N else 0
                c = int(y + 1048576.5) - 1048576
                if c > ch.hi:
                    c = ch.hi
                elif c < ch.lo:
                    c = ch.lo
                out[j] = int(c * ch.lsb_m + (0.5 if c >= 0 else -0.5))
            else:
                out[j] = ch.read(vals[j])
            j += 1
        (m.bus_mv, m.src_ma, m.batt_mv, m.batt_ma, m.cap_mv, m.cap_ma, m.usb_vbus_mv,
         m.usb_dp_mv, m.usb_dm_mv) = out
        m.batt_temp_dc = self.temp.read(temp_c)
        n = self.n_taps
        m.n_taps = n
        for k in range(n):
            m.cell_mv[k] = self.cell[k].read(cells[k])
