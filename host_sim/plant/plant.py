# The plant: every part tied together at the DC bus, advanced one control period at a time.
#
# Solver (why it looks like this): the bus capacitor is small (about 1 mF) next to the 50 ms
# period while the loads on it are stiff (a battery behind a 0.15 ohm converter is almost a
# voltage source), so an explicit bus would need microsecond steps. Instead each sub-step
# (at most solver.max_substep_ms, 25 ms by default: two per 50 ms period) solves the bus node
# as one algebraic equation by safeguarded Newton iterations (backward Euler for the bus
# capacitor, which is stable at any step):
#     C (V - V0) / h + I_loads(V) - I_discharge(V) - I_bridge(V) = 0
# While the bridge conducts the unknown is the machine current i instead of V (then
# V = E - i R_a - 2 V_F(i) is explicit and no diode equation needs inverting); when it blocks,
# V itself. The slow states move explicitly: rotor speed (semi-implicitly: the torque's
# derivative over speed, including the electrical load seen through the bus solution, is in
# the denominator, so a light rotor on a stiff load cannot go unstable), battery state of
# charge and polarisation (exact exponential step), supercap cell voltages, temperatures and
# the USB devices once per period.
# The armature inductance is neglected (L_a / R_a of a few ms, no slow ripple to resolve).
# Averaged converters: duty d = duty / 10000, u = d V_bus, i = max(0, (u - V_store)/R_out),
# bus current u i / (eta V_bus); the max duty (0.95) keeps u below a store that holds the bus
# up through its discharge diode, so no energy circulates.
#
# Energy ledger: every flow is booked where it happens, the stores are read from their
# states (1/2 J w^2, 1/2 C V^2, the battery's chemical integral and polarisation capacitor,
# the supercap cells). The backward Euler bus step moves the charge C (V - V0) through the
# node at the step's end voltage V, but the capacitor stores it at the mean (V0 + V) / 2: the
# difference, 1/2 C (V - V0)^2 per sub-step, is the loss of the resistive paths while the bus
# charges or discharges inside the sub-step (exact when that RC transient ends within the
# step, as at a jump onto the supercap's diode) and is booked as loss_bus_step_j, so the bus
# node balances by construction. What remains of the balance error is the rotor's semi-
# implicit step (and the Newton tolerance) and stays far below 0.5 % (tests/plant/test_ledger.py).
import math

import numpy as np

from host_sim.plant import events as _events
from host_sim.plant.battery import Battery
from host_sim.plant.diode import Diode
from host_sim.plant.drive import Hydro, Wind, ideal_table, make_drive
from host_sim.plant.loads import Load
from host_sim.plant.machine import RPM_PER_RAD_S, Machine
from host_sim.plant.sensors import Sensors
from host_sim.plant.supercap import Bank
from host_sim.plant.usb import Device, Network

NAN = float("nan")
LEDGER_KEYS = ("drive_in_j", "surge_in_j", "batt_stored_j", "cap_stored_j", "buscap_stored_j",
               "rotor_stored_j", "usb_out_j", "loads_out_j", "loss_winding_j",
               "loss_friction_j", "loss_gear_j", "loss_diodes_j", "loss_clamp_j",
               "loss_conv_j", "loss_dump_j", "loss_bleed_j", "loss_batt_j", "loss_cap_j",
               "loss_bus_step_j")
_TOL_V = 1e-7  # bus solution tolerance, V
_TOL_I = 1e-7  # machine current tolerance, A
_MAX_IT = 40


