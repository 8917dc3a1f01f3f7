"""Declarative spec fields: each field states its key, type, unit and allowed range once.

A spec section is a frozen, keyword-only dataclass whose fields are declared with `param`
(or `section` / `sections` for nested tables). `parse` turns a TOML table into that
dataclass, converting file units (mm, deg, g, rpm) to SI and collecting every problem in
the file before anything is reported, so a user fixes all mistakes in one pass.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import typing
from dataclasses import dataclass, field
from pathlib import Path

from ..constants import UNIT_TO_SI

__all__ = ["param", "section", "sections", "parse", "Problems", "Span", "field_keys", "section_type"]

_MISSING = dataclasses.MISSING


@dataclass(frozen=True)
class Span:
    """A closed range [lo, hi] in SI units; a fixed value has lo == hi."""

    lo: float
    hi: float

    def draw(self, rng):
        return self.lo if self.lo == self.hi else float(rng.uniform(self.lo, self.hi))


@dataclass(frozen=True)
class Rule:
    key: str
    kind: str  # "number", "integer", "boolean", "text", "numbers", "span", "path", "texts"
    unit: str | None = None
    gt: float | None = None
    ge: float | None = None
    lt: float | None = None
    le: float | None = None
    choices: tuple | None = None
    length: tuple[int, int] | None = None  # allowed list lengths for "numbers"/"texts"

    def allowed(self):
        """The English description of what this field accepts."""
        noun = {
            "number": "a number",
            "integer": "a whole number",
            "boolean": "true or false",
            "text": "a text",
            "numbers": "a list of numbers",
            "texts": "a list of texts",
            "span": "a number or a range [low, high]",
            "path": "a file path relative to the spec's folder",
        }[self.kind]
        if self.choices:
            return "one of " + ", ".join(repr(c) for c in self.choices)
        bounds = [f"{op} {_num(v)}" for op, v in
                  ((">", self.gt), (">=", self.ge), ("<", self.lt), ("<=", self.le)) if v is not None]
        text = noun + (" " + " and ".join(bounds) if bounds else "")
        if self.length:
            lo, hi = self.length
            text += f" ({lo} items)" if lo == hi else f" ({lo} to {hi} items)"
        return text


def _num(v):
    return f"{v:g}" if isinstance(v, float) else str(v)


def param(key, kind="number", *, default=_MISSING, unit=None, gt=None, ge=None, lt=None, le=None,
          choices=None, length=None, doc=""):
    """Declare a leaf field read from `key` in the file (SI in code, `unit` in the file)."""
    rule = Rule(key, kind, unit, gt, ge, lt, le, tuple(choices) if choices else None, length)
    return field(default=default, metadata={"rule": rule, "doc": doc})


def section(key, *, optional=False, doc=""):
    """Declare a nested table; `optional` sections are None when absent."""
    return field(default=None if optional else _MISSING,
                 metadata={"section": key, "optional": optional, "doc": doc})


def sections(key, *, doc=""):
    """Declare an array of tables ([[key]] in TOML), parsed into a tuple."""
    return field(default=_MISSING, metadata={"sections": key, "doc": doc})


class Problems:
    """Collects (field path, message) pairs for one file."""

    def __init__(self, file):
        self.file = Path(file)
        self.items: list[tuple[str, str]] = []

    def add(self, path, message):
        self.items.append((path, message))

    def raise_if_any(self):
        if self.items:
            from ..errors import SpecError
            raise SpecError(self.file, self.items)


def _join(prefix, key):
    return f"{prefix}.{key}" if prefix else key


def section_type(cls, f):
    """The section class a `section`/`sections` field of `cls` holds."""
    hint = typing.get_type_hints(cls)[f.name]
    args = [a for a in typing.get_args(hint) if a is not type(None) and a is not Ellipsis]
    return args[0] if args else hint


def field_keys(cls):
    """{file key: dataclass field} for a section class."""
    out = {}
    for f in dataclasses.fields(cls):
        md = f.metadata
        key = md["rule"].key if "rule" in md else md.get("section") or md.get("sections")
        if key:
            out[key] = f
    return out


def _unknown_keys(cls, table, prefix, problems, known=()):
    keys = [*field_keys(cls), *known]
    for key in table:
        if key not in keys:
            near = difflib.get_close_matches(str(key), list(keys), n=1, cutoff=0.6)
            hint = f"; did you mean '{near[0]}'?" if near else f"; known keys: {', '.join(sorted(keys))}"
            problems.add(_join(prefix, key), "is not a known key" + hint)


def parse(cls, table, problems: Problems, prefix="", known=()):
    """Build `cls` from a TOML table. Returns None when any problem was found (all are recorded).

    `known` names further keys the caller handles itself (they are not errors here)."""
    if not isinstance(table, dict):
        problems.add(prefix, f"must be a table; got {table!r}")
        return None
    before = len(problems.items)
    _unknown_keys(cls, table, prefix, problems, known)
    values = {}
    for key, f in field_keys(cls).items():
        path = _join(prefix, key)
        md = f.metadata
        if key not in table:
            if f.default is _MISSING:
                what = md["rule"].allowed() if "rule" in md else "a table"
                problems.add(path, f"is missing; it must be {what}")
            else:
                values[f.name] = f.default
            continue
        raw = table[key]
        if "rule" in md:
            values[f.name] = _leaf(md["rule"], raw, path, problems)
        elif "section" in md:
            values[f.name] = parse(section_type(cls, f), raw, problems, path)
        else:
            sub = section_type(cls, f)
            if not isinstance(raw, list) or not raw:
                problems.add(path, f"must be a non-empty list of tables ([[{key}]]); got {raw!r}")
                continue
            values[f.name] = tuple(parse(sub, item, problems, f"{path}[{i}]") for i, item in enumerate(raw))
    if len(problems.items) > before:
        return None
    obj = cls(**values)
    check = getattr(obj, "check", None)
    if check is not None:
        for sub_path, message in check() or ():
            problems.add(_join(prefix, sub_path), message)
    return obj if len(problems.items) == before else None


def _is_number(x):
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def _leaf(rule: Rule, raw, path, problems):
    bad = lambda: problems.add(path, f"must be {rule.allowed()}; got {raw!r}")  # noqa: E731
    if rule.kind == "boolean":
        return raw if isinstance(raw, bool) else bad()
    if rule.kind in ("text", "path"):
        if not isinstance(raw, str) or not raw.strip() or (rule.choices and raw not in rule.choices):
            if isinstance(raw, str) and rule.choices:
                near = difflib.get_close_matches(raw, rule.choices, n=1, cutoff=0.6)
                hint = f"; did you mean '{near[0]}'?" if near else ""
                problems.add(path, f"must be {rule.allowed()}; got {raw!r}{hint}")
                return None
            return bad()
        return raw
    if rule.kind == "texts":
        ok = isinstance(raw, list) and all(isinstance(x, str) and x for x in raw)
        if ok and rule.length:
            ok = rule.length[0] <= len(raw) <= rule.length[1]
        return tuple(raw) if ok else bad()
    if rule.kind == "numbers":
        ok = isinstance(raw, list) and all(_is_number(x) and math.isfinite(x) and _in_range(rule, x) for x in raw)
        if ok and rule.length:
            ok = rule.length[0] <= len(raw) <= rule.length[1]
        return tuple(_si(rule, x) for x in raw) if ok else bad()
    if rule.kind == "span":
        pair = raw if isinstance(raw, list) else [raw, raw]
        ok = (len(pair) == 2 and all(_is_number(x) and math.isfinite(x) and _in_range(rule, x) for x in pair))
        if not ok:
            return bad()
        if pair[0] > pair[1]:
            problems.add(path, f"must be {rule.allowed()} with low <= high; got {raw!r}")
            return None
        return Span(_si(rule, pair[0]), _si(rule, pair[1]))
    # number / integer
    if rule.kind == "integer":
        ok = isinstance(raw, int) and not isinstance(raw, bool)
    else:
        ok = _is_number(raw) and math.isfinite(raw)
    if not ok or not _in_range(rule, raw) or (rule.choices and raw not in rule.choices):
        return bad()
    return int(raw) if rule.kind == "integer" else _si(rule, raw)


def _in_range(rule, x):
    return ((rule.gt is None or x > rule.gt) and (rule.ge is None or x >= rule.ge)
            and (rule.lt is None or x < rule.lt) and (rule.le is None or x <= rule.le))


def _si(rule, x):
    return float(x) * UNIT_TO_SI[rule.unit] if rule.unit else float(x)

