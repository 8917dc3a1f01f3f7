"""Settled numbers: the `converge` and `crosscheck` commands.

Both re-run trials of a campaign with the same keys, seeds and perturbation draws at other physics
settings and compare the results pairwise (analysis/numerics.py holds the comparison and its
tolerances):

- `converge CAMPAIGN` runs a stratified sample (the first `--per-cell` trials of every cell) at
  every setting of a grid of solver iterations x physics rates, compares each with the finest
  setting of the grid, and names the cheapest setting within tolerance. Output: a table, a plot
  of cost against error, CSV and JSON, and one run folder per setting (resumable).
- `crosscheck RUN` re-runs a stratified sample of a finished run's trials under refined numerics
  (`--iterations` x the solver iterations, the step divided by `--step`), and flags the cells whose
  success rate or slip moved beyond tolerance as numerics-sensitive. The flags go to
  RUN/crosscheck.json; `report` marks them on the success map and `compare` names verdicts that
  rest on them. `run --crosscheck FRACTION` does it at the end of a campaign.
- `crosscheck RUN --engine mujoco` re-runs the sample on the other physics engine at the run's own
  numerics (unless --iterations / --step are given) and flags engine-sensitive cells in
  RUN/engine-crosscheck.json the same way: a verdict that holds in two independently written
  engines is evidence, one that flips is a property of a simulator.
"""

from __future__ import annotations

import json
import math
import sys
import time
from pathlib import Path

from ..constants import ENGINES
from ..errors import HarnessError
from .options import whole_numbers

__all__ = ["register", "stratified", "run_at", "converge", "crosscheck"]

CROSSCHECK_FOLDER = "crosscheck"


def register(subparsers):
    c = subparsers.add_parser("converge", help="find the cheapest physics settings whose results are settled",
                              description="Run a stratified sample of a campaign's trials (same seeds and draws) "
                                          "at every setting of a grid of solver iterations x physics rates, "
                                          "compare each with the finest, and name the cheapest setting within "
                                          "the tolerances of harness/analysis/numerics.py.")
    c.add_argument("campaign", metavar="CAMPAIGN")
    c.add_argument("--per-cell", type=int, default=4, metavar="N", help="trials per cell (default 4)")
    c.add_argument("--iterations", default="50,100,200,400,800", metavar="LIST",
                   help="solver iterations to try (default 50,100,200,400,800)")
    c.add_argument("--step-hz", default="240,480", metavar="LIST", help="physics rates to try (default 240,480)")
    c.add_argument("--reference", metavar="ITER@HZ",
                   help="reference setting (default: the most iterations at the highest rate)")
    c.add_argument("--workers", type=int, metavar="N")
    c.add_argument("--out", default="runs", metavar="DIR", help="folder for the study's folder (default: runs)")
    c.add_argument("--resume", metavar="DIR", help="a study folder to complete")
    x = subparsers.add_parser("crosscheck", help="re-run a sample of a run under finer numerics and flag cells",
                              description="Re-run a stratified sample of a finished run's trials (same draws) "
                                          "with more solver iterations and a smaller step; report per cell the "
                                          "paired agreement and the slip shift, and flag numerics-sensitive "
                                          "cells in RUN/crosscheck.json.")
    x.add_argument("run", metavar="RUN")
    x.add_argument("--sample", type=float, default=0.25, metavar="FRACTION",
                   help="share of each cell's trials to re-run (default 0.25; at least one per cell)")
    x.add_argument("--iterations", type=int, metavar="K", help="solver iterations x K (default 4; 1 with --engine)")
    x.add_argument("--step", type=int, metavar="K", help="physics step / K (default 2; 1 with --engine)")
    x.add_argument("--engine", choices=ENGINES, help="re-run on this physics engine instead and flag "
                                                     "engine-sensitive cells (RUN/engine-crosscheck.json)")
    x.add_argument("--campaign", metavar="FILE", help="the run's campaign file, if it has moved")
    x.add_argument("--workers", type=int, metavar="N")