class Plant:
    def __init__(self, sc):
        doc = sc.doc
        p = sc.profile
        self.sc = sc
        self.p = p
        rng = np.random.default_rng(sc.seed)
        # draw order is fixed (drive series, bank spread, network, USB setpoint, sensors) so a
        # seed always gives the same plant
        self.mach = Machine.from_doc(doc["machine"])
        self.diode = Diode.from_doc(doc["rectifier"])
        g = doc["gear"]
        self.ratio = g["ratio"]
        self.eta_g = g["efficiency"]
        self.drive = make_drive(doc["drive"], rng, sc.duration_s)
        self.j = self.mach.j + self.drive.inertia / self.ratio ** 2  # at the machine, kg m^2
        b = doc["bus"]
        self.c_bus = b["capacitance_uf"] * 1e-6
        self.knee = b["clamp_knee_v"]
        self.alpha = b["clamp_alpha"]
        self.r_dump = b["dump_ohm"]
        self.g_bleed = 1.0 / b["bleed_ohm"]
        cv = doc["converters"]
        self.cb = cv["batt"]
        self.cc = cv["cap"]
        self.v_or = cv["or_diode_v"]
        self.r_or = cv["or_diode_ohm"]
        self.batt = Battery(doc["battery"])
        self.batt.connected = doc["battery"]["present"]
        sd = doc["supercap"]
        self.bank = Bank(sd, rng, p.cap_cell_rating_mv / 1000.0)
        u = doc["usb"]
        self.net = Network(u["network"], rng)
        uc = u["converter"]
        self.usb_set = uc["setpoint_v"] * (1.0 + uc["setpoint_tol_pct"] / 100.0
                                           * float(rng.uniform(-1.0, 1.0)))
        self.usb_r = uc["r_out_ohm"]
        self.usb_do = uc["dropout_v"]
        self.usb_min = uc["in_min_v"]
        self.usb_eta = uc["efficiency"]
        self.usb_iq = uc["quiescent_a"]
        self.devices = [Device(d) for d in u["devices"]]
        self.loads = [Load(d) for d in doc["loads"]]
        self.sensors = Sensors(doc["sensors"], p, rng)
        self.events = list(doc["events"])
        self.h_max = doc["solver"]["max_substep_ms"] / 1000.0
        # A light rotor on a stiff electrical load: the rotor step is second order (midpoint)
        # only while h K^2 dI/dE / J <= 2, and dI/dE is at most 1 / R_a, so sub-steps no longer
        # than 2 J R_a / K^2 keep it there (a geared crank: about 12 ms; without this its slight
        # hunting at a steady speed built a 0.5 % ledger error over a minute). Half that bound:
        # at the bound itself a weak crank hunting for three minutes with both converters near
        # the top duty still built 0.56 % (fuzz seed 89, example 1192; 0.13 % at half, the
        # error second order in h); it costs geared cranks up to twice the sub-steps
        self.h_rotor = self.j * self.mach.ra / (self.mach.k * self.mach.k)
        if isinstance(self.drive, (Wind, Hydro)):
            s_max = 40.0 if isinstance(self.drive, Wind) else 2.0 * max(
                [self.drive.flow] + [q for _, q in self.drive.points])
            self.drive._ideal = ideal_table(self.drive, self.mach, self.ratio, self.eta_g, s_max)
        # state
        self.t = 0.0  # s
        self.w = 0.0  # machine shaft speed, rad/s
        if self.drive.speed_mode:
            self.w = self.drive.speed_at(0.0) * self.ratio
        self.dw_period = 0.0  # change of the machine speed over the last period, rad/s
        self.dw_sub = 0.0  # ... over the last sub-step (the EMF predictor), rad/s
        self.v = b["initial_v"]  # bus, V
        self.i_src = 0.0  # bridge current into the bus, A
        self.v_mean = self.v  # bus voltage, mean over the last period, V
        self.i_src_mean = 0.0  # bridge current, mean over the last period, A
        self.usb_run = False  # 5 V converter running
        self.vbus = 0.0  # VBUS at the port, V
        self.usb_a = 0.0  # current to the devices, A
        self.probe = 0  # D+ probe state at the last step
        self.batt_a = 0.0  # battery terminal current, + in, A
        self.batt_v = self.batt.e_int if self.batt.connected else 0.0
        self.float_v = 0.0  # converter output with no battery on it, V
        self.cap_a = 0.0
        self.cap_v = self.bank.v_sum
        self.loads_w = 0.0
        self.dump_w = 0.0
        self._loads_last = (0.0, 0.0, 0.0)  # last period's battery, supercap and dump duties
        self.p_in_w = 0.0
        self.p_elec_w = 0.0
        self.surges = []  # active bus surges: (t0, t1, v, ohm, energy_j or None)
        self.eq_until = -1.0
        self.reset_until = -1.0
        self._eq_events = any(e["kind"] == "equalize_request" for e in self.events)
        self._reset_events = any(e["kind"] == "reset_request" for e in self.events)
        self._ev_i = 0
        # ledger
        self.led = dict.fromkeys(LEDGER_KEYS, 0.0)
        self.w0 = self.w
        self.v0 = self.v
        self.last_bal_mask = 0

    # ---- the one-period step ----------------------------------------------------------------
    # step() = _begin() (events, drive, commands, loads, USB devices: per scenario), the sub-step
    # loop (the bus and the rotor), _end() (the slow states and the books). The batch plant
    # (batch.py) runs the same _begin and _end around its vectorised sub-step loop.
    def _begin(self, cmds, dt_s):
        """Per-period work before the sub-steps; returns (d_b_eff, d_c, g_dump, batt_out,
        i_usb, i_bl, n_sub, sv, sg, sp)."""
        t = self.t
        ev = self.events
        while self._ev_i < len(ev) and ev[self._ev_i]["t_s"] <= t + 1e-9:
            _events.apply(self, ev[self._ev_i], t)
            self._ev_i += 1
        self.drive.begin_period(t, dt_s)
        batt = self.batt
        bank = self.bank

        # commands (duties clipped to what the hardware can do)
        d_b = _duty(cmds.batt_duty, self.cb["max_duty"])
        d_c = _duty(cmds.cap_duty, self.cc["max_duty"])
        g_dump = _duty(cmds.dump_duty, 1.0) / self.r_dump
        conn = batt.connected
        if not conn:
            d_b_eff = 0.0
        else:
            d_b_eff = d_b
        if not bank.present:
            d_c = 0.0
        batt_out = bool(cmds.batt_out) and conn
        self.last_bal_mask = cmds.bal_mask
        self.probe = cmds.usb_probe

        # battery-side loads: explicit at the previous terminal voltage
        i_bl = 0.0
        lw = 0.0
        vt_prev = self.batt_v
        for ld in self.loads:
            i = ld.current(t, vt_prev, batt_out, dt_s)
            i_bl += i
            lw += i * vt_prev
        self.loads_w = lw

        # USB converter and devices (per period)
        v_prev = self.v
        if cmds.usb_conv:
            thr = self.usb_min - (0.2 if self.usb_run else 0.0)
            run = v_prev >= thr
        else:
            run = False
        self.usb_run = run
        port = run and bool(cmds.usb_on)
        v_open = min(self.usb_set, v_prev - self.usb_do) if run else 0.0
        if v_open < 0.0:
            v_open = 0.0
        i_usb = 0.0
        if self.devices:
            vb_dev = self.vbus if (port and self.usb_a > 0) else v_open
            dp, dm = self.net.lines(v_open, 0)
            for dv in self.devices:
                i_usb += dv.update(t, port, vb_dev, dp, dm)
        if not port:
            i_usb = 0.0
        self._d_b = d_b
        self._i_usb = i_usb

        # Sub-steps: h_max normally; up to 8 times finer while the rotor speed changes fast
        # (spin-up, braking, reversal), where the rotor's first-order coupling error would
        # otherwise show in the ledger
        h_max = self.h_max
        if self.h_rotor < h_max:
            h_max = max(self.h_rotor, h_max / 8.0)
        fast = self.fast()
        if fast > 1.0:
            h_max /= min(8.0, 1.0 + fast)
        # a load that steps this period (the dump switched, a converter cut or started): the
        # rotor's linearised coupling carries last period's slope across the step, so take
        # that period in finer sub-steps (a controller toggling the dump load every few periods
        # built a 2.6 % ledger error over 20 s in 20 ms steps)
        d_dump = g_dump * self.r_dump
        lb, lc, ld = self._loads_last
        self._loads_last = (d_b_eff, d_c, d_dump)
        if abs(d_b_eff - lb) + abs(d_c - lc) + abs(d_dump - ld) > 0.25:
            h_max = max(h_max / 4.0, self.h_max / 16.0)
        n_sub = int(math.ceil(dt_s / h_max - 1e-9))
        if n_sub < 1:
            n_sub = 1
        sv, sg, sp = self._surges(t, dt_s)
        return d_b_eff, d_c, g_dump, batt_out, i_usb, i_bl, n_sub, sv, sg, sp

    def fast(self):
        """How fast the rotor speed changed over the last period; above 1 the next period's
        sub-steps are refined."""
        return abs(self.dw_period) / (0.02 * abs(self.w) + 0.5)

    def _surges(self, t, dt_s):
        """Surge sources active this period, averaged over it: (v, g, power)."""
        sv = 0.0
        sg = 0.0
        sp = 0.0
        if self.surges:
            keep = []
            for s in self.surges:
                t0, t1, sv_, so, ej = s
                ov = min(t + dt_s, t1) - max(t, t0)
                if ov > 0:
                    f = ov / dt_s  # averaged over the period
                    if ej is not None:
                        sp += ej / (t1 - t0) * f
                    else:
                        sv = max(sv, sv_)
                        sg += f / so
                if t1 > t + dt_s:
                    keep.append(s)
            self.surges = keep
        return sv, sg, sp

    def step(self, cmds, dt_s):
        d_b_eff, d_c, g_dump, batt_out, i_usb, i_bl, n_sub, sv, sg, sp = self._begin(cmds, dt_s)
        t = self.t
        drive = self.drive
        batt = self.batt
        bank = self.bank
        mach = self.mach
        diode = self.diode
        conn = batt.connected
        run = self.usb_run
        # per-period constants of the bus equation
        h = dt_s / n_sub
        cbh = self.c_bus / h
        g_lin = g_dump + self.g_bleed
        knee = self.knee
        alpha = self.alpha
        v_cl = 0.6 * knee
        rbt = self.cb["r_out_ohm"] + batt.r0  # battery converter output + battery ohmic
        ieb = 1.0 / self.cb["efficiency"]
        rct = self.cc["r_out_ohm"] + bank.esr
        iec = 1.0 / self.cc["efficiency"]
        v_or = self.v_or
        rbd = self.r_or + batt.r0
        rcd = self.r_or + bank.esr
        cap_on = bank.present
        usb_vo = self.usb_set - self.usb_r * i_usb
        usb_do = self.usb_do
        iu = i_usb / self.usb_eta
        iq = self.usb_iq if run else 0.0
        k = mach.k
        ra = mach.ra
        nvt = diode.nvt
        i_s = diode.is_a
        rs = diode.rs_ohm
        rsum = ra + 2.0 * rs
        ratio = self.ratio
        eta_g = self.eta_g
        j = self.j
        eb = batt.e_int - batt.r0 * i_bl
        vc = bank.v_sum

        def bus_f(V, V0):
            """Residual of the bus node at V (A) and its derivative (S)."""
            f = cbh * (V - V0) + g_lin * V
            df = cbh + g_lin
            if V > v_cl:
                ic = 1e-3 * (V / knee) ** alpha
                f += ic
                df += alpha * ic / V
            if d_b_eff > 0.0:
                x = d_b_eff * V - eb
                if x > 0.0:
                    f += d_b_eff * x / rbt * ieb
                    df += d_b_eff * d_b_eff / rbt * ieb
            if d_c > 0.0:
                x = d_c * V - vc
                if x > 0.0:
                    f += d_c * x / rct * iec
                    df += d_c * d_c / rct * iec
            if batt_out:
                x = eb - v_or - V
                if x > 0.0:
                    f -= x / rbd
                    df += 1.0 / rbd
            if cap_on:
                x = vc - v_or - V
                if x > 0.0:
                    f -= x / rcd
                    df += 1.0 / rcd
            if run:
                f += iq
                if iu > 0.0 and V > 0.1:
                    vd = V - usb_do
                    if vd < usb_vo:
                        if vd > 0.0:
                            f += vd * iu / V
                            df += iu * usb_do / (V * V)
                    else:
                        pw = usb_vo * iu
                        f += pw / V
                        df -= pw / (V * V)
            if sg > 0.0 and V < sv:
                f -= (sv - V) * sg
                df += sg
            if sp > 0.0:
                f -= sp / (V if V > 1.0 else 1.0)
            return f, df

        e_drive = e_gear = e_fric = e_wind = e_dio = e_clamp = e_conv = e_dump = 0.0
        e_bleed = e_usb = e_loads = e_surge = e_elec = e_be = 0.0
        v_sum = i_sum = 0.0  # bus voltage and bridge current summed over the sub-steps
        w = self.w
        V = self.v
        i_a = self.i_src
        speed_mode = drive.speed_mode
        tf_fn = mach.friction
        dw_sub = self.dw_sub
        vt = self.batt_v
        i_bt = 0.0
        i_cn = 0.0
        vct = vc
        for sub in range(n_sub):
            V0 = V
            ts = t + sub * h
            # ---- bus solve ----
            # EMF at the predicted mid-step speed (the last sub-step's change, or the scripted
            # speed): the electrical and mechanical sides then meet at the same point and the
            # coupling error is second order
            if speed_mode:
                dw_p = drive.speed_at(ts + h) * ratio - w
            else:
                dw_p = dw_sub
            wp = w + 0.5 * dw_p
            E = k * wp
            ea = E if E >= 0.0 else -E
            conducting = False
            if ea > 1e-3:
                fE = bus_f(ea, V0)[0]
                conducting = fE > 0.0
            if conducting:
                lo = 0.0
                hi = ea / ra
                i = i_a if 0.0 < i_a < hi else 0.5 * hi * 1e-3
                didE = 0.0
                for _ in range(_MAX_IT):
                    vd = nvt * math.log1p(i / i_s) + rs * i
                    V = ea - i * ra - 2.0 * vd
                    f, df = bus_f(V, V0)
                    gg = f - i
                    if gg > 0.0:
                        lo = i
                    else:
                        hi = i
                    rp = rsum + 2.0 * nvt / (i_s + i)
                    dg = -df * rp - 1.0
                    i_new = i - gg / dg
                    if not lo < i_new < hi:
                        i_new = 0.5 * (lo + hi)
                    if abs(i_new - i) < _TOL_I * (1.0 + i):
                        i = i_new
                        break
                    i = i_new
                # the last Newton step moved i by < 1e-7 relative: V from the final i, the
                # derivative from the last evaluation (no extra residual call)
                vd = nvt * math.log1p(i / i_s) + rs * i
                V = ea - i * ra - 2.0 * vd
                didE = df / (1.0 + df * rp)
                i_a = i
            else:
                i_a = 0.0
                didE = 0.0
                vd = 0.0
                lo = ea if ea > 1e-3 else 0.0
                hi = max(V0, ea, eb, vc, sv) + 1.0
                if sp > 0.0:  # a power source: make sure the bracket holds the root
                    while bus_f(hi, V0)[0] <= 0.0 and hi < 1e4:
                        hi *= 2.0
                x = V0 if lo < V0 < hi else 0.5 * (lo + hi)
                for _ in range(_MAX_IT):
                    f, df = bus_f(x, V0)
                    if f > 0.0:
                        hi = x
                    else:
                        lo = x
                    x_new = x - f / df if df > 0.0 else 0.5 * (lo + hi)
                    if not lo <= x_new <= hi:
                        x_new = 0.5 * (lo + hi)
                    if abs(x_new - x) < _TOL_V:
                        x = x_new
                        break
                    x = x_new
                V = x
            # ---- flows at the solution ----
            e_be += 0.5 * self.c_bus * (V - V0) * (V - V0)
            if V > v_cl:
                i_cl = 1e-3 * (V / knee) ** alpha
                e_clamp += i_cl * V * h
            e_dump += g_dump * V * V * h
            e_bleed += self.g_bleed * V * V * h
            # battery node
            i_bo = 0.0
            i_bd = 0.0
            if d_b_eff > 0.0:
                x = d_b_eff * V - eb
                if x > 0.0:
                    i_bo = x / rbt
            if batt_out:
                x = eb - v_or - V
                if x > 0.0:
                    i_bd = x / rbd
            if conn:
                i_bt = i_bo - i_bd - i_bl
                vt = batt.e_int + batt.r0 * i_bt
                e_conv += (d_b_eff * i_bo * ieb * V - vt * i_bo) * h
                e_dio += (vt - V) * i_bd * h
                e_loads += vt * i_bl * h
                batt.substep(i_bt, h)
                eb = batt.e_int - batt.r0 * i_bl
            # supercap node
            i_co = 0.0
            i_cd = 0.0
            if d_c > 0.0:
                x = d_c * V - vc
                if x > 0.0:
                    i_co = x / rct
            if cap_on:
                x = vc - v_or - V
                if x > 0.0:
                    i_cd = x / rcd
                i_cn = i_co - i_cd
                vct = vc + bank.esr * i_cn
                e_conv += (d_c * i_co * iec * V - vct * i_co) * h
                e_dio += (vct - V) * i_cd * h
                bank.substep(i_cn, h)
                vc = bank.v_sum
            # USB
            if run:
                vo = V - usb_do
                if vo > usb_vo:
                    vo = usb_vo
                if vo < 0.0:
                    vo = 0.0
                p_in = iq * V + (vo * iu if V > 0.1 else 0.0)
                e_usb += vo * i_usb * h
                e_conv += (p_in - vo * i_usb) * h
                vbus = vo
            else:
                vbus = 0.0
            # surges
            if sg > 0.0 and V < sv:
                e_surge += (sv - V) * sg * V * h
            if sp > 0.0:
                e_surge += sp / (V if V > 1.0 else 1.0) * V * h
            # machine and bridge
            v_sum += V
            i_sum += i_a
            e_elec += ea * i_a * h
            e_wind += i_a * i_a * ra * h
            e_dio += 2.0 * vd * i_a * h
            # ---- rotor ----
            # electromagnetic torque at wp, linearised about it: T(w + th dw) = tem - c (th dw
            # - dw_p / 2), c = K^2 dI/dE. th = 1/2 (midpoint) unless the rotor is stiff against
            # its electrical load (h c / J > 2), where th = 1 - J / (h c) damps that mode in
            # one step instead of letting it ring. Drive and friction torques are taken at the
            # step's end (linearised), which keeps a light rotor stable on a stiff load.
            sgn = 1.0 if wp >= 0.0 else -1.0
            tem = -k * i_a * sgn
            c_em = k * k * didE
            tf, dtf = tf_fn(w)
            if speed_mode:
                dw = dw_p
                tm_e = j * dw / h - (tf + dtf * dw) - tem
                wm = w + 0.5 * dw
                pm = tm_e * wm * h  # machine-side shaft energy from the gear
                pd = pm / eta_g if pm >= 0.0 else pm * eta_g
            else:
                wd = w / ratio
                td, dtd = drive.torque(wd)
                if td * wd >= 0.0:
                    kg = eta_g / ratio
                else:
                    kg = 1.0 / (eta_g * ratio)
                tm = td * kg
                dtm = dtd * kg / ratio
                a = h * c_em / j
                th = 0.5 if a <= 2.0 else 1.0 - 1.0 / a
                dw = (h * (tm + tf + tem + 0.5 * c_em * dw_p)
                      / (j - h * (dtm + dtf - c_em * th)))
                wm = w + 0.5 * dw
                pm = (tm + dtm * dw) * wm * h
                pd = (td + dtd * dw / ratio) * (wm / ratio) * h
            e_drive += pd
            e_gear += pd - pm
            e_fric -= (tf + dtf * dw) * wm * h
            w += dw
            dw_sub = dw
        self._end(cmds, dt_s, (w, dw_sub, V, i_a, v_sum / n_sub, i_sum / n_sub, i_bt, vt, i_cn,
                               vct, vbus),
                  (e_drive, e_surge, e_usb, e_loads, e_wind, e_fric, e_gear, e_dio, e_clamp,
                   e_conv, e_dump, e_bleed, e_be, e_elec))

    def _end(self, cmds, dt_s, st, en):
        """After the sub-steps. st: (w, dw_sub, V, i_a, v_mean, i_mean, i_bt, vt, i_cn, vct,
        vbus) at the period's end; en: the period's energies (e_drive, e_surge, e_usb, e_loads,
        e_wind, e_fric, e_gear, e_dio, e_clamp, e_conv, e_dump, e_bleed, e_be, e_elec), J."""
        w, dw_sub, V, i_a, v_mean, i_mean, i_bt, vt, i_cn, vct, vbus = st
        (e_drive, e_surge, e_usb, e_loads, e_wind, e_fric, e_gear, e_dio, e_clamp, e_conv,
         e_dump, e_bleed, e_be, e_elec) = en
        batt = self.batt
        bank = self.bank
        conn = batt.connected
        cap_on = bank.present
        run = self.usb_run
        i_usb = self._i_usb
        led = self.led
        self.vbus = vbus
        self.t = self.t + dt_s
        self.dw_period = w - self.w
        self.dw_sub = dw_sub
        self.w = w
        self.v = V
        self.i_src = i_a
        self.v_mean = v_mean
        self.i_src_mean = i_mean
        self.batt_a = i_bt if conn else 0.0
        if conn:
            self.batt_v = vt
            self.float_v = vt
        else:
            # converter output with nothing on it but the sense divider follows u = d V
            target = self._d_b * V
            self.float_v = target + (self.float_v - target) * math.exp(-dt_s / 0.05)
            self.batt_v = self.float_v
        self.cap_a = i_cn if cap_on else 0.0
        self.cap_v = vct if cap_on else 0.0
        self.usb_a = i_usb if run else 0.0
        if not conn:
            batt.substep(0.0, dt_s)  # open circuit: polarisation relaxes, gassing self-discharge
        batt.end_period(dt_s)
        if cap_on:
            bank.end_period(dt_s, cmds.bal_mask)
        if i_usb > 0.0 and run:
            for dv in self.devices:
                if dv.i_a > 0.0:
                    dv.take(e_usb * dv.i_a / i_usb)
        self.dump_w = e_dump / dt_s
        self.p_in_w = e_drive / dt_s
        self.p_elec_w = (e_elec - e_wind) / dt_s
        led["drive_in_j"] += e_drive
        led["surge_in_j"] += e_surge
        led["usb_out_j"] += e_usb
        led["loads_out_j"] += e_loads
        led["loss_winding_j"] += e_wind
        led["loss_friction_j"] += e_fric
        led["loss_gear_j"] += e_gear
        led["loss_diodes_j"] += e_dio
        led["loss_clamp_j"] += e_clamp
        led["loss_conv_j"] += e_conv
        led["loss_dump_j"] += e_dump
        led["loss_bleed_j"] += e_bleed
        led["loss_bus_step_j"] += e_be

    # ---- readings -----------------------------------------------------------------------------
    def measure(self, m):
        """Fill a controller.signals.Measurements through the sensor models."""
        vb = self.vbus if self.usb_run else 0.0
        dp, dm = self.net.lines(vb, self.probe) if self.usb_run else (0.0, 0.0)
        vals = (self.v, self.i_src, self.batt_v, self.batt_a, self.cap_v, self.cap_a, vb, dp, dm)
        self.sensors.fill(m, vals, self.bank.v, self.batt.temp_c)
        if self._eq_events:
            m.eq_req = 1 if self.t < self.eq_until else 0
        if self._reset_events:
            m.reset_req = 1 if self.t < self.reset_until else 0

    def snapshot(self):
        b = self.batt
        bank = self.bank
        return {
            "t_s": self.t,
            "drive_rpm": self.w / self.ratio * RPM_PER_RAD_S,
            "machine_rpm": self.w * RPM_PER_RAD_S,
            "bus_v": self.v,
            "src_a": self.i_src,
            "bus_v_mean": self.v_mean,
            "src_a_mean": self.i_src_mean,
            "p_in_w": self.p_in_w,
            "p_elec_w": self.p_elec_w,
            "p_ideal_w": self.drive.p_ideal_w(),
            "batt_v": self.batt_v,
            "batt_a": self.batt_a,
            "batt_temp_c": b.temp_c,
            "batt_soc": b.soc,
            "batt_connected": 1 if b.connected else 0,
            "cap_v": self.cap_v,
            "cap_a": self.cap_a,
            "cap_v_int": bank.v_sum if bank.present else 0.0,
            "cell_v_max": bank.cell_v_max() if bank.present else 0.0,
            "usb_vbus_v": self.vbus if self.usb_run else 0.0,
            "usb_a": self.usb_a,
            "usb_devices_charging": sum(1 for d in self.devices if d.i_a > 0.0),
            "dump_w": self.dump_w,
            "loads_w": self.loads_w,
            "wind_ms": self.drive.strength if self.drive.kind == "wind" else NAN,
        }

    def ledger(self):
        """Energy books since the start, J, and the balance error in percent."""
        d = dict(self.led)
        d["batt_stored_j"] = self.batt.stored_total_j()
        d["loss_batt_j"] = self.batt.loss_j
        bank = self.bank
        d["cap_stored_j"] = bank.energy_j() - bank.e0 if bank.present else 0.0
        d["loss_cap_j"] = bank.loss_j
        d["buscap_stored_j"] = 0.5 * self.c_bus * (self.v * self.v - self.v0 * self.v0)
        d["rotor_stored_j"] = 0.5 * self.j * (self.w * self.w - self.w0 * self.w0)
        stores = ("batt_stored_j", "cap_stored_j", "buscap_stored_j", "rotor_stored_j")
        delivered = d["usb_out_j"] + d["loads_out_j"]
        lost = sum(v for k_, v in d.items() if k_.startswith("loss_"))
        inflow = d["drive_in_j"] + d["surge_in_j"]
        stored = sum(d[s] for s in stores)
        err = inflow - stored - delivered - lost
        # energy given back by a store counts as an input for the percentage's base
        base = inflow + sum(-d[s] for s in stores if d[s] < 0.0)
        d["in_j"] = base
        d["balance_error_j"] = err
        d["balance_error_pct"] = 100.0 * err / max(abs(base), 1e-9)
        return d


def _duty(x, top):
    d = x * 1e-4
    if d < 0.0:
        return 0.0
    return top if d > top else d
