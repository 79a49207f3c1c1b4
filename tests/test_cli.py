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
    # Battery University BU-403's worked example: float 2.30 V/cell at 25 C,
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


# -- issue 14: every input refused alike on both interpreters, one line, exit 2 ---------------
HEAD9 = "t_ms,bus_mv,batt_mv,batt_ma,batt_temp_dc,cap_mv,usb_vbus_mv,usb_dp_mv,usb_dm_mv"
BAD_VECTORS = [
    (HEAD9 + "\n0,15000,%d,0,250,10000,0,0,0\n" % (2 ** 64 + 12400),
     "line 2: column batt_mv = 18446744073709564016: allowed -536870912 to 536870911"),
    (HEAD9 + ",eq_req\n0,15000,12400,0,250,10000,0,0,0,5\n",
     "line 2: column eq_req = 5: allowed 0 to 1"),
    (HEAD9 + ",bus_mv\n0,15000,12400,0,250,10000,0,0,0,1\n", "line 1: column bus_mv appears twice"),
    (HEAD9 + "\n0,15000,12400,0,250,10000,0,0,0,7\n", "line 2: 10 fields, header has 9"),
    (HEAD9 + "\r0,15000,12400,0,250,10000,0,0,0\r", "line 1: CR-only line ends"),
    (HEAD9 + "\n0,15000,1_2400,0,250,10000,0,0,0\n", "column batt_mv = '1_2400' is not an integer"),
    (HEAD9 + "\n-1,15000,12400,0,250,10000,0,0,0\n", "column t_ms = -1: allowed 0 to 2147483647"),
]


@pytest.mark.parametrize("text, needle", BAD_VECTORS)
def test_bad_vectors_are_refused_alike_on_both_targets(tmp_path, capsys, micropython, text,
                                                       needle):
    from host_sim import vectors
    from host_sim.errors import UserError
    src = tmp_path / "in.csv"
    src.write_bytes(text.encode())
    for target in ("cpython", "micropython"):
        rc, _, err = run(["vectors", "run", str(src), "--target", target,
                          "--out", str(tmp_path / "o.csv")], capsys)
        assert rc == 2 and needle in err and err.count("\n") == 1, (target, err)
    # the MicroPython side on its own (no host check first) gives the same one line
    with pytest.raises(UserError) as e:
        vectors.run_micropython(None, str(src), str(tmp_path / "o.csv"))
    assert needle in str(e.value) and "Traceback" not in str(e.value)
    assert sorted(os.listdir(tmp_path)) == ["in.csv"]


def test_a_bom_and_crlf_line_ends_are_accepted_on_both_targets(tmp_path, capsys, micropython):
    plain = DEMO_VECTORS.read_text()
    src = tmp_path / "bom.csv"
    src.write_bytes(b"\xef\xbb\xbf" + plain.replace("\n", "\r\n").encode())
    outs = []
    for target in ("cpython", "micropython"):
        out = tmp_path / (target + ".csv")
        assert run(["vectors", "run", str(src), "--target", target, "--out", str(out)],
                   capsys)[0] == 0
        outs.append(out.read_bytes())
    ref = tmp_path / "ref.csv"
    assert run(["vectors", "run", str(DEMO_VECTORS), "--out", str(ref)], capsys)[0] == 0
    assert outs[0] == outs[1] == ref.read_bytes()


def test_non_utf8_vectors_and_bad_out_paths_are_one_line_errors(tmp_path, capsys):
    src = tmp_path / "in.csv"
    src.write_bytes(HEAD9.encode() + b"\n0,1,2,3,4,5,6,7,\xff\n")
    rc, _, err = run(["vectors", "run", str(src), "--out", str(tmp_path / "o.csv")], capsys)
    assert rc == 2 and "not UTF-8 text (byte 0xff" in err
    good = tmp_path / "good.csv"
    good.write_text(DEMO_VECTORS.read_text())
    before = good.read_bytes()
    for out, needle in ((tmp_path, "is a folder"), (good, "is the input file"),
                        (tmp_path / "nope" / "o.csv", "does not exist")):
        rc, _, err = run(["vectors", "run", str(good), "--out", str(out)], capsys)
        assert rc == 2 and needle in err and err.count("\n") == 1, err
    assert good.read_bytes() == before


