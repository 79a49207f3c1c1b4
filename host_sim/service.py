# Service: did the closed loop do its job? limitcheck.py judges the limits (what must never
# happen); this module measures what the system delivered and judges whether it did what a
# charge controller is for: charge the battery, serve the port, leave the dump load what the
# stores cannot take. Judged on the plant's true values, like the limits.
#
# ServiceMeter.period() runs once per control period beside the LimitChecker (plain float
# sums, no allocation on the common path: the runner's speed is a benchmarked figure);
# finish() turns the sums and the energy ledger into summary.json's "service" section with
# its warnings. Every figure, its definition and every threshold with its reason:
# docs/simulate.md ("Service figures", "Service warnings").
import math

from controller.signals import (F_BATT_ABSENT, F_BATT_REVERSED, F_BATT_SENSOR, F_BUS_SENSOR,
                                F_FIRMWARE, F_LINK, F_OVP, F_OVP_LOCKOUT, F_TEMP_SENSOR,
                                F_TEMP_WINDOW, FAULT_NAMES, ST_ABSORPTION, ST_BLOCKED, ST_BULK,
                                ST_EQUALIZE, ST_FLOAT)
from host_sim.limitcheck import CHARGING_A, DocLimits, ceiling_v
from host_sim.plant.drive import Human, Hydro, Scripted, Wind
from host_sim.plant.machine import RPM_PER_RAD_S

NAN = float("nan")
WH = 3600.0  # J per Wh

# ---- thresholds (ours unless a source is named) --------------------------------------------
# The source "turned" when the drive put in at least this much: a 50 W rider for 2 s. Below
# it no verdict about charging is given (a site at rest is not failing).
TURNED_J = 100.0
# no_charge: the battery gained no charge (net, from its state of charge) although the source
# turned, and it never reached absorption (a battery at its ceiling takes only a taper, and may
# lose a little to its loads) nor started full (above this state of charge nothing is left to
# gain).
NO_CHARGE_AH = 0.0
FULL_SOC = 0.995
# source_below_battery: to push charge the buck needs d x bus > battery with d <= its max
# duty, and the bridge drops 2 V_F; both are taken at this share of the charge limit (a
# current worth calling charge).
BELOW_AT_LIMIT = 0.05
# profile_mismatch: capacity differs by more than this share. A new block's delivered
# capacity and its label differ by up to about 10 % (common practice); beyond that the
# profile's current limit and tail are another battery's.
CAPACITY_TOL = 0.10
# dump_waste: the dump took, while a store had room, more than this share of the input. The
# dump's unavoidable share from one-period answers to bus rises stays below about 1 % on the
# built-in sites; 3 % (ours) flags a dump that works against the stores (the soft-zone dump
# that took 33 % of a rider's input) without flagging each transient.
DUMP_WASTE_SHARE = 0.03
# A store "has room" while its current is below this share of its limit and it is below its
# ceiling (battery: the "at voltage" band the charger itself uses, half the over-margin; bank:
# the clamp less its hysteresis).
ROOM_SHARE = 0.95
# The guard's latch dump steps down over ten periods after the latch clears
# (controller/overvolt.py _RELEASE_STEP): part of answering the trip, so not judged.
TRIP_RELEASE_PERIODS = 10
# stage_chatter: (a) a window-edge crossing of the true battery temperature may cause at most
# this many stage changes into or out of a temperature block (issue's goal: leave, come
# back); (b) in any 60 s no more than 2 x lockout_trips + 2 stage changes: a trip blocks and
# releases (2 changes) and the guard locks out after lockout_trips trips in its window, plus
# one bulk-absorption-float move.
CHATTER_PER_CROSSING = 2
CHATTER_WINDOW_S = 60.0
# absorption_stuck: (a) charging time in one absorption spell past the profile's limit by
# more than this (the charger counts its own current reading, we the true current above
# 0.05 A: they differ near zero current); (b) the tail condition (at voltage, true current at
# or below the tail) met for this many hold times in one spell that did not end.
ABS_OVER_S = 60.0
TAIL_HOLDS = 3.0
# The bulk acceptance counts only the bulk periods where the source could give the battery at
# least this share of its charge limit (a period with nothing to accept judges nothing: a rider
# at rest while the battery serves the port gave -148 from a near-zero sum), and is null unless
# such periods add up to ACCEPT_MIN_S (a few MPPT settling times; ours).
ACCEPT_FLOOR = 0.02
ACCEPT_MIN_S = 10.0
# harvest: null when the source offered less than TURNED_J (nothing to harvest: 390 J offered
# against 656 J drawn from the stores gave -1.68) or when the stores and loads gained less than
# nothing (the stores gave more than the source delivered: the figure would be theirs).
# dump_from_storage: energy the dump took beyond what the source put on the bus in the same
# period can only have come from the stores (through the OR-ing diodes) or the bus capacitor.
# The source side is the machine's electrical output (before the bridge's loss, so an upper
# bound: the drain found is a lower bound). Warning above 0.01 Wh: the bus capacitor holds
# well under 1 J and one period of a dump fully on at a 12 V battery through a few ohms is a
# few J; 36 J is tens of such periods (ours).
STORAGE_DUMP_J = 36.0
# charge_blocked: the controller held charging blocked this share of the time the battery was
# connected (a cold or hot battery, a sensor fault, a battery absent): a protective refusal,
# not a charging failure, named apart from no_charge.
BLOCKED_SHARE = 0.5

