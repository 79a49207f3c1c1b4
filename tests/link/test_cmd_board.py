# The board commands through the `spinrail` entry point (registered here the way the lead's
# cli.py will register them): flash, monitor, board list/check/restart; errors print
# "spinrail: ..." and exit 2.
import argparse
import csv

import pytest

from host_sim import cli, cmd_board

pytestmark = pytest.mark.micropython


@pytest.fixture
def spinrail(monkeypatch):
    orig = cli.build_parser

    def build_parser():
        ap = orig()
        for a in ap._actions:
            if isinstance(a, argparse._SubParsersAction) and "flash" not in a.choices:
                cmd_board.register(a)
        return ap

    monkeypatch.setattr(cli, "build_parser", build_parser)
    return cli.main


def test_flash_then_monitor_with_csv(spinrail, virtual_board, tmp_path, capsys):
    port = virtual_board.port
    assert spinrail(["flash", "--board", "virtual", "--port", port, "-q"]) == 0
    out = capsys.readouterr().out
    assert "flashed virtual on %s: slot sr_a (was empty), mode link" % port in out
    assert "board answers: Hello(board=virtual, mode=link" in out
    path = tmp_path / "tele.csv"
    rc = spinrail(["monitor", "--port", port, "--seconds", "1.3", "--csv", str(path), "--feed",
                   "bus_mv=15000,batt_mv=12400,batt_ma=800,cap_mv=12000,usb_vbus_mv=5000,"
                   "usb_dp_mv=600,usb_dm_mv=600"])
    cap = capsys.readouterr()
    assert rc == 0
    lines = [ln for ln in cap.out.splitlines() if " ms " in ln]
    assert len(lines) >= 2 and "bus  15.00 V" in lines[-1] and "faults -" in lines[-1]
    rows = list(csv.DictReader(path.open()))
    assert len(rows) == len(lines)
    assert rows[-1]["bus_mv"] == "15000" and rows[-1]["stage_name"] == "bulk"
    assert int(rows[-1]["rx_ok"]) > 10 and rows[-1]["faults"] == "-"
    assert "monitor: Hello(board=virtual" in cap.err
    # unfed, a link-mode board sits in the safe state with the link fault, and says why
    assert spinrail(["monitor", "--port", port, "--seconds", "1.6"]) == 0
    cap = capsys.readouterr()
    assert "nothing feeds it measurements" in cap.err
    assert "faults link" in cap.out.splitlines()[-1]


def test_board_list_and_check(spinrail, tmp_path, capsys):
    assert spinrail(["board", "list"]) == 0
    out = capsys.readouterr().out
    assert "rp2040_pico" in out and "esp32_devkit" in out and "virtual" in out
    assert spinrail(["board", "check", "rp2040_pico", "esp32_devkit", "virtual"]) == 0
    bad = tmp_path / "bad.json"
    bad.write_text('{"name": "x", "chip": "rp2040", "mpy_arch": "armv7m"}')
    assert spinrail(["board", "check", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "bad.json: mpy_arch = 'armv7m': for rp2040: armv6m" in err
    assert "spinrail: 1 of 1 board files failed validation" in err


def test_flash_errors_exit_2_with_a_message(spinrail, capsys):
    assert spinrail(["flash", "--board", "virtual", "--port", "/dev/spinrail-nope"]) == 2
    assert "spinrail: port /dev/spinrail-nope: no such device" in capsys.readouterr().err
    assert spinrail(["flash", "--board", "nosuch", "--port", "/dev/null"]) == 2
    assert "no such board file" in capsys.readouterr().err
    assert spinrail(["monitor", "--port", "/dev/null", "--feed", "volts=3"]) == 2
    assert "--feed volts: unknown measurement" in capsys.readouterr().err


def test_duplicate_keys_are_refused_in_flash_profiles_and_board_files(spinrail, tmp_path,
                                                                      capsys):
    # issue 14, finding 7: duplicate keys were last-wins, and such a profile flashed
    prof = tmp_path / "dup.json"
    prof.write_text('{"battery": {"float_v_per_cell": 2.25, "float_v_per_cell": 2.3}}')
    rc = spinrail(["flash", "--board", "virtual", "--port", "/dev/spinrail-none",
                   "--profile", str(prof)])
    err = capsys.readouterr().err
    assert rc == 2 and 'duplicate key "float_v_per_cell"' in err and "nothing copied" in err
    from boards import board
    doc = (board.BOARDS_DIR / "virtual.json").read_text()
    bad = tmp_path / "b.json"
    bad.write_text(doc.replace('"heap_kb"', '"name": "twice",\n  "heap_kb"', 1))
    rc = spinrail(["board", "check", str(bad)])
    err = capsys.readouterr().err
    assert rc == 2 and 'duplicate key "name"' in err and str(bad) in err


def test_board_virtual_stops_on_sigint_even_started_with_it_ignored(tmp_path):
    # issue 14, finding 11: `board virtual` ignored SIGINT (started as a background job,
    # which inherits SIGINT ignored)
    import signal
    import subprocess
    import sys
    import time
    code = "import sys; from host_sim.cli import main; sys.exit(main(sys.argv[1:]))"
    proc = subprocess.Popen(
        [sys.executable, "-c", code, "board", "virtual", "--dir", str(tmp_path)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_IGN))
    try:
        assert proc.stdout.readline().startswith("/dev/")
        time.sleep(0.3)
        proc.send_signal(signal.SIGINT)
        assert proc.wait(timeout=15) == 0
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
