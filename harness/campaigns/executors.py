"""Running many independent tasks in worker processes, with crash isolation.

A task is `(key, payload)`. A worker calls `fn(payload) -> dict`, where fn is a top-level function
(pickled by reference, so its module must be importable in the workers); fn may keep per-process
state, such as a physics client, in module globals. Results come back as `(key, row)` in the order
tasks finish, rows exactly as fn returned them. A task that raises, kills its worker or runs past
the time limit still gives a row (`failure_row`), and the remaining tasks go on.

Local backend: a small pool of our own, one pipe per worker, so the parent always knows which task
each worker holds. concurrent.futures.ProcessPoolExecutor is not used: when one worker dies it
marks the whole pool broken, fails every pending future with BrokenProcessPool and refuses new
submits, without saying which task was to blame (checked on Python 3.11.7: a SIGSEGV in one of six
tasks failed all six). Workers are started with the "spawn" method: a fresh interpreter inherits no
physics client or other state of the parent (a pybullet client must not be forked), and spawn works
on every OS. Its start-up cost is paid once per worker, and again only when a crash or a timeout
replaces one; the time limit counts from when the worker takes the task, not from its start-up.

Dask backend: `executor="dask"` submits each task to a dask.distributed cluster (imported only
there, so plain use stays fast).
"""

from __future__ import annotations

import math
import multiprocessing
import os
import signal
import threading
import time
from collections.abc import Callable, Iterable, Iterator
from contextlib import closing, contextmanager
from dataclasses import dataclass
from multiprocessing import connection

from ..errors import HarnessError

__all__ = ["ERROR", "TIMEOUT", "EXECUTORS", "RunReport", "WorkerStartError", "failure_row",
           "call_task", "iter_results", "run_tasks", "start_local_cluster"]

ERROR = "error"
TIMEOUT = "timeout"
EXECUTORS = ("local", "dask")

_READY = "ready"
_START_TIMEOUT_S = 120.0  # generous: a loaded machine importing pybullet and numpy in a new process
_STOP_GRACE_S = 2.0
_PARENT_CHECK_S = 1.0
_DASK_POLL_S = 0.5

Task = tuple[str, object]
Result = tuple[str, dict]


class WorkerStartError(HarnessError):
    """A worker process died or hung before it could take a task (e.g. fn's module not importable)."""


@dataclass(frozen=True)
class RunReport:
    finished: int  # results handed to on_result
    interrupted: bool  # stopped by Ctrl-C before every task finished


def failure_row(key: str, outcome: str, reason: str) -> dict:
    """The row of a task that produced none of its own; the runner may add the trial's inputs."""
    return {"trial_key": key, "outcome": outcome, "error": reason}


def call_task(fn: Callable[[object], dict], key: str, payload) -> dict:
    """Run one task in this process; an exception in fn becomes an error row."""
    try:
        row = fn(payload)
    except Exception as exc:
        return failure_row(key, ERROR, _describe(exc))
    if not isinstance(row, dict):
        return failure_row(key, ERROR, f"TypeError: task returned {type(row).__name__}, not dict")
    return row


def _describe(exc: BaseException) -> str:
    return f"{type(exc).__name__}: {exc}"


