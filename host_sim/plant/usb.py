# USB side: the 5 V converter, the data-line network on VBUS and the devices on the port.
#
# Network: each data line has a resistor to VBUS (top) and to ground (bottom), the lines are
# joined by `between`, each line leaks to ground (ADC input, ESD parts), and the board's
# probe sources V_DP_SRC through probe_ohm into D+ while usb_probe is 1 (BC1.2 = USB Battery
# Charging Specification Rev. 1.2, chapter 5, DC electrical characteristics table).
# Schemes: dcp = D+ shorted to D- (BC1.2 1.4.7, the definition) through R_DCP_DAT 0-200 ohm
# (BC1.2 ch. 5, resistances table); div_2v0_2v7 / div_2v7_2v0 / div_2v7_2v7 = dividers
# 75k/49.9k (2.0 V) and 43k/49.9k (2.7 V) from 5.00 V; short_1v2 = lines tied, 100k/31.6k
# (1.20 V): levels of common practice, in no standard; the E96 arithmetic is derived.
# Values drawn within tol_pct per seed; faults: a resistor open, a line shorted to ground, the
# lines shorted together, a wrong or decade-off value, the D+/D- networks swapped.
# The two line voltages are linear in VBUS and in the probe voltage: solved as a 2 x 2 nodal
# system when the network changes, then two multiply-adds per reading.
#
# Devices: a device reads the lines when the port switch connects it (probe off, as a phone
# does its own detection) and draws what that signalling allows: 2.0/2.7 -> 1 A, 2.7/2.0 ->
# 2.1 A, 2.7/2.7 -> 2.4 A, 1.2 V short -> 2 A (common practice), anything else 0.5 A (a
# configured USB 2.0 device's limit, from memory). DCP -> 1.5 A is the device, not the port:
# BC1.2 lets a DCP be rated anywhere in I_DCP 0.5-5 A (ch. 5 DC table); 1.5 A was BC1.1's
# DCP limit (from memory). The plant models the common phone that takes about 1.5 A from any
# DCP (common practice), the load the 5 V converter must carry. Capped by the device's own
# maximum and tapered by its own charger above taper_soc. Below min_vbus_v it detaches and
# tries again after reattach_s.
INF = float("inf")
G_SHORT = 1.0 / 0.05  # a short is 50 mohm

NOMINAL = {  # scheme -> (dp_top, dp_bottom, dm_top, dm_bottom, between); None = not fitted
    "dcp": (None, None, None, None, "dcp"),
    "div_2v0_2v7": (75e3, 49.9e3, 43e3, 49.9e3, None),
    "div_2v7_2v0": (43e3, 49.9e3, 75e3, 49.9e3, None),
    "div_2v7_2v7": (43e3, 49.9e3, 43e3, 49.9e3, None),
    "short_1v2": (100e3, 31.6e3, None, None, 0.0),
}
NAMES = ("dp_top", "dp_bottom", "dm_top", "dm_bottom", "between")
ALLOWED_A = {"dcp": 1.5, "div_2v0_2v7": 1.0, "div_2v7_2v0": 2.1, "div_2v7_2v7": 2.4,
             "short_1v2": 2.0, None: 0.5}