# fault bits that block the battery's charging (supervisor.py and leadacid.py); the others
# (USB, supercap) can be set beside a block without being its reason
BLOCKING = (F_OVP | F_OVP_LOCKOUT | F_BUS_SENSOR | F_BATT_SENSOR | F_TEMP_SENSOR | F_BATT_ABSENT
            | F_BATT_REVERSED | F_TEMP_WINDOW | F_FIRMWARE | F_LINK)
_TRIP = F_OVP | F_OVP_LOCKOUT


class BestPower:
    """The source's best electrical power this period, W, at the machine's terminals (before
    the bridge and converters): NaN where it is not defined (self.null_reason says why).

    wind, hydro: the plant's own p_ideal (drive.ideal_table): the largest steady-state output
    at any constant speed at this period's wind or flow. pedal, crank: the same for the
    person's torque-speed curve this period (Human.torque: torque limit, power available after
    fatigue, cadence): the best constant drive speed, with gear efficiency, friction and
    armature loss. scripted speed: the drive holds the speed whatever it costs, so the best is
    the matched load, E^2 / (4 R_a). scripted torque: not defined (a constant torque gives
    more power the faster it is let run)."""

    def __init__(self, plant):
        self.plant = plant
        d = plant.drive
        self.drive = d
        self.null_reason = None
        self.kind = "ideal"
        if isinstance(d, (Wind, Hydro)):
            self.kind = "ideal"
        elif isinstance(d, Human):
            self.kind = "human"
        elif isinstance(d, Scripted) and d.speed_mode:
            self.kind = "speed"
        else:
            self.kind = None
            self.null_reason = ("a torque-scripted drive has no best operating point: a "
                                "constant torque gives more power the faster it is let run")
        m = plant.mach
        self.k = m.k
        self.ra = m.ra
        self.ratio = plant.ratio
        self.eta_g = plant.eta_g
        self._key_p = -1.0  # person's available power at the cached evaluation, W
        self._key_t = -1.0  # ... and torque limit, N m
        self._key_dir = 0.0
        self._cached = 0.0

    def now(self, s):
        k = self.kind
        if k == "ideal":
            return s["p_ideal_w"]
        if k == "human":
            d = self.drive
            if not d.active:
                return 0.0
            p = d.p_avail
            kp = self._key_p
            # re-evaluate when the person's curve moved by more than 0.5 %; in between scale
            # by the available power (the best power is nearly proportional to it)
            if (abs(p - kp) > 0.005 * kp or abs(d.t_lim - self._key_t) > 0.005 * self._key_t
                    or d.dir != self._key_dir or kp <= 0.0):
                self._cached = self.human_best(d)
                self._key_p = p
                self._key_t = d.t_lim
                self._key_dir = d.dir
                return self._cached
            return self._cached * p / kp
        if k == "speed":
            if self.drive.stopped:
                return 0.0
            e = self.k * abs(s["machine_rpm"]) / RPM_PER_RAD_S
            return e * e / (4.0 * self.ra)
        return NAN

    def elec_at(self, d, v):
        """Steady electrical output at drive speed v (rad/s, the way the person turns), W."""
        td = d.dir * d.torque(d.dir * v)[0]
        wm = v * self.ratio
        tm = td * self.eta_g / self.ratio + self.plant.mach.friction(wm)[0]
        i = tm / self.k
        if i <= 0.0:
            return 0.0
        return (self.k * wm - i * self.ra) * i

    def human_best(self, d):
        """Largest elec_at over the person's speeds: a scan, then golden-section refinement."""
        hi = 1.15 * d.w_target
        n = 40
        best_v, best_p = 0.0, 0.0
        for j in range(1, n + 1):
            v = hi * j / n
            p = self.elec_at(d, v)
            if p > best_p:
                best_v, best_p = v, p
        if best_p <= 0.0:
            return 0.0
        a, b = max(0.0, best_v - hi / n), min(hi, best_v + hi / n)
        g = 0.6180339887498949
        x1, x2 = b - g * (b - a), a + g * (b - a)
        f1, f2 = self.elec_at(d, x1), self.elec_at(d, x2)
        for _ in range(24):
            if f1 >= f2:
                b, x2, f2 = x2, x1, f1
                x1 = b - g * (b - a)
                f1 = self.elec_at(d, x1)
            else:
                a, x1, f1 = x1, x2, f2
                x2 = a + g * (b - a)
                f2 = self.elec_at(d, x2)
        return max(best_p, f1, f2)


