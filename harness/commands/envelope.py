"""The `envelope` command: the pick envelope of a roller-finger variant (campaigns/envelope.py), as a
CSV of every sweep point, a CSV of the measured against the analytic bite boundary, and a PNG chart.
Writing into a run folder (`--out RUN`) puts the chart in that run's `report`."""

from __future__ import annotations

import sys

__all__ = ["register", "cmd_envelope"]


def register(subparsers):
    e = subparsers.add_parser(
        "envelope", help="sweep part height against roller friction with surface-draw-in and chart what is picked",
        description="For one roller-finger variant, run a nominal surface-draw-in trial at every (part height, "
                    "roller-part friction) point for lying cylinders, standing discs and flat plates, and chart "
                    "which parts were drawn in and held beside the analytic bite boundary (rolling-mill angle "
                    "of bite). Writes envelope.csv (every point), envelope-boundary.csv (measured against "
                    "analytic boundary per height) and envelope.png into --out.")
    e.add_argument("gripper", metavar="GRIPPER", help="gripper spec file (a hand with driven rollers)")
    e.add_argument("--variant", metavar="NAME", help="variant name (default: the spec's own values, else the first)")
    e.add_argument("--shapes", default="cylinder,disc,plate", metavar="LIST",
                   help="part shapes: cylinder (lying), disc (standing), plate (flat); default all three")
    e.add_argument("--heights-mm", metavar="LIST",
                   help="part heights in mm (default: 8 from 0.1 to 1.6 roller radii)")
    e.add_argument("--mu", metavar="LIST", help="roller-part friction coefficients (default 0.1 to 1.7, 9 values)")
    e.add_argument("--physics", action="append", default=[], metavar="KEY=VALUE",
                   help="engine numerics as in a campaign's [physics] table (default: the campaign defaults "
                        "refined, 4x the solver iterations at half the step: at the defaults a part of a gram "
                        "squeezed between the rollers sinks into the table)")
    e.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                   help="a surface-draw-in parameter in file units, e.g. --set preload_n=3")
    e.add_argument("--workers", type=int, default=1, metavar="N", help="worker processes (default 1)")
    e.add_argument("--out", required=True, metavar="DIR", help="folder to write the CSVs and the chart into")


def cmd_envelope(args):
    from pathlib import Path

    from tqdm import tqdm

    from ..campaigns.campaign import physics_settings
    from ..campaigns.envelope import (BOUNDARY_CSV, CHART_PNG, DEFAULT_MU, POINTS_CSV, SHAPES, boundary,
                                      default_heights, sweep)
    from ..errors import SpecError
    from ..models.grippers import build_models
    from ..models.specs import load_gripper
    from ..safety import SAFETY
    from ..sim.routines import make_routine
    from ..sim.world import PhysicsSettings
    from ..table import format_table
    from ..views.envelope import boundary_rows, write_chart
    from .options import key_values, numbers

    # every input is checked before the first trial
    spec_file = Path(args.gripper).resolve()
    spec = load_gripper(spec_file)
    models = build_models(spec)
    if args.variant:
        found = [m for m in models if m.name == args.variant]
        if not found:
            raise SpecError(args.gripper, [("--variant", f"must name one of: {', '.join(m.name for m in models)}; "
                                                         f"got {args.variant!r}")])
        model = found[0]
    else:
        model = next((m for m in models if m.name == spec.own), models[0])
    table = key_values(args.set)
    routine = make_routine("surface-draw-in", table, file="--set")
    if not model.roll_joints:
        raise SpecError(args.gripper, [("family", f"needs driven rollers; the {model.family} family has none")])
    shapes = [s.strip() for s in args.shapes.split(",") if s.strip()]
    bad = [s for s in shapes if s not in SHAPES]
    if bad or not shapes:
        raise SpecError("--shapes", [(args.shapes, f"must list some of {', '.join(SHAPES)}; got {bad or 'none'}")])
    heights = ([h * 1e-3 for h in numbers(args.heights_mm, "--heights-mm", "2,4,8,16")] if args.heights_mm
               else default_heights(model.roller_radius))
    mus = numbers(args.mu, "--mu", "0.2,0.5,1.0") if args.mu else DEFAULT_MU
    physics = key_values(args.physics, "--physics")
    settings = physics_settings(physics, "--physics") if physics else PhysicsSettings().refined()
    if args.workers < 1:
        raise SpecError("--workers", [(str(args.workers), "must be a whole number >= 1")])
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)

    n = len(shapes) * len(heights) * len(mus)
    print(f"{model.name}: {n} surface-draw-in trials ({', '.join(shapes)}; {len(heights)} heights x "
          f"{len(mus)} friction values; {settings.label()})", file=sys.stderr)
    with tqdm(total=n, unit="trial", file=sys.stderr, disable=None) as bar:
        df = sweep(spec_file, model.name, shapes, heights, mus, settings, routine=table, workers=args.workers,
                   progress=bar.update)
    edge = boundary(df)
    df.to_csv(out / POINTS_CSV, index=False)
    edge.to_csv(out / BOUNDARY_CSV, index=False)
    write_chart(df, edge, out / CHART_PNG)
    print(format_table(boundary_rows(edge)))
    print(f"\n{out / POINTS_CSV}, {out / BOUNDARY_CSV}, {out / CHART_PNG}: {len(df)} points, "
          f"{int(df['drawn_in'].sum())} drawn in, {int(df['held'].sum())} held")
    print(f"\n{SAFETY}")
    return 0