@contextmanager
def _ctrl_c_deferred():
    """Hold Ctrl-C while a result is recorded, so a row is either recorded and counted or neither
    (a Ctrl-C landing between the journal write and the count made them disagree). The handler is
    swapped at the Python level: blocking the signal in the OS is not enough, because a Ctrl-C the
    interpreter has already caught but not yet raised is raised inside the block (about 1 run in 6
    of tests/test_executors.py's Ctrl-C test counted one row fewer than it recorded)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught = []
    previous = signal.signal(signal.SIGINT, lambda *_: caught.append(True))
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)
        if caught:
            raise KeyboardInterrupt


def run_tasks(tasks: Iterable[Task], fn, *, on_result: Callable[[str, dict], object],
              workers: int | None = None, timeout: float | None = None, executor: str = "local",
              scheduler=None) -> RunReport:
    """Run every task, calling on_result(key, row) in the parent as each finishes.

    Ctrl-C (KeyboardInterrupt) stops the workers and returns with interrupted=True; everything
    on_result already handled (journaled) stays. Other errors stop the workers and propagate.
    """
    finished = 0
    try:
        with closing(iter_results(tasks, fn, workers=workers, timeout=timeout,
                                  executor=executor, scheduler=scheduler)) as results:
            for key, row in results:
                with _ctrl_c_deferred():
                    on_result(key, row)
                    finished += 1
    except KeyboardInterrupt:
        return RunReport(finished, interrupted=True)
    return RunReport(finished, interrupted=False)


def iter_results(tasks: Iterable[Task], fn, *, workers: int | None = None,
                 timeout: float | None = None, executor: str = "local",
                 scheduler=None) -> Iterator[Result]:
    """Yield (key, row) as tasks finish, in any order.

    tasks is consumed lazily, one task each time a worker is free, so a caller may decide the next
    tasks from the results so far. workers defaults to the CPU count (for dask with scheduler=None,
    the size of the LocalCluster started; with a scheduler address, the cluster decides). timeout
    is per task, in seconds (None: no limit). Close the iterator (or exhaust it) to stop workers.
    """
    workers = workers or os.cpu_count() or 1
    if workers < 1:
        raise ValueError(f"workers must be at least 1; got {workers}")
    if timeout is not None and not timeout > 0:
        raise ValueError(f"timeout must be a number of seconds > 0; got {timeout}")
    if executor == "local":
        return _iter_local(iter(tasks), fn, workers, timeout)
    if executor == "dask":
        return _iter_dask(iter(tasks), fn, workers, timeout, scheduler)
    raise ValueError(f"unknown executor {executor!r}; expected one of: {', '.join(EXECUTORS)}")


def _deadline(timeout: float | None) -> float:
    return math.inf if timeout is None else time.monotonic() + timeout


def _seconds_until(deadline: float) -> float | None:
    return None if deadline == math.inf else max(0.0, deadline - time.monotonic())


def _timeout_row(key: str, timeout: float) -> dict:
    return failure_row(key, TIMEOUT, f"ran past the time limit of {timeout:g} s")


# ---- local backend -------------------------------------------------------------------------


def _worker_main(conn, fn, parent_pid: int) -> None:
    # Ctrl-C in a terminal reaches the whole process group; the parent decides what stops.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _exit_when_orphaned(parent_pid)
    conn.send(_READY)
    while True:
        try:
            key, payload = conn.recv()
        except (EOFError, OSError):
            return  # the parent closed the pipe: no more tasks
        row = call_task(fn, key, payload)
        try:
            conn.send(row)
        except OSError:
            return  # the parent is gone
        except Exception as exc:  # the row could not be pickled; nothing was sent
            conn.send(failure_row(key, ERROR, f"result not picklable: {_describe(exc)}"))


def _exit_when_orphaned(parent_pid: int) -> None:
    """If the parent is killed (kill -9), stop rather than finish a long or hung task for nobody."""
    def watch():
        while os.getppid() == parent_pid:
            time.sleep(_PARENT_CHECK_S)
        os._exit(0)
    threading.Thread(target=watch, daemon=True).start()


def _exit_status(proc) -> str:
    code = proc.exitcode
    if code is not None and code < 0:
        try:
            return f"signal {-code}, {signal.Signals(-code).name}"
        except ValueError:
            return f"signal {-code}"
    return f"exit code {code}"


class _Worker:
    """One worker process, the parent's end of its pipe, and the task it holds (key or None)."""

    def __init__(self, ctx, fn):
        self.conn, child_end = ctx.Pipe()
        self.proc = ctx.Process(target=_worker_main, args=(child_end, fn, os.getpid()),
                                daemon=True, name="grasp-harness-worker")
        self.proc.start()
        child_end.close()  # only the child holds it now, so its death reads as EOF here
        self.key = None
        self.deadline = math.inf

    def wait_ready(self) -> None:
        if connection.wait([self.conn, self.proc.sentinel], _START_TIMEOUT_S) and self.conn.poll():
            try:
                if self.conn.recv() == _READY:
                    return
            except (EOFError, OSError):
                pass
        self.stop()
        raise WorkerStartError(f"a worker process did not start ({_exit_status(self.proc)})")

    def give(self, key: str, payload, timeout: float | None) -> None:
        self.conn.send((key, payload))
        self.key, self.deadline = key, _deadline(timeout)

    def has_news(self) -> bool:
        """The held task's row is waiting, or the process has ended."""
        return self.conn.poll() or self.proc.exitcode is not None

    def take(self) -> Result:
        key, self.key, self.deadline = self.key, None, math.inf
        try:
            return key, self.conn.recv()
        except (EOFError, OSError):
            self.proc.join()
            return key, failure_row(key, ERROR, f"worker crashed ({_exit_status(self.proc)})")
        except Exception as exc:  # sent, but cannot be unpickled here
            return key, failure_row(key, ERROR, f"result not readable: {_describe(exc)}")

    def stop(self) -> None:
        """An idle worker exits on EOF; a busy or stuck one is killed."""
        self.conn.close()
        if self.key is not None:
            self.proc.kill()
        self.proc.join(_STOP_GRACE_S)
        if self.proc.exitcode is None:
            self.proc.kill()
            self.proc.join()


