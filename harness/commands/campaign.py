"""The `plan`, `run` and `export` subcommands.

`register(subparsers)` adds the parsers; each `cmd_*` handler returns the exit code. A malformed
campaign raises SpecError before any run folder exists (the CLI prints it and exits 2).

Scheduling (`Scheduler`): trials are handed out one at a time as workers free up, in rounds over
pair keys, so a run stopped at any moment (time budget, Ctrl-C, a crash) is a valid paired
experiment. A place (object set x object x routine) holds its pair keys in trial order; a pair is
the trials of every variant the routine suits on that key, handed out one after the other. The next
pair goes to the open place with the fewest pairs handed out (the round), then the widest 95 %
Wilson interval of the success rate over its open cells' finished valid trials (a cell with no
finished trial counts as width 1), then plan order. So every open cell of every variant is within
one round of every other, and a round spends its trials where the estimates are least certain
first. A started pair is always completed: once the time budget (`--hours`, `[stop] hours`) is
spent no new pair starts, but the rest of a started one is still handed out (at most one trial per
variant beyond the budget; trials in flight finish and are recorded). Ctrl-C or a crash can leave
the pairs in flight incomplete; resume completes them first, and `compare` pairs only complete ones.

Stopping rules close cells early. With a target width, a cell closes once it has at least
`min_trials` valid trials and its interval is at most `target_width` wide; with a sequential gate
(`run --against BASE`), a place closes once its verdict is settled (harness.analysis.sequential).
A cell also closes when its `trials` are used up.
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

from ..constants import ENGINES

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
    p.add_argument("--hours", type=float, metavar="H", help="time budget to plan for: how many rounds (one "
                                                            "pair per cell of every variant) fit in it")
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
    r.add_argument("--engine", choices=ENGINES, help="physics engine; overrides the campaign's [physics] engine "
                                                     "(the run records it, and resumes and reloads with it)")
    r.add_argument("--crosscheck", type=float, metavar="FRACTION",
                   help="at the end, re-run this share of each cell's trials under finer numerics and flag "
                        "numerics-sensitive cells (see `grasp-harness crosscheck`)")
    r.add_argument("--against", metavar="BASE_RUN",
                   help="finished run of the base design: stop each cell as soon as the sequential gate settles "
                        "its verdict against BASE_RUN's paired trials (needs the campaign's detect_drop; "
                        "`trials` is the most a cell runs)")
    e = subparsers.add_parser("export", help="write a run's results as CSV or Parquet",
                              description="Write one row per trial of a run folder to RUN/results.csv or "
                                          "RUN/results.parquet (Parquet needs pyarrow).")
    e.add_argument("run", metavar="RUN", help="run folder")
    e.add_argument("--to", choices=("csv", "parquet"), default="csv", help="file format (default csv)")
    e.add_argument("--out", metavar="FILE", help="output file (default: inside RUN)")


def _bad_input(work):
    """Run `work`; a HarnessError that is bad input prints one line and gives exit code 2."""
    from ..errors import HarnessError, SpecError
    try:
        return work()
    except SpecError:
        raise  # the CLI prints it and exits 2
    except HarnessError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2


# --- plan ----------------------------------------------------------------------------------------

def cmd_plan(args):
    from ..campaigns.campaign import expand, load_campaign
    from ..table import format_table
    campaign = load_campaign(args.campaign)
    plan = expand(campaign)
    rows = [{"variant": v, "object_set": s, "object": o, "routine": r, "trials": n}
            for (v, s, o, r), n in plan.cells().items()]
    print(format_table(rows))
    print(f"\n{len(rows)} cell(s), {len(plan.tasks)} trial(s)" + _skipped_text(plan))
    if plan.short_reach:
        print(f"{len(plan.short_reach)} cell(s) should miss from geometry alone (object height against the "
              "fingertips' reach or the rollers' bite condition; nothing simulated):")
        for variant, obj, routine, why in plan.short_reach:
            print(f"  {routine} / {variant} / {obj}: {why}")
    for line in power_lines(campaign, plan):
        print(line)
    if not plan.tasks:
        return 0
    workers = args.workers or os.cpu_count() or 1
    print(f"\nPhysics: {campaign.physics.solver_iterations} solver iterations at {campaign.physics.step_hz} Hz "
          "(the campaign's [physics] table, else the defaults).")
    total, loading, calibrated = calibrate(campaign, plan, workers)
    per_trial = total / len(plan.tasks)
    estimate = loading + total / workers
    walls = sorted(calibrated.values())
    print(f"\nCalibration: {len(walls)} trial(s), one per routine x object kind, {walls[0]:.2f} to {walls[-1]:.2f} s "
          f"each; {loading:.1f} s starting workers and loading models.")
    print(f"Estimated run time with {workers} worker(s): {_duration(estimate)} (each trial timed like the "
          "calibration trial of its routine and object kind)")
    hours = args.hours if getattr(args, "hours", None) is not None else (campaign.stop.hours if campaign.stop else None)
    if hours:
        rounds = int(max(0.0, hours * 3600 - loading) * workers / per_trial // len(rows))
        print(f"Time budget: {_duration(hours * 3600)}: about {min(rounds, campaign.trials)} of {campaign.trials} "
              f"round(s) fit (a round is one pair of trials per cell, {len(rows)} trials); a run stopped by the "
              "budget has every cell within one round of the others.")
    return 0


def _skipped_text(plan):
    """How many trials the plan leaves out and why; nothing to say when none are."""
    if not plan.skipped_cells:
        return "; none skipped."
    reasons = {}
    for variant, obj, routine, reason in plan.skipped_cells:
        reasons.setdefault((routine, reason), []).append(f"{variant} / {obj}")
    lines = [f"; {plan.skipped} trial(s) in {len(plan.skipped_cells)} combination(s) skipped because the routine "
             "does not suit them:"]
    lines += [f"  {routine}: {reason} ({len(pairs)} combination(s))" for (routine, reason), pairs in reasons.items()]
    return "\n".join(lines)


def calibrate(campaign, plan, workers):
    """Time one trial of each routine x object kind the plan holds, in `workers` processes as a run
    would (trials of one routine on one kind of object cost alike; across them they differ several
    fold). Returns (estimated trial seconds of the whole plan, seconds of start-up and loading,
    {"routine / kind": calibration trial seconds})."""
    from contextlib import closing

    from ..campaigns.campaign import run_payload
    from ..campaigns.executors import iter_results
    kinds = {(s.name, i.name): i.kind for s, instances in campaign.object_sets for i in instances}

    def group(task):
        return f"{task.payload['routine']} / {kinds[(task.payload['object_set'], task.payload['object'])]}"

    first = {}
    for task in plan.tasks:
        first.setdefault(group(task), task)
    started = time.perf_counter()
    with closing(iter_results(((g, t.payload) for g, t in first.items()), run_payload,
                              workers=min(workers, len(first)), timeout=campaign.timeout_s)) as results:
        calibrated = {g: float(row.get("wall_s") or campaign.timeout_s or 0.0) for g, row in results}
    elapsed = time.perf_counter() - started
    loading = max(0.0, elapsed - sum(calibrated.values()) / min(workers, len(first)))
    return sum(calibrated[group(t)] for t in plan.tasks), loading, calibrated


def power_lines(campaign, plan, alpha=0.05):
    """What a paired comparison of this campaign's runs can see (harness.analysis.power), in words."""
    from ..analysis.power import POWER, detectable_drop, fewest_flaggable, pairs_needed
    cells = plan.cells()
    places = {cell[1:] for cell in cells}
    if not places:
        return []
    rows = len(places) + 1  # compare's rows for one pair of variants: each place and the overall row
    level = alpha / rows
    n = campaign.trials
    need = fewest_flaggable(level)
    drop = detectable_drop(n, level)
    lines = ["", f"Power of a paired comparison of two variants or runs of this campaign (exact McNemar, alpha "
                 f"{alpha:g} with Holm over {rows} rows, so {level:.2g} for a lone changed cell; {POWER:.0%} "
                 "power; a candidate losing only trials the base won, the most favourable case):"]
    if drop != drop:
        lines.append(f"  WARNING: a cell of {n} pairs can never be flagged, whatever the change: it needs at least "
                     f"{need} pairs that differ, all one way. Only the overall row can show a drop.")
    else:
        lines.append(f"  a cell of {n} pairs can show a drop of {drop:.2f} or more; smaller drops pass unseen.")
    lines.append(f"  the overall row ({n * len(places)} pairs) can show a uniform drop of "
                 f"{detectable_drop(n * len(places), level):.2f} or more.")
    if campaign.detect_drop:
        needed = pairs_needed(campaign.detect_drop, level)
        verdict = ("enough" if n >= needed else
                   f"WARNING: raise trials to {needed} or the campaign cannot detect it")
        lines.append(f"  detect_drop {campaign.detect_drop:g} needs {needed} trials per cell; trials = {n}: {verdict}.")
    return lines


