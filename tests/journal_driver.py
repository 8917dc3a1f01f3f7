"""A small driver run as a subprocess by the crash tests: run the planned dummy tasks that the
journal does not hold yet, journaling each as it finishes.

    python tests/journal_driver.py RUN_DIR N [--workers W] [--sleep S] [--hang-from SEED]

Exit code 0 when every task is done, 130 when stopped by Ctrl-C. `start_driver` and
`wait_for_count` are the tests' side.
"""

from __future__ import annotations

import argparse
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import dummy_tasks

from harness.campaigns.executors import run_tasks
from harness.campaigns.journal import EVENTS_NAME, JOURNAL_NAME, EventLog, Journal


def main(argv=None) -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("run_dir", type=Path)
    parser.add_argument("n", type=int)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--sleep", type=float, default=0.0)
    parser.add_argument("--hang-from", type=int, default=None, help="tasks from this seed on hang")
    args = parser.parse_args(argv)
    args.run_dir.mkdir(parents=True, exist_ok=True)
    with Journal(args.run_dir) as journal, EventLog(args.run_dir / EVENTS_NAME) as events:
        hang = {} if args.hang_from is None else dict.fromkeys(range(args.hang_from, args.n), "hang")
        planned = dummy_tasks.plan(args.n, sleep_s=args.sleep, faults=hang)
        done = journal.done_keys()
        todo = [task for task in planned if task[0] not in done]
        events.log("start", pid=os.getpid(), done=len(done), todo=len(todo))

        def record(key, row):
            if not journal.add(row):
                events.log("duplicate", key=key)
            events.log("recorded", key=key)

        report = run_tasks(todo, dummy_tasks.trial, workers=args.workers, on_result=record)
        events.log("end", finished=report.finished, interrupted=report.interrupted)
    return 130 if report.interrupted else 0


def start_driver(run_dir, n: int, *, sleep: float = 0.0, workers: int = 2, options=(), **popen):
    return subprocess.Popen([sys.executable, __file__, str(run_dir), str(n), "--sleep", str(sleep),
                             "--workers", str(workers), *options],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            preexec_fn=ctrl_c_as_in_a_terminal, **popen)


def ctrl_c_as_in_a_terminal():
    """Give a child the default Ctrl-C: a test suite started in the background of a non-interactive
    shell ignores SIGINT, and its children would inherit that (POSIX job control)."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def wait_for_count(run_dir, at_least: int, driver, limit_s: float = 60.0) -> int:
    """Poll the journal (as a second process would) until it holds at_least rows."""
    give_up = time.monotonic() + limit_s
    while time.monotonic() < give_up:
        if (Path(run_dir) / JOURNAL_NAME).exists():
            with Journal(run_dir, create=False) as journal:
                count = journal.count()
            if count >= at_least:
                return count
        assert driver.poll() is None, f"driver ended early: {driver.stderr.read()}"
        time.sleep(0.005)
    raise AssertionError(f"journal did not reach {at_least} rows in {limit_s} s")


def driver_processes(driver):
    """The driver's children (its two workers and multiprocessing's resource tracker)."""
    import psutil

    children = psutil.Process(driver.pid).children()
    assert sum("spawn_main" in " ".join(c.cmdline()) for c in children) == 2, "two workers"
    return children


if __name__ == "__main__":
    sys.exit(main())
