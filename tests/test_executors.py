"""The executors: same rows on every backend; crashes, hangs and exceptions are recorded and the
rest goes on; Ctrl-C stops cleanly."""

import os
import signal
import time

import dummy_tasks
import psutil
import pytest

from harness.campaigns.executors import (ERROR, TIMEOUT, call_task, failure_row, iter_results, run_tasks,
                               start_local_cluster)
from harness.campaigns.journal import EVENTS_NAME, Journal, read_events
from journal_driver import driver_processes, start_driver, wait_for_count

TIMEOUT_S = 3.0
FAULTS = {0: "segfault", 1: "hang", 2: "raise", 3: "exit", 7: "segfault"}
DASK_CRASH = "worker crashed (dask KilledWorker: the worker process died while running this task)"
LOCAL_REASONS = {
    "segfault": (ERROR, "worker crashed (signal 11, SIGSEGV)"),
    "hang": (TIMEOUT, f"ran past the time limit of {TIMEOUT_S:g} s"),
    "raise": (ERROR, "ValueError: injected failure"),
    "exit": (ERROR, "worker crashed (exit code 3)"),
}
DASK_REASONS = {**LOCAL_REASONS, "segfault": (ERROR, DASK_CRASH), "exit": (ERROR, DASK_CRASH)}


@pytest.fixture(scope="module")
def dask_scheduler():
    cluster = start_local_cluster(2)
    yield cluster.scheduler_address
    cluster.close()


def expected(tasks):
    return dummy_tasks.canonical(dummy_tasks.expected_row(payload) for _, payload in tasks)


def collect(tasks, **options):
    options.setdefault("timeout", 60.0)  # a failing test ends instead of waiting for ever
    results = list(iter_results(tasks, dummy_tasks.trial, **options))
    keys = [key for key, _ in results]
    assert sorted(keys) == sorted(key for key, _ in tasks), "every task once"
    return {key: row for key, row in results}


def test_rows_identical_with_one_worker_two_workers_and_dask(dask_scheduler):
    tasks = dummy_tasks.plan(16)
    one = collect(tasks, workers=1)
    two = collect(tasks, workers=2)
    dask = collect(tasks, executor="dask", scheduler=dask_scheduler)
    want = expected(tasks)
    assert dummy_tasks.canonical(one.values()) == want
    assert dummy_tasks.canonical(two.values()) == want
    assert dummy_tasks.canonical(dask.values()) == want


def check_faults(rows, tasks, reasons):
    for seed, fault in FAULTS.items():
        key = dummy_tasks.key_for(seed)
        assert rows.pop(key) == failure_row(key, *reasons[fault]), fault
    healthy = [task for task in tasks if task[0] in rows]
    assert dummy_tasks.canonical(rows.values()) == expected(healthy)


@pytest.mark.parametrize("workers", [1, 2])
def test_local_crash_hang_and_raise_are_recorded_and_the_rest_completes(workers):
    # Faults come first and twice, so later tasks can only finish on replaced workers.
    tasks = dummy_tasks.plan(12, faults=FAULTS)
    rows = collect(tasks, workers=workers, timeout=TIMEOUT_S)
    check_faults(rows, tasks, LOCAL_REASONS)


def test_dask_crash_hang_and_raise_are_recorded_and_the_rest_completes(dask_scheduler):
    tasks = dummy_tasks.plan(12, faults=FAULTS)
    rows = collect(tasks, executor="dask", scheduler=dask_scheduler, timeout=TIMEOUT_S)
    check_faults(rows, tasks, DASK_REASONS)
    # The cluster recovered: a plain batch afterwards runs on restarted workers.
    again = dummy_tasks.plan(6)
    assert dummy_tasks.canonical(collect(again, executor="dask", scheduler=dask_scheduler)
                                 .values()) == expected(again)


def test_call_task_turns_exceptions_and_non_dict_results_into_error_rows():
    payload = dummy_tasks.plan(1, faults={0: "raise"})[0][1]
    assert call_task(dummy_tasks.trial, "k", payload) == failure_row(
        "k", "error", "ValueError: injected failure")
    assert call_task(len, "k", [1, 2]) == failure_row(
        "k", "error", "TypeError: task returned int, not dict")


def test_tasks_are_taken_lazily_as_workers_free_up():
    # A caller may decide the next task from the results so far (time-budget mode).
    seen = []

    def tasks():
        for key, payload in dummy_tasks.plan(5):
            assert len(seen) == payload["seed"]  # one worker: each task is taken after a result
            yield key, payload

    report = run_tasks(tasks(), dummy_tasks.trial, workers=1,
                       on_result=lambda key, row: seen.append(key))
    assert (report.finished, report.interrupted) == (5, False)
    assert sorted(seen) == [dummy_tasks.key_for(seed) for seed in range(5)]


@pytest.mark.parametrize("options, message", [
    ({"executor": "threads"}, "unknown executor 'threads'; expected one of: local, dask"),
    ({"workers": -1}, "workers must be at least 1; got -1"),
    ({"timeout": 0}, "timeout must be a number of seconds > 0; got 0"),
])
def test_bad_options_are_refused_before_any_worker_starts(options, message):
    with pytest.raises(ValueError) as err:
        iter_results([], dummy_tasks.trial, **options)
    assert str(err.value) == message


def test_ctrl_c_stops_workers_and_keeps_the_journal(tmp_path):
    n = 200
    # A new session stands for the terminal's process group: Ctrl-C reaches driver and workers.
    driver = start_driver(tmp_path, n, sleep=0.05, start_new_session=True)
    wait_for_count(tmp_path, 4, driver)
    children = driver_processes(driver)
    os.killpg(driver.pid, signal.SIGINT)
    assert driver.wait(timeout=30) == 130, driver.stderr.read()
    _, alive = psutil.wait_procs(children, timeout=10)
    assert alive == []
    with Journal(tmp_path) as journal:
        rows = journal.rows()
    assert 4 <= len(rows) < n
    assert dummy_tasks.canonical(rows) == {
        key: text for key, text in expected(dummy_tasks.plan(n)).items()
        if key in {row["trial_key"] for row in rows}}
    end = read_events(tmp_path / EVENTS_NAME)[-1]
    assert (end["event"], end["interrupted"], end["finished"]) == ("end", True, len(rows))


def test_workers_holding_hung_tasks_exit_when_their_driver_is_killed(tmp_path):
    # Tasks 0-2 finish, every later one hangs; kill -9 must not leave the workers hanging on.
    driver = start_driver(tmp_path, 10, options=["--hang-from", "3"])
    wait_for_count(tmp_path, 3, driver)
    children = driver_processes(driver)
    time.sleep(0.2)  # let the workers take their hanging tasks (a sooner kill only makes it easier)
    driver.kill()
    driver.wait(timeout=30)
    _, alive = psutil.wait_procs(children, timeout=10)
    assert alive == []