def _duration(seconds):
    seconds = int(round(seconds))
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h} h {m:02d} min" if h else (f"{m} min {s:02d} s" if m else f"{s} s")


# --- run -----------------------------------------------------------------------------------------

class Scheduler:
    """Hands out trials lazily in rounds over pair keys, widest interval first (see module doc)."""

    def __init__(self, tasks, *, deadline=None, target_width=None, min_trials=1, done_rows=(), gate=None):
        self.deadline, self.target, self.min_trials, self.gate = deadline, target_width, min_trials, gate
        self.cells = {}  # cell -> [pending tasks (plan order), valid, successes, handed out]
        self.places = {}  # place -> {pair key: [tasks]} pending pairs, in trial order
        self.rounds = {}  # place -> pairs started
        self._widths = {}
        for task in tasks:
            cell = _cell(task.payload)
            self.cells.setdefault(cell, [[], 0, 0, 0])[0].append(task)
            pairs = self.places.setdefault(cell[1:], {})
            pairs.setdefault(_pair(task), []).append(task)
        started = {(_cell(r)[1:], _pair(r)) for r in done_rows}
        for place in self.places:
            self.rounds[place] = len({k for p, k in started if p == place})
        # pairs a stopped run left incomplete come first
        self.unfinished = [t for place, pairs in self.places.items() for key, ts in list(pairs.items())
                           if (place, key) in started for t in pairs.pop(key)]
        for row in done_rows:
            self.record(row)

    def record(self, row):
        cell = self.cells.get(_cell(row))
        if cell is not None and row.get("outcome") not in ("invalid", "error", "timeout"):
            cell[1] += 1
            cell[2] += bool(row.get("success"))
            self._widths.pop(_cell(row), None)

    def width(self, cell):
        """Width of the cell's 95 % Wilson interval (1 before its first valid trial); cached per count."""
        if cell not in self._widths:
            from ..analysis.stats import wilson_interval
            _, valid, wins, _ = self.cells[cell]
            lo, hi = wilson_interval(wins, valid) if valid else (0.0, 1.0)
            self._widths[cell] = float(hi - lo)
        return self._widths[cell]

    def closed(self, cell):
        pending, valid = self.cells[cell][0], self.cells[cell][1]
        return (not pending or (self.target is not None and valid >= self.min_trials
                                and self.width(cell) <= self.target)
                or (self.gate is not None and self.gate.settled(cell[1:])))

    def _hand(self, task):
        cell = self.cells[_cell(task.payload)]
        cell[0].remove(task)
        cell[3] += 1
        return task.trial_key, task.payload

    def __iter__(self):
        order = {place: i for i, place in enumerate(self.places)}
        for task in self.unfinished:
            if not self.closed(_cell(task.payload)):
                yield self._hand(task)
        while True:
            if self.deadline is not None and time.monotonic() >= self.deadline:
                return
            open_places = {}
            for place, pairs in self.places.items():
                cells = [c for c in {_cell(t.payload) for t in next(iter(pairs.values()), [])}
                         if not self.closed(c)] if pairs else []
                if cells:
                    open_places[place] = max(self.width(c) for c in cells)
            if not open_places:
                return
            place = min(open_places, key=lambda p: (self.rounds[p], -open_places[p], order[p]))
            self.rounds[place] += 1
            pairs = self.places[place]
            for task in pairs.pop(next(iter(pairs))):
                if not self.closed(_cell(task.payload)):
                    yield self._hand(task)


