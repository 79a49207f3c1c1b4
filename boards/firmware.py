# The firmware's control loop (runs on the board): link, supervisor and hardware layer, one pass
# at a time on the wrapping millisecond clock. Built by boards/main.py once the profile is
# loaded and the validation code dropped (so the heap never holds both).
#
# Modes (fixed at flash time, from the board file or `spinrail flash --mode`):
#  standalone  sensors through the HAL; telemetry frames out; HELLO answered.
#  link        measurements arrive in MEAS frames; a CMD frame goes back after each tick.
#              Realtime MEAS: the board ticks on its own period with the latest values.
#              Lock-step MEAS (F_STEP): the board ticks at once with now_ms = the frame's t_ms
#              (the host's simulated clock), so a host can run faster than real time.
#              No MEAS for link_timeout_ms: outputs safe, F_LINK, until frames resume.
# Any exception in a loop pass: outputs safe (dump on only if the bus reads at or above the
# trip), F_FIRMWARE latched (until reset_req) and recorded in fault.log, and the loop goes on,
# so the supervisor's guards keep running. KeyboardInterrupt (a BREAK frame from the host, or
# Ctrl-C where the link has its own UART) leaves the loop with storage and USB off and the
# dump load on: nothing watches the bus any more.
import time

from controller import link as L
from controller.compat import TICKS_MASK, const, ticks_add, ticks_diff
from controller.signals import DUTY_MAX, F_FIRMWARE, F_LINK, ST_BLOCKED
from controller.supervisor import Supervisor

_RX_CHUNK = const(128)  # bytes taken from the stream per pass at most (a MEAS frame is ~80)
_RESYNC_PERIODS = const(4)  # further behind than this: restart the schedule from now
_WAIT_MAX_MS = const(5)  # longest sleep between passes (input wakes us earlier)


