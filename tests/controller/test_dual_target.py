"""The controller on MicroPython: every module imports in a 64 KB heap, the same sequences give
byte-identical commands on both interpreters (invariant I7), and the steady-state tick
allocates nothing."""
import array
import os
import subprocess
import tempfile
from pathlib import Path

import pytest
from ctl_bench import ROOT, write_doc
from ctl_props import Limits, check_i7
from ctl_scen import long_scenario, run, scenario_doc, scenarios, vector_lines
from hypothesis import given, settings

from controller import profile, replay
from controller.signals import STAGE_NAMES

pytestmark = pytest.mark.micropython

MODULES = sorted(f.stem for f in (ROOT / "controller").glob("*.py") if f.stem != "__init__")
# each example spawns an interpreter: a modest count, more under the deep profile
MP_EXAMPLES = {"deep": 200}.get(os.environ.get("HYPOTHESIS_PROFILE", ""), 15)
COMPARED = {"sequences": 0, "ticks": 0}  # figures for the report (printed with -s)


def mp_run(micropython, args, heap="512k", timeout=120):
    """Run a snippet under the MicroPython unix port with the repository on its path."""
    code = "import sys; sys.path.insert(0, %r); " % str(ROOT) + args
    r = subprocess.run([micropython, "-X", "heapsize=" + heap, "-c", code], capture_output=True,
                       text=True, timeout=timeout)
    return r


@pytest.mark.parametrize("module", MODULES)
def test_module_imports_in_a_64k_heap(micropython, module):
    # DEVELOPERS.md: each module imports under micropython -X heapsize=64k, from source
    r = mp_run(micropython, "import controller.%s" % module, heap="64k")
    assert r.returncode == 0, r.stderr


def replay_both(micropython, doc, lines, workdir):
    """Replay a vector on CPython (in process) and on MicroPython (a subprocess); return both
    outputs as text."""
    prof = Path(workdir) / "profile.json"
    vin = Path(workdir) / "in.csv"
    vout = Path(workdir) / "out_mp.csv"
    write_doc(doc, prof)
    tmp = str(vin) + ".tmp"
    with open(tmp, "w") as f:
        f.writelines(lines)
    os.replace(tmp, str(vin))
    cp = []
    n = replay.run(profile.load(str(prof)), lines, cp.append)
    r = mp_run(micropython, "from controller import replay; replay.run_files(%r, %r, %r)"
               % (str(prof), str(vin), str(vout)))
    assert r.returncode == 0, r.stderr
    return "".join(cp), vout.read_text(), n


def expected_rows(ticks):
    """The closed-loop run's commands in replay's output format."""
    from controller.usbport import MATCH_NAMES
    rows = [replay.OUT_HEADER]
    for t in ticks:
        c = t.c
        rows.append("%d,%d,%d,%d,%d,%d,%d,%d,%d,%s,%s,%d\n" % (
            t.now_ms, c.batt_duty, c.cap_duty, c.dump_duty, c.usb_conv, c.usb_on, c.usb_probe,
            c.batt_out, c.bal_mask, STAGE_NAMES[c.stage], MATCH_NAMES[c.usb_match], c.fault))
    return "".join(rows)


@settings(max_examples=MP_EXAMPLES)
@given(scn=scenarios(min_ticks=100, max_ticks=400))
def test_i7_identical_outputs_on_micropython(micropython, tmp_path_factory, scn):
    """I7 (dual target): the same measurement sequence gives byte-identical commands on CPython
    and on MicroPython (controller.replay on both), and those are the commands the closed-loop
    run produced; the outputs are in range."""
    ticks = run(scn)
    check_i7(ticks, Limits(scenario_doc(scn)))
    work = tempfile.mkdtemp(dir=str(tmp_path_factory.getbasetemp()))
    cp, mp, n = replay_both(micropython, scenario_doc(scn), vector_lines(ticks), work)
    assert n == len(ticks)
    assert cp == expected_rows(ticks)  # the vector file reproduces the run
    assert mp == cp
    COMPARED["sequences"] += 1
    COMPARED["ticks"] += n