def _pair(d):
    """The pair key of a task or row (its trial key when it has none: a pair of one)."""
    if hasattr(d, "payload"):
        return d.payload.get("pair_key", d.trial_key)
    return d.get("pair_key", d.get("trial_key"))


def _cell(d):
    return (d["variant"], d["object_set"], d["object"], d["routine"])


def cmd_run(args):
    return _bad_input(lambda: run_campaign(
        args.campaign, workers=args.workers, resume=args.resume, out=args.out, executor=args.executor,
        engine=args.engine,
        scheduler=args.scheduler, hours=args.hours, against=getattr(args, "against", None),
        crosscheck=args.crosscheck))


def run_campaign(campaign_file, *, workers=None, resume=None, out="runs", executor="local", scheduler=None,
                 hours=None, progress=True, echo=print, against=None, crosscheck=None, engine=None):
    """Run (or resume) a campaign; returns the exit code (0 done, 130 interrupted, ERRORED when more than
    ERROR_SHARE of the recorded trials ended in error or timeout).

    `against`: a finished base run folder; cells stop once the sequential gate settles (`_gate`).
    `crosscheck`: a share of each cell's trials to re-run under finer numerics at the end
    (convergence.crosscheck)."""
    if crosscheck is not None and not 0 < crosscheck <= 1:
        from ..errors import SpecError
        raise SpecError("--crosscheck", [(str(crosscheck), "must be a share of trials in (0, 1], e.g. 0.25")])
    from tqdm import tqdm

    from .analysis import summary_text
    from ..campaigns.campaign import expand, failure_inputs, load_campaign, run_payload
    from ..errors import HarnessError
    from ..campaigns.journal import EVENTS_NAME, EventLog, Journal
    from ..campaigns.runs import environment, load_run, new_run_folder, read_campaign, write_campaign
    from ..sim.engines import engine_version
    from ..campaigns.executors import RunReport, run_tasks
    campaign = load_campaign(campaign_file, engine)  # a malformed campaign stops here: no run folder
    plan = expand(campaign)
    resolved = campaign.resolved()
    gate = _gate(campaign, plan, against) if against else None  # bad input stops before any run folder
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
                                "engine": engine_version(campaign.physics.engine), "environment": environment()})
    stop = campaign.stop
    hours = hours if hours is not None else (stop.hours if stop else None)
    payloads = {t.trial_key: t.payload for t in plan.tasks}
    with Journal(folder) as journal, EventLog(folder / EVENTS_NAME) as events:
        done_rows = journal.rows()
        done = {row["trial_key"] for row in done_rows}
        todo = [t for t in plan.tasks if t.trial_key not in done]
        for row in done_rows if gate is not None else ():
            _gate_add(gate, row, "candidate")
        sched = Scheduler(todo, deadline=time.monotonic() + hours * 3600 if hours else None,
                          target_width=stop.target_width if stop else None,
                          min_trials=stop.min_trials if stop else 1,
                          done_rows=[r for r in done_rows if r["trial_key"] in payloads], gate=gate)
        events.log("run_start", planned=len(plan.tasks), done=len(done), todo=len(todo), workers=workers,
                   executor=executor, hours=hours)
        tally = {"valid": 0, "held": 0}
        failures = {}  # short reason -> count, for the progress line
        bar = tqdm(total=len(plan.tasks), initial=len(done), unit="trial", disable=not progress or not todo,
                   dynamic_ncols=True, smoothing=0.1)

        def on_result(key, row):
            if "gripper" not in row:  # the executor's error / timeout row: add the trial's inputs
                row = {**failure_inputs(payloads[key]), "success": False, **row}
            journal.add(row)
            events.log("trial", trial_key=key, outcome=row.get("outcome"))
            if gate is not None:
                _gate_add(gate, row, "candidate")
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

        if resume and not todo:  # no workers to start
            echo(f"nothing to do: {len(done)} of {len(plan.tasks)} trials recorded in {folder}")
            report = RunReport(0, interrupted=False)
        else:
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
    if gate is not None:
        echo(_gate_text(gate, plan))
    echo(f"\nRun folder: {folder}" + (f" ({remaining} planned trial(s) not run: stopping rule)" if remaining else ""))
    if crosscheck:
        from .convergence import crosscheck as check
        echo("")
        check(folder, sample=crosscheck, campaign_file=campaign_file, workers=workers, progress=progress, echo=echo)
    if total and failed > ERROR_SHARE * total:
        echo(f"\n{failed} of {total} trial(s) ({100 * failed / total:.0f} %) ended in error or timeout, more than the "
             f"{100 * ERROR_SHARE:g} % allowed: exit code {ERRORED}. The reasons are listed first above.", file=sys.stderr)
        return ERRORED
    return 0


