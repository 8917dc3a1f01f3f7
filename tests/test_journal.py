"""The run journal and event log: exact rows, no duplicates, readable during a run, and a run
killed with -9 at random instants resumes to exactly the rows of an uninterrupted run."""

import json
import math
import random
import signal
import sqlite3
import struct
import time

import dummy_tasks
import numpy as np
import psutil
import pytest

from harness.campaigns.journal import EVENTS_NAME, JOURNAL_NAME, EventLog, Journal, read_events
from journal_driver import driver_processes, start_driver, wait_for_count

N_TASKS = 60
TASK_S = 0.04


def bits(x: float) -> bytes:
    return struct.pack("<d", x)


def test_table_has_the_documented_columns_and_uses_wal(tmp_path):
    Journal(tmp_path).close()
    db = sqlite3.connect(tmp_path / JOURNAL_NAME)
    columns = [(name, kind, pk) for _, name, kind, _, _, pk in db.execute("PRAGMA table_info(trials)")]
    assert columns == [("trial_key", "TEXT", 1), ("seq", "INTEGER", 0), ("finished_at", "REAL", 0),
                       ("outcome", "TEXT", 0), ("row", "TEXT", 0)]
    assert db.execute("PRAGMA journal_mode").fetchone() == ("wal",)


def test_a_key_is_recorded_once_and_add_says_whether_it_was_new(tmp_path):
    with Journal(tmp_path / "j.sqlite") as journal:
        assert journal.add({"trial_key": "a", "outcome": "held", "slip_mm": 1.5}) is True
        assert journal.add({"trial_key": "a", "outcome": "dropped", "slip_mm": 9.0}) is False
        assert journal.count() == 1
        assert journal.rows() == [{"trial_key": "a", "outcome": "held", "slip_mm": 1.5}]


def test_rows_come_back_in_finishing_order_with_seq_and_outcome(tmp_path):
    with Journal(tmp_path) as journal:
        for key in ("c", "a", "b"):
            journal.add({"trial_key": key, "outcome": f"o-{key}"})
        assert [row["trial_key"] for row in journal.rows()] == ["c", "a", "b"]
        assert journal.done_keys() == {"a", "b", "c"}
    db = sqlite3.connect(tmp_path / JOURNAL_NAME)
    stored = db.execute("SELECT trial_key, seq, outcome FROM trials ORDER BY seq").fetchall()
    assert stored == [("c", 1, "o-c"), ("a", 2, "o-a"), ("b", 3, "o-b")]
    times = [t for (t,) in db.execute("SELECT finished_at FROM trials ORDER BY seq")]
    assert times == sorted(times) and times[0] > 1.6e9


def test_floats_round_trip_bit_exactly_through_a_reopened_journal(tmp_path):
    values = [0.1 + 0.2, -0.0, 5e-324, 2.2250738585072014e-308 / 3, 1.7976931348623157e308,
              math.pi * 1e100, float("inf"), float("-inf"), np.float64(1 / 3),
              float(np.nextafter(1.0, 2.0))]
    row = {"trial_key": "k", "x": values, "f32": np.float32(0.1), "n": np.int64(2**53 + 1),
           "nan": float("nan"), "ok": np.bool_(True)}
    with Journal(tmp_path) as journal:
        journal.add(row)
    with Journal(tmp_path, create=False) as journal:
        [back] = journal.rows()
    assert [bits(v) for v in back["x"]] == [bits(float(v)) for v in values]
    assert bits(back["f32"]) == bits(float(np.float32(0.1)))
    assert back["n"] == 2**53 + 1 and back["ok"] is True and math.isnan(back["nan"])


def test_a_run_recorded_under_an_old_column_name_reads_under_the_current_one(tmp_path):
    # runs recorded before the actuator lag column gained its unit suffix still load
    with Journal(tmp_path) as journal:
        journal.add({"trial_key": "old", "pert_actuator_lag": 0.02, "slip_mm": 1.0})
        journal.add({"trial_key": "new", "pert_actuator_lag_s": 0.01, "slip_mm": 2.0})
    with Journal(tmp_path, create=False) as journal:
        rows = journal.rows()
    assert rows == [{"trial_key": "old", "pert_actuator_lag_s": 0.02, "slip_mm": 1.0},
                    {"trial_key": "new", "pert_actuator_lag_s": 0.01, "slip_mm": 2.0}]