class _Pool:
    def __init__(self, fn, size: int, timeout: float | None):
        self._ctx = multiprocessing.get_context("spawn")
        self._fn, self._size, self._timeout = fn, size, timeout
        self.workers: list[_Worker] = []

    def start(self) -> None:
        # Start all, then wait: the interpreters boot in parallel.
        for _ in range(self._size):
            self.workers.append(_Worker(self._ctx, self._fn))
        for worker in self.workers:
            worker.wait_ready()

    def renew(self, i: int) -> None:
        self.workers[i].stop()
        self.workers[i] = _Worker(self._ctx, self._fn)
        self.workers[i].wait_ready()

    def fill(self, todo: Iterator[Task]) -> None:
        """Give a task to every idle worker while tasks remain."""
        for i, worker in enumerate(self.workers):
            if worker.key is None:
                task = next(todo, None)
                if task is None:
                    return
                self._give(i, *task)

    def _give(self, i: int, key: str, payload) -> None:
        try:
            self.workers[i].give(key, payload, self._timeout)
        except OSError:  # the idle worker died since its last task (e.g. the out-of-memory killer)
            self.renew(i)
            self.workers[i].give(key, payload, self._timeout)

    def busy(self) -> list[_Worker]:
        return [w for w in self.workers if w.key is not None]

    def collect(self) -> list[Result]:
        """Wait until a held task has finished, died or overrun; return those rows."""
        busy = self.busy()
        handles = [w.conn for w in busy] + [w.proc.sentinel for w in busy]
        connection.wait(handles, _seconds_until(min(w.deadline for w in busy)))
        results = []
        for i, worker in enumerate(self.workers):
            if worker.key is None:
                continue
            if worker.has_news():
                results.append(worker.take())
                if worker.proc.is_alive():
                    continue
            elif time.monotonic() >= worker.deadline:
                results.append((worker.key, _timeout_row(worker.key, self._timeout)))
            else:
                continue
            self.renew(i)  # a dead worker, or an overrunning one (stop() kills it)
        return results

    def close(self) -> None:
        for worker in self.workers:
            worker.stop()


def _iter_local(todo: Iterator[Task], fn, workers: int, timeout: float | None) -> Iterator[Result]:
    pool = _Pool(fn, workers, timeout)
    try:
        pool.start()
        pool.fill(todo)
        while pool.busy():
            yield from pool.collect()
            pool.fill(todo)
    finally:
        pool.close()


