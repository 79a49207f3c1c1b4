# USB port check. The 5 V converter runs when the bus is high enough (with hysteresis); the
# port's load switch closes only after VBUS and the data lines have matched the configured
# signalling scheme for the debounce time, and opens in the same tick either stops matching.
#
# Levels (BC1.2 = USB Battery Charging Specification Rev. 1.2; its values are in chapter 5,
# "Parameter Values", named here by table title):
#  - dcp: dedicated charging port (BC1.2 1.4.7, the definition), D+ shorted to D- (R_DCP_DAT
#    0-200 ohm, ch. 5 resistances table). Before the port closes the board sources its D+ probe
#    (V_DP_SRC 0.5-0.7 V, ch. 5 DC electrical characteristics) and D- must follow above
#    V_DAT_REF's top, 0.4 V (same table). While the port is on (probe off) the lines must
#    stay equal and below V_LGC's bottom, 0.8 V (same table).
#  - div_*: resistor dividers from VBUS giving D+/D- levels of 2.0 V or 2.7 V at VBUS 5.00 V
#    (common practice). The windows scale with the measured VBUS (the dividers track it).
#  - short_1v2: D+ tied to D-, biased to about 1.2 V at VBUS 5.00 V (common practice).
from array import array

from controller.compat import MICROPYTHON, const, micropython

if not MICROPYTHON:  # on a board the viper compiler reads ptr32() itself
    from controller.compat import ptr32, state_names

_F_USB_LINES = const(4096)  # signals.F_USB_LINES as a const (a machine int in viper)

_M_NONE = const(0)  # usb_match: the readings match no scheme
# usb_match for a scheme is 1 + its index in profile_fields.SCHEMES
_M_DCP = const(1)
_M_DIV_2V0_2V7 = const(2)
_M_DIV_2V7_2V0 = const(3)
_M_DIV_2V7_2V7 = const(4)
_M_SHORT_1V2 = const(5)
# private: no dict entries on the board; the host's M_* and MATCH_NAMES: usbport_host.py

_VNOM_MV = const(5000)  # divider levels are quoted at VBUS = 5.00 V
_L20 = const(2000)
_L27 = const(2700)
_L12 = const(1200)
_DP_SRC_MIN_MV = const(500)  # BC1.2 ch. 5 DC table: V_DP_SRC
_DP_SRC_MAX_MV = const(700)
_DAT_REF_MAX_MV = const(400)  # BC1.2 ch. 5 DC table: V_DAT_REF
_LGC_MIN_MV = const(800)  # BC1.2 ch. 5 DC table: V_LGC


@micropython.viper
def classify(dp_mv: int, dm_mv: int, vbus_mv: int, probe: int, tol_pct: int, short_mv: int) -> int:
    """Which scheme the data lines match (M_*). probe: 1 if the D+ probe was sourced.
    A divider level L matches within L x tol_pct / 100 around L x VBUS / 5.00 V (the dividers
    track VBUS); the windows are written out rather than called, a call costing more on a
    board than the arithmetic."""
    d = dp_mv - dm_mv
    shorted = -short_mv <= d <= short_mv
    if probe:
        if shorted and _DP_SRC_MIN_MV <= dp_mv <= _DP_SRC_MAX_MV and dm_mv > _DAT_REF_MAX_MV:
            return _M_DCP
        return _M_NONE
    if shorted:
        lv = (_L12 * vbus_mv) // _VNOM_MV
        w = (lv * tol_pct) // 100
        if lv - w <= dp_mv <= lv + w and lv - w <= dm_mv <= lv + w:
            return _M_SHORT_1V2
        if dp_mv < _LGC_MIN_MV and dm_mv < _LGC_MIN_MV:
            return _M_DCP
    l20 = (_L20 * vbus_mv) // _VNOM_MV
    w20 = (l20 * tol_pct) // 100
    l27 = (_L27 * vbus_mv) // _VNOM_MV
    w27 = (l27 * tol_pct) // 100
    if l20 - w20 <= dp_mv <= l20 + w20:
        if l27 - w27 <= dm_mv <= l27 + w27:
            return _M_DIV_2V0_2V7
    elif l27 - w27 <= dp_mv <= l27 + w27:
        if l20 - w20 <= dm_mv <= l20 + w20:
            return _M_DIV_2V7_2V0
        if l27 - w27 <= dm_mv <= l27 + w27:
            return _M_DIV_2V7_2V7
    return _M_NONE


