# Batch plant: n scenarios advanced together, one control period at a time, with the bus node,
# the bridge, the clamp, the converters' bus side, the USB converter's input, the surges and the
# rotor vectorised across scenarios (numpy arrays of shape (n,)).
#
# What is shared with the scalar Plant (plant.py) rather than copied: each scenario keeps its
# own Plant object for its parts, drawn from its seed exactly as a scalar run draws them, and
# the per-period work runs through the same Plant._begin (events, drive, commands, loads, USB
# devices) and Plant._end (battery chemistry and temperature, supercap cells, device charge,
# the books) per scenario; measure(), snapshot() and ledger() are the Plant's own. Inside the
# sub-steps the part functions that are cheap scalar calls (drive torque and scripted speed,
# machine friction, battery and supercap sub-steps) are called per scenario; the rest, the
# expensive part (safeguarded Newton on the bus node, typically 3-8 iterations a sub-step, and
# the flows), runs on arrays with the same formulas in the same order of operations, so on a
# given machine a scenario's floats come out as in a scalar run (tests/plant/test_batch.py).
#
# Sub-steps: one loop for the whole batch, each scenario with its own step length (dt / n_sub,
# n_sub from its own rotor as in the scalar plant); a scenario that needs fewer sub-steps this
# period sits out the later ones (masked). Newton: an element stops moving once it has
# converged, as the scalar loop breaks. So a scenario's result never depends on which other
# scenarios share its batch.
import numpy as np

from host_sim.plant.plant import _MAX_IT, _TOL_I, _TOL_V, Plant

_where = np.where
_nz = np.count_nonzero  # cheaper than ndarray.any() on short arrays


def _col(plants, fn):
    return np.array([fn(p) for p in plants], dtype=float)


