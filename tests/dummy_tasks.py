"""Picklable stand-ins for a trial function, for the executor and journal tests.

`trial(payload)` computes a deterministic row from the payload's seed with numpy, or injects the
fault the payload names. Tests import this module by name (pytest puts tests/ on sys.path, and
spawned workers inherit sys.path).
"""

from __future__ import annotations

import json
import os
import signal
import time

import numpy as np

# Per-process state, as a worker's physics client would be; rows must never depend on it.
_CALLS = {"n": 0}


def _segfault():
    os.kill(os.getpid(), signal.SIGSEGV)


def _hang():
    while True:
        time.sleep(1.0)


def _raise():
    raise ValueError("injected failure")


def _exit():
    os._exit(3)


FAULTS = {"segfault": _segfault, "hang": _hang, "raise": _raise, "exit": _exit}


def key_for(seed: int) -> str:
    return f"trial-{seed:04d}"


def plan(n: int, *, sleep_s: float = 0.0, faults: dict[int, str] | None = None):
    """n tasks (key, payload) with stable keys; faults maps a seed to a FAULTS name."""
    faults = faults or {}
    return [(key_for(seed), {"key": key_for(seed), "seed": seed, "sleep_s": sleep_s,
                             "fault": faults.get(seed)})
            for seed in range(n)]


def trial(payload: dict) -> dict:
    _CALLS["n"] += 1
    if payload.get("fault"):
        FAULTS[payload["fault"]]()
    time.sleep(payload.get("sleep_s", 0.0))  # stands in for simulation time
    return _row(payload)


def _row(payload: dict) -> dict:
    seed = payload["seed"]
    x = np.random.default_rng(seed).normal(size=257)
    return {
        "trial_key": payload["key"],
        "seed": seed,
        "outcome": "held" if x.mean() > 0 else "dropped",
        "success": bool(x.mean() > 0),
        "slip_mm": float(np.abs(x).sum() / 7.0),  # digits all the way down
        "drift_deg": float(np.degrees(np.arctan2(x[0], x[1]))),
        "epsilon": float(x[2] * 1e-310),  # subnormal
        "zero": -0.0,
        "count": int((x > 1).sum()),
        "missing": float("nan"),
        "unbounded": float("-inf") if seed % 2 else float("inf"),
        "label": f"seed {seed} \u00b5",
    }


def expected_row(payload: dict) -> dict:
    """The row trial() returns for a fault-free payload, computed in this process."""
    return _row(payload)


def canonical(rows) -> dict[str, str]:
    """key -> JSON text with sorted keys: equal texts mean equal keys and bit-equal floats
    (Python writes floats with repr, which round-trips exactly; NaN compares equal here)."""
    return {row["trial_key"]: json.dumps(row, sort_keys=True) for row in rows}