class ServiceMeter:
    """Service sums over a closed-loop run. period(t_s, s, c) after each plant step (s: the
    snapshot at the period's end, c: the commands applied over it); finish(ledger) at the end.
    Reads only Commands' stage, fault, usb_on and the plant's public parts, so it works
    the same for the in-process Supervisor and for a board over the link (hil)."""

    def __init__(self, sc, plant, dt_s):
        p = sc.profile
        self.sc = sc
        self.p = p
        self.lims = DocLimits(sc.profile_doc)  # ceilings as the limit check judges them
        self.plant = plant
        self.dt = dt_s
        self.best = BestPower(plant)
        self.p_best = NAN  # this period's best power, W (the timeseries column p_best_w)
        cv = sc.doc["converters"]
        self.eta_b = cv["batt"]["efficiency"]
        self.eta_c = cv["cap"]["efficiency"]
        self.eta_usb = sc.doc["usb"]["converter"]["efficiency"]
        self.lim_a = p.chg_limit_ma / 1000.0
        self.cap_lim_a = p.cap_limit_ma / 1000.0
        self.cap_room_v = (p.cap_clamp_mv - p.cap_hyst_mv) / 1000.0
        self.band_v = p.over_margin_mv / 2000.0  # the charger's "at voltage" band, V
        self.tail_a = p.tail_ma / 1000.0
        self.overspeed_v = p.overspeed_mv / 1000.0 if p.mppt and p.overspeed_mv else math.inf
        self.t_min = p.temp_min_dc / 10.0
        self.t_max = p.temp_max_dc / 10.0
        self.cap_on = bool(sc.doc["supercap"]["present"])
        # sums (J, s, A s) and events
        self.offered_j = 0.0  # the source's best power, integrated
        self.offered_nan = False  # a period had no defined best power
        self.bulk_s = 0.0
        self.bulk_as = 0.0  # battery current in bulk, integrated, A s
        self.bulk_poss_as = 0.0  # what it could have been, integrated, A s (periods counted)
        self.accept_as = 0.0  # battery current taken in those periods (0 if it gave), A s
        self.ah_in_as = 0.0  # positive battery current, integrated, A s
        self.t_abs = None  # first tick reported in absorption, s
        self.t_float = None
        self.usb_wanted_s = 0.0
        self.usb_on_wanted_s = 0.0
        self.blocked_s = 0.0
        self.blocked_by = [0.0] * len(FAULT_NAMES)  # s per fault bit while blocked
        self.blocked_other_s = 0.0  # blocked with no blocking bit set
        self.dump_j = 0.0
        self.dump_excused_j = 0.0  # in a trip, its release ramp or an overspeed
        self.dump_waste_j = 0.0  # taken while a store had room (bus side, up to the room)
        self.dump_store_j = 0.0  # taken beyond the source's power: drained from the stores
        self._surge_led = 0.0
        self.accept_s = 0.0  # bulk time where the source could give the battery something
        self.t_trip = -math.inf  # end time of the last period with the latch set
        self.rpm_max = 0.0  # largest true machine speed, rpm
        self.t_rpm_max = 0.0
        self.vb_min = math.inf  # lowest true battery voltage while connected, V
        self.connected_s = 0.0
        self.stage = -1  # stage over the last period
        self.fault = 0
        self.changes = []  # tick times of stage changes (rare: a list is fine)
        self.temp_flips = 0  # stage changes into or out of a temperature-window block
        self.temp_side = -1  # true battery temperature below (0), inside (1), above (2) window
        self.temp_crossings = 0
        self.abs_spells = []  # (charging s, tail-met s, ended) per absorption spell
        self.abs_charge_s = 0.0
        self.abs_tail_s = 0.0
        self.loads = plant.loads
        self.load_j = [0.0] * len(plant.loads)
        self._loads_led = 0.0
        self.devices = plant.devices

    def period(self, t_s, s, c):
        dt = self.dt
        t0 = t_s - dt  # the tick that decided this period
        stage = c.stage
        fault = c.fault
        pb = self.best.now(s)
        self.p_best = pb
        if pb == pb:
            self.offered_j += pb * dt
        else:
            self.offered_nan = True
        if stage != self.stage:
            self._stage_change(t0, stage, fault)
        self.fault = fault
        rpm = s["machine_rpm"]
        if rpm < 0.0:
            rpm = -rpm
        if rpm > self.rpm_max:
            self.rpm_max = rpm
            self.t_rpm_max = t_s
        tb = s["batt_temp_c"]
        side = 0 if tb < self.t_min else (2 if tb > self.t_max else 1)
        if side != self.temp_side:
            if self.temp_side >= 0:
                self.temp_crossings += 1
            self.temp_side = side
        conn = s["batt_connected"]
        ib = s["batt_a"]
        vb = s["batt_v"]
        if conn:
            self.connected_s += dt
            if vb < self.vb_min:
                self.vb_min = vb
            if ib > 0.0:
                self.ah_in_as += ib * dt
        if stage == ST_BLOCKED:
            self.blocked_s += dt
            bits = fault & BLOCKING
            if bits:
                by = self.blocked_by
                for i in range(len(by)):
                    if bits >> i & 1:
                        by[i] += dt
            else:
                self.blocked_other_s += dt
        elif stage == ST_BULK:
            if conn:
                self.bulk_s += dt
                self.bulk_as += ib * dt
                if pb == pb:
                    usb_w = s["usb_vbus_v"] * s["usb_a"] / self.eta_usb
                    x = ((pb - usb_w) * self.eta_b - s["loads_w"]) / vb if vb > 0.1 else 0.0
                    if x > self.lim_a:
                        x = self.lim_a
                    if x >= ACCEPT_FLOOR * self.lim_a:
                        # a battery that gave charge here accepted none of it
                        self.bulk_poss_as += x * dt
                        self.accept_as += (ib if ib > 0.0 else 0.0) * dt
                        self.accept_s += dt
        elif stage == ST_ABSORPTION:
            if ib > CHARGING_A:
                self.abs_charge_s += dt
            if ib <= self.tail_a and vb >= ceiling_v(self.lims, stage, tb) - self.band_v:
                self.abs_tail_s += dt
        if fault & _TRIP:
            self.t_trip = t_s
        ed = s["dump_w"] * dt
        if ed > 0.0:
            # the source's energy onto the bus this period: machine output and injected surges
            sled = self.plant.led["surge_in_j"]
            es = s["p_elec_w"] * dt + (sled - self._surge_led)
            self._surge_led = sled
            if es < 0.0:
                es = 0.0
            if ed > es:
                self.dump_store_j += ed - es
                ed_src = es
            else:
                ed_src = ed
            self._dump(t_s, s, ed, ed_src, stage, conn, vb, ib, tb)
        else:
            self._surge_led = self.plant.led["surge_in_j"]
        if self.devices:
            for dv in self.devices:
                if dv.soc < 1.0 and dv.plugged(t0):
                    self.usb_wanted_s += dt
                    if c.usb_on:
                        self.usb_on_wanted_s += dt
                    break
        if self.loads:
            led = self.plant.led["loads_out_j"]
            de = led - self._loads_led
            self._loads_led = led
            if de != 0.0:
                lj = self.load_j
                if len(lj) == 1:
                    lj[0] += de
                else:
                    tot = 0.0
                    for ld in self.loads:
                        tot += ld.i_a
                    if tot > 0.0:
                        for i, ld in enumerate(self.loads):
                            lj[i] += de * ld.i_a / tot

    def _stage_change(self, t0, stage, fault):
        old = self.stage
        self.stage = stage
        if old < 0:
            self._enter(t0, stage)
            return
        self.changes.append(t0)
        if (old == ST_BLOCKED or stage == ST_BLOCKED) and (fault | self.fault) & F_TEMP_WINDOW:
            self.temp_flips += 1
        if old == ST_ABSORPTION:
            self.abs_spells.append((self.abs_charge_s, self.abs_tail_s, True))
            self.abs_charge_s = 0.0
            self.abs_tail_s = 0.0
        self._enter(t0, stage)

    def _enter(self, t0, stage):
        if stage == ST_ABSORPTION and self.t_abs is None:
            self.t_abs = t0
        if stage in (ST_FLOAT, ST_EQUALIZE) and self.t_float is None:
            self.t_float = t0
            if self.t_abs is None:
                self.t_abs = t0

    def _dump(self, t_s, s, ed, ed_src, stage, conn, vb, ib, tb):
        """A period with the dump load on: excused (trip, its release ramp, overspeed) or
        judged against the room the stores had. ed: the dump's energy, ed_src: the part the
        source can have fed (the rest was drained from the stores, counted apart)."""
        self.dump_j += ed
        dt = self.dt
        if (t_s - self.t_trip <= TRIP_RELEASE_PERIODS * dt + 1e-9
                or s["bus_v"] >= self.overspeed_v):
            self.dump_excused_j += ed
            return
        ed = ed_src  # waste is the source's energy burnt; a drained store is dump_from_storage
        room = 0.0  # what the stores could have taken this period, bus side, J
        # the battery takes up to its limit in bulk only: in absorption and float its voltage
        # sets the current, and the room left below the ceiling is a small taper; a full
        # battery (true state of charge FULL_SOC or more) has only that taper left in any stage
        if (conn and stage == ST_BULK and ib < ROOM_SHARE * self.lim_a
                and s["batt_soc"] < FULL_SOC):
            if vb < ceiling_v(self.lims, stage, tb) - self.band_v:
                room += (self.lim_a - ib) * vb * dt / self.eta_b
        if self.cap_on:
            vc = s["cap_v"]
            ic = s["cap_a"]
            if vc < self.cap_room_v and ic < ROOM_SHARE * self.cap_lim_a:
                room += (self.cap_lim_a - ic) * vc * dt / self.eta_c
        self.dump_waste_j += ed if ed < room else room

    # ---- the end of the run --------------------------------------------------------------------
    def finish(self, led, t_end_s):
        if self.stage == ST_ABSORPTION:
            self.abs_spells.append((self.abs_charge_s, self.abs_tail_s, False))
        sc = self.sc
        b = self.plant.batt
        bd = sc.doc["battery"]
        in_j = led["drive_in_j"] + led["surge_in_j"]
        delivered_j = (led["batt_stored_j"] + led["cap_stored_j"] + led["usb_out_j"]
                       + led["loads_out_j"])
        losses_j = sum(v for k, v in led.items() if k.startswith("loss_") and k != "loss_dump_j")
        net_ah = (b.soc - bd["soc0"]) * b.cap_ah
        out = {
            "energy_wh": {
                "drive_in": _r(led["drive_in_j"] / WH), "surge_in": _r(led["surge_in_j"] / WH),
                "battery": _r(led["batt_stored_j"] / WH), "supercap": _r(led["cap_stored_j"] / WH),
                "usb": _r(led["usb_out_j"] / WH), "loads": _r(led["loads_out_j"] / WH),
                "loads_each": {_name(ld.name, i): _r(self.load_j[i] / WH)
                               for i, ld in enumerate(self.loads)},
                "dump": _r(led["loss_dump_j"] / WH), "losses": _r(losses_j / WH),
                "rotor_and_bus_cap": _r((led["rotor_stored_j"] + led["buscap_stored_j"]) / WH),
            },
            "battery_ah": {"net": _r(net_ah), "in": _r(self.ah_in_as / 3600.0)},
        }
        out["harvest"] = self._harvest(delivered_j)
        # the dump's share of the input counts what the source fed it; the input counts the
        # rotor's kinetic energy given back too (a slowing rotor feeds the bus), so the share
        # is at most 1
        src_j = in_j + max(0.0, -led["rotor_stored_j"])
        dump_src_j = max(0.0, led["loss_dump_j"] - self.dump_store_j)
        out["dump_share"] = _r(dump_src_j / src_j) if in_j >= TURNED_J else None
        out["dump"] = {"excused_wh": _r(self.dump_excused_j / WH),
                       "from_storage_wh": _r(self.dump_store_j / WH),
                       "while_store_had_room_wh": _r(self.dump_waste_j / WH),
                       "while_store_had_room_share": _r(self.dump_waste_j / src_j)
                       if in_j >= TURNED_J else None}
        out["acceptance"] = self._acceptance()
        out["time_to_absorption_s"] = _r(self.t_abs)
        out["time_to_float_s"] = _r(self.t_float)
        out["usb"] = {"served_wh": _r(led["usb_out_j"] / WH), "wanted_s": _r(self.usb_wanted_s),
                      "on_while_wanted_s": _r(self.usb_on_wanted_s)}
        out["blocked"] = {"total_s": _r(self.blocked_s),
                          "reasons_s": dict([(FAULT_NAMES[i], _r(x))
                                             for i, x in enumerate(self.blocked_by) if x > 0]
                                            + ([("none", _r(self.blocked_other_s))]
                                               if self.blocked_other_s > 0 else []))}
        out["stage_changes"] = {"count": len(self.changes),
                                "most_in_60_s": self._most_in_window(),
                                "temp_window_flips": self.temp_flips,
                                "temp_edge_crossings": self.temp_crossings}
        out["absorption"] = {"spells": len(self.abs_spells),
                             "longest_charging_s": _r(max([x[0] for x in self.abs_spells],
                                                         default=0.0)),
                             "longest_tail_met_s": _r(max([x[1] for x in self.abs_spells],
                                                         default=0.0))}
        out["source"] = {"machine_rpm_max": _r(self.rpm_max),
                         "emf_max_v": _r(self.plant.mach.k * self.rpm_max / RPM_PER_RAD_S)}
        out["warnings"] = self._warnings(led, in_j, net_ah, out)
        return out

    def _harvest(self, delivered_j):
        d = {"ratio": None, "delivered_wh": _r(delivered_j / WH), "offered_wh": None,
             "basis": self.best.kind, "null_reason": None}
        if self.best.kind is None:
            d["null_reason"] = self.best.null_reason
            return d
        if self.offered_nan:
            d["null_reason"] = "the source's best power was not defined in some periods"
            return d
        d["offered_wh"] = _r(self.offered_j / WH)
        if self.offered_j < TURNED_J:
            d["null_reason"] = ("the source offered almost nothing (%.3g J, less than %.0f J)"
                                % (self.offered_j, TURNED_J))
            return d
        if delivered_j < 0.0:
            d["null_reason"] = ("the stores gave out %.3g Wh more than the stores and loads "
                                "gained: what was delivered is not the source's harvest"
                                % (-delivered_j / WH))
            return d
        d["ratio"] = _r(delivered_j / self.offered_j)
        return d

    def _acceptance(self):
        d = {"ratio": None, "bulk_s": _r(self.bulk_s), "judged_s": None, "mean_a": None,
             "possible_a": None,
             "limit_a": _r(self.lim_a), "null_reason": None}
        if self.bulk_s <= 0.0:
            d["null_reason"] = "the battery was never in bulk"
            return d
        d["mean_a"] = _r(self.bulk_as / self.bulk_s)
        if self.best.kind is None or self.offered_nan:
            d["null_reason"] = ("what the source could give is not defined: "
                                + (self.best.null_reason or "no best power in some periods"))
            return d
        d["judged_s"] = _r(self.accept_s)
        if self.accept_s < ACCEPT_MIN_S:
            d["null_reason"] = ("the source could give the battery %.0f %% of its charge limit "
                                "or more for only %.1f s of bulk (less than %.0f s)"
                                % (100 * ACCEPT_FLOOR, self.accept_s, ACCEPT_MIN_S))
            return d
        d["possible_a"] = _r(self.bulk_poss_as / self.accept_s)
        d["ratio"] = _r(self.accept_as / self.bulk_poss_as)
        return d

    def _most_in_window(self):
        ch = self.changes
        best = 0
        j = 0
        for i in range(len(ch)):
            while ch[i] - ch[j] >= CHATTER_WINDOW_S:
                j += 1
            if i - j + 1 > best:
                best = i - j + 1
        return best

    def _warnings(self, led, in_j, net_ah, out):
        w = []
        sc = self.sc
        p = self.p
        b = self.plant.batt
        batt_here = sc.doc["battery"]["present"] and self.connected_s > 0.0
        turned = led["drive_in_j"] >= TURNED_J
        for code, msg in mismatches(sc):
            w.append((code, msg))
        if batt_here and turned:
            need, parts = self.need_emf_v()
            emf = out["source"]["emf_max_v"]
            below = emf < need
            if below:
                w.append(("source_below_battery",
                          "the machine's EMF peaked at %.2f V (K_e %g V/krpm at %.0f rpm, the "
                          "drive's top speed, at %.1f s); charging the battery needs %.2f V (%s):"
                          " short by %.2f V" % (emf, sc.doc["machine"]["ke_v_per_krpm"],
                                                self.rpm_max, self.t_rpm_max, need, parts,
                                                need - emf)))
            if (net_ah <= NO_CHARGE_AH and self.t_abs is None
                    and sc.doc["battery"]["soc0"] < FULL_SOC and not below):
                w.append(self._no_charge(led, net_ah, out))
        if self.dump_store_j > STORAGE_DUMP_J:
            w.append(("dump_from_storage",
                      "the dump load burnt %.3f Wh drained from the stores (more than the source "
                      "put on the bus in the same periods: the battery or the bank fed the dump "
                      "through its OR-ing diode); the controller switched the dump on with the bus "
                      "below the stores (warning above %.2f Wh)"
                      % (self.dump_store_j / WH, STORAGE_DUMP_J / WH)))
        if in_j >= TURNED_J and self.dump_waste_j > DUMP_WASTE_SHARE * in_j:
            w.append(("dump_waste",
                      "the dump load took %.2f Wh (%.1f %% of the input %.2f Wh) while a store "
                      "was below its ceiling and its current limit and could have taken it "
                      "(trips, their release ramp and overspeed excused; warning above %.0f %%)"
                      % (self.dump_waste_j / WH, 100 * self.dump_waste_j / in_j, in_j / WH,
                         100 * DUMP_WASTE_SHARE)))
        st = out["stage_changes"]
        allowed = CHATTER_PER_CROSSING * max(1, self.temp_crossings)
        if self.temp_flips > allowed:
            w.append(("stage_chatter",
                      "%d stage changes into or out of a temperature-window block against %d "
                      "crossing(s) of a window edge by the true battery temperature (at most %d "
                      "per crossing)" % (self.temp_flips, self.temp_crossings,
                                         CHATTER_PER_CROSSING)))
        top = 2 * p.lockout_trips + 2
        if st["most_in_60_s"] > top:
            w.append(("stage_chatter",
                      "%d stage changes within 60 s (at most %d: two per trip up to the guard's "
                      "lockout, plus one charging move)" % (st["most_in_60_s"], top)))
        abs_max_s = p.abs_max_ms / 1000.0
        tail_hold_s = p.tail_hold_ms / 1000.0
        for i, (chg, tail, ended) in enumerate(self.abs_spells):
            if chg > abs_max_s + ABS_OVER_S:
                w.append(("absorption_stuck",
                          "absorption spell %d charged for %.0f s, past its time limit of %.0f s"
                          % (i + 1, chg, abs_max_s)))
            elif not ended and tail >= TAIL_HOLDS * tail_hold_s:
                w.append(("absorption_stuck",
                          "absorption spell %d never reached float although the tail condition "
                          "(at voltage, current at or below %.2f A) was met for %.0f s in all, "
                          "%.0f times the %.0f s hold" % (i + 1, self.tail_a, tail,
                                                          tail / tail_hold_s, tail_hold_s)))
        return [{"code": c, "message": m} for c, m in w]

    def _no_charge(self, led, net_ah, out):
        """The battery gained no charge although the source turned and could reach it: say
        whether the controller refused (a block), the site is too weak for its loads, or the
        controller failed to charge. (code, message)"""
        got = "the battery gained no charge (net %+.3f Ah, %.3f Ah in at its terminals)" % (
            net_ah, self.ah_in_as / 3600.0)
        bl = out["blocked"]
        reasons = ", ".join("%s %.0f s" % kv for kv in bl["reasons_s"].items())
        if self.blocked_s >= BLOCKED_SHARE * self.connected_s:
            return ("charge_blocked",
                    "%s: the controller held charging blocked for %.0f of the %.0f s the battery "
                    "was connected (%s); a protective refusal (battery outside its temperature "
                    "window, a sensor fault, the battery absent), not a charging failure"
                    % (got, self.blocked_s, self.connected_s, reasons))
        need_j = led["usb_out_j"] / self.eta_usb + led["loads_out_j"] / self.eta_b
        base_j, base = self.offered_j, "the source's best"
        if self.best.kind is None or self.offered_nan:
            base_j, base = led["drive_in_j"], "the drive's input"
        if need_j >= base_j:
            return ("loads_exceed_source",
                    "%s: the loads took more than the source gave: USB and loads took %.2f Wh at "
                    "the bus against %.2f Wh, %s; the battery covered the rest. The site is too "
                    "weak for its loads, not a controller failure" % (
                        got, need_j / WH, base_j / WH, base))
        why = "; blocked %.0f s (%s)" % (bl["total_s"], reasons) if bl["total_s"] else ""
        return ("no_charge",
                "%s although the drive put in %.2f Wh and the source offered %.2f Wh against "
                "%.2f Wh the USB and loads took at the bus: the source could have covered the "
                "loads and charged%s" % (got, led["drive_in_j"] / WH, base_j / WH, need_j / WH,
                                          why))

    def need_emf_v(self):
        """The EMF the machine must reach to push charge into the battery at its lowest true
        voltage: battery / max duty + the bridge's two diodes + the armature drop, at
        BELOW_AT_LIMIT of the charge limit. (volts, how it is made up)"""
        pl = self.plant
        i0 = BELOW_AT_LIMIT * self.lim_a
        vb = self.vb_min if self.vb_min < math.inf else pl.batt.e_int
        md = self.sc.doc["converters"]["batt"]["max_duty"]
        bridge = pl.diode.bridge_drop(i0)
        arm = i0 * pl.mach.ra
        need = vb / md + bridge + arm
        parts = ("battery %.2f V / max duty %g + bridge %.2f V + armature %.2f V at %.2f A"
                 % (vb, md, bridge, arm, i0))
        return need, parts


