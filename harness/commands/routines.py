"""`grasp-harness routines [NAME]`: every routine's phases and parameters, with units, ranges and defaults."""

from __future__ import annotations

__all__ = ["register", "cmd_routines", "parameter_rows", "UNIT_SUFFIXES"]

# What a routine key's ending says about its unit (the longest matching ending wins).
UNIT_SUFFIXES = {"_mm_s": "mm/s", "_deg_s": "deg/s", "_s": "s", "_mm": "mm", "_deg": "deg", "_n": "N",
                 "_hz": "Hz", "_g": "g (standard gravity)", "_share": "share of 1"}


def register(subparsers):
    r = subparsers.add_parser(
        "routines", help="list the routines with their parameters (units, ranges, defaults)",
        description="List every routine (or one) with what it needs, its phases and its parameters: the key "
                    "as written in a campaign's [[routine]] params table or `try --set`, its unit, what values "
                    "are allowed and the default.")
    r.add_argument("name", nargs="?", metavar="NAME", help="one routine (default: all)")


def parameter_rows(name):
    """One row per parameter of routine `name`: key, unit, allowed values, default (file units), meaning."""
    import dataclasses

    from ..constants import UNIT_TO_SI
    from ..sim.routines import ROUTINES
    rows = []
    for f in dataclasses.fields(ROUTINES[name][0]):
        rule = f.metadata["rule"]
        rows.append({"key": rule.key, "unit": _unit(rule), "allowed": rule.allowed(),
                     "default": _shown(f.default, UNIT_TO_SI[rule.unit] if rule.unit else 1.0),
                     "meaning": f.metadata.get("doc", "")})
    return rows


def _shown(default, scale):
    """A default as written in a file: SI back to the key's unit."""
    if default is None:
        return "see meaning"
    if isinstance(default, bool):
        return str(default).lower()
    if isinstance(default, float):
        return f"{default / scale:.6g}"
    if isinstance(default, tuple):
        return "[" + ", ".join(f"{x:g}" for x in default) + "]"
    return str(default)


def _unit(rule):
    if rule.kind == "boolean":
        return "-"
    if rule.kind == "numbers":
        return "direction"  # a vector whose length does not matter
    ending = max((s for s in UNIT_SUFFIXES if rule.key.endswith(s)), key=len, default=None)
    return UNIT_SUFFIXES[ending] if ending else "?"


def cmd_routines(args):
    from ..errors import SpecError
    from ..sim.routines import ROUTINES, make_routine
    from ..table import format_table
    names = list(ROUTINES)
    if args.name is not None:
        if args.name not in ROUTINES:
            raise SpecError("routines", [("NAME", f"must be one of {', '.join(ROUTINES)}; got {args.name!r}")])
        names = [args.name]
    needs = {"rollers": "a gripper with driven rollers", "cavity": "a ring or a cup (held from inside)",
             "": "any gripper and object"}
    for i, name in enumerate(names):
        routine = make_routine(name)
        if i:
            print()
        print(f"{name}: needs {needs[routine.needs]}; phases {' -> '.join(routine.labels())}")
        print(format_table(parameter_rows(name)))
    return 0