class Network:
    def __init__(self, net, rng):
        scheme = net["scheme"]
        self.scheme = scheme
        tol = net["tol_pct"] / 100.0
        r = {}
        for name, nom in zip(NAMES, NOMINAL[scheme]):
            if nom == "dcp":
                x = net["dcp_short_ohm"]
                r[name] = float(rng.uniform(0.0, 200.0)) if x is None else x
            elif nom is None:
                r[name] = INF
            else:
                r[name] = nom * (1.0 + tol * float(rng.uniform(-1.0, 1.0)))
        self.r = r  # fitted values, ohm (inf: not fitted or open)
        self.g_leak = 1.0 / net["leak_ohm"]
        self.probe_v = net["probe_v"]
        self.g_probe = 1.0 / net["probe_ohm"]
        self.gnd_short = {"dp": False, "dm": False}
        self.swapped = False
        for f in net["faults"]:
            self.apply_fault(f)
        self._solve()

    def apply_fault(self, f):
        k = f["kind"]
        if k == "open":
            self.r[f["resistor"]] = INF
        elif k == "short_to_ground":
            self.gnd_short[f["line"]] = True
        elif k == "lines_shorted":
            self.r["between"] = 0.05
        elif k == "value":
            self.r[f["resistor"]] = f["ohm"]
        elif k == "decade_up":
            self.r[f["resistor"]] *= 10.0
        elif k == "decade_down":
            self.r[f["resistor"]] /= 10.0
        elif k == "swapped":
            self.swapped = not self.swapped
        self._solve()

    def set_resistor(self, name, ohm):
        self.r[name] = ohm
        self._solve()

    @staticmethod
    def _g(r):
        if r == INF:
            return 0.0
        return G_SHORT if r < 0.05 else 1.0 / r

    def _solve(self):
        """Line voltages as coefficients: v = a VBUS + b probe_v (probe on)."""
        g = self._g
        r = self.r
        tp, bp, tm, bm = g(r["dp_top"]), g(r["dp_bottom"]), g(r["dm_top"]), g(r["dm_bottom"])
        if self.swapped:  # the D+ network landed on D- and vice versa
            tp, bp, tm, bm = tm, bm, tp, bp
        gb = g(r["between"])
        gl = self.g_leak
        gpg = G_SHORT if self.gnd_short["dp"] else 0.0
        gmg = G_SHORT if self.gnd_short["dm"] else 0.0
        out = []
        for probe in (0, 1):
            gpr = self.g_probe if probe else 0.0
            # [a11 a12; a21 a22] [vp; vm] = [tp VBUS + gpr Vprobe ; tm VBUS]
            a11 = tp + bp + gl + gpg + gb + gpr
            a22 = tm + bm + gl + gmg + gb
            det = a11 * a22 - gb * gb
            # coefficient of VBUS and of Vprobe in vp and vm
            vp_v = (tp * a22 + gb * tm) / det
            vm_v = (a11 * tm + gb * tp) / det
            vp_p = gpr * a22 / det
            vm_p = gb * gpr / det
            out.append((vp_v, vp_p * self.probe_v, vm_v, vm_p * self.probe_v))
        self.coef = out  # [probe off, probe on]

    def lines(self, vbus, probe):
        """(D+, D-) in volts."""
        a, b, c, d = self.coef[1 if probe else 0]
        if probe:
            return a * vbus + b, c * vbus + d
        return a * vbus, c * vbus


def device_reads(dp, dm, vbus):
    """The scheme a device recognises from the lines at attach (its own wide windows)."""
    if vbus < 4.0:
        return None
    k = vbus / 5.0
    if abs(dp - dm) < 0.2:
        if dp < 0.8:
            return "dcp"
        if abs(dp - 1.2 * k) < 0.25:
            return "short_1v2"
    def near(x, lvl):
        return abs(x - lvl * k) < 0.25
    if near(dp, 2.0) and near(dm, 2.7):
        return "div_2v0_2v7"
    if near(dp, 2.7) and near(dm, 2.0):
        return "div_2v7_2v0"
    if near(dp, 2.7) and near(dm, 2.7):
        return "div_2v7_2v7"
    return None


class Device:
    def __init__(self, d):
        self.name = d["name"]
        self.arrive_s = d["arrive_s"]
        self.leave_s = d["leave_s"]
        self.e_full_j = d["battery_wh"] * 3600.0
        self.soc = d["soc0"]
        self.max_a = d["max_a"]
        self.taper_soc = d["taper_soc"]
        self.min_vbus = d["min_vbus_v"]
        self.reattach_s = d["reattach_s"]
        self.attached = False  # drawing current from the port
        self.retry_at = 0.0  # earliest time to try attaching again, s
        self.limit_a = 0.0  # allowed by the signalling it read
        self.i_a = 0.0  # current this period, A
        self.dropouts = 0
        self.scheme_read = None

    def plugged(self, t_s):
        return t_s >= self.arrive_s and (self.leave_s is None or t_s < self.leave_s)

    def update(self, t_s, port_live, vbus, dp, dm):
        """Once per period: attach, drop out, taper. Sets and returns this period's current."""
        if not (port_live and self.plugged(t_s)):
            self.attached = False
            self.i_a = 0.0
            return 0.0
        if self.attached and vbus < self.min_vbus:
            self.attached = False
            self.dropouts += 1
            self.retry_at = t_s + self.reattach_s
        if not self.attached and t_s >= self.retry_at and vbus >= self.min_vbus:
            self.attached = True
            self.scheme_read = device_reads(dp, dm, vbus)
            self.limit_a = ALLOWED_A[self.scheme_read]
        if not self.attached:
            self.i_a = 0.0
            return 0.0
        i = min(self.limit_a, self.max_a)
        if self.soc >= 1.0:
            i = 0.0
        elif self.soc > self.taper_soc:
            i *= max(0.03, (1.0 - self.soc) / (1.0 - self.taper_soc))
        self.i_a = i
        return i

    def take(self, e_j):
        """Energy delivered to the device this period."""
        self.soc += e_j / self.e_full_j
