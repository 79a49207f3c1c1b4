# Lead-acid block: open-circuit voltage over state of charge, an ohmic resistance, one RC
# polarisation branch, the overcharge (gassing) side reaction and a lumped thermal model.
#
#   terminal V = OCV(soc) + v_p + I R0          (I: + into the battery)
#   I = I_main + I_gas                          main reaction stores charge, gassing does not
#   C_p dv_p/dt = I_main - v_p / R_p
#   I_gas = i0 C exp((V_int/cell - onset) / slope) 2^((T - 25) / doubling), V_int = OCV + v_p
#
# R_p grows as the plates fill (rp_full / (1 - soc)), so at a held absorption voltage the main
# current falls towards zero and the gassing current (small, growing with voltage and
# temperature) is what remains: the taper the charger's tail-current rule watches for.
# OCV: a cubic fitted to the BCI (Battery Council International) open-circuit voltage table
# (flooded, rested, 26.7 C, as commonly reproduced), scaled by cells / 6; tests/plant/test_parts.py
# holds it within 0.01 V of the table.
# Energy: stored = integral of OCV x I_main (chemical) + 1/2 C_p v_p^2; every other watt is
# heat (R0, R_p, gassing) that also warms the block.
import math

# BCI table (as commonly reproduced): state of charge -> 12 V block OCV, flooded, rested, 26.7 C
BCI_OCV = ((0.0, 11.89), (0.25, 12.06), (0.5, 12.24), (0.75, 12.45), (1.0, 12.65))


def _fit_cubic(points):
    """Least-squares cubic through (x, y) points (plain Python: normal equations, 4 x 4)."""
    a = [[sum(x ** (i + j) for x, _ in points) for j in range(4)] for i in range(4)]
    b = [sum(y * x ** i for x, y in points) for i in range(4)]
    n = 4
    for c in range(n):  # Gauss-Jordan with partial pivoting
        p = max(range(c, n), key=lambda r: abs(a[r][c]))
        a[c], a[p] = a[p], a[c]
        b[c], b[p] = b[p], b[c]
        for r in range(n):
            if r != c:
                f = a[r][c] / a[c][c]
                for k in range(c, n):
                    a[r][k] -= f * a[c][k]
                b[r] -= f * b[c]
    return tuple(b[i] / a[i][i] for i in range(n))


OCV_COEF = _fit_cubic(BCI_OCV)  # block volts = c0 + c1 s + c2 s^2 + c3 s^3
R_TEMP_K = 0.028  # resistances x exp(-k (T - 25)): about x2 from 25 C to 0 C (from memory)


def ocv_block(soc):
    """Open-circuit voltage of a 6-cell block at a state of charge (clamped to 0..1), V."""
    s = 0.0 if soc < 0.0 else (1.0 if soc > 1.0 else soc)
    c0, c1, c2, c3 = OCV_COEF
    return c0 + s * (c1 + s * (c2 + s * c3))


