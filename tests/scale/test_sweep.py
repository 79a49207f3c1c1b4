# `spinrail sweep` at small size: sweep.csv (one row per sample: drawn values, verdicts,
# margins, energies), sweep.png and the table; bad --vary specs stop before anything runs, with
# an error naming the field and the allowed range.
import csv

import pytest

from .conftest import run_cli

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948, section 5.2)


def test_sweep_writes_csv_png_and_table(tmp_path, short_crank, capsys):
    out = tmp_path / "sw"
    rc = run_cli(["sweep", short_crank, "--vary", "battery.ambient_c=uniform(-10,50)",
                  "--vary", "machine.ra_ohm=pct(10)", "--vary", "usb.network.tol_pct=choice(1,5)",
                  "--vary", "drive.effort=normal(1.0,0.05)", "--samples", 8, "--seed", 1,
                  "--workers", 2, "--out", out, "--quiet"])
    assert rc in (0, 1)
    rows = list(csv.DictReader((out / "sweep.csv").open()))
    assert [int(r["sample"]) for r in rows] == list(range(8))
    for r in rows:
        assert -10 <= float(r["battery.ambient_c"]) <= 50
        assert 0.54 <= float(r["machine.ra_ohm"]) <= 0.66  # 0.6 ohm +/- 10 %
        assert r["usb.network.tol_pct"] in ("1", "5")
        for k in ("bus", "cap_clamp", "ledger"):
            assert r["%s_held" % k] in ("0", "1")
            assert float(r["%s_margin" % k]) == pytest.approx(
                float(r["%s_margin" % k]))  # a number
        assert float(r["cap_stored_j"]) == float(r["cap_stored_j"])
    held = {k: all(r["%s_held" % k] == "1" for r in rows) for k in ("bus", "cap_clamp")}
    for k, ok in held.items():  # held in every row <=> the worst margin is not below zero
        assert ok == (min(float(r["%s_margin" % k]) for r in rows) >= 0)
    assert rc == (0 if all(r["all_held"] == "1" for r in rows) else 1)
    assert (out / "sweep.png").read_bytes()[:8] == PNG_MAGIC
    table = capsys.readouterr().out
    for k in ("batt_ceiling", "cap_clamp", "bus", "usb_vbus", "to supercap", "to USB"):
        assert k in table


@pytest.mark.parametrize("vary, words", [
    ("battery.ambient=uniform(0,1)", ["battery.ambient", "no such scenario field", "ambient_c"]),
    ("battery.ambient_c=uniform(-40,50)", ["battery.ambient_c", "-40", "-30 to 55 C"]),
    ("machine.ra_ohm=pct(2000)", ["machine.ra_ohm", "0 to 100"]),
    ("battery.cells=uniform(1,3)", ["battery.cells", "whole number", "1 to 12"]),
    ("drive.effort=normal(1.4,0.5)", ["drive.effort", "0 to 1.5"]),
    ("battery.chemistry=choice(agm,nimh)", ["battery.chemistry", "nimh", "flooded, agm, gel"]),
    ("usb.devices[0].max_a=uniform(1,2)", ["usb.devices", "0 item"]),
    ("machine.ra_ohm=triangle(1,2)", ["triangle", "uniform(lo,hi)"]),
])
def test_bad_vary_names_the_field_and_runs_nothing(tmp_path, short_crank, capsys, vary, words):
    out = tmp_path / "sw"
    rc = run_cli(["sweep", short_crank, "--vary", vary, "--samples", 20, "--out", out,
                  "--workers", 1])
    err = capsys.readouterr().err
    assert rc == 2
    assert err.startswith("spinrail: ")
    for w in words:
        assert w in err, (w, err)
    assert not (out / "sweep.csv").exists()
