# `spinrail hil --port P SCENARIO --out DIR`: hardware in the loop. The plant runs here, the
# controller on the board: every control period the host sends the plant's measurements over
# the framed link in lock-step and applies the commands the board sends back. Same outputs as
# simulate, plus the link figures. Against the virtual board the commands equal the CPython
# `simulate` run of the same scenario and seed, tick for tick (tests/link/test_hil.py).
import hashlib
import json
import statistics

from controller.signals import Commands, Measurements
from host_sim import report, runner
from host_sim.errors import UserError
from host_sim.fileio import write_json
from host_sim.simulate import finish, load, summary, write_timeseries


class LinkController:
    """Stands in for the Supervisor: tick() sends self.m to the board and copies back its
    commands. A lost frame is sent again (the board ignores a repeated sequence number's
    tick only if it already ran it; in lock-step the same now_ms is sent again)."""

    def __init__(self, link, retries=3):
        self.link = link
        self.retries = retries
        self.m = Measurements()
        self.c = Commands()
        self.ticks = 0
        self.resent = 0  # frames sent again after a lost answer
        self.commands = []  # every tick's commands, for comparisons

    def tick(self, now_ms):
        for attempt in range(self.retries + 1):
            f = self.link.step(self.m, now_ms)
            if f is not None:
                break
            self.resent += 1
        else:
            raise UserError("port %s: the board stopped answering at tick %d (now_ms %d)"
                            % (self.link.port, self.ticks, now_ms), exit_code=1)
        src = f.c
        c = self.c
        c.batt_duty, c.cap_duty, c.dump_duty = src.batt_duty, src.cap_duty, src.dump_duty
        c.usb_conv, c.usb_on, c.usb_probe, c.batt_out = (src.usb_conv, src.usb_on,
                                                          src.usb_probe, src.batt_out)
        c.bal_mask, c.stage, c.usb_match, c.fault = (src.bal_mask, src.stage, src.usb_match,
                                                    src.fault)
        self.commands.append((now_ms, c.batt_duty, c.cap_duty, c.dump_duty, c.usb_conv,
                              c.usb_on, c.usb_probe, c.batt_out, c.bal_mask, c.stage,
                              c.usb_match, c.fault))
        self.ticks += 1
        # keep telemetry and other unsolicited frames from piling up between steps
        self.link.poll(0.0)


def profile_hash(doc):
    """First 8 bytes of the sha256 of the profile as flash writes it (canonical JSON)."""
    data = json.dumps(doc, sort_keys=True, separators=(",", ":")).encode()
    return hashlib.sha256(data).hexdigest()[:16]


def run_hil(sc, port, progress=True, every=1, check_profile=True):
    from host_sim.seriallink import SerialLink
    with SerialLink(port) as link:
        hello = link.hello()
        if hello.mode_name != "link":
            raise UserError("port %s: the board runs in %s mode; flash it with --mode link for "
                            "hardware in the loop" % (port, hello.mode_name))
        want = profile_hash(sc.profile_doc)
        if check_profile and hello.profile_hash != want:
            raise UserError("port %s: the board's profile (%s) is not the scenario's (%s): flash "
                            "the scenario's profile first (spinrail flash --board %s --port %s "
                            "--profile FILE)" % (port, hello.profile_hash, want, hello.board, port))
        if hello.period_ms != sc.profile.period_ms:
            raise UserError("port %s: board period %d ms, scenario profile %d ms"
                            % (port, hello.period_ms, sc.profile.period_ms))
        ctl = LinkController(link)
        result = runner.run(sc, progress=progress, every=every, controller=ctl)
        rtt = sorted(link.rtt_s) or [0.0]
        figures = {
            "board": hello.board, "firmware": hello.fw_hash, "profile": hello.profile_hash,
            "frames_sent": getattr(link, "sent", ctl.ticks + ctl.resent),
            "frames_resent": ctl.resent,
            "ticks": ctl.ticks,
            "rtt_median_ms": round(1000 * statistics.median(rtt), 3),
            "rtt_p95_ms": round(1000 * rtt[int(0.95 * (len(rtt) - 1))], 3),
            "rtt_max_ms": round(1000 * rtt[-1], 3),
        }
        for k in ("crc_errors", "bad_frames", "board_gaps"):
            if hasattr(link, k):
                figures[k] = getattr(link, k)
    return result, figures, ctl


def cmd_hil(args):
    sc = load(args.scenario)
    result, figures, _ = run_hil(sc, args.port, progress=not args.quiet, every=args.every)
    summ = summary(result)
    summ["link"] = figures
    from pathlib import Path
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    write_timeseries(result, out / "timeseries.csv")
    write_json(out / "summary.json", summ)
    report.write_reports(result, summ, out)
    print("link: board %s, %d ticks, %d frames resent, round trip median %.2f ms (p95 %.2f, max "
          "%.2f)" % (figures["board"], figures["ticks"], figures["frames_resent"],
                     figures["rtt_median_ms"], figures["rtt_p95_ms"], figures["rtt_max_ms"]))
    return finish(result, summ, args.out)


def register(sub):
    hp = sub.add_parser(
        "hil", help="hardware in the loop: the plant here, the controller on a board",
        description="Run a scenario with the plant simulated on this computer and the controller "
                    "on a board (a real one, or `spinrail board virtual`), in lock-step over the "
                    "framed serial link. Flash the board first with the scenario's profile and "
                    "--mode link. Writes the same files as simulate plus link figures in "
                    "summary.json; exit 0 when every limit held and the system did its job, 1 "
                    "when one was crossed or the board stopped answering, 2 on bad input, 3 when "
                    "every limit held but a service warning was raised (docs/simulate.md).")
    hp.add_argument("scenario", metavar="SCENARIO", help="scenario file or built-in name")
    hp.add_argument("--port", required=True, help="serial port (e.g. /dev/ttyACM0, or the path "
                    "`spinrail board virtual` printed)")
    hp.add_argument("--out", required=True, help="output folder")
    hp.add_argument("--every", type=int, default=1, help="keep one row in N periods")
    hp.add_argument("--quiet", action="store_true", help="no progress on stderr")
    hp.set_defaults(func=cmd_hil)
