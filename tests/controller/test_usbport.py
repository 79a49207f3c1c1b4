"""usbport: the data-line classifier against BC1.2 and the divider levels, and the port's
converter hysteresis, debounce, same-tick disable and probe handling."""
import pytest
from ctl_bench import build, doc_with

from controller import usbport
from controller.signals import F_USB_LINES, Measurements
from controller.usbport import (
    M_DCP,
    M_DIV_2V0_2V7,
    M_DIV_2V7_2V0,
    M_DIV_2V7_2V7,
    M_NONE,
    M_SHORT_1V2,
    UsbPort,
    classify,
)

TOL_PCT = 8  # default line tolerance
SHORT_MV = 100  # default short tolerance


def cls(dp_mv, dm_mv, vbus_mv=5000, probe=0, tol_pct=TOL_PCT, short_mv=SHORT_MV):
    return classify(dp_mv, dm_mv, vbus_mv, probe, tol_pct, short_mv)


# --- BC1.2 dedicated charging port --------------------------------------------------------------
# BC1.2 §1.4.7 (the definition): a DCP has D+ shorted to D- (R_DCP_DAT 0-200 ohm, BC1.2 ch. 5
# resistances table). While probing, the board sources V_DP_SRC on D+ (0.5-0.7 V) and D- must
# follow above V_DAT_REF (0.25-0.4 V, so above 0.4 V whatever the comparator's threshold);
# both in BC1.2 ch. 5, "Parameter Values", DC electrical characteristics table.
@pytest.mark.parametrize("dp_mv", [500, 550, 600, 650, 700])
def test_probe_inside_v_dp_src_with_d_minus_following_is_dcp(dp_mv):
    assert cls(dp_mv, dp_mv, probe=1) == M_DCP
    assert cls(dp_mv, dp_mv - SHORT_MV, probe=1) == (M_DCP if dp_mv - SHORT_MV > 400 else M_NONE)


@pytest.mark.parametrize("dp_mv", [0, 300, 499, 701, 800, 1200])
def test_probe_outside_v_dp_src_is_not_dcp(dp_mv):
    assert cls(dp_mv, dp_mv, probe=1) == M_NONE


def test_d_minus_must_exceed_the_top_of_v_dat_ref():
    assert cls(500, 400, probe=1) == M_NONE  # 0.40 V: a comparator at 0.4 V may read it low
    assert cls(500, 401, probe=1) == M_DCP
    assert cls(450, 410, probe=1) == M_NONE  # D+ under V_DP_SRC's 0.5 V bottom


def test_probe_on_lines_not_shorted_is_not_dcp():
    # D- left low while D+ is sourced: the lines are not tied together (a data port, an open
    # cable), whatever D+ reads
    assert cls(600, 0, probe=1) == M_NONE
    assert cls(600, 600 - SHORT_MV - 1, probe=1) == M_NONE
    assert cls(600, 600 + SHORT_MV + 1, probe=1) == M_NONE


def test_probe_on_rejects_every_other_scheme():
    for dp_mv, dm_mv in ((1998, 2686), (2686, 1998), (2686, 2686), (1201, 1201)):
        assert cls(dp_mv, dm_mv, probe=1) == M_NONE


def test_port_on_dcp_lines_stay_shorted_below_v_lgc():
    # probe off (port on): the lines must stay equal and below V_LGC's bottom, 0.8 V
    # (V_LGC 0.8-2.0 V, BC1.2 ch. 5 DC electrical characteristics)
    assert cls(0, 0) == M_DCP
    assert cls(790, 760) == M_DCP
    assert cls(799, 799) == M_DCP
    assert cls(800, 800) == M_NONE
    assert cls(799, 800) == M_NONE
    assert cls(300, 0) == M_NONE  # not shorted


# --- divider levels -----------------------------------------------------------------------------
def divider_mv(top_kohm, bottom_kohm, vbus_mv):
    return vbus_mv * bottom_kohm / (top_kohm + bottom_kohm)