class Battery:
    def __init__(self, b, temp_c=None):
        self.cells = b["cells"]
        self.chem = b["chemistry"]
        self.cap_ah = b["capacity_ah"]
        self.q_c = b["capacity_ah"] * 3600.0  # capacity, coulomb
        self.scale = self.cells / 6.0  # block volts per 12 V block
        self.r0_25 = b["r0_mohm_ah"] / 1000.0 / self.cap_ah
        self.rp_base = b["rp_base_ohm_ah"] / self.cap_ah
        self.rp_full = b["rp_full_ohm_ah"] / self.cap_ah
        self.rp_dis = b["rp_dis_ohm_ah"] / self.cap_ah
        self.cp = b["cp_f_per_ah"] * self.cap_ah
        self.gas_i0 = b["gas_i0_ma_per_ah"] / 1000.0 * self.cap_ah
        self.gas_onset = b["gas_onset_v_per_cell"]
        self.gas_slope = b["gas_slope_mv"] / 1000.0
        self.gas_dbl = b["gas_doubling_c"]
        self.heat_cap = b["heat_j_per_k_ah"] * self.cap_ah  # J/K
        self.r_th = b["thermal_k_per_w"]  # K/W
        self.ambient_c = b["ambient_c"]
        # state
        self.soc = b["soc0"]  # state of charge, 0..1
        self.vp = 0.0  # polarisation voltage, V
        self.temp_c = b["temp0_c"] if temp_c is None else temp_c
        self.connected = b["present"]  # wired to the converter and the discharge switch
        # per-period cache (refresh())
        self.ocv = 0.0
        self.r0 = 0.0
        self.rp = 1.0
        self.i_gas = 0.0
        self.e_int = 0.0  # OCV + v_p
        # energy books, J
        self.stored_j = 0.0  # chemical: integral OCV x I_main
        self.vp_e0 = 0.0  # 1/2 C_p v_p^2 at the start
        self.loss_j = 0.0
        self.heat_j = 0.0  # heat this period (for the thermal model)
        self.refresh()

    def refresh(self):
        """Recompute the slow quantities from the state (once per control period)."""
        s = self.soc
        self.ocv = ocv_block(s) * self.scale
        kt = math.exp(-R_TEMP_K * (self.temp_c - 25.0))
        self.r0 = self.r0_25 * kt * (1.0 + 0.6 * (1.0 - s) ** 2)
        if self.vp >= 0.0:
            f = 1.0 - s
            if f < 1e-6:  # acceptance -> 0 at full: the charge current goes to gassing
                f = 1e-6
            self.rp = (self.rp_base + self.rp_full / f) * kt
        else:
            self.rp = self.rp_dis * kt * (1.0 + 0.05 / (s + 0.02))
        self.e_int = self.ocv + self.vp
        v_cell = self.e_int / self.cells
        x = (v_cell - self.gas_onset) / self.gas_slope
        if x > 20.0:
            x = 20.0
        self.i_gas = self.gas_i0 * math.exp(x) * 2.0 ** ((self.temp_c - 25.0) / self.gas_dbl)

    def terminal_v(self, i_a):
        return self.e_int + i_a * self.r0

    def substep(self, i_a, h):
        """Advance by h seconds with terminal current i_a (+ into the battery)."""
        i_gas = self.i_gas
        i_main = i_a - i_gas
        vp0 = self.vp
        rp = self.rp
        tau = rp * self.cp
        vinf = i_main * rp
        vp1 = vinf + (vp0 - vinf) * math.exp(-h / tau)
        self.vp = vp1
        # A full plate stores nothing more. The current it cannot accept still crosses the
        # interface: it charges the polarisation branch above (that is what lifts a full cell to
        # its gassing voltage, where the side reaction takes over the current), and at the OCV
        # element it feeds the overcharge reaction, whose OCV x I is heat. Its v_p share is
        # already in the branch's books (1/2 C_p v_p^2 and the R_p heat): booking it again at
        # OCV + v_p counted it twice (+4 % on the books after 10 min at 1.5 A from full).
        room = (1.0 - self.soc) * self.q_c / h
        surplus = 0.0
        if i_main > room:
            surplus = i_main - room
            i_main = room
        self.soc += i_main * h / self.q_c
        ocv = self.ocv
        self.stored_j += ocv * i_main * h
        q = (i_a * i_a * self.r0 + i_gas * (ocv + vp0) + surplus * ocv
             + 0.5 * (vp0 * vp0 + vp1 * vp1) / rp) * h
        self.loss_j += q
        self.heat_j += q
        self.e_int = ocv + vp1

    def end_period(self, dt_s):
        """Thermal model: the period's heat in, conduction to ambient out."""
        t = self.temp_c
        self.temp_c = t + (self.heat_j - (t - self.ambient_c) / self.r_th * dt_s) / self.heat_cap
        self.heat_j = 0.0
        self.refresh()

    def stored_total_j(self):
        """Energy stored since the start: chemical plus polarisation capacitor."""
        return self.stored_j + 0.5 * self.cp * self.vp * self.vp - self.vp_e0

    def hold_voltage(self, v_term, h):
        """One step at a held terminal voltage (a charger in absorption) at a fixed
        temperature; returns the current (A). For checks of the electrochemistry alone."""
        i = (v_term - self.e_int) / self.r0
        self.substep(i, h)
        self.refresh()
        return i