def stratified(tasks, per_cell=None, share=None, keys=None):
    """The first trials (by trial index) of every cell: `per_cell` of them, or ceil(share x the
    cell's trials), at least one; only tasks whose key is in `keys` when it is given."""
    cells = {}
    for task in tasks:
        if keys is None or task.trial_key in keys:
            p = task.payload
            cells.setdefault((p["variant"], p["object_set"], p["object"], p["routine"]), []).append(task)
    out = []
    for group in cells.values():
        group.sort(key=lambda t: t.payload["trial"])
        n = per_cell if per_cell is not None else max(1, math.ceil(share * len(group)))
        out.extend(group[:n])
    return out


def run_at(tasks, settings, folder, record, *, workers=None, timeout=None, progress=True, label=""):
    """Run `tasks` at `settings` into the run folder `folder` (its journal; resumable: keys already
    recorded are skipped). Returns the folder's results as a DataFrame."""
    from tqdm import tqdm

    from ..campaigns.executors import run_tasks
    from ..campaigns.journal import Journal
    from ..campaigns.runs import environment, load_run, write_campaign
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    if not (folder / "campaign.json").is_file():
        write_campaign(folder, {**record, "physics": settings.record(), "planned_trials": len(tasks),
                                "created_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
                                "environment": environment()})
    from ..campaigns.campaign import failure_inputs, run_payload
    physics = settings.record()
    with Journal(folder) as journal:
        done = journal.done_keys()
        todo = {t.trial_key: {**t.payload, "physics": physics} for t in tasks if t.trial_key not in done}
        bar = tqdm(total=len(tasks), initial=len(tasks) - len(todo), unit="trial", disable=not progress,
                   desc=label or settings.label(), dynamic_ncols=True, leave=False)

        def on_result(key, row):
            if "gripper" not in row:  # the executor's error / timeout row: add the trial's inputs
                row = {**failure_inputs(todo[key]), "success": False, **row}
            journal.add(row)
            bar.update(1)

        report = run_tasks(todo.items(), run_payload, on_result=on_result, workers=workers, timeout=timeout)
        bar.close()
    if report.interrupted:
        raise KeyboardInterrupt
    return load_run(folder)


# --- converge ------------------------------------------------------------------------------------

def converge(campaign_file, *, per_cell=4, iterations=(50, 100, 200, 400, 800), rates=(240, 480), reference=None,
             workers=None, out="runs", resume=None, progress=True, echo=print):
    """Run the study; returns (table DataFrame, folder). See the module doc."""
    import pandas as pd

    from ..analysis.numerics import TOLERANCES, agreement
    from ..campaigns.campaign import expand, load_campaign, physics_settings
    from ..campaigns.runs import new_run_folder
    from ..sim.world import PhysicsSettings
    campaign = load_campaign(campaign_file)
    tasks = stratified(expand(campaign).tasks, per_cell=per_cell)
    grid = [physics_settings({"solver_iterations": it, "step_hz": hz}, "--iterations/--step-hz")
            for hz in rates for it in iterations]
    ref = reference or PhysicsSettings(step_hz=max(rates), solver_iterations=max(iterations))
    if ref not in grid:
        grid.append(ref)
    folder = Path(resume) if resume else new_run_folder(out, f"converge-{campaign.name}")
    record = {**campaign.resolved(), "study": "converge", "per_cell": per_cell}
    echo(f"{len(tasks)} trial(s) ({per_cell} per cell) x {len(grid)} setting(s); reference {ref.label()}; "
         f"folder {folder}")
    results = {}
    for s in sorted(grid, key=lambda s: s == ref, reverse=True):  # the reference first: it is compared with all
        results[s] = run_at(tasks, s, folder / f"it{s.solver_iterations}-hz{s.step_hz}", record, workers=workers,
                            timeout=campaign.timeout_s * s.step_hz / 240 * max(1, s.solver_iterations / 100),
                            progress=progress, label=s.label())
    rows = []
    for s in grid:
        a = agreement(results[s], results[ref])
        rows.append({"solver_iterations": s.solver_iterations, "step_hz": s.step_hz, "reference": s == ref,
                     "wall_per_trial_s": a["wall_coarse_s"], "pairs": a["pairs"], "success": a["success_coarse"],
                     "difference": a["difference"], "mcnemar_p": a["p"], "flip_share": a["flip_share"],
                     "cells_significant": a["cells_significant"], "cells_flagged": a["cells_flagged"],
                     "slip_median_mm": a["slip_coarse_mm"], "slip_reference_mm": a["slip_fine_mm"],
                     "drift_median_mm": a["drift_coarse_mm"], "drift_reference_mm": a["drift_fine_mm"],
                     "hold_slip_mm": a.get("hold_slip_coarse_mm", math.nan),
                     "settled": not a["failures"], "failures": "; ".join(a["failures"])})
    table = pd.DataFrame(rows).sort_values(["wall_per_trial_s"]).reset_index(drop=True)
    table.to_csv(folder / "converge.csv", index=False)
    cheapest = table[table["settled"] & ~table["reference"]].head(1)
    summary = {"reference": ref.record(), "tolerances": TOLERANCES, "per_cell": per_cell, "trials": len(tasks),
               "cheapest": cheapest.iloc[0][["solver_iterations", "step_hz"]].astype(int).to_dict()
               if len(cheapest) else None}
    (folder / "converge.json").write_text(json.dumps(summary, indent=1), encoding="utf-8")
    _plot(table, folder / "converge.png", ref)
    echo(_format(table))
    if len(cheapest):
        c = cheapest.iloc[0]
        echo(f"\nCheapest settled setting: {int(c.solver_iterations)} iterations at {int(c.step_hz)} Hz "
             f"({c.wall_per_trial_s:.2f} s per trial; reference {ref.label()}).")
    else:
        echo(f"\nNo setting short of the reference {ref.label()} is settled; try finer settings.")
    echo(f"Table, plot and runs in {folder}")
    return table, folder