# state slots of UsbPort.st (array('i'), all >= 0); the host names them (end of file)
_WANT = const(0)  # want: the usb_match value the profile asks for
_CONV = const(1)  # conv: 5 V converter enabled
_ON = const(2)  # on: port load switch closed
_PROBE = const(3)  # probe: D+ probe sourced by this tick's command
_PROBE_WAS = const(4)  # probe_was: probe state while this tick's readings were taken
_MATCH = const(5)  # match: scheme the latest readings match
_OK_MS = const(6)  # ok_ms: how long VBUS and lines have matched, ms
_FAULT = const(7)  # fault: this tick's fault bits (F_USB_LINES while the converter runs
# unmatched)
_CONV_MS = const(8)  # conv_ms: how long the converter has run, ms (capped at the debounce time)
_HOLD_MS = const(9)  # hold_ms: the port stays open this much longer, ms (after VBUS left the
# window under the device's load)
# A port whose VBUS leaves the window under the device's load stays open _HOLD_OFF_MS: the
# unloaded VBUS reads inside again at once, and a 0.1 ohm converter a phone pulled to 4.745 V
# was switched on and off every few periods (one period each time outside the window)
_HOLD_OFF_MS = const(5000)
# profile slots of UsbPort.cfg (array('i'))
_C_BUS_MIN_MV = const(0)
_C_BUS_HYST_MV = const(1)
_C_DEBOUNCE_MS = const(2)
_C_VBUS_MIN_MV = const(3)  # the VBUS window shrunk by the sensor's tolerance (profile_system)
_C_VBUS_MAX_MV = const(4)
_C_TOL_PCT = const(5)
_C_SHORT_MV = const(6)


class UsbPort:
    def __init__(self, p):
        self.p = p
        self.st = array("i", [0] * 10)  # the state, slots above
        self.st[_WANT] = p.scheme + 1
        self.cfg = array("i", [p.usb_bus_min_mv, p.usb_bus_hyst_mv, p.usb_debounce_ms,
                               p.vbus_on_min_mv, p.vbus_on_max_mv, p.line_tol_pct,
                               p.short_tol_mv])

    @micropython.viper
    def block(self):
        s = ptr32(self.st)
        s[_CONV] = 0
        s[_CONV_MS] = 0
        s[_ON] = 0
        s[_PROBE] = 0
        s[_PROBE_WAS] = 0
        s[_OK_MS] = 0
        s[_MATCH] = _M_NONE

    @micropython.viper
    def update(self, m, dt_ms: int):
        s = ptr32(self.st)
        cfg = ptr32(self.cfg)
        b = int(m.bus_mv)
        conv = s[_CONV]
        if conv:
            if b < cfg[_C_BUS_MIN_MV] - cfg[_C_BUS_HYST_MV]:
                conv = 0
        elif b >= cfg[_C_BUS_MIN_MV]:
            conv = 1
        s[_CONV] = conv
        deb = cfg[_C_DEBOUNCE_MS]
        conv_ms = 0
        if conv:
            conv_ms = s[_CONV_MS]
            if conv_ms < deb:
                conv_ms += dt_ms
        s[_CONV_MS] = conv_ms
        vbus = int(m.usb_vbus_mv)
        match = int(classify(int(m.usb_dp_mv), int(m.usb_dm_mv), vbus, s[_PROBE_WAS],
                             cfg[_C_TOL_PCT], cfg[_C_SHORT_MV]))
        s[_MATCH] = match
        want = s[_WANT]
        on = s[_ON]
        hold = s[_HOLD_MS]
        if hold > dt_ms:
            hold -= dt_ms
        else:
            hold = 0
        in_window = cfg[_C_VBUS_MIN_MV] <= vbus <= cfg[_C_VBUS_MAX_MV]
        if on and conv and not in_window:
            hold = _HOLD_OFF_MS
        s[_HOLD_MS] = hold
        ok = conv and in_window and match == want
        if ok and not hold:
            ok_ms = s[_OK_MS]
            if ok_ms < deb:
                ok_ms += dt_ms  # stops counting once on: stays a small int
                s[_OK_MS] = ok_ms
            if ok_ms >= deb:
                on = 1
            s[_FAULT] = 0
        else:
            s[_OK_MS] = 0
            on = 0
            # a fault once the converter has run for the debounce time: not while it starts
            s[_FAULT] = _F_USB_LINES if conv_ms >= deb and not ok else 0
        s[_ON] = on
        probe = 1 if (want == _M_DCP and conv and not on) else 0
        s[_PROBE] = probe
        s[_PROBE_WAS] = probe


if not MICROPYTHON:  # the host's names: M_* match codes and MATCH_NAMES
    from controller import usbport_host as _host
    _host.publish(globals())
    state_names(UsbPort, "st", want=_WANT, conv=_CONV, on=_ON, probe=_PROBE,
                probe_was=_PROBE_WAS, match=_MATCH, ok_ms=_OK_MS, fault=_FAULT,
                conv_ms=_CONV_MS, hold_ms=_HOLD_MS)