def test_divider_arithmetic_from_check_values():
    # divider arithmetic (derived, E96 values) from 5.00 V
    assert round(divider_mv(75, 49.9, 5000)) == 1998
    assert round(divider_mv(43, 49.9, 5000)) == 2686
    assert round(divider_mv(100, 31.6, 5000)) == 1201


LEVEL_20 = (75, 49.9)  # 1.998 V at 5.00 V
LEVEL_27 = (43, 49.9)  # 2.686 V
LEVEL_12 = (100, 31.6)  # 1.201 V
SCHEMES = [  # data-line schemes of common practice (no standard), named by their levels
    (M_DIV_2V0_2V7, LEVEL_20, LEVEL_27),
    (M_DIV_2V7_2V0, LEVEL_27, LEVEL_20),
    (M_DIV_2V7_2V7, LEVEL_27, LEVEL_27),
    (M_SHORT_1V2, LEVEL_12, LEVEL_12),
]


@pytest.mark.parametrize("want, dp_div, dm_div", SCHEMES)
@pytest.mark.parametrize("vbus_mv", [4750, 4900, 5000, 5100, 5250])
@pytest.mark.parametrize("tol_pct", [1, 3, 8, 14])
def test_divider_levels_accepted_for_their_scheme_at_any_vbus(want, dp_div, dm_div, vbus_mv,
                                                              tol_pct):
    # derived: a divider tracks VBUS; at the +/-5 % VBUS limits the line moves +/-5 %
    # (before resistor tolerance); the classifier's windows scale with the measured VBUS
    dp_mv = round(divider_mv(*dp_div, vbus_mv))
    dm_mv = round(divider_mv(*dm_div, vbus_mv))
    assert cls(dp_mv, dm_mv, vbus_mv, tol_pct=tol_pct) == want
    # and no other scheme's lines (nor the swapped ones) pass for it
    for other, o_dp, o_dm in SCHEMES:
        if other != want:
            assert cls(round(divider_mv(*o_dp, vbus_mv)), round(divider_mv(*o_dm, vbus_mv)),
                       vbus_mv, tol_pct=tol_pct) != want


@pytest.mark.parametrize("want, dp_div, dm_div", SCHEMES)
def test_windows_move_with_vbus(want, dp_div, dm_div):
    # ratiometric: the level a divider gives at 5.00 V is outside a 3 % window when VBUS reads
    # 5.25 V (it should have risen 5 % with VBUS), and the risen level is inside
    fixed = (round(divider_mv(*dp_div, 5000)), round(divider_mv(*dm_div, 5000)))
    risen = (round(divider_mv(*dp_div, 5250)), round(divider_mv(*dm_div, 5250)))
    fallen = (round(divider_mv(*dp_div, 4750)), round(divider_mv(*dm_div, 4750)))
    assert cls(*fixed, 5250, tol_pct=3) == M_NONE
    assert cls(*risen, 5250, tol_pct=3) == want
    assert cls(*fixed, 4750, tol_pct=3) == M_NONE
    assert cls(*fallen, 4750, tol_pct=3) == want
    assert cls(*risen, 4750, tol_pct=3) == M_NONE


def test_window_edges_at_5v():
    # 2.0 V level at VBUS 5.00 V, 8 %: 1.840-2.160 V; 2.7 V level: 2.484-2.916 V
    assert cls(1840, 2700) == M_DIV_2V0_2V7
    assert cls(1839, 2700) == M_NONE
    assert cls(2160, 2700) == M_DIV_2V0_2V7
    assert cls(2161, 2700) == M_NONE
    assert cls(2000, 2484) == M_DIV_2V0_2V7
    assert cls(2000, 2483) == M_NONE
    assert cls(2000, 2916) == M_DIV_2V0_2V7
    assert cls(2000, 2917) == M_NONE