def _format(table):
    from ..table import format_table
    cols = {"solver_iterations": "iterations", "step_hz": "step_hz", "wall_per_trial_s": "s/trial",
            "success": "success", "difference": "diff", "mcnemar_p": "p", "flip_share": "flips",
            "cells_significant": "cells sig.", "slip_median_mm": "slip mm", "drift_median_mm": "drift mm",
            "hold_slip_mm": "hold slip mm", "settled": "settled"}
    rows = [{v: (round(r[k], 4) if isinstance(r[k], float) else r[k]) for k, v in cols.items()}
            for r in table.to_dict("records")]
    return format_table(rows)


def _plot(table, path, ref):
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    fig, axes = plt.subplots(1, 2, figsize=(10, 4))
    slip_err = (table["slip_median_mm"] - table["slip_reference_mm"]).abs() / table["slip_reference_mm"].abs()
    for ax, err, name in ((axes[0], table["difference"].abs(), "|success difference| vs reference"),
                          (axes[1], slip_err, "relative error of median slip vs reference")):
        for hz, g in table.sort_values("solver_iterations").groupby("step_hz"):
            ax.plot(g["wall_per_trial_s"], err[g.index], "o-", label=f"{hz} Hz")
            for i, r in g.iterrows():
                ax.annotate(str(int(r["solver_iterations"])), (r["wall_per_trial_s"], err[i]), fontsize=7,
                            textcoords="offset points", xytext=(3, 3))
        ax.set_xlabel("wall time per trial (s)")
        ax.set_ylabel(name)
        ax.grid(alpha=0.3)
        ax.legend(title="labels: iterations")
    axes[0].axhline(0.02, color="grey", ls="--")
    axes[1].axhline(0.10, color="grey", ls="--")
    fig.suptitle(f"Cost against error (reference: {ref.label()})")
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


# --- crosscheck ----------------------------------------------------------------------------------