def test_i7_long_fixed_sequence_identical_on_micropython(micropython, tmp_path):
    """I7 (dual target) on one long fixed sequence: 20,000 ticks of a rich scenario (MPPT,
    cell taps, equalize, trips, lockouts and resets, every sensor fault, a clock wrap), which
    the test first shows reaches every stage and every controller fault bit."""
    scn = long_scenario("flooded6_mppt_taps", n_ticks=20000)
    ticks = run(scn)
    stages = {t.c.stage for t in ticks}
    faults = 0
    for t in ticks:
        faults |= t.c.fault
    assert stages == set(range(len(STAGE_NAMES)))
    assert faults == (1 << 13) - 1  # every bit the controller sets (firmware, link: boards/)
    assert any(t.c.usb_on for t in ticks) and any(t.c.bal_mask for t in ticks)
    assert any(b.now_ms < a.now_ms for a, b in zip(ticks, ticks[1:]))  # the clock wraps
    cp, mp, n = replay_both(micropython, scenario_doc(scn), vector_lines(ticks), tmp_path)
    assert n == 20000
    assert cp == expected_rows(ticks)
    assert mp == cp
    print("\nI7 long sequence: %d ticks byte-identical on CPython and MicroPython (%d bytes)"
          % (n, len(mp)))


def test_zz_report_compared_ticks():
    """Prints how many sequences and ticks the hypothesis half of I7 compared (runs last in
    this module; skipped when that test did not run)."""
    if not COMPARED["sequences"]:
        pytest.skip("the hypothesis I7 test did not run in this session")
    print("\nI7 hypothesis: %d sequences, %d ticks byte-identical on CPython and MicroPython"
          % (COMPARED["sequences"], COMPARED["ticks"]))


# --- allocation per tick -------------------------------------------------------------------------
ALLOC_SCRIPT = r"""
import array, gc
from controller import profile
from controller.supervisor import Supervisor

def main(prof_path, data_path, width, rows, n_taps, warm_step, n, inject):
    p = profile.load(prof_path)
    sup = Supervisor(p)
    if inject:  # the control run: a tick that makes one small list
        real = sup.tick

        def tick_alloc(now_ms):
            real(now_ms)
            return [now_ms]

        sup.tick = tick_alloc
    m = sup.m
    m.n_taps = n_taps
    a = array.array('i', bytearray(4 * width * rows))
    with open(data_path, 'rb') as f:
        f.readinto(a)

    def tick(i):
        o = i * width
        m.bus_mv = a[o + 1]
        m.batt_mv = a[o + 2]
        m.batt_ma = a[o + 3]
        m.batt_temp_dc = a[o + 4]
        m.cap_mv = a[o + 5]
        m.usb_vbus_mv = a[o + 6]
        m.usb_dp_mv = a[o + 7]
        m.usb_dm_mv = a[o + 8]
        m.src_ma = a[o + 9]
        m.cap_ma = a[o + 10]
        m.eq_req = a[o + 11]
        m.reset_req = a[o + 12]
        for k in range(n_taps):
            m.cell_mv[k] = a[o + 13 + k]
        sup.tick(a[o])

    def loop(count):
        for i in range(count):
            tick(i)

    # warm-up: a sample spread over the whole sequence, so every regime has run once
    for i in range(0, rows, warm_step):
        tick(i)
    gc.collect()
    gc.disable()
    b0 = gc.mem_alloc()
    loop(0)
    b1 = gc.mem_alloc()
    loop(n)
    b2 = gc.mem_alloc()
    gc.enable()
    print('ALLOC', (b2 - b1) - (b1 - b0), n, sup.ticks)
"""


