# The command line of issue 2: vectors on both targets, limits, and bad input (exit 2, the
# file, line and field named, no partial output left behind).
import json
import os

import pytest

from host_sim.cli import main
from host_sim.vectors import DEMO_VECTORS


def run(argv, capsys):
    rc = main(argv)
    out, err = capsys.readouterr()
    return rc, out, err


def test_vectors_identical_on_cpython_and_micropython(tmp_path, capsys, micropython):
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    assert run(["vectors", "run", str(DEMO_VECTORS), "--target", "cpython", "--out", str(a)],
               capsys)[0] == 0
    assert run(["vectors", "run", str(DEMO_VECTORS), "--target", "micropython", "--out", str(b)],
               capsys)[0] == 0
    assert a.read_bytes() == b.read_bytes()
    lines = a.read_text().splitlines()
    assert lines[0].startswith("t_ms,batt_duty,cap_duty,dump_duty,usb_conv,usb_on")
    assert len(lines) == 4001


@pytest.mark.parametrize("text, needle", [
    ("t_ms,bus_mv\n0,1\n", "missing column batt_mv"),
    ("t_ms,bus_mv,batt_mv,batt_ma,batt_temp_dc,cap_mv,usb_vbus_mv,usb_dp_mv,usb_dm_mv\n"
     "0,1,2,3,4,5,6,7,8\n50,1,2,x3,4,5,6,7,8\n", "line 3: column batt_ma = 'x3' is not an integer"),
])
def test_bad_vectors_exit_2_and_leave_no_output(tmp_path, capsys, text, needle):
    src = tmp_path / "in.csv"
    src.write_text(text)
    out = tmp_path / "out.csv"
    rc, _, err = run(["vectors", "run", str(src), "--out", str(out)], capsys)
    assert rc == 2 and needle in err and str(src) in err
    assert not out.exists() and os.listdir(tmp_path) == ["in.csv"]


def test_bad_profile_exit_2_names_the_field(tmp_path, capsys):
    prof = tmp_path / "p.json"
    prof.write_text(json.dumps({"battery": {"absorption_v_per_cell": 2.7}}))
    rc, _, err = run(["limits", "--profile", str(prof)], capsys)
    assert rc == 2 and "battery.absorption_v_per_cell = 2.7" in err and "2.5" in err


def test_unknown_target_is_refused(tmp_path, capsys):
    with pytest.raises(SystemExit) as e:
        main(["vectors", "run", "--target", "java", "--out", str(tmp_path / "o.csv")])
    assert e.value.code == 2


def test_limits_json_keys_and_a_worked_example(tmp_path, capsys):
    # Battery University BU-403 (shared/reference/check-values.md): float 2.30 V/cell at 25 C,
    # -3 mV/C/cell -> 2.27 V/cell at 35 C, i.e. 13.62 V for six cells.
    prof = tmp_path / "p.json"
    prof.write_text(json.dumps({"battery": {"chemistry": "agm", "float_v_per_cell": 2.30,
                                            "absorption_v_per_cell": 2.45,
                                            "temp_coeff_mv_per_c_per_cell": -3.0}}))
    rc, out, err = run(["limits", "--profile", str(prof), "--temp-dc", "350", "--json"], capsys)
    assert rc == 0 and "CAUTION" in err
    d = json.loads(out)
    for k in ("absorption_mv", "float_mv", "charge_limit_ma", "charge_temp_min_dc",
              "charge_temp_max_dc", "cap_clamp_mv", "ovp_trip_mv", "ovp_recover_mv",
              "ovp_hold_ms", "usb_vbus_min_mv", "usb_vbus_max_mv", "period_ms"):
        assert isinstance(d[k], int), k
    assert d["float_mv"] == 13620
