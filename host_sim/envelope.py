# The closed-loop envelope's one derived bound: how strong a human drive the dump load can hold.
#
# During an overvoltage trip the storage converters and the USB port are off and the dump
# resistor alone loads the generator (with the bleeder and the surge clamp). In steady state at
# crank speed v the person's power goes into the machine through the gear; it comes out as the
# armature's EMF times the current (copper, bridge and dump) and as friction. Take the bus at
# the limit the closed-loop check allows (the trip plus the clamp's margin) with the full dump:
#   I = V_lim / R_dump + V_lim / R_bleed + I_clamp(V_lim)
#   E = V_lim + 2 Vf(I) + I R_a          (the bridge: two diodes conduct)
#   w = E / K_e,  P_machine = E I + T_friction(w) w,  P_drive = P_machine / eta_gear
# A person who can give no more than P_drive at the crank cannot hold the bus at V_lim against
# the full dump: wherever the bus would sit higher the machine turns faster and takes more than
# P_drive, so the rotor slows (the absorbed power rises with speed; the person's falls above
# their cadence). This bounds the sustained state only: the approach to the trip is the soft
# zone's and the latch's job, and the campaigns test it.
#
# Sources: the circuit relations are Kirchhoff's laws with the permanent-magnet machine's
# E = K_e w and T = K_t I (K_t = K_e in SI units; any machines text, e.g. Hughes and Drury,
# Electric Motors and Drives, chapter 3, from memory); the diode curve and machine are the
# plant's own (host_sim/plant/diode.py, machine.py).
import math

from host_sim.plant.diode import Diode
from host_sim.plant.machine import Machine

HUMAN_DRIVES = ("pedal", "crank")
# the draw keeps a person this far under what the dump holds: the plant's rider is quasi-static
# (power-limited, no sprint above the fresh power), the margin covers the period-scale transients
MARGIN = 0.9


def dump_hold(trip_v, doc):
    """(drive-side power in W, crank speed in rpm) that the full dump absorbs with the bus at
    the closed-loop limit. trip_v: the profile's overvoltage trip, V; doc: a resolved scenario
    document (its bus, machine, rectifier and gear sections, every field present)."""
    b = doc["bus"]
    v_lim = trip_v + b["clamp_margin_v"]
    i_a = (v_lim / b["dump_ohm"] + v_lim / b["bleed_ohm"]
           + 1e-3 * (v_lim / b["clamp_knee_v"]) ** b["clamp_alpha"])
    mach = Machine.from_doc(doc["machine"])
    e_v = v_lim + Diode.from_doc(doc["rectifier"]).bridge_drop(i_a) + i_a * mach.ra
    w = e_v / mach.k
    t_fric, _ = mach.friction(w)  # negative: it opposes the turning
    p_machine_w = e_v * i_a - t_fric * w
    g = doc["gear"]
    p_drive_w = p_machine_w / g["efficiency"]
    crank_rpm = w / g["ratio"] * 60.0 / (2.0 * math.pi)
    return p_drive_w, crank_rpm


def scenario_hold(sc):
    """dump_hold for a loaded scenario (host_sim.scenario.Scenario)."""
    return dump_hold(sc.profile.ovp_trip_mv / 1000.0, sc.doc)


def effort_max(p_drive_w, power_start_w, margin=MARGIN):
    """The largest effort (the drive's scale on its power curve) a person with this fresh power
    may have so their best, effort x power_start_w, stays within margin x what the dump holds."""
    return margin * p_drive_w / power_start_w


# Wind: the same balance on the plant's rotor curve. The turbulence is a unit-variance series
# scaled by the turbulence intensity (host_sim/plant/drive.py Wind), so the wind reaches
# mean x (1 + 3 TI) at its three-sigma peaks, plus any gust on top; a peak lasts seconds
# (the series' time constant), long enough for the rotor to follow it.
TURB_SIGMAS = 3.0


def wind_hold(trip_v, doc):
    """The steady wind speed, m/s, at which the rotor turning at the speed of the bus limit
    gives just what the full dump absorbs there (dump_hold). A stronger wind, held, holds the
    bus above the limit. doc: a resolved scenario document with a wind drive."""
    import numpy as np

    from host_sim.plant.drive import Wind
    p_drive_w, rotor_rpm = dump_hold(trip_v, doc)
    w_r = rotor_rpm * 2.0 * math.pi / 60.0  # rotor speed, rad/s
    # the plant's own rotor curve (its wind series is not used: a second of it is drawn)
    rotor = Wind(doc["drive"], np.random.default_rng(0), 1.0)

    def p_rotor_w(v):
        return float(rotor.torque_array(v, w_r)) * w_r

    # at a fixed rotor speed the rotor's power rises with the wind: bisect
    lo, hi = 0.1, 100.0
    if p_rotor_w(hi) < p_drive_w:
        return hi
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if p_rotor_w(mid) < p_drive_w:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def gust_peak_ms(gusts):
    """The largest sum of the gusts' pulses at any one time, m/s (the plant's own gust shape,
    on 2,001 points over the span of the gusts)."""
    if not gusts:
        return 0.0
    import numpy as np

    from host_sim.plant.drive import gust_series
    t0 = min(gu["t_s"] for gu in gusts)
    t1 = max(gu["t_s"] + gu["duration_s"] for gu in gusts)
    return float(gust_series(gusts, np.linspace(t0, t1, 2001)).max())