class Firmware:
    def __init__(self, p, hal, stream, mode, ident, timeout_ms, telemetry_ms, log_path=None):
        self.p = p
        self.hal = hal
        self.stream = stream
        self.sup = Supervisor(p)
        self.link_mode = mode == L.MODE_LINK  # else standalone
        self.link = L.BoardLink(timeout_ms, ident, self.sup.m if self.link_mode else None)
        self.rxbuf = bytearray(_RX_CHUNK)
        self.period_ms = p.period_ms
        self.telemetry_ms = telemetry_ms  # 0: no telemetry frames
        self.next_ms = 0  # board clock of the next scheduled tick
        self.next_telem_ms = 0  # board clock of the next telemetry frame
        self.started = 0  # 1 after the first pass (schedules start from it)
        self.lockstep = 0  # 1 while the host sends lock-step MEAS frames
        self.fw_fault = 0  # 1 after an exception, until reset_req
        self.exceptions = 0  # exceptions caught in loop passes
        self.late = 0  # scheduled ticks that ran more than one period late
        self.log_path = log_path  # where the first exception's traceback goes
        self.now_ms = 0  # board clock of the current pass

    # -- one pass -----------------------------------------------------------------------------
    def step(self, now_ms):
        """One pass of the main loop on the board clock now_ms (masked to 30 bits)."""
        self.now_ms = now_ms
        try:
            self._pass(now_ms)
        except Exception as e:  # not KeyboardInterrupt: Ctrl-C must still stop the loop
            self._on_exception(e)
        self.hal.feed()

    def _pass(self, now_ms):
        if not self.started:
            self.started = 1
            self.next_ms = now_ms
            self.next_telem_ms = now_ms
        link = self.link
        n = self.stream.read_into(self.rxbuf)
        for i in range(n):
            ev = link.push(self.rxbuf[i], now_ms)
            if ev == L.EV_HELLO:
                self._send(link.hello_frame())
            elif ev == L.EV_STEP:
                self.lockstep = 1
                self._tick(link.step_ms)
                self._send(link.cmd_frame(self.sup.c, self.sup.ticks, link.step_ms))
            elif ev == L.EV_MEAS:
                self.lockstep = 0
            elif ev == L.EV_HOLD_STEP:
                # lock-step while the link fault holds (not enough fresh frames yet): answer
                # with the safe state, do not tick
                self.lockstep = 1
                self._hold_safe()
                self._send(link.cmd_frame(self.sup.c, self.sup.ticks, link.step_ms))
            elif ev == L.EV_BREAK:
                raise KeyboardInterrupt  # the host breaks in (run() leaves the outputs safe)
        if ticks_diff(now_ms, self.next_ms) >= 0:
            self._schedule(now_ms)
            if not self.link_mode:
                self.hal.read(self.sup.m)
                self._tick(now_ms)
            elif link.check(now_ms):
                self._hold_safe()
                self._send(link.cmd_frame(self.sup.c, self.sup.ticks, now_ms))
            elif not self.lockstep:
                self._tick(now_ms)
                self._send(link.cmd_frame(self.sup.c, self.sup.ticks, now_ms))
        elif self.link_mode and link.check(now_ms):
            self._hold_safe()
        if self.telemetry_ms and ticks_diff(now_ms, self.next_telem_ms) >= 0:
            self.next_telem_ms = ticks_add(self.next_telem_ms, self.telemetry_ms)
            if ticks_diff(now_ms, self.next_telem_ms) >= 0:
                self.next_telem_ms = ticks_add(now_ms, self.telemetry_ms)
            self._send(link.telem_frame(self.sup.m, self.sup.c, self.sup.ticks, now_ms,
                                        self.exceptions, self.late))

    def _schedule(self, now_ms):
        late_ms = ticks_diff(now_ms, self.next_ms)
        if late_ms >= self.period_ms:
            self.late += 1
        if late_ms >= _RESYNC_PERIODS * self.period_ms:
            self.next_ms = ticks_add(now_ms, self.period_ms)
        else:
            self.next_ms = ticks_add(self.next_ms, self.period_ms)

    def _tick(self, now_ms):
        sup = self.sup
        sup.tick(now_ms)
        c = sup.c
        if self.fw_fault:
            if sup.m.reset_req:
                self.fw_fault = 0
            else:
                c.set_safe()
                c.stage = ST_BLOCKED
                c.fault |= F_FIRMWARE
        self.hal.apply(c)

    def _hold_safe(self):
        """Link lost: storage, USB and the battery switch off; the dump load keeps the last
        tick's decision (the bus is not known any more)."""
        c = self.sup.c
        if c.fault & F_LINK:
            return
        c.set_safe()
        c.stage = ST_BLOCKED
        c.fault |= F_LINK
        if self.fw_fault:
            c.fault |= F_FIRMWARE
        self.hal.apply(c)

    def _send(self, n):
        self.stream.write(self.link.tx.out, n)

    def _on_exception(self, e):
        self.exceptions += 1
        if not self.fw_fault:
            self.fw_fault = 1
            self._record(e)
        sup = self.sup
        c = sup.c
        m = sup.m
        try:
            if not self.link_mode:
                self.hal.read_bus(m)
        except Exception:
            pass  # keep the last bus reading
        dump = m.bus_mv >= self.p.ovp_trip_mv
        c.set_safe()
        c.stage = ST_BLOCKED
        c.dump_duty = DUTY_MAX if dump else 0
        c.fault |= F_FIRMWARE
        try:
            self.hal.apply(c)
        except Exception:
            try:
                self.hal.safe(dump)
            except Exception:
                pass
        self.next_ms = ticks_add(self.now_ms, self.period_ms)

    def _record(self, e):
        if not self.log_path:
            return
        try:
            import sys
            with open(self.log_path, "w") as f:
                if hasattr(sys, "print_exception"):
                    sys.print_exception(e, f)
                else:
                    import traceback
                    traceback.print_exception(type(e), e, e.__traceback__, file=f)
        except Exception:
            pass

    # -- the loop -----------------------------------------------------------------------------
    def loop(self):
        while True:
            now = time.ticks_ms() & TICKS_MASK
            self.step(now)
            wait = ticks_diff(self.next_ms, time.ticks_ms() & TICKS_MASK)
            if wait > 0:
                self.stream.wait(wait if wait < _WAIT_MAX_MS else _WAIT_MAX_MS)