def test_an_unforeseen_error_is_an_internal_error_with_exit_4(tmp_path, capsys, monkeypatch):
    from host_sim import vectors
    monkeypatch.setenv("SPINRAIL_LOG_DIR", str(tmp_path / "logs"))

    def broken(*a):
        raise ZeroDivisionError("a bug")

    monkeypatch.setattr(vectors, "run_cpython", broken)
    rc, out, err = run(["vectors", "run", "--out", str(tmp_path / "o.csv")], capsys)
    assert rc == 4 and err.startswith("spinrail: internal error: ZeroDivisionError: a bug")
    assert "Traceback" not in err and err.count("\n") == 1
    logs = list((tmp_path / "logs").iterdir())
    assert len(logs) == 1 and str(logs[0]) in err
    assert "Traceback" in logs[0].read_text() and "ZeroDivisionError" in logs[0].read_text()


@pytest.mark.parametrize("text, needle", [
    ('{"battery": {"cells": 6, "cells": 3}}', 'duplicate key "cells"'),
    ("[" * 5000 + "]" * 5000, "nested more than 64 levels deep"),
    ('{"battery": {"cells": %s}}' % ("9" * 400), "has more than 30 digits"),
])
def test_json_traps_are_one_line_errors_in_profiles_and_scenarios(tmp_path, capsys, text,
                                                                   needle):
    prof = tmp_path / "p.json"
    prof.write_text(text)
    rc, _, err = run(["limits", "--profile", str(prof)], capsys)
    assert rc == 2 and needle in err and str(prof) in err and err.count("\n") == 1, err
    scen = tmp_path / "s.json"
    scen.write_text(text.replace('"battery"', '"drive"'))
    rc, _, err = run(["simulate", str(scen), "--out", str(tmp_path / "o")], capsys)
    assert rc == 2 and needle in err and err.count("\n") == 2, err  # the caution line, then it
    assert not (tmp_path / "o").exists()


# -- issue 14: output sets whole, --out checked first, plant failures not blamed ---------------
SHORT = {"drive": {"kind": "crank"}, "duration_s": 2}


def short_scenario(tmp_path, **extra):
    p = tmp_path / "short.json"
    p.write_text(json.dumps(dict(SHORT, **extra)))
    return str(p)


def test_out_is_checked_before_the_run_and_a_second_run_is_refused(tmp_path, capsys,
                                                                    monkeypatch):
    from host_sim import runner
    from host_sim.fileio import OutputSet
    ran = []
    monkeypatch.setattr(runner, "run", lambda *a, **k: ran.append(1))
    scen = short_scenario(tmp_path)
    a_file = tmp_path / "f"
    a_file.write_text("x")
    for out, needle in ((a_file, "exists and is not a folder"),
                        (a_file / "sub", "cannot write there")):
        rc, _, err = run(["simulate", scen, "--out", str(out), "--quiet"], capsys)
        assert rc == 2 and needle in err, err
    locked = tmp_path / "busy"
    with OutputSet(locked):
        rc, _, err = run(["simulate", scen, "--out", str(locked), "--quiet"], capsys)
    assert rc == 2 and "another spinrail run is writing into this folder" in err
    assert ran == []  # refused before any simulation


def test_a_failed_write_keeps_the_previous_set_and_leaves_no_temporary_files(tmp_path, capsys,
                                                                            monkeypatch):
    import errno

    from host_sim import report
    scen = short_scenario(tmp_path)
    out = tmp_path / "out"
    assert run(["simulate", scen, "--out", str(out), "--quiet"], capsys)[0] == 0
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    assert sorted(before) == ["report.html", "report.png", "summary.json", "timeseries.csv"]

    def full(result, path, *rest):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(report, "write", full)
    rc, _, err = run(["simulate", scen, "--out", str(out), "--quiet"], capsys)
    assert rc == 2 and "No space left on device" in err and "keeps its previous contents" in err
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert sorted(os.listdir(tmp_path)) == ["out", "short.json"]