def test_level_windows_never_overlap_within_the_allowed_tolerances():
    # profile cap line_tolerance_pct <= 14 "wider windows would confuse the 2.0 V and 2.7 V
    # levels": for every allowed tolerance and VBUS across the BC1.2 V_CHG window (ch. 5,
    # 4.75-5.25 V), the top of the 2.0 V window stays under the bottom of the 2.7 V window,
    # and the 1.2 V window stays above the DCP's 0.8 V logic bound (V_LGC, ch. 5)
    for tol_pct in range(1, 15):
        assert tol_pct < 100 * 700 / 4700  # 2.0 (1 + t) < 2.7 (1 - t)
        for vbus_mv in range(4750, 5251, 25):
            dm_27 = round(divider_mv(*LEVEL_27, vbus_mv))
            top_20 = round(divider_mv(*LEVEL_20, vbus_mv))  # walk up out of the 2.0 V window
            assert cls(top_20, dm_27, vbus_mv, tol_pct=tol_pct) == M_DIV_2V0_2V7
            while cls(top_20 + 1, dm_27, vbus_mv, tol_pct=tol_pct) == M_DIV_2V0_2V7:
                top_20 += 1
            bottom_27 = dm_27  # walk down out of the 2.7 V window
            assert cls(bottom_27, dm_27, vbus_mv, tol_pct=tol_pct) == M_DIV_2V7_2V7
            while cls(bottom_27 - 1, dm_27, vbus_mv, tol_pct=tol_pct) == M_DIV_2V7_2V7:
                bottom_27 -= 1
            assert top_20 < bottom_27
            in_12 = [x for x in range(700, 1100)
                     if cls(x, x, vbus_mv, tol_pct=tol_pct) == M_SHORT_1V2]
            assert not in_12 or min(in_12) > 800


# --- the port ------------------------------------------------------------------------------------
class Port:
    """A UsbPort with its own Measurements, stepped with a fixed dt."""

    def __init__(self, **kw):
        self.p = build(doc_with(**kw))
        self.port = UsbPort(self.p)
        self.m = Measurements()

    def step(self, n=1, dt_ms=50, **fields):
        for k, v in fields.items():
            setattr(self.m, k, v)
        for _ in range(n):
            self.port.update(self.m, dt_ms)
        return self.port


def dcp_lines(port):
    """A DCP's lines as they read this tick: the probe's 0.6 V on both while probed, else 0."""
    v = 600 if port.port.probe else 0
    port.m.usb_dp_mv = v
    port.m.usb_dm_mv = v - 20


def test_converter_hysteresis():
    # bus_min 7.0 V, hysteresis 0.5 V
    u = Port()
    assert u.step(bus_mv=6999).conv == 0
    assert u.step(bus_mv=7000).conv == 1
    assert u.step(bus_mv=6500).conv == 1
    assert u.step(bus_mv=6499).conv == 0
    assert u.step(bus_mv=6900).conv == 0


def test_dcp_port_probes_then_closes_after_the_debounce():
    u = Port()  # dcp, debounce 250 ms
    u.step(bus_mv=12000, usb_vbus_mv=0)
    assert u.port.conv == 1 and u.port.probe == 1 and u.port.on == 0
    assert u.port.fault == 0  # converter on, VBUS still 0: starting, not a line fault
    u.m.usb_vbus_mv = 5000
    for k in range(5):  # 250 ms of matching readings, taken with the probe on
        dcp_lines(u)
        u.step()
        assert u.port.match == M_DCP
        assert u.port.on == (1 if k == 4 else 0)
    assert u.port.probe == 0  # port on: probe off, the lines now read 0 V and still match
    dcp_lines(u)
    assert u.step().on == 1 and u.port.match == M_DCP and u.port.fault == 0


