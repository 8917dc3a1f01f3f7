"""The `grasp-harness` command. Subcommands import what they need when they run."""

from __future__ import annotations

import argparse
import sys

from . import __version__
from .constants import ENGINES
from .safety import SAFETY

def _parser():
    p = argparse.ArgumentParser(
        prog="grasp-harness",
        description="Generate gripper and object models from spec files and test grasps in headless physics.",
        epilog=SAFETY)
    p.add_argument("--version", action="version", version=f"grasp-harness {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")
    c = sub.add_parser("check", help="validate gripper specs, object sets and campaigns")
    c.add_argument("files", nargs="+", metavar="FILE")
    b = sub.add_parser("build", help="write the URDFs and meshes of a spec or object set")
    b.add_argument("file", metavar="FILE")
    b.add_argument("--out", required=True, metavar="DIR", help="folder to write models into")
    s = sub.add_parser("show", help="print the variants or instances of a spec or object set")
    s.add_argument("file", metavar="FILE")
    t = sub.add_parser("try", help="run one trial and print its metrics",
                       description="Run one seeded trial of a routine on one gripper variant and one object "
                                   "instance, headless, and print its row of metrics.")
    t.add_argument("gripper", metavar="GRIPPER", help="gripper spec file")
    t.add_argument("objects", metavar="OBJECTS", help="object set file")
    t.add_argument("--object", required=True, metavar="NAME", help="object instance name (see `show OBJECTS`)")
    t.add_argument("--routine", default="draw-in-grasp", metavar="NAME",
                   help="draw-in-grasp (default); `grasp-harness routines` lists them all with their parameters")
    t.add_argument("--variant", metavar="NAME", help="variant name (see `show GRIPPER`); default: the one with "
                                                      "the spec's own values, else the first of its sweep")
    t.add_argument("--physics", action="append", default=[], metavar="KEY=VALUE",
                   help="engine numerics as in a campaign's [physics] table, e.g. --physics solver_iterations=400 "
                        "--physics step_hz=480 (default: the campaign defaults)")
    t.add_argument("--engine", choices=ENGINES, help="physics engine (default pybullet; same as --physics engine=...)")
    t.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                   help="a routine parameter in file units, e.g. --set angle_deg=450 (repeatable; "
                        "`grasp-harness routines NAME` lists them)")
    t.add_argument("--seed", type=int, default=0, help="trial seed (default 0)")
    t.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    t.add_argument("--plot", metavar="FILE.png",
                   help="also write the object's position in the hand, slip speed and contact force over time as a PNG")
    from .commands.analysis import register
    register(sub)
    from .commands.campaign import register as register_campaign
    register_campaign(sub)
    from .commands.report import register as register_report
    register_report(sub)
    from .commands.convergence import register as register_convergence
    register_convergence(sub)
    from .commands.bench import register as register_bench
    register_bench(sub)
    from .commands.envelope import register as register_envelope
    register_envelope(sub)
    from .commands.routines import register as register_routines
    register_routines(sub)
    return p


def main(argv=None):
    args = _parser().parse_args(argv)
    from .errors import HarnessError, SpecError
    from .commands import analysis, bench, campaign, convergence, envelope, report, routines
    handlers = {"check": cmd_check, "build": cmd_build, "show": cmd_show, "try": cmd_try,
                "summary": analysis.cmd_summary, "compare": analysis.cmd_compare, "rank": analysis.cmd_rank,
                "plan": campaign.cmd_plan, "run": campaign.cmd_run, "export": campaign.cmd_export,
                "report": report.cmd_report, "replay": report.cmd_replay, "bench": bench.cmd_bench,
                "converge": convergence.cmd_converge, "crosscheck": convergence.cmd_crosscheck,
                "envelope": envelope.cmd_envelope, "routines": routines.cmd_routines}
    try:
        return handlers[args.command](args)
    except SpecError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except HarnessError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 1


def _models(spec):
    """(name, urdf, files) of every model a loaded spec or set describes, and one row each for `show`."""
    from .models.grippers import build_models
    from .models.objects import ObjectSet, generate
    if isinstance(spec, ObjectSet):
        return [(o.name, o.urdf, o.files, _object_row(o)) for o in generate(spec)]
    return [(m.name, m.urdf, m.files, {"variant": m.name, "family": m.family, **m.summary, **_reach(m)})
            for m in build_models(spec)]


def _reach(model):
    """What a gripper reaches from geometry: its fingertips' lowest height over the table in an
    approach from above, and for roller hands the lowest parts the rollers draw in off the surface
    at a pair friction of 1 (rigid bite condition)."""
    from .sim.bite import thinnest_part
    from .sim.trial import TABLE_CLEARANCE
    row = {"tip_reach_mm": TABLE_CLEARANCE * 1e3}
    if model.roll_joints and model.roller_radius:
        row["bite_at_mu1_mm"] = (f"lying {thinnest_part('cylinder', model.roller_radius, 1.0) * 1e3:.1f} / "
                                 f"edge {thinnest_part('disc', model.roller_radius, 1.0) * 1e3:.1f}")
    return row