def alloc_run(micropython, tmp_path, variant, n, inject=0):
    """Run ALLOC_SCRIPT on a recorded closed-loop sequence; return (bytes, ticks, ticks run)."""
    scn = long_scenario(variant, n_ticks=n, seed=3)
    ticks = run(scn)
    n_taps = len(ticks[0].cells)
    width = 13 + n_taps
    flat = array.array("i")
    for t in ticks:
        flat.extend([t.now_ms] + list(t.m) + list(t.cells))
    data = tmp_path / "rows.bin"
    data.write_bytes(flat.tobytes())
    prof = tmp_path / "profile.json"
    write_doc(scenario_doc(scn), prof)
    script = tmp_path / "alloc.py"
    script.write_text(ALLOC_SCRIPT + "\nmain(%r, %r, %d, %d, %d, %d, %d, %d)\n"
                      % (str(prof), str(data), width, n, n_taps, n // 500, n, inject))
    r = subprocess.run([micropython, "-X", "heapsize=2m", "-c",
                        "import sys; sys.path.insert(0, %r); exec(open(%r).read())"
                        % (str(ROOT), str(script))],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    line = [x for x in r.stdout.splitlines() if x.startswith("ALLOC")][0]
    _, alloc_bytes, ticks_run, _ = line.split()
    return int(alloc_bytes), ticks, int(ticks_run)


@pytest.mark.parametrize("variant, stages", [
    ("agm6_dcp", {0, 1, 2}),  # the default: 60 s tail hold, float is out of reach in 250 s
    ("flooded6_mppt_taps", {0, 1, 2, 3, 4})])  # MPPT, cell taps, every stage
def test_steady_state_tick_allocates_nothing(micropython, tmp_path, variant, stages):
    """DEVELOPERS.md: with gc.disable(), gc.mem_alloc() over N = 5000 ticks minus the same loop with
    0 ticks is 0 bytes. The 5000 ticks are a rich closed-loop sequence (stages, USB on and
    off, trips, lockout and reset, every sensor fault), after a warm-up of 500 ticks sampled
    across it."""
    n = 5000
    alloc_bytes, ticks, ticks_run = alloc_run(micropython, tmp_path, variant, n)
    # the measured ticks exercise the branches that matter
    faults = 0
    for t in ticks:
        faults |= t.c.fault
    assert {t.c.stage for t in ticks} >= stages
    assert any(t.c.usb_on for t in ticks) and any(not t.c.usb_on for t in ticks)
    assert faults & 0b1111111111 == 0b1111111111  # OVP, lockout, every sensor, absent, window
    print("\nallocation (%s): %d bytes over %d ticks (MicroPython, gc disabled)"
          % (variant, alloc_bytes, ticks_run))
    assert ticks_run == n
    assert alloc_bytes == 0


def test_allocation_measurement_sees_an_allocating_tick(micropython, tmp_path):
    """Control: the same measurement with a tick that makes one small list per call reports
    at least one heap block per tick, so a 0 above means 0."""
    alloc_bytes, _, ticks_run = alloc_run(micropython, tmp_path, "agm6_dcp", 1000, inject=1)
    assert ticks_run == 1000
    assert alloc_bytes >= 16 * 1000  # MicroPython allocates in 16-byte blocks


SIGNED_SLOTS = r"""
from controller.buckloop import BuckLoop
b = BuckLoop()
out = []
# a bus and a bank both read just below 0 V: the loop makes a negative duty (u stays >= 1),
# then the bus comes back with the bank near its limit, where last period's duty sets u
for bus_mv, out_ma in ((-100, 0), (-100, 0), (12000, 1900), (12500, 1900), (12500, 1950)):
    out.append(b.update(-400, 15000, out_ma, 2000, bus_mv, 9500, 100, 1))
    out.append(tuple(b.st))
print(out)
"""


def test_signed_state_slots_read_back_their_sign_on_micropython(micropython):
    """A ptr32 load zero-extends on the 64-bit unix port; the slots that can go negative (the
    loop's duty, u and last bus) are read back with the sign-restore idiom (compat.py), so the
    loop's state after a negative duty gives the same duties on both interpreters."""
    import contextlib
    import io
    cp = io.StringIO()
    with contextlib.redirect_stdout(cp):
        exec(SIGNED_SLOTS, {})
    assert "-100" in cp.getvalue()  # the negative duty was reached
    r = mp_run(micropython, SIGNED_SLOTS)
    assert r.returncode == 0, r.stderr
    assert r.stdout == cp.getvalue()
