"""The properties catch a broken controller. Each test breaks the controller on purpose (a limit
raised, a check removed), asks hypothesis for a scenario on which the matching property check
fails, and shows that the same scenario passes on the unbroken controller. If a property could
not see its mutation, the test fails: that property would be proving nothing."""
import copy

import pytest
from ctl_props import Limits, check_i1, check_i2, check_i3, check_i4, check_i5, check_i6
from ctl_scen import run, scenario_doc, scenarios
from hypothesis import HealthCheck, Phase, find, settings

from controller.leadacid import LeadAcidCharger
from controller.signals import F_CAP_CELL
from controller.usbport import UsbPort

# The parts copy the profile numbers their tick reads when they are built (array slots read
# by viper code), so a mutation that changes the profile builds the part again from it.


def raised_ceiling(sup):
    """The charger's setpoints 150 mV/cell higher than the profile says."""
    p = copy.copy(sup.p)
    p.abs_cell_mv += 150
    p.float_cell_mv += 150
    if p.eq_cell_mv:
        p.eq_cell_mv += 150
    sup.charger = LeadAcidCharger(p)


def guard_skipped(sup):
    """The overvoltage guard never runs."""
    sup.ovp.update = lambda bus_mv, dt_ms, now_ms, reset_req: None


def clamp_removed(sup):
    """The supercap converter never stops at the clamp (the regulator still aims at it)."""
    k = sup.clamp

    def update(m, floor_mv):
        k.fault = 0
        if k._balance(m):
            k.fault = F_CAP_CELL
        return k.loop.update(m.cap_mv, k.p.cap_clamp_mv, m.cap_ma, k.p.cap_limit_ma, m.bus_mv,
                             floor_mv, m.cap_mv + k.p.cap_headroom_mv)

    k.update = update


def window_removed(sup):
    """The charging temperature window opened to the sensor's whole range."""
    p = copy.copy(sup.p)
    p.temp_min_dc, p.temp_max_dc = -400, 850
    sup.charger = LeadAcidCharger(p)


def port_check_loosened(sup):
    """No debounce, and a VBUS window of 4.0-6.0 V."""
    p = copy.copy(sup.p)
    p.usb_debounce_ms, p.vbus_min_mv, p.vbus_max_mv = 0, 4000, 6000
    sup.usb = UsbPort(p)


def battery_range_removed(sup):
    """The supervisor's battery voltage plausibility check sees a 1 kV sensor."""
    p = copy.copy(sup.p)
    p.batt_fs_mv = 1_000_000
    sup.__init__(p)  # the supervisor keeps its sensor ranges too: build it again on p


MUTATIONS = [
    ("ceiling raised", raised_ceiling, check_i1),
    ("guard skipped", guard_skipped, check_i5),
    ("clamp removed", clamp_removed, check_i3),
    ("temperature window removed", window_removed, check_i2),
    ("port check loosened", port_check_loosened, check_i4),
    ("battery plausibility removed", battery_range_removed, check_i6),
]


def fails(check, scn, mutate=None):
    try:
        check(run(scn, mutate), Limits(scenario_doc(scn)))
    except AssertionError:
        return True
    return False


@pytest.mark.parametrize("name, mutate, check", MUTATIONS, ids=[m[0] for m in MUTATIONS])
def test_property_catches_the_broken_controller(name, mutate, check):
    found = find(scenarios(), lambda scn: fails(check, scn, mutate), settings=settings(
        max_examples=500, database=None, derandomize=True, phases=[Phase.generate, Phase.shrink],
        suppress_health_check=list(HealthCheck)))
    print("\n%s: %s finds %r" % (name, check.__name__, found))
    assert fails(check, found, mutate)  # replays
    assert not fails(check, found)  # and the real controller passes the same scenario