def _gate(campaign, plan, against):
    """A SequentialGate of the campaign's places, fed with the base run's trials and our finished ones."""
    from ..analysis.sequential import SequentialGate
    from ..errors import HarnessError
    from ..campaigns.runs import load_run
    if not campaign.detect_drop:
        raise HarnessError(f"run --against needs the campaign's detect_drop (the drop each cell must detect); "
                           f"{campaign.file} has none")
    base = load_run(against)
    places = {cell[1:] for cell in plan.cells()}
    gate = SequentialGate(cells=len(places), detect_drop=campaign.detect_drop, max_pairs=campaign.trials)
    shared = 0
    for row in base.to_dict("records"):
        if _cell(row)[1:] in places:
            shared += 1
            _gate_add(gate, row, "base")
    if not shared:
        raise HarnessError(f"the base run {against} has no trial of this campaign's cells (object set, object, "
                           "routine); compare needs shared pair keys")
    return gate


def _gate_add(gate, row, side):
    broken = row.get("outcome") in ("invalid", "error", "timeout")
    gate.add(_cell(row)[1:], row.get("pair_key"), side, None if broken else bool(row.get("success")))


def _gate_text(gate, plan):
    from ..analysis.sequential import SETTLED, WORSE
    places = sorted({cell[1:] for cell in plan.cells()})
    verdicts = [gate.verdict(p) for p in places]
    worse = [f"{p[1]} / {p[2]}" for p, (v, _) in zip(places, verdicts) if v == WORSE]
    settled = sum(v in (WORSE, SETTLED) for v, _ in verdicts)
    return (f"\nSequential gate (detect_drop {gate.options['detect_drop']:g}, alpha {gate.options['alpha']:g} over "
            f"{len(places)} cells): {settled} of {len(places)} cells settled, {len(worse)} worse"
            + (f" ({', '.join(worse)})" if worse else "") + f"; {sum(n for _, n in verdicts)} pairs used. "
            "Run `grasp-harness compare` on the two runs for the full table.")


def _short_reason(row):
    """A few words naming why a trial failed: the exception's type, or the executor's own words."""
    text = str(row.get("error") or row.get("reason") or row.get("outcome"))
    return text.split(":")[0][:40] if row.get("outcome") == "error" else "timeout"


# --- export --------------------------------------------------------------------------------------

def cmd_export(args):
    from ..campaigns.runs import export

    def work():
        print(export(args.run, args.to, args.out))
        return 0
    return _bad_input(work)
