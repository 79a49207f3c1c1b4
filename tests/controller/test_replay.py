"""replay: the vector CSV runner both interpreters share, and the signal objects."""
import pytest
from ctl_bench import build, doc_with

from controller import replay
from controller.compat import TICKS_PERIOD
from controller.signals import Commands, Measurements

HEAD = "t_ms,bus_mv,batt_mv,batt_ma,batt_temp_dc,cap_mv,usb_vbus_mv,usb_dp_mv,usb_dm_mv\n"


def replay_text(lines, p=None):
    out = []
    n = replay.run(p or build(doc_with()), lines, out.append)
    return n, "".join(out)


def test_rows_in_commands_out():
    lines = [HEAD, "0,15000,12800,1000,250,10000,0,0,0\n", "\n",
             "50,15000,12800,1000,250,10000,0,0,0\n"]
    n, text = replay_text(lines)
    rows = text.splitlines()
    assert n == 2 and rows[0] == replay.OUT_HEADER.strip()
    t, batt_duty, *_, stage, usb_match, fault = rows[2].split(",")
    assert t == "50" and int(batt_duty) > 0 and stage == "bulk"
    # every reading inside its range, 25.0 C inside the charging window, a 12.8 V battery
    # present: no fault bit at all
    assert fault == "0"
    # read while probing (usb_probe 1): D- at 0 mV is below V_DAT_REF, so no dcp, and the
    # divider schemes never match while the probe is on
    assert usb_match == "none"


def test_clock_masked_to_the_wrap():
    _, text = replay_text([HEAD, "%d,15000,12800,0,250,10000,0,0,0\n" % (TICKS_PERIOD + 7)])
    assert text.splitlines()[1].startswith("7,")


def test_optional_and_cell_columns():
    p = build(doc_with(supercap__cell_taps=True, control__mppt=True))
    head = HEAD.strip() + ",src_ma,cap_ma,eq_req,reset_req,cell1,cell2\n"
    _, text = replay_text([head, "0,15000,12800,0,250,10000,0,0,0,100,0,0,0,1700,1900\n"], p)
    assert text.splitlines()[1].split(",")[8] == "2"  # bleeder on cell 2 (200 mV over the mean)


@pytest.mark.parametrize("lines, message", [
    (["t_ms,bus_mv\n"], "line 1: missing column batt_mv"),
    ([HEAD, "0,15000,12800\n"], "line 2: 3 fields, header has 9"),
    ([HEAD, "0,15000,12.8,0,250,10000,0,0,0\n"],
     "line 2: column batt_mv = '12.8' is not an integer"),
])
def test_bad_vectors_name_the_line_and_column(lines, message):
    with pytest.raises(replay.VectorError, match=message):
        replay_text(lines)


def test_measurements_copy_and_safe_commands():
    a = Measurements()
    a.bus_mv, a.batt_mv, a.n_taps, a.eq_req = 12000, 12500, 2, 1
    a.cell_mv[0], a.cell_mv[1], a.cell_mv[2] = 1, 2, 3
    b = Measurements()
    b.copy_from(a)
    assert (b.bus_mv, b.batt_mv, b.n_taps, b.eq_req) == (12000, 12500, 2, 1)
    assert b.cell_mv[:3] == [1, 2, 0]  # only the sensed taps
    c = Commands()
    c.batt_duty = c.cap_duty = c.dump_duty = 5000
    c.usb_conv = c.usb_on = c.usb_probe = c.batt_out = 1
    c.bal_mask = 3
    c.set_safe()
    assert (c.batt_duty, c.cap_duty, c.usb_conv, c.usb_on, c.usb_probe, c.batt_out,
            c.bal_mask) == (0,) * 7
    assert c.dump_duty == 5000  # the dump load is the guard's to set
