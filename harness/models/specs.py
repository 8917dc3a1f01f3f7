"""Loading spec files: gripper specs (with sweeps) and object sets, validated before anything runs."""

from __future__ import annotations

import copy
import difflib
import itertools
from dataclasses import dataclass
from pathlib import Path

from ..errors import SpecError
from .fields import Problems, field_keys, parse, section_type
from .grippers import FAMILIES
from .objects import load_object_set
from .sources import load_toml

__all__ = ["GripperSpec", "Variant", "load_gripper", "load_any"]

_COMMON_GRIPPER_KEYS = ("family", "name", "description", "sweep")


@dataclass(frozen=True)
class Variant:
    """One design variant of a gripper spec: the sweep values it takes and its parsed parameters."""

    name: str
    sweep: tuple[tuple[str, object], ...]
    params: object


@dataclass(frozen=True)
class GripperSpec:
    file: Path
    name: str
    family: str
    description: str
    variants: tuple[Variant, ...]
    own: str | None = None  # name of the variant whose parameters are the spec's own (unswept) values


def _family_problems(raw, problems):
    family = raw.get("family")
    if not isinstance(family, str) or family not in FAMILIES:
        near = difflib.get_close_matches(str(family), list(FAMILIES), n=1, cutoff=0.5)
        hint = f"; did you mean '{near[0]}'?" if near else ""
        allowed = ", ".join(repr(f) for f in FAMILIES)
        problems.add("family", f"must be one of {allowed}; got {family!r}{hint}" if family is not None
                     else f"is missing; it must be one of {allowed}")
        return None
    return FAMILIES[family]


def _flatten(table, prefix=""):
    """An unquoted dotted key (finger.roller.radius_mm = [...]) reads as nested tables; join it back."""
    for key, value in table.items():
        if isinstance(value, dict):
            yield from _flatten(value, f"{prefix}{key}.")
        else:
            yield f"{prefix}{key}", value


def _sweep_items(raw, family, problems):
    sweep = raw.get("sweep", {})
    if not isinstance(sweep, dict):
        problems.add("sweep", f"must be a table of 'dotted.key = [values]'; got {sweep!r}")
        return []
    items = []
    for key, values in _flatten(sweep):
        path = f"sweep.{key}"
        if not _known_path(family.Params, key.split(".")):
            problems.add(path, f"must name a parameter of family '{raw['family']}'{_near_path(family.Params, key)}")
        elif not isinstance(values, list) or not values:
            problems.add(path, f"must be a non-empty list of values; got {values!r}")
        elif len(set(map(repr, values))) != len(values):
            problems.add(path, f"must not repeat a value; got {values!r}")
        else:
            items.append((key, values))
    return items


def _known_path(cls, parts):
    keys = field_keys(cls)
    f = keys.get(parts[0])
    if f is None:
        return False
    if len(parts) == 1:
        return "rule" in f.metadata
    if "section" not in f.metadata:
        return False
    return _known_path(section_type(cls, f), parts[1:])


def _all_paths(cls, prefix=""):
    for key, f in field_keys(cls).items():
        if "rule" in f.metadata:
            yield prefix + key
        elif "section" in f.metadata:
            yield from _all_paths(section_type(cls, f), prefix + key + ".")


def _near_path(cls, key):
    near = difflib.get_close_matches(key, list(_all_paths(cls)), n=1, cutoff=0.6)
    return f"; did you mean '{near[0]}'?" if near else ""


def _set_path(table, parts, value):
    for part in parts[:-1]:
        table = table.setdefault(part, {})
    table[parts[-1]] = value


def load_gripper(path, raw=None):
    """Parse a gripper spec and every variant its sweep expands to; raise SpecError listing all problems."""
    path = Path(path)
    raw = load_toml(path) if raw is None else raw
    problems = Problems(path)
    family = _family_problems(raw, problems)
    name = raw.get("name")
    if not isinstance(name, str) or not name.strip():
        problems.add("name", f"must be a non-empty text naming the gripper; got {name!r}")
    description = raw.get("description", "")
    if not isinstance(description, str):
        problems.add("description", f"must be a text; got {description!r}")
    if family is None:
        problems.raise_if_any()
    sweep = _sweep_items(raw, family, problems)
    body = {k: v for k, v in raw.items() if k not in _COMMON_GRIPPER_KEYS}
    base = parse(family.Params, body, problems, known=_COMMON_GRIPPER_KEYS)
    # without a sweep the one variant is the base; with one, every variant is checked, even when
    # the base has problems, so all problems are reported at once
    variants = [Variant(str(name), (), base)] if not sweep and base is not None else []
    for combo in itertools.product(*[values for _, values in sweep]) if sweep else ():
        chosen = tuple((key, value) for (key, _), value in zip(sweep, combo))
        table = copy.deepcopy(body)
        for key, value in chosen:
            _set_path(table, key.split("."), value)
        label = ", ".join(f"{k}={v}" for k, v in chosen)
        sub = Problems(path)
        params = parse(family.Params, table, sub)
        for field, message in sub.items:
            if (field, message) not in problems.items:  # the base's own problems are reported once
                problems.add(field, f"{message} (in sweep variant {label})")
        if params is not None:
            variants.append(Variant(f"{name}[{label}]", chosen, params))
    if base is not None and hasattr(family, "check_files"):
        family.check_files(base, path, problems)
    problems.raise_if_any()
    own = next((v.name for v in variants if v.params == base), None)
    return GripperSpec(path, str(name), raw["family"], description, tuple(variants), own)


def load_any(path, raw=None):
    """Load a gripper spec (has `family`) or an object set (has [[object]]); `raw`: the file's
    table when the caller has read it already."""
    raw = load_toml(path) if raw is None else raw
    if "family" in raw:
        return load_gripper(path, raw)
    if "object" in raw or "seed" in raw:
        return load_object_set(path, raw)
    raise SpecError(path, [("", "is neither a gripper spec (needs a 'family' key) nor an object set "
                                "(needs [[object]] tables and a 'seed')")])

