# Supercap bank: series EDLC cells with capacitance and leakage spread drawn per seed, an ESR
# per cell, a passive balancing resistor across each cell and a bleeder per cell switched by
# the controller's bal_mask bit i. The bank current is common to every cell; leakage,
# balancing and bleeders are per cell, so cells drift apart and the bleeders pull them back.
# The bank current changes the sum of the cell voltages every sub-step (one float); the per-
# cell split and the parallel paths are applied once per control period (they are slow:
# R x C is minutes to hours for the balancing and leakage paths).
import math


class Bank:
    def __init__(self, s, rng, rating_v):
        n = s["cells"]
        self.n = n
        self.present = s["present"]
        self.rating_v = rating_v
        cf = s["cell_f"]
        sp = s["cap_spread_pct"] / 100.0
        lp = s["leak_spread_pct"] / 100.0
        # spreads: gaussian, truncated at 3 sigma so no cell comes out absurd
        zc = [max(-3.0, min(3.0, float(z))) for z in rng.standard_normal(n)]
        zl = [max(-3.0, min(3.0, float(z))) for z in rng.standard_normal(n)]
        self.c = [cf * (1.0 + sp * z) for z in zc]  # cell capacitance, F
        leak_a = s["leak_ua"] * 1e-6
        # leakage as a resistance giving leak_ua at 2.7 V (a usual datasheet point)
        self.g_leak = [max(0.0, leak_a * (1.0 + lp * z)) / 2.7 for z in zl]  # S
        self.g_bal = 1.0 / s["balance_ohm"]
        self.g_bleed = 1.0 / s["bleeder_ohm"]
        self.esr = s["esr_mohm"] / 1000.0 * n  # bank ESR, ohm
        self.v = [s["v0_per_cell"]] * n  # cell voltages, V
        self.inv_c_sum = sum(1.0 / c for c in self.c)  # d(sum v)/dQ, V/C
        self.c_bank = 1.0 / self.inv_c_sum  # series capacitance, F
        self.v_sum = sum(self.v)  # bank voltage behind the ESR, V
        self.q_period = 0.0  # charge into the bank this period, C
        self.e0 = self.energy_j()
        self.loss_j = 0.0  # ESR + leakage + balancing + bleeders, J

    def energy_j(self):
        return sum(0.5 * c * v * v for c, v in zip(self.c, self.v))

    def substep(self, i_a, h):
        """Bank current i_a (+ charging) for h seconds: ESR loss, bank voltage."""
        q = i_a * h
        self.q_period += q
        self.v_sum += q * self.inv_c_sum
        self.loss_j += i_a * i_a * self.esr * h

    def _decay(self, dt_s):
        """Per-cell decay factors over dt_s through the parallel paths, bleeder off and on."""
        off = [math.exp(-(gl + self.g_bal) * dt_s / c) for gl, c in zip(self.g_leak, self.c)]
        on = [math.exp(-(gl + self.g_bal + self.g_bleed) * dt_s / c)
              for gl, c in zip(self.g_leak, self.c)]
        self._dt = dt_s
        self._f = (off, on)
        self._inv_c = [1.0 / c for c in self.c]

    def end_period(self, dt_s, bal_mask):
        """Split the period's charge over the cells; leakage, balancing and bleeders."""
        if dt_s != getattr(self, "_dt", None):
            self._decay(dt_s)
        q = self.q_period
        self.q_period = 0.0
        tot = 0.0
        loss = 0.0
        off, on = self._f
        v = self.v
        c = self.c
        ic = self._inv_c
        for k in range(self.n):
            v0 = v[k] + q * ic[k]
            # exact decay through the parallel paths over the period
            v1 = v0 * (on[k] if bal_mask >> k & 1 else off[k])
            loss += c[k] * (v0 * v0 - v1 * v1)
            v[k] = v1
            tot += v1
        self.v_sum = tot
        self.loss_j += 0.5 * loss

    def cell_v_max(self):
        return max(self.v) if self.n else 0.0