def test_same_tick_disable():
    u = Port()
    u.m.usb_vbus_mv = 5000
    u.step(bus_mv=12000)
    for _ in range(6):
        dcp_lines(u)
        u.step()
    assert u.port.on == 1
    for field, bad in (("usb_vbus_mv", 4749), ("usb_vbus_mv", 5251), ("usb_dp_mv", 900)):
        good = getattr(u.m, field)
        dcp_lines(u)
        setattr(u.m, field, bad)
        assert u.step().on == 0, field  # the first bad reading opens the port
        assert u.port.fault == F_USB_LINES
        u.m.usb_vbus_mv = 5000
        # after VBUS left the window with the port on, the port stays open 5 s
        # (usbport._HOLD_OFF_MS), then closes after the debounce as before
        n_hold = 0 if field == "usb_dp_mv" else usbport._HOLD_OFF_MS // 50
        for _ in range(n_hold + 6):
            dcp_lines(u)
            u.step()
            if u.port.on:
                break
        assert u.port.on == 1 and _ >= n_hold, (field, _)
        setattr(u.m, field, good)
    u.step(bus_mv=6400)  # converter stops: the port opens with it
    assert u.port.on == 0 and u.port.conv == 0 and u.port.fault == 0


def test_debounce_restarts_on_a_glitch():
    u = Port(usb__debounce_ms=200)
    u.m.usb_vbus_mv = 5000
    u.step(bus_mv=12000)
    for _ in range(3):
        dcp_lines(u)
        u.step()
    u.m.usb_dp_mv = 0  # one bad reading while probing (D+ should read ~0.6 V)
    u.step()
    for k in range(4):
        dcp_lines(u)
        u.step()
        assert u.port.on == (1 if k == 3 else 0)


def test_vbus_window_edges_are_inside():
    """Invariant (docs/profile.md sensors.vbus_gain_tol_pct): the port switches on only with
    the reading inside BC1.2 V_CHG (ch. 5) 4.75-5.25 V shrunk by the VBUS sensor's tolerance
    (0.5 % x edge, rounded up, + 4 mV: 4.778-5.219 V); the shrunk window's edges are inside,
    a reading 1 mV beyond them is not. Regression: a sensor 0.33 % high kept a port on for 41 s
    at a true 4.745 V (it read 4.761 V)."""
    for vbus_mv, on in ((4778, 1), (5219, 1), (4777, 0), (5220, 0), (4761, 0), (4750, 0)):
        u = Port(usb__scheme="div_2v7_2v7", usb__debounce_ms=10)
        assert (u.port.p.vbus_on_min_mv, u.port.p.vbus_on_max_mv) == (4778, 5219)
        u.step(bus_mv=12000)
        level = round(divider_mv(*LEVEL_27, vbus_mv))
        u.step(2, usb_vbus_mv=vbus_mv, usb_dp_mv=level, usb_dm_mv=level)
        assert u.port.on == on, vbus_mv


def test_divider_schemes_never_probe():
    u = Port(usb__scheme="div_2v0_2v7")
    u.step(bus_mv=12000, usb_vbus_mv=5000, usb_dp_mv=1998, usb_dm_mv=2686)
    assert u.port.probe == 0 and u.port.match == M_DIV_2V0_2V7
    u.step(5)
    assert u.port.on == 1 and u.port.probe == 0


def test_dcp_readings_judged_by_the_probe_state_they_were_taken_in():
    # lines reading 0 V are a DCP's with the probe off (port on), but with the probe on a DCP's
    # D- follows D+ up to V_DP_SRC: the same 0 V then means no DCP. The tick that turns the
    # probe on still judges readings taken with it off.
    u = Port()
    u.step(bus_mv=12000, usb_vbus_mv=5000, usb_dp_mv=0, usb_dm_mv=0)
    assert u.port.probe == 1 and u.port.match == M_DCP  # read with the probe still off
    u.step()
    assert u.port.match == M_NONE and u.port.on == 0  # read with it on: the lines did not follow
    u.step(usb_dp_mv=600, usb_dm_mv=600)
    assert u.port.match == M_DCP


def test_block_resets_everything():
    u = Port()
    u.m.usb_vbus_mv = 5000
    u.step(bus_mv=12000)
    for _ in range(6):
        dcp_lines(u)
        u.step()
    assert u.port.on == 1
    u.port.block()
    assert (u.port.conv, u.port.on, u.port.probe, u.port.ok_ms, u.port.match) == (0, 0, 0, 0,
                                                                                 M_NONE)