def mismatches(sc):
    """profile_mismatch warnings: the scenario's battery or supercap bank is not the one the
    controller's profile describes. [(code, message)]; names in accept_mismatch are skipped."""
    p = sc.profile
    b = sc.doc["battery"]
    cap = sc.doc["supercap"]
    accept = set(sc.doc.get("accept_mismatch") or ())
    out = []
    if b["present"]:
        if b["chemistry"] != p.chemistry and "chemistry" not in accept:
            out.append("battery chemistry %s, profile chemistry %s (setpoints, temperature "
                       "coefficient and equalize are another chemistry's)"
                       % (b["chemistry"], p.chemistry))
        if b["cells"] != p.cells and "cells" not in accept:
            out.append("battery of %d cells on a %d-cell profile (every ceiling is scaled to %d "
                       "cells)" % (b["cells"], p.cells, p.cells))
        prof_ah = p.capacity_mah / 1000.0
        if abs(b["capacity_ah"] - prof_ah) > CAPACITY_TOL * prof_ah and "capacity_ah" not in accept:
            out.append("battery of %g Ah on a %g Ah profile (charge limit %.2f A, tail %.2f A are "
                       "the profile's; more than %.0f %% apart)" % (
                           b["capacity_ah"], prof_ah, p.chg_limit_ma / 1000.0, p.tail_ma / 1000.0,
                           100 * CAPACITY_TOL))
    if cap["present"] and cap["cells"] != p.cap_cells and "supercap_cells" not in accept:
        out.append("supercap bank of %d cells on a %d-cell profile (the clamp is %.2f V for %d "
                   "cells of %.2f V)" % (cap["cells"], p.cap_cells, p.cap_clamp_mv / 1000.0,
                                         p.cap_cells, p.cap_cell_rating_mv / 1000.0))
    return [("profile_mismatch", m + "; a deliberate study opts out with accept_mismatch")
            for m in out]