class BatchPlant:
    def __init__(self, scenarios):
        self.plants = [Plant(sc) for sc in scenarios]
        self.n = len(self.plants)
        ps = self.plants
        # per-scenario constants, arrays of shape (n,)
        self._static = {
            "c_bus": _col(ps, lambda p: p.c_bus),
            "g_bleed": _col(ps, lambda p: p.g_bleed),
            "knee": _col(ps, lambda p: p.knee),
            "alpha": _col(ps, lambda p: p.alpha),
            "cb_r": _col(ps, lambda p: p.cb["r_out_ohm"]),
            "ieb": _col(ps, lambda p: 1.0 / p.cb["efficiency"]),
            "cc_r": _col(ps, lambda p: p.cc["r_out_ohm"]),
            "iec": _col(ps, lambda p: 1.0 / p.cc["efficiency"]),
            "v_or": _col(ps, lambda p: p.v_or),
            "r_or": _col(ps, lambda p: p.r_or),
            "esr": _col(ps, lambda p: p.bank.esr),
            "cap_on": np.array([p.bank.present for p in ps], dtype=bool),
            "usb_set": _col(ps, lambda p: p.usb_set),
            "usb_r": _col(ps, lambda p: p.usb_r),
            "usb_do": _col(ps, lambda p: p.usb_do),
            "usb_eta": _col(ps, lambda p: p.usb_eta),
            "usb_iq": _col(ps, lambda p: p.usb_iq),
            "k": _col(ps, lambda p: p.mach.k),
            "ra": _col(ps, lambda p: p.mach.ra),
            "nvt": _col(ps, lambda p: p.diode.nvt),
            "i_s": _col(ps, lambda p: p.diode.is_a),
            "rs": _col(ps, lambda p: p.diode.rs_ohm),
            "ratio": _col(ps, lambda p: p.ratio),
            "eta_g": _col(ps, lambda p: p.eta_g),
            "j": _col(ps, lambda p: p.j),
        }
        self._sub_key = None
        self._sub = None

    # ---- per-scenario access (the scalar Plant's own) -----------------------------------------
    def measure(self, i, m):
        self.plants[i].measure(m)

    def snapshot(self, i):
        return self.plants[i].snapshot()

    def ledger(self, i):
        return self.plants[i].ledger()

    def state(self, name):
        """One scalar-plant attribute across the batch, e.g. state('v') for the bus volts."""
        return _col(self.plants, lambda p: getattr(p, name))

    def _static_for(self, idx):
        key = tuple(idx)
        if key != self._sub_key:
            if len(key) == self.n:
                self._sub = self._static
            else:
                ix = np.array(key, dtype=np.intp)
                self._sub = {k: v[ix] for k, v in self._static.items()}
            self._sub_key = key
        return self._sub

    # ---- one control period ---------------------------------------------------------------------
    def step(self, cmds, dt_s, idx=None):
        """Advance the scenarios idx (default all) by one period each. cmds: their Commands,
        in idx order; dt_s: one period for all (s) or one per scenario."""
        if idx is None:
            idx = range(self.n)
        n_in = len(idx)
        dtl = [float(dt_s)] * n_in if np.ndim(dt_s) == 0 else [float(x) for x in dt_s]
        # a scenario whose rotor changes fast (spin-up, braking, reversal) needs up to 8 times
        # more sub-steps this period: it takes the scalar step, so the batch's common loop
        # keeps to the usual one or two
        fast = [k for k in range(n_in) if self.plants[idx[k]].fast() > 1.0]
        if fast:
            for k in fast:
                self.plants[idx[k]].step(cmds[k], dtl[k])
            fs = set(fast)
            keep = [k for k in range(n_in) if k not in fs]
            idx = [idx[k] for k in keep]
            cmds = [cmds[k] for k in keep]
            dtl = [dtl[k] for k in keep]
        ps = [self.plants[i] for i in idx]
        nb = len(ps)
        if nb == 0:
            return
        S = self._static_for(idx)
        dt = np.array(dtl)
        rows = []
        for p, c, d in zip(ps, cmds, dtl):
            b = p._begin(c, d)
            bt = p.batt
            rows.append(b + (bt.connected, p.usb_run, bt.r0, bt.e_int, p.bank.v_sum,
                             p.drive.speed_mode, p.w, p.v, p.i_src, p.dw_sub, p.batt_v, p.t))
        A = np.array(rows, dtype=float).T
        (d_b, d_c, g_dump, batt_out, i_usb, i_bl, n_sub, sv, sg, sp, conn, run, r0, e_int, vc,
         smode, w, V, i_a, dw_sub, vt, t0) = A
        batt_out = batt_out > 0.0
        conn = conn > 0.0
        run = run > 0.0
        smode = smode > 0.0
        n_sub_i = n_sub.astype(np.intp)
        with np.errstate(all="ignore"):  # masked-out branches may divide by zero
            out = self._substeps(ps, S, dt, d_b, d_c, g_dump, batt_out, i_usb, i_bl, n_sub,
                                 n_sub_i, sv, sg, sp, conn, run, r0, e_int, vc, smode, w, V,
                                 i_a, dw_sub, vt, t0)
        st, en = out
        st_rows = np.array(st).T.tolist()
        en_rows = np.array(en).T.tolist()
        for p, c, d, s_, e_ in zip(ps, cmds, dtl, st_rows, en_rows):
            p._end(c, d, s_, e_)

    def _substeps(self, ps, S, dt, d_b, d_c, g_dump, batt_out, i_usb, i_bl, n_sub, n_sub_i,
                  sv, sg, sp, conn, run, r0, e_int, vc, smode, w, V, i_a, dw_sub, vt, t0):
        nb = len(ps)
        zero = np.zeros(nb)
        h = dt / n_sub
        c_bus = S["c_bus"]
        cbh = c_bus / h
        g_bleed = S["g_bleed"]
        g_lin = g_dump + g_bleed
        knee = S["knee"]
        alpha = S["alpha"]
        v_cl = 0.6 * knee
        rbt = S["cb_r"] + r0
        ieb = S["ieb"]
        rct = S["cc_r"] + S["esr"]
        iec = S["iec"]
        v_or = S["v_or"]
        rbd = S["r_or"] + r0
        rcd = S["r_or"] + S["esr"]
        esr = S["esr"]
        cap_on = S["cap_on"]
        usb_vo = S["usb_set"] - S["usb_r"] * i_usb
        usb_do = S["usb_do"]
        iu = i_usb / S["usb_eta"]
        iq = _where(run, S["usb_iq"], 0.0)
        k = S["k"]
        ra = S["ra"]
        nvt = S["nvt"]
        i_s = S["i_s"]
        rs = S["rs"]
        rsum = ra + 2.0 * rs
        ratio = S["ratio"]
        eta_g = S["eta_g"]
        j = S["j"]
        eb = e_int - r0 * i_bl
        # per-period parts of the residual: which terms any scenario has, and the constants
        df0 = cbh + g_lin
        on_b = d_b > 0.0
        on_c = d_c > 0.0
        any_b = _nz(on_b) > 0
        any_c = _nz(on_c) > 0
        any_bo = _nz(batt_out) > 0
        any_cd = _nz(cap_on) > 0
        on_u = iu > 0.0
        any_u = _nz(on_u) > 0
        on_sg = sg > 0.0
        any_sg = _nz(on_sg) > 0
        on_sp = sp > 0.0
        any_sp = _nz(on_sp) > 0
        kb = d_b * d_b / rbt * ieb
        kc = d_c * d_c / rct * iec
        gbd = 1.0 / rbd
        gcd = 1.0 / rcd
        pw = usb_vo * iu
        ku = iu * usb_do

        def bus_f(V, V0):
            """The scalar bus_f on arrays: residual (A) and derivative (S), same term order."""
            f = cbh * (V - V0) + g_lin * V
            df = df0
            m = V > v_cl
            if _nz(m):
                ic = 1e-3 * (V / knee) ** alpha
                f = _where(m, f + ic, f)
                df = _where(m, df + alpha * ic / V, df)
            if any_b:
                x = d_b * V - eb
                m = on_b & (x > 0.0)
                f = _where(m, f + d_b * x / rbt * ieb, f)
                df = _where(m, df + kb, df)
            if any_c:
                x = d_c * V - vc
                m = on_c & (x > 0.0)
                f = _where(m, f + d_c * x / rct * iec, f)
                df = _where(m, df + kc, df)
            if any_bo:
                x = eb - v_or - V
                m = batt_out & (x > 0.0)
                f = _where(m, f - x / rbd, f)
                df = _where(m, df + gbd, df)
            if any_cd:
                x = vc - v_or - V
                m = cap_on & (x > 0.0)
                f = _where(m, f - x / rcd, f)
                df = _where(m, df + gcd, df)
            f = f + iq
            if any_u:
                m = on_u & (V > 0.1)
                vd = V - usb_do
                lo = vd < usb_vo
                m1 = m & lo & (vd > 0.0)
                m2 = m & ~lo
                vv = V * V
                f = _where(m1, f + vd * iu / V, _where(m2, f + pw / V, f))
                df = _where(m1, df + ku / vv, _where(m2, df - pw / vv, df))
            if any_sg:
                m = on_sg & (V < sv)
                f = _where(m, f - (sv - V) * sg, f)
                df = _where(m, df + sg, df)
            if any_sp:
                f = _where(on_sp, f - sp / _where(V > 1.0, V, 1.0), f)
            return f, df

        # energies of the period and the states carried between sub-steps
        e_drive = zero.copy()
        e_gear, e_fric, e_wind, e_dio, e_clamp, e_conv, e_dump = (zero.copy() for _ in range(7))
        e_bleed, e_usb, e_loads, e_surge, e_elec, e_be = (zero.copy() for _ in range(6))
        v_sum = zero.copy()
        i_sum = zero.copy()
        i_bt = zero.copy()
        i_cn = zero.copy()
        vct = vc.copy()
        vbus = zero.copy()
        batts = [p.batt for p in ps]
        banks = [p.bank for p in ps]
        fric = [p.mach.friction for p in ps]
        torq = [p.drive.torque for p in ps]
        hl = h.tolist()
        t0l = t0.tolist()
        i_conn = np.flatnonzero(conn).tolist()
        i_cap = np.flatnonzero(cap_on).tolist()
        i_spd = np.flatnonzero(smode).tolist()
        i_trq = np.flatnonzero(~smode).tolist()
        any_spd = bool(i_spd)
        any_conn = bool(i_conn)
        n_max = int(n_sub_i.max())
        for sub in range(n_max):
            live = sub < n_sub_i
            all_live = _nz(live) == nb
            if not all_live:
                lv = live.tolist()
                i_conn_s = [i for i in i_conn if lv[i]]
                i_cap_s = [i for i in i_cap if lv[i]]
            else:
                i_conn_s = i_conn
                i_cap_s = i_cap
            V0 = V
            # ---- bus solve ----
            dw_p = dw_sub
            if any_spd:
                dw_p = dw_sub.copy()
                wl = w.tolist()
                for i in i_spd:
                    p = ps[i]
                    ts = t0l[i] + sub * hl[i]
                    dw_p[i] = p.drive.speed_at(ts + hl[i]) * p.ratio - wl[i]
            wp = w + 0.5 * dw_p
            E = k * wp
            ea = np.abs(E)
            big = ea > 1e-3
            fE = bus_f(ea, V0)[0]
            cond = big & (fE > 0.0)
            hi_c = ea / ra
            i0 = _where((0.0 < i_a) & (i_a < hi_c), i_a, 0.5 * hi_c * 1e-3)
            lo_b = _where(big, ea, 0.0)
            hi_b = np.maximum(np.maximum(np.maximum(np.maximum(V0, ea), eb), vc), sv) + 1.0
            if any_sp:  # a power source: make sure the bracket holds the root
                grow = ~cond & on_sp
                while _nz(grow):
                    grow = grow & (bus_f(hi_b, V0)[0] <= 0.0) & (hi_b < 1e4)
                    hi_b = _where(grow, hi_b * 2.0, hi_b)
            x0 = _where((lo_b < V0) & (V0 < hi_b), V0, 0.5 * (lo_b + hi_b))
            it = _where(cond, i0, x0)
            lo = _where(cond, 0.0, lo_b)
            hi = _where(cond, hi_c, hi_b)
            done = ~live
            n_done = nb - _nz(live)
            n_c = _nz(cond)
            df_l = zero
            rp_l = zero
            for _ in range(_MAX_IT):
                # both updates where the batch mixes conducting and blocking scenarios, else
                # only the one it needs
                if n_c:
                    vdi = nvt * np.log1p(it / i_s) + rs * it
                    Vc = ea - it * ra - 2.0 * vdi
                    Vx = Vc if n_c == nb else _where(cond, Vc, it)
                else:
                    Vx = it
                f, df = bus_f(Vx, V0)
                if n_c:
                    gg = f - it
                    up = gg > 0.0  # the iterate becomes the lower bound
                    if n_c < nb:
                        up = _where(cond, up, f <= 0.0)
                else:
                    up = f <= 0.0
                lo_n = _where(up, it, lo)
                hi_n = _where(up, hi, it)
                mid = 0.5 * (lo_n + hi_n)
                if n_c:
                    rp = rsum + 2.0 * nvt / (i_s + it)
                    dg = -df * rp - 1.0
                    new_c = it - gg / dg
                    new_c = _where((lo_n < new_c) & (new_c < hi_n), new_c, mid)
                else:
                    rp = zero
                if n_c < nb:
                    new_b = _where(df > 0.0, it - f / df, mid)
                    new_b = _where((lo_n <= new_b) & (new_b <= hi_n), new_b, mid)
                if n_c == nb:
                    new = new_c
                elif n_c == 0:
                    new = new_b
                else:
                    new = _where(cond, new_c, new_b)
                step = np.abs(new - it)
                if n_c == nb:
                    conv = step < _TOL_I * (1.0 + it)
                elif n_c == 0:
                    conv = step < _TOL_V
                else:
                    conv = _where(cond, step < _TOL_I * (1.0 + it), step < _TOL_V)
                if n_done:  # converged elements stay where they stopped
                    act = ~done
                    it = _where(act, new, it)
                    lo = _where(act, lo_n, lo)
                    hi = _where(act, hi_n, hi)
                    df_l = _where(act, df, df_l)
                    rp_l = _where(act, rp, rp_l)
                else:
                    it, lo, hi, df_l, rp_l = new, lo_n, hi_n, df, rp
                done = done | conv
                n_done = _nz(done)
                if n_done == nb:
                    break
            vd = _where(cond, nvt * np.log1p(it / i_s) + rs * it, 0.0)
            Vn = _where(cond, ea - it * ra - 2.0 * vd, it)
            didE = _where(cond, df_l / (1.0 + df_l * rp_l), 0.0)
            ian = _where(cond, it, 0.0)
            if not all_live:
                Vn = _where(live, Vn, V0)
                ian = _where(live, ian, i_a)
            V = Vn
            i_a = ian
            hz = h if all_live else _where(live, h, 0.0)  # a sitting-out scenario books nothing
            # ---- flows at the solution ----
            dv = V - V0
            e_be = e_be + 0.5 * c_bus * dv * dv
            m = V > v_cl
            if _nz(m):
                i_cl = 1e-3 * (V / knee) ** alpha
                e_clamp = e_clamp + _where(m, i_cl * V * hz, 0.0)
            e_dump = e_dump + g_dump * V * V * hz
            e_bleed = e_bleed + g_bleed * V * V * hz
            # battery node
            if any_conn:
                x = d_b * V - eb
                i_bo = _where(on_b & (x > 0.0), x / rbt, 0.0)
                x = eb - v_or - V
                i_bd = _where(batt_out & (x > 0.0), x / rbd, 0.0)
                i_btn = i_bo - i_bd - i_bl
                vtn = e_int + r0 * i_btn
                cl = conn if all_live else conn & live
                e_conv = e_conv + _where(cl, (d_b * i_bo * ieb * V - vtn * i_bo) * h, 0.0)
                e_dio = e_dio + _where(cl, (vtn - V) * i_bd * h, 0.0)
                e_loads = e_loads + _where(cl, vtn * i_bl * h, 0.0)
                i_bt = _where(cl, i_btn, i_bt)
                vt = _where(cl, vtn, vt)
                ib = i_btn.tolist()
                eil = e_int.tolist()  # list writes: a numpy item write costs ~100 ns
                for i in i_conn_s:
                    bt = batts[i]
                    bt.substep(ib[i], hl[i])
                    eil[i] = bt.e_int
                e_int = np.array(eil)
                eb = e_int - r0 * i_bl
            # supercap node
            if any_cd:
                x = d_c * V - vc
                i_co = _where(on_c & (x > 0.0), x / rct, 0.0)
                x = vc - v_or - V
                i_cd = _where(cap_on & (x > 0.0), x / rcd, 0.0)
                i_cnn = i_co - i_cd
                vctn = vc + esr * i_cnn
                cl = cap_on if all_live else cap_on & live
                e_conv = e_conv + _where(cl, (d_c * i_co * iec * V - vctn * i_co) * h, 0.0)
                e_dio = e_dio + _where(cl, (vctn - V) * i_cd * h, 0.0)
                i_cn = _where(cl, i_cnn, i_cn)
                vct = _where(cl, vctn, vct)
                ic_ = i_cnn.tolist()
                vcl = vc.tolist()
                for i in i_cap_s:
                    bk = banks[i]
                    bk.substep(ic_[i], hl[i])
                    vcl[i] = bk.v_sum
                vc = np.array(vcl)
            # USB
            vo = np.minimum(V - usb_do, usb_vo)
            vo = _where(vo < 0.0, 0.0, vo)
            rl = run if all_live else run & live
            p_in = iq * V + _where(V > 0.1, vo * iu, 0.0)
            e_usb = e_usb + _where(rl, vo * i_usb * h, 0.0)
            e_conv = e_conv + _where(rl, (p_in - vo * i_usb) * h, 0.0)
            vbus_n = _where(run, vo, 0.0)
            vbus = vbus_n if all_live else _where(live, vbus_n, vbus)
            # surges
            if any_sg:
                e_surge = e_surge + _where(on_sg & (V < sv), (sv - V) * sg * V * hz, 0.0)
            if any_sp:
                e_surge = e_surge + _where(on_sp, sp / _where(V > 1.0, V, 1.0) * V * hz, 0.0)
            # machine and bridge
            if all_live:
                v_sum = v_sum + V
                i_sum = i_sum + i_a
            else:
                v_sum = _where(live, v_sum + V, v_sum)
                i_sum = _where(live, i_sum + i_a, i_sum)
            e_elec = e_elec + ea * i_a * hz
            e_wind = e_wind + i_a * i_a * ra * hz
            e_dio = e_dio + 2.0 * vd * i_a * hz
            # ---- rotor (the scalar plant's step; see plant.py for the why) ----
            sgn = _where(wp >= 0.0, 1.0, -1.0)
            tem = -k * i_a * sgn
            c_em = k * k * didE
            wl = w.tolist()
            tf, dtf = np.array([fr(x) for fr, x in zip(fric, wl)]).T
            wd = w / ratio
            wdl = wd.tolist()
            if i_trq:
                tq = [(0.0, 0.0)] * nb
                for i in i_trq:
                    tq[i] = torq[i](wdl[i])
                td, dtd = np.array(tq).T
            else:
                td = dtd = zero
            kg = _where(td * wd >= 0.0, eta_g / ratio, 1.0 / (eta_g * ratio))
            tm = td * kg
            dtm = dtd * kg / ratio
            a = h * c_em / j
            th = _where(a <= 2.0, 0.5, 1.0 - 1.0 / a)
            dw = (h * (tm + tf + tem + 0.5 * c_em * dw_p)
                  / (j - h * (dtm + dtf - c_em * th)))
            wm = w + 0.5 * dw
            pm = (tm + dtm * dw) * wm * h
            pd = (td + dtd * dw / ratio) * (wm / ratio) * h
            if any_spd:
                dws = dw_p
                tm_e = j * dws / h - (tf + dtf * dws) - tem
                wms = w + 0.5 * dws
                pms = tm_e * wms * h
                pds = _where(pms >= 0.0, pms / eta_g, pms * eta_g)
                dw = _where(smode, dws, dw)
                wm = _where(smode, wms, wm)
                pm = _where(smode, pms, pm)
                pd = _where(smode, pds, pd)
            if not all_live:
                dw = _where(live, dw, 0.0)
                pd = _where(live, pd, 0.0)
                pm = _where(live, pm, 0.0)
            e_drive = e_drive + pd
            e_gear = e_gear + (pd - pm)
            e_fric = e_fric - (tf + dtf * dw) * wm * hz
            w = w + dw
            dw_sub = dw if all_live else _where(live, dw, dw_sub)
        st = (w, dw_sub, V, i_a, v_sum / n_sub, i_sum / n_sub, i_bt, vt, i_cn, vct, vbus)
        en = (e_drive, e_surge, e_usb, e_loads, e_wind, e_fric, e_gear, e_dio, e_clamp, e_conv,
              e_dump, e_bleed, e_be, e_elec)
        return st, en