def test_a_row_needs_a_key_and_a_missing_journal_is_not_created_on_request(tmp_path):
    with Journal(tmp_path) as journal, pytest.raises(ValueError, match="needs a 'trial_key'"):
        journal.add({"outcome": "held"})
    with pytest.raises(FileNotFoundError, match="no journal at"):
        Journal(tmp_path / "elsewhere.sqlite", create=False)
    assert not (tmp_path / "elsewhere.sqlite").exists()


def test_event_log_writes_one_timed_json_line_per_event(tmp_path):
    with EventLog(tmp_path / EVENTS_NAME) as log:
        log.log("start", todo=3)
        log.log("recorded", key="a", value=float("nan"))
    lines = (tmp_path / EVENTS_NAME).read_text().splitlines()
    assert len(lines) == 2
    first = json.loads(lines[0])
    assert set(first) == {"t", "event", "todo"} and first["event"] == "start"


def test_event_log_skips_a_line_torn_by_a_kill_and_continues_on_a_new_line(tmp_path):
    path = tmp_path / EVENTS_NAME
    with EventLog(path) as log:
        log.log("start")
    with open(path, "ab") as f:
        f.write(b'{"t": 1.0, "event": "recor')  # what a kill in mid-write could leave
    with EventLog(path) as log:
        log.log("resume")
    assert [event["event"] for event in read_events(path)] == ["start", "resume"]


def reference_rows(tmp_path, n):
    """The rows of an uninterrupted driver run."""
    driver = start_driver(tmp_path / "reference", n, sleep=TASK_S)
    assert driver.wait(timeout=60) == 0, driver.stderr.read()
    with Journal(tmp_path / "reference", create=False) as journal:
        return dummy_tasks.canonical(journal.rows())


def test_kill_9_at_five_random_instants_then_resume_records_every_trial_once(tmp_path):
    want = reference_rows(tmp_path, N_TASKS)
    run = tmp_path / "run"
    rng = random.Random(20240607)
    count = 0
    for _ in range(5):
        driver = start_driver(run, N_TASKS, sleep=TASK_S)
        count = wait_for_count(run, count + rng.randint(1, 6), driver)
        children = driver_processes(driver)
        time.sleep(rng.uniform(0.0, 2 * TASK_S))  # a random instant inside the next trial or two
        driver.kill()
        assert driver.wait(timeout=30) == -signal.SIGKILL, "killed while running"
        _, orphans = psutil.wait_procs(children, timeout=10)
        assert orphans == []
        with Journal(run, create=False) as journal:
            count = journal.count()
        assert count < N_TASKS, "the kill landed before the end"
    driver = start_driver(run, N_TASKS, sleep=TASK_S)
    assert driver.wait(timeout=60) == 0, driver.stderr.read()

    db = sqlite3.connect(run / JOURNAL_NAME)
    assert db.execute("PRAGMA integrity_check").fetchone() == ("ok",)
    keys = [key for (key,) in db.execute("SELECT trial_key FROM trials")]
    assert sorted(keys) == sorted(key for key, _ in dummy_tasks.plan(N_TASKS))
    with Journal(run) as journal:
        assert dummy_tasks.canonical(journal.rows()) == want
    events = read_events(run / EVENTS_NAME)
    starts = [event for event in events if event["event"] == "start"]
    assert len(starts) == 6 and all(s["done"] + s["todo"] == N_TASKS for s in starts)
    assert [s["done"] for s in starts] == sorted(s["done"] for s in starts)
    assert not [event for event in events if event["event"] == "duplicate"]


def test_a_second_process_reads_the_journal_while_a_run_writes_it(tmp_path):
    run = tmp_path / "run"
    want = dummy_tasks.canonical(dummy_tasks.expected_row(p) for _, p in dummy_tasks.plan(N_TASKS))
    driver = start_driver(run, N_TASKS, sleep=TASK_S)
    wait_for_count(run, 1, driver)
    seen = []
    with Journal(run, create=False) as journal:
        while driver.poll() is None:
            count = journal.count()
            rows = dummy_tasks.canonical(journal.rows())
            assert len(rows) >= count >= (seen[-1] if seen else 0)
            assert rows == {key: want[key] for key in rows}
            seen.append(count)
    assert driver.returncode == 0, driver.stderr.read()
    mid_run = {count for count in seen if 0 < count < N_TASKS}
    assert len(mid_run) >= 2, f"reads saw the journal grow: {sorted(mid_run)}"
    with Journal(run) as journal:
        assert dummy_tasks.canonical(journal.rows()) == want
