# `spinrail board emulate`: prints the port on stdout, stops cleanly on SIGINT and SIGTERM
# (disk saved, qemu gone), leaves no emulator behind even when killed, and without a
# MicroPython source exits 2 naming the pinned commit.
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from host_sim import emulate
from host_sim.errors import UserError

ROOT = Path(__file__).resolve().parents[2]


def test_no_source_names_the_pinned_commit(monkeypatch, tmp_path):
    monkeypatch.delenv(emulate.ENV_SRC, raising=False)
    with pytest.raises(UserError) as e:
        emulate.source()
    assert e.value.exit_code == 2 and emulate.PINNED_COMMIT in str(e.value)
    assert "--micropython-src" in str(e.value) and emulate.ENV_SRC in str(e.value)


def test_a_missing_source_path_exits_2(tmp_path):
    r = subprocess.run([sys.executable, "-m", "host_sim.cli", "board", "emulate", "qemu_m0",
                        "--micropython-src", str(tmp_path / "nope"), "--dir", str(tmp_path)],
                       cwd=str(ROOT), capture_output=True, text=True, timeout=60)
    assert r.returncode == 2 and "nope" in r.stderr and r.stdout == ""


def test_a_board_that_is_not_emulated_exits_2(tmp_path):
    r = subprocess.run([sys.executable, "-m", "host_sim.cli", "board", "emulate", "rp2040_pico",
                        "--dir", str(tmp_path)], cwd=str(ROOT), capture_output=True, text=True,
                       timeout=60)
    assert r.returncode == 2 and "not an emulated board" in r.stderr


def _children(pid):
    out = []
    for task in Path("/proc/%d/task" % pid).iterdir():
        out += [int(x) for x in (task / "children").read_text().split()]
    return out


def _alive(pid):
    try:
        with open("/proc/%d/stat" % pid) as f:
            return f.read().split()[2] != "Z"
    except OSError:
        return False


def _start(tmp_path):
    p = subprocess.Popen([sys.executable, "-m", "host_sim.cli", "board", "emulate", "qemu_m0",
                          "--dir", str(tmp_path)], cwd=str(ROOT), stdout=subprocess.PIPE,
                         stderr=subprocess.PIPE, text=True)
    port = p.stdout.readline().strip()
    assert port.startswith("/dev/pts/"), (port, p.stderr.read() if p.poll() is not None else "")
    assert os.path.exists(port)
    time.sleep(0.5)
    kids = _children(p.pid)
    assert kids, "no emulator process"
    return p, kids


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_signal_stops_it_cleanly(sig, emu_fw, tmp_path):
    p, kids = _start(tmp_path)
    p.send_signal(sig)
    assert p.wait(timeout=20) == 0
    assert not any(_alive(k) for k in kids), "emulator left running"
    assert (tmp_path / "flash.img").stat().st_size == emulate.DISK_BYTES


def test_a_killed_command_leaves_no_emulator(emu_fw, tmp_path):
    p, kids = _start(tmp_path)
    p.kill()
    p.wait(timeout=10)
    deadline = time.monotonic() + 10
    while any(_alive(k) for k in kids) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert not any(_alive(k) for k in kids), "emulator outlived a killed spinrail"
