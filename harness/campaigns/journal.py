"""The run journal (SQLite, one row per finished trial) and the append-only event log.

Both are written by the driving process only, one trial or event at a time, and each write is
durable before the next trial is handed out; so a run killed at any instant (kill -9) loses at most
the trials in flight, and resuming runs exactly the keys missing from `done_keys()`.
"""

from __future__ import annotations

import json
import os
import sqlite3
import time
from pathlib import Path

__all__ = ["JOURNAL_NAME", "EVENTS_NAME", "RENAMED_COLUMNS", "Journal", "EventLog", "read_events", "to_json",
           "current_names"]

JOURNAL_NAME = "journal.sqlite"
EVENTS_NAME = "events.jsonl"

_SCHEMA = """CREATE TABLE IF NOT EXISTS trials (
    trial_key   TEXT PRIMARY KEY,
    seq         INTEGER NOT NULL,
    finished_at REAL NOT NULL,
    outcome     TEXT,
    row         TEXT NOT NULL
)"""

# seq (order of finishing) is taken inside the insert, under SQLite's write lock, so it stays unique
# and gap-free even if two processes ever wrote to one journal.
_INSERT = """INSERT OR IGNORE INTO trials (trial_key, seq, finished_at, outcome, row)
    SELECT ?, COALESCE(MAX(seq), 0) + 1, ?, ?, ? FROM trials"""

# Columns renamed since runs were first recorded: old name -> current name. Old runs still load.
RENAMED_COLUMNS = {"pert_actuator_lag": "pert_actuator_lag_s"}

_BUSY_TIMEOUT_S = 30.0  # a reader or writer waits this long for a lock instead of failing


def current_names(row: dict) -> dict:
    """`row` with any column named by RENAMED_COLUMNS under its current name."""
    if RENAMED_COLUMNS.keys().isdisjoint(row):
        return row
    return {RENAMED_COLUMNS.get(k, k): v for k, v in row.items()}


def _plain(value):
    """json default: numpy scalars become the equal Python number (float32 widens exactly)."""
    if hasattr(value, "item"):
        return value.item()
    raise TypeError(f"value of type {type(value).__name__} is not JSON serialisable")


def to_json(obj) -> str:
    """JSON text with NaN/inf allowed; Python writes floats with repr, so they round-trip bit-exactly."""
    return json.dumps(obj, default=_plain, allow_nan=True)


class Journal:
    """One SQLite file in WAL mode: readers (summaries, exports) work while a run writes."""

    def __init__(self, path, *, create: bool = True):
        path = Path(path)
        if path.is_dir():
            path = path / JOURNAL_NAME
        if not create and not path.is_file():
            raise FileNotFoundError(f"no journal at {path}")
        self.path = path
        # Autocommit mode: every add() is its own committed transaction.
        self._db = sqlite3.connect(path, timeout=_BUSY_TIMEOUT_S, isolation_level=None)
        self._db.execute("PRAGMA journal_mode=WAL")
        # FULL syncs the WAL on every commit: a finished trial survives power loss, not only kill -9.
        self._db.execute("PRAGMA synchronous=FULL")
        self._db.execute(_SCHEMA)

    def add(self, row: dict) -> bool:
        """Record a finished trial (row must hold 'trial_key'); False if that key was already there."""
        if "trial_key" not in row:
            raise ValueError("a journal row needs a 'trial_key'")
        params = (str(row["trial_key"]), time.time(), row.get("outcome"), to_json(row))
        return self._db.execute(_INSERT, params).rowcount == 1

    def done_keys(self) -> set[str]:
        return {key for (key,) in self._db.execute("SELECT trial_key FROM trials")}

    def rows(self) -> list[dict]:
        """Every recorded row, in the order the trials finished; columns renamed since are read under
        their current names."""
        cursor = self._db.execute("SELECT row FROM trials ORDER BY seq")
        return [current_names(json.loads(text)) for (text,) in cursor]

    def count(self) -> int:
        return self._db.execute("SELECT COUNT(*) FROM trials").fetchone()[0]

    def close(self) -> None:
        self._db.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class EventLog:
    """Append-only JSON lines ({"t": unix time, "event": name, ...}), each fsynced when written."""

    def __init__(self, path):
        self.path = Path(path)
        self._fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o644)
        self._end_torn_line()

    def _end_torn_line(self) -> None:
        # A kill during an earlier write can leave a last line without its newline; end it so the
        # next event starts on a line of its own (readers skip the broken one).
        size = os.fstat(self._fd).st_size
        if size and self._last_byte(size) != b"\n":
            self._write(b"\n")

    def _last_byte(self, size: int) -> bytes:
        with open(self.path, "rb") as f:
            f.seek(size - 1)
            return f.read(1)

    def _write(self, data: bytes) -> None:
        while data:
            data = data[os.write(self._fd, data):]
        os.fsync(self._fd)

    def log(self, event: str, **fields) -> None:
        self._write((to_json({"t": time.time(), "event": event, **fields}) + "\n").encode())

    def close(self) -> None:
        if self._fd >= 0:
            os.close(self._fd)
            self._fd = -1

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def read_events(path) -> list[dict]:
    """Every complete event in the log; a line torn by a kill is skipped."""
    events = []
    for line in Path(path).read_text(encoding="utf-8", errors="replace").splitlines():
        try:
            events.append(json.loads(line))
        except json.JSONDecodeError:
            continue
    return events
