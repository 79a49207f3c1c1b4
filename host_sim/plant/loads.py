# Battery-side loads behind the discharge switch: resistive, an LED string with a series
# resistor, and a filament lamp whose resistance follows its temperature (cold about a tenth
# of hot, so it draws a surge when switched on) with a first-order thermal lag. Evaluated once
# per control period at the battery voltage of the previous period: they are slow next to
# the 50 ms period except the filament's inrush, which the exact exponential update keeps.
import math


class Load:
    def __init__(self, d):
        self.name = d["name"]
        self.kind = d["kind"]
        self.ohm = d["ohm"]
        self.led_v = d["led_v"]
        self.spans = d["on"]
        if self.kind == "filament":
            self.r_hot = d["rated_v"] ** 2 / d["rated_w"]
            self.r_cold = self.r_hot * d["cold_ratio"]
            self.tau = d["tau_s"]
            self.x = 0.0  # filament heat state: 0 cold .. 1 at rated power
            self.p_rated = d["rated_w"]
        self.i_a = 0.0

    def on_at(self, t_s):
        if not self.spans:
            return True
        for a, b in self.spans:
            if a <= t_s < b:
                return True
        return False

    def current(self, t_s, v, live, dt_s):
        """Current drawn this period at voltage v (A); live: switch closed and powered."""
        on = live and self.on_at(t_s)
        k = self.kind
        if k == "resistive":
            i = v / self.ohm if on else 0.0
        elif k == "led":
            i = (v - self.led_v) / self.ohm if on and v > self.led_v else 0.0
        else:
            r = self.r_cold + (self.r_hot - self.r_cold) * min(1.0, self.x)
            i = v / r if on else 0.0
            # heat state follows the electrical power (exact first-order step)
            target = (v * i) / self.p_rated
            self.x = target + (self.x - target) * math.exp(-dt_s / self.tau)
        self.i_a = i
        return i
