"""Run folders: `runs/<campaign name>-<UTC timestamp>/` holding campaign.json (the resolved campaign,
tool / engine / library versions and the machine), journal.sqlite (one row per finished trial) and
events.jsonl. `load_run` reads a run as a typed pandas DataFrame; `export` writes it as CSV or Parquet.
"""

from __future__ import annotations

import json
import os
import platform
import sys
import time
from pathlib import Path

from ..errors import HarnessError
from .journal import JOURNAL_NAME, Journal

__all__ = ["CAMPAIGN_NAME", "STRING_COLUMNS", "FLOAT_COLUMNS", "EXPORTS", "new_run_folder", "write_campaign",
           "read_campaign", "run_campaign_of", "environment", "load_run", "export"]

CAMPAIGN_NAME = "campaign.json"
EXPORTS = ("csv", "parquet")
STRING_COLUMNS = ("trial_key", "pair_key", "gripper", "variant", "variant_key", "family", "object",
                  "object_set", "kind", "routine", "outcome", "reason", "failed_phase", "error", "engine")
INT_COLUMNS = ("seed", "trial", "plan_index")
# the metrics every analysis reads; always present (NaN for trials that gave none)
FLOAT_COLUMNS = ("slip_mm", "slip_peak_mm_s", "drift_mm", "drift_deg", "epsilon", "wall_s")
BOOL_SUFFIXES = ("_ok",)
BOOL_COLUMNS = ("success", "force_closure")


def new_run_folder(out, campaign_name) -> Path:
    """A new, empty run folder under `out` named for the campaign and the UTC time (never reused)."""
    stamp = time.strftime("%Y%m%dT%H%M%SZ", time.gmtime())
    base = Path(out) / f"{campaign_name}-{stamp}"
    folder, n = base, 1
    while True:
        try:
            folder.mkdir(parents=True)
            return folder
        except FileExistsError:
            n += 1
            folder = base.with_name(f"{base.name}-{n}")


def environment() -> dict:
    """Tool, engine and library versions and the machine, for the record."""
    from importlib import metadata

    from .. import __version__
    libs = {}
    for dist in ("pybullet", "mujoco", "numpy", "pandas", "scipy", "trimesh", "tqdm"):
        try:
            libs[dist] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            libs[dist] = None
    return {"tool": {"name": "grasp-harness", "version": __version__, "source": _source_revision()},
            "python": sys.version.split()[0],
            "libraries": libs,
            "machine": {"platform": platform.platform(), "machine": platform.machine(),
                        "processor": platform.processor(), "node": platform.node(), "cpus": os.cpu_count()}}


def _source_revision():
    """The git commit of the harness's own source and whether it had uncommitted edits, when it runs
    from a checkout (a replay that does not match its journal usually ran other code)."""
    import subprocess
    here = Path(__file__).resolve().parents[1]  # the harness package
    try:
        commit = subprocess.run(["git", "rev-parse", "HEAD"], cwd=here, capture_output=True, text=True, timeout=5)
        dirty = subprocess.run(["git", "status", "--porcelain", "--", "."], cwd=here, capture_output=True,
                               text=True, timeout=5)
    except (OSError, subprocess.SubprocessError):
        return None
    if commit.returncode != 0:
        return None
    return {"commit": commit.stdout.strip(), "uncommitted_edits": bool(dirty.stdout.strip())}


def write_campaign(folder, record: dict) -> None:
    path = Path(folder) / CAMPAIGN_NAME
    tmp = path.with_suffix(".tmp")
    tmp.write_text(json.dumps(record, indent=1, default=str), encoding="utf-8")
    os.replace(tmp, path)  # whole or absent, even if killed while writing


def read_campaign(folder) -> dict:
    path = Path(folder) / CAMPAIGN_NAME
    if not path.is_file():
        raise HarnessError(f"{folder} is not a run folder (no {CAMPAIGN_NAME})")
    return json.loads(path.read_text(encoding="utf-8"))


def run_campaign_of(run, campaign_file=None, why="the trials would differ"):
    """(campaign.json record, loaded Campaign) of a run: the campaign file as given, else where it was
    when the run was made; it must still resolve to the hash the run recorded."""
    from .campaign import load_campaign
    run = Path(run)
    record = read_campaign(run)
    candidates = [campaign_file] if campaign_file else [record.get("file", ""), record.get("path", "")]
    file = next((Path(f) for f in candidates if f and Path(f).is_file()), Path(candidates[0] or ""))
    if not file.is_file():
        raise HarnessError(f"the campaign file {file} that {run} was run from is not found (from {Path.cwd()}); "
                           "pass --campaign FILE")
    campaign = load_campaign(file, engine=record.get("physics", {}).get("engine"))  # as run (run --engine)
    if campaign.fingerprint() != record.get("campaign_hash"):
        raise HarnessError(f"{file} no longer resolves to the campaign {run} was run from (hash "
                           f"{campaign.fingerprint()}, run {record.get('campaign_hash')}); {why}")
    return record, campaign


def load_run(path):
    """One row per recorded trial of a run folder (or its journal file), with typed columns.

    Text columns are strings, `success` and the per-phase `*_ok` columns are bool, seed / trial /
    plan_index are integers, every other column is float (NaN where a trial gave no value). Rows
    are in plan order when the journal has it, so a run gives the same table however it was run.
    """
    import numpy as np
    import pandas as pd
    path = Path(path)
    if not (path / JOURNAL_NAME).is_file() and not path.is_file():
        raise HarnessError(f"no run journal at {path} (expected a run folder holding {JOURNAL_NAME})")
    with Journal(path, create=False) as journal:
        rows = journal.rows()
    if not rows:
        raise HarnessError(f"the run at {path} has no finished trials yet")
    df = pd.DataFrame.from_records(rows)
    for col in (*STRING_COLUMNS[:11], *FLOAT_COLUMNS):
        if col not in df.columns:
            df[col] = None
    for col in df.columns:
        if col in STRING_COLUMNS:
            df[col] = df[col].fillna("").astype(str)
        elif col in BOOL_COLUMNS or col.endswith(BOOL_SUFFIXES):
            df[col] = df[col].fillna(False).astype(bool)
        elif col in INT_COLUMNS:
            df[col] = pd.to_numeric(df[col]).astype("Int64")
        else:
            df[col] = pd.to_numeric(df[col], errors="coerce").astype(np.float64)
    if "plan_index" in df.columns and not df["plan_index"].isna().any():
        df = df.sort_values("plan_index", kind="stable").reset_index(drop=True)
    return df


def export(run, to="csv", out=None) -> Path:
    """Write the run's table as results.csv or results.parquet (in the run folder unless `out`)."""
    if to not in EXPORTS:
        raise HarnessError(f"export format must be one of {', '.join(EXPORTS)}; got {to!r}")
    df = load_run(run)
    target = Path(out) if out else Path(run) / f"results.{to}"
    if to == "csv":
        df.to_csv(target, index=False)
    else:
        try:
            df.to_parquet(target, index=False)
        except ImportError as exc:
            raise HarnessError(f"Parquet export needs pyarrow (pip install pyarrow): {exc}") from None
    return target