def _object_row(o):
    size = " x ".join(f"{e * 1e3:.1f}" for e in o.extents)
    from .sim.trial import rest_height
    row = {"object": o.name, "kind": o.kind, "size_mm": size, "top_mm": round(rest_height(o) * 1e3, 1),
           "mass_g": round(o.mass * 1e3, 2),
           "friction": round(o.friction, 3), "restitution": round(o.restitution, 3)}
    if o.sources:  # objects read from files: say where mass properties and material came from
        row["inertia_from"] = o.sources["inertia"]
        row["material_from"] = ", ".join(f"{k} {v}" for k, v in o.sources.items() if k != "inertia")
        row["file"] = o.source
    return row


def cmd_check(args):
    from .errors import SpecError
    failed = 0
    for f in args.files:
        try:
            what = _check_one(f)
        except SpecError as exc:
            print(f"error: {exc}", file=sys.stderr)
            failed += 1
            continue
        print(f"ok: {f} ({what})")
    return 2 if failed else 0


def _check_one(path):
    """Load a gripper spec, an object set or a campaign (it has [[gripper]] or [[routine]] tables)
    as the run would, and say what it holds."""
    from .models.sources import load_toml
    from .models.specs import load_any
    raw = load_toml(path)
    if "gripper" in raw or "routine" in raw:
        from .campaigns.campaign import expand, load_campaign
        expansion = expand(load_campaign(path))
        return f"campaign of {len(expansion.tasks)} trial(s), {expansion.skipped} skipped as unsuited"
    spec = load_any(path, raw)
    if hasattr(spec, "variants"):
        return f"{len(spec.variants)} variant(s)"
    return f"{sum(e.count for e in spec.entries)} object instance(s) before folders"


def cmd_build(args):
    from .models.build import materialise
    from .models.specs import load_any
    spec = load_any(args.file)
    for name, urdf, files, _ in _models(spec):
        print(materialise(name, urdf, files, args.out))
    return 0


def cmd_show(args):
    from .models.specs import load_any
    from .table import format_table
    rows = [row for *_, row in _models(load_any(args.file))]
    print(format_table(rows))
    return 0


def _named(items, name, what, source):
    """The item called `name` among `items` (objects with .name), or a SpecError listing the names."""
    from .errors import SpecError
    found = [i for i in items if i.name == name]
    if not found:
        names = ", ".join(i.name for i in items)
        raise SpecError(source, [(what, f"must name one of: {names}; got {name!r}")])
    return found[0]


def _routine_table(pairs, flag="--set"):
    """--set KEY=VALUE pairs as a table, each value read as TOML (numbers, lists, true/false)."""
    from .commands.options import key_values
    return key_values(pairs, flag)


def cmd_try(args):
    import json
    import math

    from .errors import SpecError
    from .models.grippers import build_models
    from .models.objects import generate
    from .sim.routines import make_routine
    from .models.specs import load_any, load_gripper
    from .campaigns.campaign import physics_settings
    from .table import format_table
    from .sim.trial import run_trial
    spec = load_gripper(args.gripper)
    models = build_models(spec)
    if args.variant:
        model = _named(models, args.variant, "--variant", args.gripper)
    else:
        model = next((m for m in models if m.name == spec.own), models[0])
        if len(models) > 1:
            why = "the spec's own values" if model.name == spec.own else "the first of the sweep"
            print(f"variant: {model.name} ({why}; --variant picks another)", file=sys.stderr)
    physics = _routine_table(args.physics, "--physics")
    if args.engine:
        physics["engine"] = args.engine
    settings = physics_settings(physics, "--physics")
    instance = _named(generate(load_any(args.objects)), args.object, "--object", args.objects)
    routine = make_routine(args.routine, _routine_table(args.set), file="--set", prefix="")
    problem = routine.unsuitable(model, instance)
    if problem:
        raise SpecError("--routine", [(args.routine, problem)])
    recorder = None
    if args.plot:
        from .views.plots import TrialRecorder
        recorder = TrialRecorder()
    row = run_trial(model, instance, routine, seed=args.seed, on_step=recorder, settings=settings)
    if args.plot:
        from .views.plots import trial_plot
        trial_plot(recorder, args.plot, title=f"{model.name} / {instance.name} / {routine.name} / seed {args.seed}")
    if args.json:
        print(json.dumps({k: (None if isinstance(v, float) and not math.isfinite(v) else v) for k, v in row.items()}))
    else:
        print(format_table([{"metric": k, "value": v} for k, v in row.items()]))
        print(f"\n{SAFETY}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