def wind_mean_max(v_hold_ms, turbulence_pct, gust_ms):
    """The strongest mean wind whose three-sigma turbulence peak plus gusts stays within
    MARGIN x the wind the dump holds."""
    return (MARGIN * v_hold_ms - gust_ms) / (1.0 + TURB_SIGMAS * turbulence_pct / 100.0)


# ---- How fast a person's torque may build: the one-period reaction delay --------------------
# The bound above is a steady state. A person who starts turning (or starts again after a
# rest) spins the rotor up, and once the bridge conducts the bus follows the EMF (its RC with
# the armature, R_a C_bus, is a fraction of a millisecond). The controller sees the bus once
# per period and answers at the next tick, so between two ticks nothing but the commands of
# the last tick load the generator. Where no dump is on, at or below the soft zone's bottom
# (the profile's ovp_recover_v: below it the bus may sit, unloaded by the dump, for as long as
# it likes), the bus can rise for one whole period before the controller sees it rise:
#   J dw/dt <= T_person(w) eta_gear / ratio          (Newton, on the machine shaft; friction and
#                                                    every load left out, so it is an upper bound)
#   dV/dt <= dE/dt = K_e dw/dt                       (the bus under the EMF while it conducts)
#   dV in one period T <= K_e T_m T / J,   T_m = eta / ratio x min(torque_max, P / max(v, 0.3 v_c))
# with the person's torque at the lowest crank speed v where the bus can be at the soft zone's
# bottom (v = V_recover / (K_e ratio)): the plant's person (drive.py Human) gives at most their
# torque limit, and above 0.3 x cadence v_c at most their power P over the speed, which only
# falls as the rotor speeds up. Their torque also ends at 1.15 x cadence (the plant's taper),
# so the EMF never exceeds E_max = K_e x 1.15 v_c ratio, and the bus never exceeds it either.
# After that one period the controller sees the rise: the soft zone reads the bus where twice
# the last rise would take it, so with a rise no steeper than the first the full dump is on
# before the bus reaches the trip, and from there the steady bound above holds the bus (the
# rotor is first order: it settles on the dump's line without overshoot). So a once-per-period
# controller holds the bus under the limit when
#   E_max <= V_lim,   or   V_recover + K_e T_m T / J <= V_recover + MARGIN (V_lim - V_recover).
# The bound is for a torque that steps up at once: it holds for every rise time
# (drive.start_ramp_s), down to the plant's shortest. A slower build only helps after a rest
# long enough to stop the rotor, which the bound does not count on. Outside it a controller
# acting once per period cannot hold the bus with the dump alone: that needs a shorter period,
# a larger bus capacitor, or a hardware clamp that answers within the period.
CADENCE_TAPER = 1.15  # drive.py Human: torque falls to zero at 1.15 x cadence
LOW_SPEED = 0.3  # drive.py Human: below 0.3 x cadence the person's torque is P / (0.3 v_c)


def rise_hold(trip_v, recover_v, period_s, doc, best_w):
    """The one-period rise a person can give the bus (a dict): e_max_v (highest EMF the person
    reaches), slew_v_s (steepest bus rise at the soft zone's bottom), rise_v (one period of it),
    room_v (MARGIN x (limit - recovery)), inside (the bus is held whatever the rise time) and
    torque_cap_nm (the largest drive.torque_max_nm that stays inside; inf if the EMF alone
    keeps it). trip_v, recover_v: the profile's overvoltage trip and recovery, V; period_s: the
    control period; doc: a resolved scenario document (bus, machine, gear, drive); best_w: the
    person's best power (effort x power_start_w), W."""
    mach = Machine.from_doc(doc["machine"])
    g, d = doc["gear"], doc["drive"]
    ratio, eta = g["ratio"], g["efficiency"]
    j = mach.j + d["inertia_kg_m2"] / ratio ** 2  # at the machine, as the plant has it
    v_lim = trip_v + doc["bus"]["clamp_margin_v"]
    w_c = d["cadence_rpm"] * 2.0 * math.pi / 60.0  # cadence, rad/s at the crank
    e_max = mach.k * CADENCE_TAPER * w_c * ratio
    v_low = max(recover_v / (mach.k * ratio), LOW_SPEED * w_c)  # crank speed, rad/s
    t_power = best_w / v_low  # the torque the person's power allows there, N m at the crank
    t_crank = min(d["torque_max_nm"], t_power)
    slew = mach.k * t_crank * eta / ratio / j
    room = MARGIN * (v_lim - recover_v)
    if e_max <= v_lim:
        cap = math.inf
    elif t_power * eta / ratio * mach.k / j * period_s <= room:
        cap = math.inf  # the person's power alone keeps the rise inside
    else:
        cap = room * j * ratio / (mach.k * eta * period_s)
    rise = slew * period_s
    return {"e_max_v": e_max, "slew_v_s": slew, "rise_v": rise, "room_v": room,
            "inside": e_max <= v_lim or rise <= room, "torque_cap_nm": cap}


def scenario_rise(sc):
    """rise_hold for a loaded scenario with a human drive."""
    p = sc.profile_doc.get("bus", {})
    d = sc.doc["drive"]
    return rise_hold(p.get("ovp_trip_v", 24), p.get("ovp_recover_v", 21),
                     sc.profile_doc.get("control", {}).get("period_ms", 50) / 1000.0, sc.doc,
                     d["effort"] * d["power_start_w"])
