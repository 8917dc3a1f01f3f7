"""Per-cell summary of a results table, and the input checks every analysis shares.

A cell is one variant x object x routine. Trials whose outcome is invalid, error or timeout
say nothing about the gripper (the simulation or the code failed), so they are counted and
shown but left out of success rates and metric statistics.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import HarnessError
from .stats import wilson_interval

__all__ = ["OUTCOMES", "NOT_VALID", "FAILED", "CELL", "checked", "valid_mask", "summary", "error_reasons"]

OUTCOMES = ("held", "dropped", "missed", "ejected", "stalled", "invalid", "error", "timeout")
NOT_VALID = ("invalid", "error", "timeout")
FAILED = ("error", "timeout")  # the trial's code failed or hung: no result at all
CELL = ["variant", "object_set", "object", "routine"]
SUMMARY_COLUMNS = [*CELL, "outcome", "success", "slip_mm", "drift_mm", "drift_deg", "epsilon"]
# metric column -> quantiles reported
QUANTILES = {"slip_mm": (0.5, 0.9), "drift_mm": (0.5, 0.9), "drift_deg": (0.5, 0.9), "epsilon": (0.5,)}


def checked(df, columns, what="results table"):
    """`df` after checking it is a non-empty table with `columns` and known outcomes."""
    if not isinstance(df, pd.DataFrame):
        raise HarnessError(f"the {what} must be a pandas DataFrame; got {type(df).__name__}")
    if df.empty:
        raise HarnessError(f"the {what} is empty; it needs at least one trial row")
    missing = [c for c in columns if c not in df.columns]
    if missing:
        raise HarnessError(f"the {what} lacks column(s) {', '.join(missing)}; "
                           f"it has: {', '.join(map(str, df.columns))}")
    if "outcome" in columns:
        unknown = sorted(set(df["outcome"].unique()) - set(OUTCOMES))
        if unknown:
            raise HarnessError(f"the {what} holds unknown outcome(s) {', '.join(map(str, unknown))}; "
                               f"allowed: {', '.join(OUTCOMES)}")
    return df


def valid_mask(df):
    """True for trials that say something about the gripper (not invalid, error or timeout)."""
    return ~df["outcome"].isin(NOT_VALID).to_numpy()


def summary(df, confidence=0.95):
    """One row per variant x object x routine: counts, success rate with a Wilson interval, metrics.

    Columns: the cell keys, trials, valid, successes, success_rate, success_lo, success_hi, one
    count column per outcome, and `<metric>_p50` / `<metric>_p90` for slip_mm (over held trials),
    drift_mm and drift_deg (over trials that kept the object in the hand) plus epsilon_p50 (over
    valid trials); NaN values ignored.
    """
    checked(df, SUMMARY_COLUMNS)
    valid = valid_mask(df)
    work = df[CELL].assign(valid=valid, success=df["success"].to_numpy(bool) & valid)
    out = work.groupby(CELL, sort=True).agg(trials=("valid", "size"), valid=("valid", "sum"),
                                            successes=("success", "sum"))
    with np.errstate(invalid="ignore", divide="ignore"):
        out["success_rate"] = out["successes"] / out["valid"].where(out["valid"] > 0)
    out["success_lo"], out["success_hi"] = wilson_interval(out["successes"], out["valid"], confidence)
    counts = df.groupby([*CELL, "outcome"], sort=False).size().unstack("outcome", fill_value=0)
    out = out.join(counts.reindex(columns=list(OUTCOMES), fill_value=0))
    # slip of a missed trial comes from glancing touches and would pull a cell's median toward
    # whatever the approach brushed; slip statistics are of held trials (drift is NaN unless the
    # object stayed in the hand, see sim.routines.Routine.describe)
    out = out.join(_metric_quantiles(df[valid].assign(slip_mm=df["slip_mm"].where(df["outcome"] == "held"))))
    return out.reset_index()


def _metric_quantiles(df):
    """Median and 90th percentile of each metric per cell (groupby quantiles, NaN skipped)."""
    grouped = df.groupby(CELL, sort=False)
    parts = {}
    for col, qs in QUANTILES.items():
        for q in qs:
            parts[f"{col}_p{round(q * 100)}"] = grouped[col].quantile(q)
    return pd.DataFrame(parts)


def error_reasons(df):
    """Trials that ended in error or timeout, grouped by reason, most frequent first.

    Columns: outcome, reason (the worker's message, or the row's own reason), trials, example (a
    trial key, for `replay`). Empty (with those columns) when no trial failed."""
    columns = ["outcome", "reason", "trials", "example"]
    if "outcome" not in df.columns:
        return pd.DataFrame(columns=columns)
    failed = df[df["outcome"].isin(FAILED)]
    if failed.empty:
        return pd.DataFrame(columns=columns)
    blank = pd.Series("", index=failed.index)
    text = failed["error"] if "error" in failed.columns else blank
    own = failed["reason"] if "reason" in failed.columns else blank
    text = text.where(text.notna() & (text.astype(str) != ""), own).fillna("").astype(str)
    text = text.where(text != "", "(no reason recorded)")
    keys = failed["trial_key"] if "trial_key" in failed.columns else blank
    table = (pd.DataFrame({"outcome": failed["outcome"].to_numpy(), "reason": text.to_numpy(), "key": keys.to_numpy()})
             .groupby(["outcome", "reason"], sort=False).agg(trials=("key", "size"), example=("key", "first"))
             .reset_index())
    return table.sort_values("trials", ascending=False, kind="stable").reset_index(drop=True)[columns]
