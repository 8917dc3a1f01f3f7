"""The `grasp-harness` command. Subcommands import what they need when they run."""

from __future__ import annotations

import argparse
import sys

from . import __version__

SAFETY = ("Simulated success is no guarantee for hardware: rollers and pinch points can trap fingers and "
          "loose clothing. Validate on hardware with reduced force and speed limits and follow local "
          "machine-safety rules and the robot maker's instructions.")


def _parser():
    p = argparse.ArgumentParser(
        prog="grasp-harness",
        description="Generate gripper and object models from spec files and test grasps in headless physics.",
        epilog=SAFETY)
    p.add_argument("--version", action="version", version=f"grasp-harness {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")
    c = sub.add_parser("check", help="validate gripper specs and object sets")
    c.add_argument("files", nargs="+", metavar="FILE")
    b = sub.add_parser("build", help="write the URDFs and meshes of a spec or object set")
    b.add_argument("file", metavar="FILE")
    b.add_argument("--out", required=True, metavar="DIR", help="folder to write models into")
    s = sub.add_parser("show", help="print the variants or instances of a spec or object set")
    s.add_argument("file", metavar="FILE")
    return p


def main(argv=None):
    args = _parser().parse_args(argv)
    from .errors import HarnessError, SpecError
    try:
        return {"check": cmd_check, "build": cmd_build, "show": cmd_show}[args.command](args)
    except SpecError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except HarnessError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 1


def _models(spec):
    """(name, urdf, files) of every model a loaded spec or set describes, and one row each for `show`."""
    from .grippers import build_models
    from .objects import ObjectSet, generate
    if isinstance(spec, ObjectSet):
        return [(o.name, o.urdf, o.files, _object_row(o)) for o in generate(spec)]
    return [(m.name, m.urdf, m.files, {"variant": m.name, "family": m.family, **m.summary})
            for m in build_models(spec)]


def _object_row(o):
    size = " x ".join(f"{e * 1e3:.1f}" for e in o.extents)
    return {"object": o.name, "kind": o.kind, "size_mm": size, "mass_g": round(o.mass * 1e3, 2),
            "friction": round(o.friction, 3), "restitution": round(o.restitution, 3)}


def cmd_check(args):
    from .errors import SpecError
    from .specs import load_any
    failed = 0
    for f in args.files:
        try:
            spec = load_any(f)
        except SpecError as exc:
            print(f"error: {exc}", file=sys.stderr)
            failed += 1
            continue
        n = len(spec.variants) if hasattr(spec, "variants") else sum(e.count for e in spec.entries)
        what = "variant(s)" if hasattr(spec, "variants") else "object instance(s) before folders"
        print(f"ok: {f} ({n} {what})")
    return 2 if failed else 0


def cmd_build(args):
    from .build import materialise
    from .specs import load_any
    spec = load_any(args.file)
    for name, urdf, files, _ in _models(spec):
        print(materialise(name, urdf, files, args.out))
    return 0


def cmd_show(args):
    from .specs import load_any
    from .table import format_table
    rows = [row for *_, row in _models(load_any(args.file))]
    print(format_table(rows))
    return 0


if __name__ == "__main__":
    sys.exit(main())
