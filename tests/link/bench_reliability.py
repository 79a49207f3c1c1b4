# The reliability pass against the virtual board (docs/reliability.md): noisy sessions full
# of interrupt characters, flashes killed at many points, trial boots that fail. Prints its
# figures; a benchmark, not a unit test (about a minute here).
# Usage: .venv/bin/python tests/link/bench_reliability.py [sessions] [seed]
import json
import random
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from host_sim import deploy  # noqa: E402
from host_sim.errors import UserError  # noqa: E402
from host_sim.seriallink import SerialLink  # noqa: E402
from host_sim.virtualboard import VirtualBoard  # noqa: E402
from link.fakes import charging_measurements  # noqa: E402


def hello_hash(port):
    try:
        with SerialLink(port) as link:
            return link.hello(timeout_s=3.0).profile_hash
    except UserError:
        return None


def noisy_sessions(port, n, rng):
    answered = steps_ok = steps = sent = ctrl_c = 0
    m = charging_measurements()
    for s in range(n):
        with SerialLink(port) as link:
            link.hello()
            for k in range(10):
                junk = bytes(rng.choice((0, 1, 2, 3, 3, 4, 5, 0x10, 0x0D, rng.randrange(256)))
                             for _ in range(rng.randrange(10, 400)))
                link.ser.write(junk)
                sent += len(junk)
                ctrl_c += junk.count(3)
                steps += 1
                steps_ok += link.step(m, 50 * (10 * s + k)) is not None
            try:
                link.hello()
                answered += 1
            except UserError:
                pass
    return answered, steps_ok, steps, sent, ctrl_c


def killed_flashes(port, profiles, points):
    """profiles: {hash16: path}; each flash writes the version that is not running."""
    whole = 0
    for k in points:
        before = hello_hash(port)
        other = [p for h, p in profiles.items() if h != before][0]
        code = ("import sys; sys.path.insert(0, %r); from host_sim import deploy; "
                "deploy.flash(%r, 'virtual', profile_arg=%r, chunk=256, "
                "log=lambda m: print(m, file=sys.stderr, flush=True))" % (str(ROOT), port, other))
        proc = subprocess.Popen([sys.executable, "-c", code], stderr=subprocess.PIPE, text=True)
        for line in proc.stderr:
            if k in line:
                proc.send_signal(signal.SIGKILL)
                break
        proc.wait(timeout=60)
        boots = 2 if "trial" in k else 1  # a named trial boots once, then the previous slot
        for _ in range(boots):
            try:
                deploy.restart(port)
            except UserError:
                pass
            after = hello_hash(port)
        ok = after is not None and after == before
        whole += ok
        print("  killed at %-28r: boots %s (%s)" % (k, after, "previous" if ok else "CHANGED"))
    return whole


def main(sessions=20, seed=14):
    import faulthandler
    faulthandler.dump_traceback_later(240, exit=True)  # a hang shows where, then ends the run
    rng = random.Random(seed)
    d = tempfile.mkdtemp(prefix="spinrail-rel-")
    other = Path(d) / "other.json"
    doc = json.loads((ROOT / "controller" / "default_profile.json").read_text())
    doc["battery"]["float_v_per_cell"] = 2.25
    other.write_text(json.dumps(doc))
    fs = Path(d) / "fs"
    fs.mkdir()
    with VirtualBoard(str(fs)) as vb:
        deploy.flash(vb.port, "virtual")
        t0 = time.monotonic()
        a, ok, steps, sent, cc = noisy_sessions(vb.port, sessions, rng)
        print("noisy sessions: %d, HELLO answered after the noise in %d; lock-step steps "
              "answered %d of %d; %d noise bytes, %d of them 0x03 (%.0f s)"
              % (sessions, a, ok, steps, sent, cc, time.monotonic() - t0))
        points = ["verified", "trial boot"] if sessions == 0 else [
            " %d/" % i for i in (1, 5, 10, 15, 20, 25, 30, 34)] + ["verified", "trial boot"]
        a_hash = hello_hash(vb.port)
        b_hash = deploy.sha256_hex(deploy.canonical_profile(str(other)))[:16]
        w = killed_flashes(vb.port, {a_hash: deploy.profile_path(None), b_hash: str(other)},
                           points)
        print("killed flashes: %d, the board booted a whole version after %d" % (len(points), w))
    notes = dict(doc, notes="n" * 20000)
    big = Path(d) / "big.json"
    big.write_text(json.dumps(notes))
    fs2 = Path(d) / "fs2"
    fs2.mkdir()
    rolled = 0
    trials = 3
    with VirtualBoard(str(fs2), heap_kb=64) as vb:
        first = deploy.flash(vb.port, "virtual")
        for _ in range(trials):
            try:
                deploy.flash(vb.port, "virtual", profile_arg=str(big))
            except UserError as e:
                rolled += "rolled back" in str(e) and hello_hash(vb.port) == first.profile_sha256[:16]
    print("trial boots that ran out of heap (20 KB notes, 64 KiB board): %d, rolled back to the "
          "previous slot and answering: %d" % (trials, rolled))


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
