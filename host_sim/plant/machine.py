# Permanent-magnet DC machine: E = K w, V_term = E - I R_a, torque K I (K_e = K_t in SI units).
# The averaged plant neglects the armature inductance: L_a / R_a is a few ms, far below the
# 50 ms control period, and a DC machine's rectified current has no slow ripple to resolve.
# The ngspice check keeps L_a and shows the mean values agree (tests/plant/test_spice.py).
import math

RPM_PER_RAD_S = 60.0 / (2.0 * math.pi)


def ke_si(ke_v_per_krpm):
    """Back-EMF constant in V s/rad (= N m/A) from volts per 1000 rpm."""
    return ke_v_per_krpm / (1000.0 / RPM_PER_RAD_S)


class Machine:
    def __init__(self, ke_v_per_krpm=16.0, ra_ohm=0.8, la_mh=1.5, inertia_kg_m2=2e-4,
                 viscous_nm_per_krpm=0.01, coulomb_nm=0.03):
        self.k = ke_si(ke_v_per_krpm)  # K_e = K_t, V s/rad
        self.ra = ra_ohm  # armature resistance, ohm
        self.la = la_mh / 1000.0  # armature inductance, H
        self.j = inertia_kg_m2  # rotor inertia, kg m^2
        self.b = viscous_nm_per_krpm / (1000.0 / RPM_PER_RAD_S)  # viscous friction, N m s/rad
        self.tc = coulomb_nm  # Coulomb friction, N m
        self.w_s = 1.0  # Coulomb friction ramps over +/- this speed (no chatter at rest), rad/s

    @classmethod
    def from_doc(cls, m):
        return cls(m["ke_v_per_krpm"], m["ra_ohm"], m["la_mh"], m["inertia_kg_m2"],
                   m["viscous_nm_per_krpm"], m["coulomb_nm"])

    def emf(self, w_rad_s):
        return self.k * w_rad_s

    def friction(self, w_rad_s):
        """(torque on the rotor, its derivative over w): viscous plus a smoothed Coulomb term."""
        x = w_rad_s / self.w_s
        if x > 1.0:
            return -self.b * w_rad_s - self.tc, -self.b
        if x < -1.0:
            return -self.b * w_rad_s + self.tc, -self.b
        return -self.b * w_rad_s - self.tc * x, -self.b - self.tc / self.w_s

    def into_resistor(self, w_rad_s, r_load_ohm):
        """Steady state with a resistor on the terminals: (I, V_term, P_out, P_converted)."""
        e = self.emf(w_rad_s)
        i = e / (self.ra + r_load_ohm)
        v = e - i * self.ra
        return i, v, v * i, e * i