# ---- dask backend --------------------------------------------------------------------------


def start_local_cluster(workers: int = 2):
    """A dask LocalCluster of single-threaded worker processes.

    allowed-failures is 0 so that a trial that kills its worker is recorded as an error at once,
    instead of being retried on three more workers (set the same on a real cluster's scheduler).
    """
    import dask
    from dask.distributed import LocalCluster

    with dask.config.set({"distributed.scheduler.allowed-failures": 0}):
        return LocalCluster(n_workers=workers, processes=True, threads_per_worker=1,
                            dashboard_address=None)


def _iter_dask(todo: Iterator[Task], fn, workers: int, timeout: float | None,
               scheduler) -> Iterator[Result]:
    from dask.distributed import Client

    cluster = start_local_cluster(workers) if scheduler is None else None
    client = Client(cluster if cluster is not None else scheduler)
    try:
        yield from _dask_results(client, todo, fn, timeout)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


def _dask_results(client, todo: Iterator[Task], fn, timeout: float | None) -> Iterator[Result]:
    from concurrent.futures import CancelledError  # what dask raises for cancelled futures

    from dask.distributed import wait

    live: dict = {}  # future -> [key, deadline]; the deadline is set once the task is seen running
    exhausted = False
    while True:
        # No more tasks in flight than the cluster has threads up now: a task queued on a worker
        # behind a crashing one would die with it (a restarting worker is not counted).
        capacity = sum(client.nthreads().values())
        while len(live) < capacity and not exhausted:
            task = next(todo, None)
            exhausted = task is None
            if not exhausted:
                key, payload = task
                future = client.submit(call_task, fn, key, payload, pure=False, retries=0)
                live[future] = [key, math.inf]
        if not live:
            if exhausted:
                return
            client.wait_for_workers(1)
            continue
        # wait(), not as_completed: each task has its own deadline, and as_completed has no
        # per-call timeout. wait() raises when time is up or a future was cancelled by the
        # cluster; either way the futures' own states say what is done.
        try:
            wait(list(live), timeout=_next_check(client, live, timeout),
                 return_when="FIRST_COMPLETED")
        except (TimeoutError, CancelledError):
            pass
        for future, (key, deadline) in list(live.items()):
            if future.done():
                yield key, _dask_row(key, future)
            elif time.monotonic() >= deadline:
                _abandon(client, future)
                yield key, _timeout_row(key, timeout)
            else:
                continue
            del live[future]


def _next_check(client, live: dict, timeout: float | None) -> float | None:
    """Start the clock of tasks the scheduler now reports running; seconds until the next look.

    Timing from submission would count the wait for a worker that a crash or a timeout is
    restarting (seconds) against the innocent task queued behind it. A task is seen running within
    _DASK_POLL_S, so its limit is met that much late at worst.
    """
    if timeout is None:
        return None
    unstarted = [future for future, (_, deadline) in live.items() if deadline == math.inf]
    if unstarted:
        running = {key for keys in client.processing().values() for key in keys}
        for future in unstarted:
            if future.key in running:
                live[future][1] = _deadline(timeout)
    waits = [_seconds_until(deadline) for _, deadline in live.values() if deadline != math.inf]
    if len(waits) < len(live):
        waits.append(_DASK_POLL_S)  # some task not seen running yet: look again soon
    return min(waits)


def _dask_row(key: str, future) -> dict:
    from dask.distributed import KilledWorker

    try:
        return future.result()
    except KilledWorker:
        return failure_row(key, ERROR, "worker crashed (dask KilledWorker: the worker process "
                                       "died while running this task)")
    except Exception as exc:  # lost or cancelled by the cluster itself
        return failure_row(key, ERROR, _describe(exc))


def _abandon(client, future) -> None:
    """Cancel an overrunning task and restart its worker: a running thread cannot be stopped."""
    holders = [addr for addr, keys in client.processing().items() if future.key in keys]
    future.cancel()
    if holders:
        client.restart_workers(holders, raise_for_error=False)