# ---- campaigns (fuzz, sweep) ------------------------------------------------------------------
# the service figures a campaign keeps per run, and which way is worse
FIGURES = (("harvest_ratio", "low"), ("acceptance_ratio", "low"), ("dump_share", "high"),
           ("dump_room_share", "high"), ("dump_storage_wh", "high"))


def brief(sv):
    """The service figures and warning codes of one run, for campaign records (fuzz, sweep)."""
    if not sv:
        return None
    return {"warnings": sorted({w["code"] for w in sv["warnings"]}),
            "harvest_ratio": sv["harvest"]["ratio"],
            "acceptance_ratio": sv["acceptance"]["ratio"],
            "dump_share": sv["dump_share"],
            "dump_room_share": sv["dump"]["while_store_had_room_share"],
            "dump_storage_wh": sv["dump"]["from_storage_wh"],
            "batt_net_ah": sv["battery_ah"]["net"]}


def counts(records):
    """warning code -> number of records (examples, samples) that raised it."""
    n = {}
    for r in records:
        for code in (r.get("service") or {}).get("warnings", ()):
            n[code] = n.get(code, 0) + 1
    return dict(sorted(n.items()))


def worst(records):
    """figure -> (value, record) of the worst value over the records (low ratios, high shares)."""
    out = {}
    for r in records:
        sv = r.get("service")
        if not sv:
            continue
        for k, way in FIGURES:
            x = sv.get(k)
            if x is None:
                continue
            if k not in out or (x < out[k][0] if way == "low" else x > out[k][0]):
                out[k] = (x, r)
    return out


def print_campaign(records, label, key, out):
    """Two lines: the warning counts and the worst service figures (key: 'i' or 'sample')."""
    n_code = counts(records)
    n = sum(1 for r in records if (r.get("service") or {}).get("warnings"))
    if n_code:
        print("service warnings (not limit crossings): %d of %d %ss: %s" % (
            n, len(records), label, ", ".join("%s %d" % kv for kv in n_code.items())), file=out)
    else:
        print("service warnings (not limit crossings): none", file=out)
    bad = worst(records)
    if bad:
        print("worst service figures: %s" % "; ".join(
            "%s %.3f (%s %d%s)" % (k, x, label, r[key], ", " + r["base"] if "base" in r else "")
            for k, (x, r) in bad.items()), file=out)


def _name(name, i):
    return name or "load %d" % i


def _r(x, nd=4):
    if x is None:
        return None
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return round(float(x), nd)