def crosscheck(run, *, sample=0.25, iterations=None, step=None, engine=None, campaign_file=None, workers=None,
               progress=True, echo=print):
    """Re-run a stratified sample of `run` under refined numerics (`iterations` x the solver
    iterations, the step / `step`; defaults 4 and 2), or on `engine` (defaults 1 and 1); write
    RUN/crosscheck.json (RUN/engine-crosscheck.json); return the agreement dict
    (analysis.numerics.agreement)."""
    from dataclasses import replace

    from ..analysis.numerics import SENSITIVE, TOLERANCES, agreement
    from ..campaigns.campaign import expand, payload_settings
    from ..campaigns.runs import load_run, run_campaign_of
    run = Path(run)
    record, campaign = run_campaign_of(run, campaign_file, "a crosscheck would test other models")
    done = load_run(run)
    tasks = stratified(expand(campaign).tasks, share=sample, keys=set(done["trial_key"]))
    if not tasks:
        raise HarnessError(f"{run} has no recorded trial to crosscheck")
    base = payload_settings(tasks[0].payload)
    kind = "engine" if engine else "numerics"
    iterations, step = iterations or (1 if engine else 4), step or (1 if engine else 2)
    fine = base.refined(iterations, step)
    if engine:
        from ..sim.engines import engine_available
        if engine == base.engine:
            raise HarnessError(f"{run} ran on {engine} already; --engine names the other engine ({', '.join(ENGINES)})")
        if not engine_available(engine):
            raise HarnessError(f"engine {engine!r} is not installed here: pip install -e '.[{engine}]'")
        fine = replace(fine, engine=engine)
    echo(f"Crosscheck of {run}: {len(tasks)} trial(s) at {fine.label()} against {base.label()}")
    folder = run / (f"{CROSSCHECK_FOLDER}-{engine}" if engine else CROSSCHECK_FOLDER)
    refined = run_at(tasks, fine, folder, record, workers=workers, timeout=campaign.timeout_s * iterations * step,
                     progress=progress)
    a = agreement(done[done["trial_key"].isin(refined["trial_key"])], refined)
    cells = a.pop("cells")
    flagged = cells[cells["flagged"]]
    result = {"run_settings": base.record(), "refined_settings": fine.record(), "tolerances": TOLERANCES,
              **{k: v for k, v in a.items()},
              "cells": json.loads(cells.to_json(orient="records")),
              "flagged": [{"variant": r.variant, "object_set": r.object_set, "object": r.object,
                           "routine": r.routine, "why": r.why} for r in flagged.itertuples()]}
    (run / SENSITIVE[kind]).write_text(json.dumps(result, indent=1, default=float), encoding="utf-8")
    other = engine or "refined"
    echo(f"Overall success {a['success_coarse']:.3f} (run) vs {a['success_fine']:.3f} ({other}) over {a['pairs']} "
         f"pair(s), McNemar p {a['p']:.2g}; {100 * a['flip_share']:.1f} % of trials flip"
         + (" (chaos)." if not engine else "."))
    echo(f"Median slip of trials held in both {a['slip_coarse_mm']:.3g} vs {a['slip_fine_mm']:.3g} mm; "
         f"drift {a['drift_coarse_mm']:.3g} vs {a['drift_fine_mm']:.3g} mm.")
    if a["failures"]:
        echo("Not settled: " + "; ".join(a["failures"]))
    echo(f"{len(flagged)} of {len(cells)} cell(s) {kind}-sensitive" + (":" if len(flagged) else "."))
    for r in flagged.itertuples():
        echo(f"  {r.variant} / {r.object} / {r.routine}: {r.why}")
    return {**a, "cells": cells}


def cmd_converge(args):
    from ..campaigns.campaign import physics_settings
    ref = None
    if args.reference:
        it, _, hz = args.reference.partition("@")
        ref = physics_settings({"solver_iterations": whole_numbers(it, "--reference")[0],
                                "step_hz": whole_numbers(hz, "--reference")[0]}, "--reference")
    converge(args.campaign, per_cell=args.per_cell, iterations=whole_numbers(args.iterations, "--iterations"),
             rates=whole_numbers(args.step_hz, "--step-hz"), reference=ref, workers=args.workers, out=args.out,
             resume=args.resume)
    return 0


def cmd_crosscheck(args):
    try:
        crosscheck(args.run, sample=args.sample, iterations=args.iterations, step=args.step, engine=args.engine,
                   campaign_file=args.campaign, workers=args.workers)
    except HarnessError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    return 0
