# Bridge diode: the SPICE diode DC curve I = IS (exp(Vj / (N Vt)) - 1) with series resistance
# RS, so the plant and the ngspice check (host_sim/spice.py) use one curve. The defaults are a
# 1 A, 40 V Schottky of the 1N5817-1N5819 class; tests/plant/test_parts.py holds the model
# under those datasheets' maximum forward voltages.
import math

K_B_OVER_Q = 8.617333262e-5  # Boltzmann constant over the electron charge, V/K


def thermal_v(temp_c):
    """Thermal voltage kT/q at a junction temperature, V."""
    return K_B_OVER_Q * (temp_c + 273.15)


class Diode:
    def __init__(self, is_a=1e-6, n=1.05, rs_ohm=0.06, temp_c=25.0):
        self.is_a = is_a  # saturation current, A (SPICE IS)
        self.n = n  # emission coefficient (SPICE N)
        self.rs_ohm = rs_ohm  # series resistance, ohm (SPICE RS)
        self.temp_c = temp_c
        self.nvt = n * thermal_v(temp_c)  # N x Vt, V

    @classmethod
    def from_doc(cls, r):
        return cls(r["is_a"], r["n"], r["rs_ohm"], r["temp_c"])

    def vf(self, i_a):
        """Forward voltage at a forward current (i_a >= 0), V."""
        return self.nvt * math.log1p(i_a / self.is_a) + self.rs_ohm * i_a

    def dvf(self, i_a):
        """Incremental resistance dV/dI at i_a, ohm."""
        return self.nvt / (self.is_a + i_a) + self.rs_ohm

    def bridge_drop(self, i_a):
        """Full-wave bridge: two diodes conduct in series whichever way the machine turns."""
        return 2.0 * self.vf(i_a)

    def spice_model(self, name="DBR"):
        """The same curve as a SPICE .model line (no junction capacitance, no breakdown)."""
        return ".model %s D(IS=%.6g N=%.6g RS=%.6g)" % (name, self.is_a, self.n, self.rs_ohm)
