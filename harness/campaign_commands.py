"""The `plan`, `run` and `export` subcommands.

`register(subparsers)` adds the parsers; each `cmd_*` handler returns the exit code. A malformed
campaign raises SpecError before any run folder exists (the CLI prints it and exits 2).

Scheduling with stopping rules (`--hours`, `[stop] hours`, `[stop] target_width`): trials are handed
out one at a time as workers free up. With a time budget no trial is handed out once the budget is
spent (trials in flight finish and are recorded). With a target width, each cell (variant x object
set x object x routine) keeps its trials in plan order; the next trial goes to the open cell whose
95 % Wilson interval of the success rate, over its finished valid trials, is widest (a cell with no
finished trial counts as width 1; ties go to the cell with fewer trials handed out, then plan
order). A cell closes once it has at least `min_trials` valid trials and its interval is at most
`target_width` wide, or when its `trials` are used up.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

__all__ = ["register", "cmd_plan", "cmd_run", "cmd_export", "Scheduler", "run_campaign", "ERRORED", "ERROR_SHARE"]

INTERRUPTED = 130
# Exit code of a run in which more than ERROR_SHARE of the recorded trials ended in `error` or
# `timeout` (the harness's code failed or hung, so those trials say nothing about the gripper).
ERRORED = 3
ERROR_SHARE = 0.05


def register(subparsers):
    """Add the plan, run and export subcommands to an argparse subparsers object."""
    p = subparsers.add_parser("plan", help="show a campaign's cells, trial count and estimated run time",
                              description="Validate a campaign, list its cells (variant x object x routine) "
                                          "and the combinations a routine does not suit, and estimate the "
                                          "run time from two calibration trials.")
    p.add_argument("campaign", metavar="CAMPAIGN", help="campaign file (campaigns/*.toml)")
    p.add_argument("--workers", type=int, metavar="N", help="worker processes to estimate for "
                                                            "(default: one per core)")
    r = subparsers.add_parser("run", help="run a campaign into a run folder (resumable)",
                              description="Run every trial of a campaign in worker processes, recording each "
                                          "finished trial in the run folder's journal. Ctrl-C stops; "
                                          "--resume RUN runs exactly the trials that folder lacks.")
    r.add_argument("campaign", metavar="CAMPAIGN", help="campaign file (campaigns/*.toml)")
    r.add_argument("--workers", type=int, metavar="N", help="worker processes (default: one per core)")
    r.add_argument("--resume", metavar="RUN", help="run folder of an earlier run of this campaign to complete")
    r.add_argument("--out", default="runs", metavar="DIR", help="folder for new run folders (default: runs)")
    r.add_argument("--executor", choices=("local", "dask"), default="local",
                   help="local process pool (default) or a dask.distributed cluster")
    r.add_argument("--scheduler", metavar="ADDR", help="dask scheduler address (default: a local cluster)")
    r.add_argument("--hours", type=float, metavar="H", help="time budget; overrides the campaign's [stop] hours")
    e = subparsers.add_parser("export", help="write a run's results as CSV or Parquet",
                              description="Write one row per trial of a run folder to RUN/results.csv or "
                                          "RUN/results.parquet (Parquet needs pyarrow).")
    e.add_argument("run", metavar="RUN", help="run folder")
    e.add_argument("--to", choices=("csv", "parquet"), default="csv", help="file format (default csv)")
    e.add_argument("--out", metavar="FILE", help="output file (default: inside RUN)")


def _bad_input(work):
    """Run `work`; a HarnessError that is bad input prints one line and gives exit code 2."""
    from .errors import HarnessError, SpecError
    try:
        return work()
    except SpecError:
        raise  # the CLI prints it and exits 2
    except HarnessError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2


# --- plan ----------------------------------------------------------------------------------------

def cmd_plan(args):
    from .campaign import expand, load_campaign, run_payload
    from .table import format_table
    campaign = load_campaign(args.campaign)
    plan = expand(campaign)
    rows = [{"variant": v, "object_set": s, "object": o, "routine": r, "trials": n}
            for (v, s, o, r), n in plan.cells().items()]
    print(format_table(rows))
    print(f"\n{len(rows)} cell(s), {len(plan.tasks)} trial(s); {plan.skipped} trial(s) in "
          f"{len(plan.skipped_cells)} combination(s) skipped because the routine does not suit them:")
    reasons = {}
    for variant, obj, routine, reason in plan.skipped_cells:
        reasons.setdefault((routine, reason), []).append(f"{variant} / {obj}")
    for (routine, reason), pairs in reasons.items():
        print(f"  {routine}: {reason} ({len(pairs)} combination(s))")
    if not plan.tasks:
        return 0
    picks = sorted({0, len(plan.tasks) // 2})
    started = time.perf_counter()
    walls = [run_payload(plan.tasks[i].payload)["wall_s"] for i in picks]
    loading = time.perf_counter() - started - sum(walls)
    workers = args.workers or os.cpu_count() or 1
    per_trial = sum(walls) / len(walls)
    estimate = loading + len(plan.tasks) * per_trial / workers
    print(f"\nCalibration: {len(walls)} trial(s), {per_trial:.2f} s each, {loading:.1f} s loading models.")
    print(f"Estimated run time with {workers} worker(s): {_duration(estimate)} (rough: trials differ by "
          "routine and object)")
    if campaign.stop and campaign.stop.hours:
        print(f"Time budget: {_duration(campaign.stop.hours * 3600)}")
    return 0


def _duration(seconds):
    seconds = int(round(seconds))
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h} h {m:02d} min" if h else (f"{m} min {s:02d} s" if m else f"{s} s")


# --- run -----------------------------------------------------------------------------------------

class Scheduler:
    """Hands out trials lazily: in plan order, or widest success interval first (see module doc)."""

    def __init__(self, tasks, *, deadline=None, target_width=None, min_trials=1, done_rows=()):
        self.deadline, self.target, self.min_trials = deadline, target_width, min_trials
        self.cells = {}  # cell -> [pending tasks (plan order), valid, successes, handed out]
        for task in tasks:
            self.cells.setdefault(_cell(task.payload), [[], 0, 0, 0])[0].append(task)
        for row in done_rows:
            self.record(row)

    def record(self, row):
        cell = self.cells.get(_cell(row))
        if cell is not None and row.get("outcome") not in ("invalid", "error", "timeout"):
            cell[1] += 1
            cell[2] += bool(row.get("success"))

    def width(self, cell):
        from .analysis.stats import wilson_interval
        _, valid, wins, _ = self.cells[cell]
        if not valid:
            return 1.0
        lo, hi = wilson_interval(wins, valid)
        return float(hi - lo)

    def closed(self, cell):
        pending, valid = self.cells[cell][0], self.cells[cell][1]
        return not pending or (self.target is not None and valid >= self.min_trials
                               and self.width(cell) <= self.target)

    def __iter__(self):
        order = {cell: i for i, cell in enumerate(self.cells)}
        while True:
            if self.deadline is not None and time.monotonic() >= self.deadline:
                return
            open_cells = [c for c in self.cells if not self.closed(c)]
            if not open_cells:
                return
            if self.target is None:
                cell = open_cells[0]
            else:
                cell = min(open_cells, key=lambda c: (-self.width(c), self.cells[c][3], order[c]))
            self.cells[cell][3] += 1
            task = self.cells[cell][0].pop(0)
            yield task.trial_key, task.payload


def _cell(d):
    return (d["variant"], d["object_set"], d["object"], d["routine"])


def cmd_run(args):
    return _bad_input(lambda: run_campaign(
        args.campaign, workers=args.workers, resume=args.resume, out=args.out, executor=args.executor,
        scheduler=args.scheduler, hours=args.hours))


def run_campaign(campaign_file, *, workers=None, resume=None, out="runs", executor="local", scheduler=None,
                 hours=None, progress=True, echo=print):
    """Run (or resume) a campaign; returns the exit code (0 done, 130 interrupted, ERRORED when more than
    ERROR_SHARE of the recorded trials ended in error or timeout)."""
    from tqdm import tqdm

    from .analysis.commands import summary_text
    from .campaign import expand, failure_inputs, load_campaign, run_payload
    from .errors import HarnessError
    from .journal import EVENTS_NAME, EventLog, Journal
    from .runs import environment, load_run, new_run_folder, read_campaign, write_campaign
    from .executors import run_tasks
    campaign = load_campaign(campaign_file)  # a malformed campaign stops here: no run folder
    plan = expand(campaign)
    resolved = campaign.resolved()
    if resume:
        folder = Path(resume)
        recorded = read_campaign(folder)
        if recorded.get("campaign_hash") != resolved["campaign_hash"]:
            raise HarnessError(f"{folder} was run from a different campaign ({recorded.get('file')}, "
                               f"hash {recorded.get('campaign_hash')}); {campaign_file} has hash "
                               f"{resolved['campaign_hash']}")
    else:
        folder = new_run_folder(out, campaign.name)
        write_campaign(folder, {**resolved, "planned_trials": len(plan.tasks), "skipped_trials": plan.skipped,
                                "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                                "environment": environment()})
    stop = campaign.stop
    hours = hours if hours is not None else (stop.hours if stop else None)
    payloads = {t.trial_key: t.payload for t in plan.tasks}
    with Journal(folder) as journal, EventLog(folder / EVENTS_NAME) as events:
        done_rows = journal.rows()
        done = {row["trial_key"] for row in done_rows}
        todo = [t for t in plan.tasks if t.trial_key not in done]
        sched = Scheduler(todo, deadline=time.monotonic() + hours * 3600 if hours else None,
                          target_width=stop.target_width if stop else None,
                          min_trials=stop.min_trials if stop else 1,
                          done_rows=[r for r in done_rows if r["trial_key"] in payloads])
        events.log("run_start", planned=len(plan.tasks), done=len(done), todo=len(todo), workers=workers,
                   executor=executor, hours=hours)
        tally = {"valid": 0, "held": 0}
        failures = {}  # short reason -> count, for the progress line
        bar = tqdm(total=len(plan.tasks), initial=len(done), unit="trial", disable=not progress,
                   dynamic_ncols=True, smoothing=0.1)

        def on_result(key, row):
            if "gripper" not in row:  # the executor's error / timeout row: add the trial's inputs
                row = {**failure_inputs(payloads[key]), "success": False, **row}
            journal.add(row)
            events.log("trial", trial_key=key, outcome=row.get("outcome"))
            sched.record(row)
            if row.get("outcome") not in ("invalid", "error", "timeout"):
                tally["valid"] += 1
                tally["held"] += bool(row.get("success"))
            if row.get("outcome") in ("error", "timeout"):
                short = _short_reason(row)
                failures[short] = failures.get(short, 0) + 1
            parts = [f"success {100 * tally['held'] / tally['valid']:.0f}% of {tally['valid']} valid"] \
                if tally["valid"] else []
            if failures:
                top = sorted(failures.items(), key=lambda kv: -kv[1])
                parts.append(f"{sum(failures.values())} ERROR: " + ", ".join(f"{n} {k}" for k, n in top[:2])
                             + (", ..." if len(top) > 2 else ""))
            if parts:
                bar.set_postfix_str("; ".join(parts), refresh=False)
            bar.update(1)

        report = run_tasks(sched, run_payload, on_result=on_result, workers=workers,
                           timeout=campaign.timeout_s, executor=executor, scheduler=scheduler)
        bar.close()
        events.log("run_end", finished=report.finished, interrupted=report.interrupted)
        remaining = len(plan.tasks) - journal.count()
    if report.interrupted:
        echo(f"\nInterrupted: {report.finished} trial(s) recorded this time, {remaining} left in {folder}.\n"
             f"Resume with: grasp-harness run {campaign_file} --resume {folder}", file=sys.stderr)
        return INTERRUPTED
    if remaining and not hours and not (stop and stop.target_width):
        echo(f"{remaining} trial(s) not recorded", file=sys.stderr)
    failed = total = 0
    try:
        df = load_run(folder)
        total, failed = len(df), int(df["outcome"].isin(("error", "timeout")).sum())
        echo(summary_text(df))
    except HarnessError as exc:
        echo(f"no summary: {exc}")
    echo(f"\nRun folder: {folder}" + (f" ({remaining} planned trial(s) not run: stopping rule)" if remaining else ""))
    if total and failed > ERROR_SHARE * total:
        echo(f"\n{failed} of {total} trial(s) ({100 * failed / total:.0f} %) ended in error or timeout, more than the "
             f"{100 * ERROR_SHARE:g} % allowed: exit code {ERRORED}. The reasons are listed first above.", file=sys.stderr)
        return ERRORED
    return 0


def _short_reason(row):
    """A few words naming why a trial failed: the exception's type, or the executor's own words."""
    text = str(row.get("error") or row.get("reason") or row.get("outcome"))
    return text.split(":")[0][:40] if row.get("outcome") == "error" else "timeout"


# --- export --------------------------------------------------------------------------------------

def cmd_export(args):
    from .runs import export

    def work():
        print(export(args.run, args.to, args.out))
        return 0
    return _bad_input(work)
