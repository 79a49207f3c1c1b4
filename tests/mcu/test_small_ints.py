# Small ints are 31-bit on a 32-bit port (+/-2**30); a value past that becomes a heap-allocated
# long int, or wraps silently inside viper code. Invariant: on the largest legal MPPT profile
# (100 V and 100 A sensor full scales, the shortest period with the longest MPPT interval, so
# an interval sums the most ticks) fed readings at the top of their ranges, the emulated
# 32-bit board gives CPython's commands exactly (nothing wrapped), no tick call changes the
# heap (nothing spilled into a long int), and the MPPT power sum really climbs past 2**29,
# the last bit below the small-int limit.
import json
from pathlib import Path

import pytest

from controller import profile
from host_sim import mcu_bench

from tests.mcu.conftest import BOARDS

pytestmark = pytest.mark.micropython
HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
TICKS = 2500  # two whole MPPT intervals of 1000 ticks and part of a third


def large_profile():
    doc = json.loads((ROOT / "host_sim" / "profiles" / "hut_wind.json").read_text())
    doc["name"] = "largest legal MPPT sums"
    doc["bus"] = {"ovp_trip_v": 60, "ovp_recover_v": 57, "floor_v": 12.0}
    doc["sensors"] = {"bus_full_scale_v": 100, "batt_full_scale_v": 60,
                      "batt_current_full_scale_a": 100, "cap_full_scale_v": 60}
    doc["control"] = {"period_ms": 5, "mppt": True, "mppt_step_v": 0.25,
                      "mppt_interval_ms": 10000, "overspeed_bus_v": 59.5}
    doc["battery"]["charge_limit_a"] = 30
    doc["battery"]["capacity_ah"] = 1000
    return doc


def _cpython(path):
    import subprocess
    import sys
    r = subprocess.run([sys.executable, str(HERE / "mcu_extremes.py"), str(path), str(TICKS)],
                       cwd=str(ROOT), capture_output=True, text=True, check=True)
    return r.stdout.split()


def test_the_large_profile_is_legal(tmp_path):
    p = tmp_path / "large.json"
    p.write_text(json.dumps(large_profile()))
    prof = profile.load(str(p))
    assert prof.period_ms == 5 and prof.mppt and prof.bus_fs_mv == 100000


@pytest.mark.parametrize("board", BOARDS)
def test_largest_mppt_sums_stay_small_ints_on_32_bit(board, emu_fw, flashed_image, tmp_path):
    folder, _ = flashed_image(board)
    doc = json.dumps(large_profile()).encode()
    (tmp_path / "large.json").write_bytes(doc)
    want = _cpython(tmp_path / "large.json")
    out = mcu_bench._slot_exec(
        emu_fw, folder, "import mcu_extremes\nmcu_extremes.main(['', 'large.json', '%d'])" % TICKS,
        files=[("mcu_extremes.py", (HERE / "mcu_extremes.py").read_bytes()),
               ("large.json", doc)])
    got = out.split()
    print("board", got, "cpython", want)
    assert got[0] == "EXT" and int(got[1]) == 0, "ticks that allocated (a long int): %s" % got[1]
    assert 2 ** 29 < int(got[2]) < 2 ** 30, got[2]
    assert got[2:] == want[2:]  # same peak, same commands tick for tick
