# USB port check. The 5 V converter runs when the bus is high enough (with hysteresis); the
# port's load switch closes only after VBUS and the data lines have matched the configured
# signalling scheme for the debounce time, and opens in the same tick either stops matching.
#
# Levels (shared/reference/check-values.md):
#  - dcp: BC1.2 1.4.7 dedicated charging port, D+ shorted to D- (0-200 ohm). Before the port
#    closes the board sources its D+ probe (V_DP_SRC 0.5-0.7 V, BC1.2 1.4.2) and D- must follow
#    above V_DAT_REF's top, 0.4 V (BC1.2 1.4.4). While the port is on (probe off) the lines must
#    stay equal and below V_LGC's bottom, 0.8 V.
#  - div_*: resistor dividers from VBUS giving D+/D- levels of 2.0 V or 2.7 V at VBUS 5.00 V
#    (common practice). The windows scale with the measured VBUS (the dividers track it).
#  - short_1v2: D+ tied to D-, biased to about 1.2 V at VBUS 5.00 V (common practice).
from controller.compat import MICROPYTHON, const, micropython
from controller.signals import F_USB_LINES

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
_DP_SRC_MIN_MV = const(500)  # BC1.2 1.4.2 V_DP_SRC
_DP_SRC_MAX_MV = const(700)
_DAT_REF_MAX_MV = const(400)  # BC1.2 1.4.4 V_DAT_REF
_LGC_MIN_MV = const(800)  # BC1.2 1.4.4 V_LGC


@micropython.native
def classify(dp_mv, dm_mv, vbus_mv, probe, tol_pct, short_mv):
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


class UsbPort:
    def __init__(self, p):
        self.p = p
        self.want = p.scheme + 1  # the usb_match value the profile asks for
        self.conv = 0  # 5 V converter enabled
        self.on = 0  # port load switch closed
        self.probe = 0  # D+ probe sourced by this tick's command
        self.probe_was = 0  # probe state while this tick's readings were taken
        self.match = _M_NONE  # scheme the latest readings match
        self.ok_ms = 0  # how long VBUS and lines have matched, ms
        self.fault = 0  # this tick's fault bits (F_USB_LINES while the converter runs unmatched)
        self.conv_ms = 0  # how long the converter has run, ms (capped at the debounce time)

    @micropython.native
    def block(self):
        self.conv = 0
        self.conv_ms = 0
        self.on = 0
        self.probe = 0
        self.probe_was = 0
        self.ok_ms = 0
        self.match = _M_NONE

    @micropython.native
    def update(self, m, dt_ms):
        p = self.p
        b = m.bus_mv
        conv = self.conv
        if conv:
            if b < p.usb_bus_min_mv - p.usb_bus_hyst_mv:
                conv = 0
        elif b >= p.usb_bus_min_mv:
            conv = 1
        self.conv = conv
        deb = p.usb_debounce_ms
        conv_ms = 0
        if conv:
            conv_ms = self.conv_ms
            if conv_ms < deb:
                conv_ms += dt_ms
        self.conv_ms = conv_ms
        vbus = m.usb_vbus_mv
        match = classify(m.usb_dp_mv, m.usb_dm_mv, vbus, self.probe_was, p.line_tol_pct,
                         p.short_tol_mv)
        self.match = match
        want = self.want
        on = self.on
        if conv and p.vbus_min_mv <= vbus <= p.vbus_max_mv and match == want:
            ok_ms = self.ok_ms
            if ok_ms < deb:
                ok_ms += dt_ms  # stops counting once on: stays a small int
                self.ok_ms = ok_ms
            if ok_ms >= deb:
                on = 1
            self.fault = 0
        else:
            self.ok_ms = 0
            on = 0
            # a fault once the converter has run for the debounce time: not while it starts
            self.fault = F_USB_LINES if conv_ms >= deb else 0
        self.on = on
        probe = 1 if (want == _M_DCP and conv and not on) else 0
        self.probe = probe
        self.probe_was = probe


if not MICROPYTHON:  # the host's names: M_* match codes and MATCH_NAMES
    from controller import usbport_host as _host
    _host.publish(globals())
