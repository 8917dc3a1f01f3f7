"""Command-line option values shared by several commands."""

from __future__ import annotations

__all__ = ["key_values", "numbers"]


def key_values(pairs, flag="--set"):
    """KEY=VALUE pairs as a table, each value read as TOML (numbers, lists, true/false)."""
    import tomllib

    from ..errors import SpecError
    table = {}
    for pair in pairs:
        key, sep, value = pair.partition("=")
        try:
            table[key.strip()] = tomllib.loads(f"v = {value}")["v"] if sep else None
        except tomllib.TOMLDecodeError:
            table[key.strip()] = value  # plain text; the fields that read it say what is allowed
        if not sep or not key.strip():
            raise SpecError(flag, [(pair, "must be KEY=VALUE, e.g. angle_deg=90")])
    return table


def numbers(text, flag, example="1,2.5,4"):
    """A comma-separated list of numbers > 0, in the order given; SpecError naming the option otherwise."""
    import math

    from ..errors import SpecError
    try:
        values = [float(v) for v in str(text).split(",") if v.strip()]
    except ValueError:
        values = []
    if not values or not all(math.isfinite(v) and v > 0 for v in values):
        raise SpecError(flag, [(str(text), f"must be a comma-separated list of numbers > 0, e.g. {example}")])
    return values


def whole_numbers(text, flag, example="100,200,400"):
    """A comma-separated list of whole numbers > 0, sorted, each once; SpecError naming the option otherwise."""
    from ..errors import SpecError
    try:
        values = sorted({int(v) for v in str(text).split(",") if v.strip()})
    except ValueError:
        values = []
    if not values or values[0] <= 0:
        raise SpecError(flag, [(str(text), f"must be a comma-separated list of whole numbers > 0, e.g. {example}")])
    return values
