# Where the examples of a campaign run (`spinrail fuzz`, `spinrail sweep`): in this process
# (--workers 1), in a local pool of worker processes (the default: one per core), on a Dask
# cluster started here for the run (--scheduler local: a LocalCluster, one single-threaded worker
# process per core or per --workers), or on an existing Dask distributed cluster
# (--scheduler tcp://host:port).
#
# Work goes out in chunks of example indices with a small context (the base scenarios and the
# options); results come back as chunks finish and the caller orders them by index, so nothing
# depends on which worker ran what. The local pool is a plain ProcessPoolExecutor: no scheduler,
# no dashboard port, quick to start; Dask is imported only when --scheduler is given.
import concurrent.futures as cf
from concurrent.futures.process import BrokenProcessPool
import multiprocessing as mp
import os
import sys
import time

from host_sim.errors import UserError

EXIT_LOST = 4  # the run could not finish: a worker process died or the cluster went away (4, as
# an internal error: 3 is simulate's "limits held but the system did not do its job")
PRELOAD = ("numpy", "host_sim.fuzz", "host_sim.sweep", "host_sim.runner", "host_sim.plant.plant",
           "controller.supervisor")


def default_workers():
    """Cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:
        return max(1, os.cpu_count() or 1)


def chunk_size(total, slots, most=16):
    """Examples per task: a few tasks per worker for balance, at most `most` for progress."""
    if total is None:
        return max(1, min(most, 4))
    return max(1, min(most, total // (slots * 4) if slots else total))


def chunks(start, stop, size):
    """[start, stop) in ranges of `size`; stop None: without end."""
    i = start
    while stop is None or i < stop:
        j = i + size if stop is None else min(stop, i + size)
        yield (i, j)
        i = j


def _probe():
    """Runs on a Dask worker: proves it can import the project."""
    import socket

    import host_sim
    return socket.gethostname(), os.path.dirname(host_sim.__file__)


class Pool:
    """Context manager. imap(fn, ctx, tasks, deadline) yields (task, fn(ctx, task)) as tasks
    finish, with a bounded number in flight; after `deadline` (time.monotonic()) no new task
    starts and the ones running finish."""

    def __init__(self, workers=None, scheduler=None):
        self.scheduler = scheduler
        self.workers = default_workers() if workers is None else int(workers)
        if self.workers < 1:
            raise UserError("--workers = %d: allowed 1 or more" % self.workers)
        self.client = None
        self.cluster = None  # a LocalCluster this pool started (--scheduler local)
        self.ex = None
        self.slots = self.workers

    def __enter__(self):
        if self.scheduler:
            try:
                self._connect()
            except BaseException:
                if self.cluster is not None:  # one this pool started: no orphan processes
                    self.cluster.close()
                raise
        elif self.workers > 1:
            if "forkserver" in mp.get_all_start_methods():
                ctx = mp.get_context("forkserver")
                # the fork server imports these once; each worker forks with them loaded
                ctx.set_forkserver_preload(list(PRELOAD))
            else:
                ctx = mp.get_context("spawn")
            self.ex = cf.ProcessPoolExecutor(max_workers=self.workers, mp_context=ctx)
        return self

    def __exit__(self, *exc):
        if self.ex is not None:
            self.ex.shutdown(wait=True, cancel_futures=True)
        if self.client is not None:
            self.client.close()
        if self.cluster is not None:
            self.cluster.close()
        return False

    def _start_local_cluster(self):
        from distributed import LocalCluster
        try:
            # processes, one thread each: the simulation holds the GIL. The scheduler always opens
            # an HTTP port (8787 unless told): a free one on localhost only
            self.cluster = LocalCluster(n_workers=self.workers, threads_per_worker=1,
                                        processes=True, dashboard_address="127.0.0.1:0")
        except Exception as e:
            raise UserError("--scheduler local: could not start a local Dask cluster of %d "
                            "workers (%s: %s)" % (self.workers, type(e).__name__, e))
        self.scheduler = self.cluster.scheduler_address

    def _connect(self):
        addr = self.scheduler
        try:
            from distributed import Client
        except ImportError:
            raise UserError("--scheduler %s: the dask distributed package is not installed "
                            "(pip install 'dask[distributed]')" % addr)
        if addr == "local":
            self._start_local_cluster()
            addr = self.scheduler
        try:
            self.client = Client(addr, timeout="15s")
        except Exception as e:  # OSError, TimeoutError, ValueError for a bad address
            raise UserError("--scheduler %s: cannot connect to a Dask scheduler there (%s); "
                            "allowed: the address of a running scheduler, e.g. "
                            "tcp://host:8786" % (addr, e))
        try:
            self.client.wait_for_workers(1, timeout=60)
            host, where = self.client.submit(_probe, pure=False).result(timeout=120)
        except Exception as e:
            self.client.close()
            raise UserError("--scheduler %s: the cluster's workers cannot run spinrail (%s: %s); "
                            "install this project on every worker (pip install -e .) or start "
                            "them from the checkout" % (addr, type(e).__name__, e))
        nthreads = self.client.nthreads()
        self.workers = len(nthreads)
        self.slots = max(1, sum(nthreads.values()))

    def describe(self):
        if self.client is not None:
            return "%sDask cluster %s (%d workers, %d threads)" % (
                "local " if self.cluster is not None else "", self.scheduler, self.workers,
                self.slots)
        if self.ex is not None:
            return "local pool of %d processes" % self.workers
        return "this process"

    def imap(self, fn, ctx, tasks, deadline=None):
        tasks = iter(tasks)
        if self.client is None and self.ex is None:
            for t in tasks:
                if deadline is not None and time.monotonic() >= deadline:
                    return
                yield t, fn(ctx, t)
            return
        in_flight = 2 * self.slots
        if self.client is not None:
            yield from self._imap_dask(fn, ctx, tasks, deadline, in_flight)
        else:
            yield from self._imap_local(fn, ctx, tasks, deadline, in_flight)

    def _imap_local(self, fn, ctx, tasks, deadline, in_flight):
        pending = {}

        def submit():
            if deadline is not None and time.monotonic() >= deadline:
                return False
            t = next(tasks, None)
            if t is None:
                return False
            pending[self.ex.submit(fn, ctx, t)] = t
            return True

        while len(pending) < in_flight and submit():
            pass
        while pending:
            done, _ = cf.wait(pending, return_when=cf.FIRST_COMPLETED)
            for fut in sorted(done, key=lambda f: pending[f]):
                t = pending.pop(fut)
                try:
                    res = fut.result()
                except BrokenProcessPool as e:
                    raise UserError("a worker process died (%s); the campaign stopped" % e,
                                    EXIT_LOST)
                yield t, res
                submit()

    def _imap_dask(self, fn, ctx, tasks, deadline, in_flight):
        from distributed import as_completed
        ac = as_completed()
        pending = {}

        def submit():
            if deadline is not None and time.monotonic() >= deadline:
                return False
            t = next(tasks, None)
            if t is None:
                return False
            fut = self.client.submit(fn, ctx, t, pure=False)
            pending[fut.key] = t
            ac.add(fut)
            return True

        while len(pending) < in_flight and submit():
            pass
        for fut in ac:
            t = pending.pop(fut.key)
            try:
                res = fut.result()
            except Exception as e:
                if type(e).__name__ in ("KilledWorker", "CommClosedError", "CancelledError"):
                    raise UserError("the Dask cluster %s lost the task for examples %s (%s: %s)"
                                    % (self.scheduler, t, type(e).__name__, e), EXIT_LOST)
                raise
            yield t, res
            submit()


class Bar:
    """Progress on stderr: a bar, examples done, failures, rate. Redrawn in place on a
    terminal; otherwise a line every 10 s."""

    def __init__(self, label, total=None, seconds=None, enabled=True, stream=None):
        self.label = label
        self.total = total
        self.seconds = seconds
        self.enabled = enabled
        self.stream = stream or sys.stderr
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()
        self.t0 = time.monotonic()
        self.next_t = self.t0 + (0.2 if self.tty else 2.0)
        self.shown = False

    def update(self, done, failed, force=False):
        now = time.monotonic()
        if not self.enabled or (now < self.next_t and not force):
            return
        self.next_t = now + (0.2 if self.tty else 10.0)
        el = now - self.t0
        rate = done / el if el > 0 else 0.0
        if self.total:
            frac = done / self.total
            left = (self.total - done) / rate if rate > 0 else float("nan")
            count = "%d/%d" % (done, self.total)
        elif self.seconds:
            frac = min(1.0, el / self.seconds)
            left = max(0.0, self.seconds - el)
            count = "%d" % done
        else:
            frac, left, count = 0.0, float("nan"), "%d" % done
        n = 24
        fill = int(round(frac * n))
        bar = "#" * fill + "." * (n - fill)
        text = "%s [%s] %s done, %d failing, %.1f/s" % (self.label, bar, count, failed, rate)
        if left == left:
            text += ", about %.0f s left" % left
        if self.tty:
            print("\r" + text + "   ", end="", file=self.stream, flush=True)
        else:
            print(text, file=self.stream, flush=True)
        self.shown = True

    def close(self):
        if self.shown and self.tty:
            print(file=self.stream, flush=True)