def test_a_kill_while_writing_leaves_the_old_set_and_the_next_run_tidies(tmp_path, capsys):
    import subprocess
    import sys
    scen = short_scenario(tmp_path)
    out = tmp_path / "out"
    assert run(["simulate", scen, "--out", str(out), "--quiet"], capsys)[0] == 0
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    code = ("import os, signal; from host_sim import report, cli\n"
            "report.write = lambda r, p, *v: os.kill(os.getpid(), signal.SIGKILL)\n"
            "cli.main(['simulate', %r, '--out', %r, '--quiet', '--every', '2'])" % (scen, str(out)))
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True)
    assert proc.returncode == -9
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before  # whole, and the old one
    assert any(n.startswith(".out.tmp-") for n in os.listdir(tmp_path))  # the killed run's
    assert run(["simulate", scen, "--out", str(out), "--quiet"], capsys)[0] == 0
    assert sorted(os.listdir(tmp_path)) == ["out", "short.json"]  # tidied by the next run


def test_a_plant_that_comes_apart_is_an_error_not_a_verdict(tmp_path, capsys, monkeypatch):
    from host_sim import runner
    real = runner.run

    def blown(sc, **kw):
        res = real(sc, **kw)
        res.series["bus_v"][5] = 4656.0  # what a 100,000 rpm drive once gave
        return res

    monkeypatch.setattr(runner, "run", blown)
    out = tmp_path / "o"
    rc, _, err = run(["simulate", short_scenario(tmp_path), "--out", str(out), "--quiet"], capsys)
    assert rc == 4 and "failed numerically" in err and "bus_v = 4656" in err
    assert "limit" not in err.split("CAUTION")[-1].split("spinrail:")[-1].split("failed")[0]
    assert not out.exists() or os.listdir(out) == []


@pytest.mark.parametrize("extra, needle", [
    ({"drive": {"kind": "scripted", "points": [[0, 100000]]}},
     "drive.points[0][1] = 100000.0: allowed |rpm| x gear.ratio 1 <= 20000 rpm"),
    ({"supercap": {"v0_per_cell": 2.7}}, "a start state outside the limits"),
    ({"bus": {"initial_v": 60}}, "a start state outside the limits"),
    ({"profile": {"battery": {"capacity_ah": 500}}},
     "charge_limit_a = 100.0: allowed 0.05 to 30.0 A (not written in the profile: derived"),
    ({"drive": {"kind": "scripted", "points": [[i, 1] for i in range(100001)]}},
     "[100001 items]"),
])
def test_physical_ranges_and_start_states_are_input_errors(tmp_path, capsys, extra, needle):
    rc, _, err = run(["simulate", short_scenario(tmp_path, **extra), "--out",
                      str(tmp_path / "o"), "--quiet"], capsys)
    assert rc == 2 and needle in err, err
    assert len(err) < 1000  # a 100,001-point list once gave a 1.5 MB message


def test_numpy_numbers_print_plain_in_scenario_errors():
    # issue 14, finding 11: time errors printed np.float64(9.0)
    import numpy as np

    from host_sim.scenario import ScenarioError, load_doc
    doc = {"drive": {"kind": "pedal"},
           "events": [{"t_s": np.float64(9.0), "kind": "drive_stop"},
                      {"t_s": np.float64(5.5), "kind": "drive_start"}]}
    with pytest.raises(ScenarioError) as e:
        load_doc(doc)
    assert "events[1].t_s = 5.5: allowed at or after the previous event's 9 s" in str(e.value)
    assert "np." not in str(e.value)


def test_a_recursion_error_is_bad_input_in_one_line(capsys, monkeypatch, tmp_path):
    # what is left of finding 5 outside the shared JSON loader (identify's --write target
    # reader): deep input that recurses is exit 2, not a traceback
    from host_sim import vectors

    def deep(*a):
        raise RecursionError("maximum recursion depth exceeded")

    monkeypatch.setattr(vectors, "run_cpython", deep)
    rc, _, err = run(["vectors", "run", "--out", str(tmp_path / "o.csv")], capsys)
    assert rc == 2 and err == "spinrail: input nested too deeply to process (RecursionError)\n"
