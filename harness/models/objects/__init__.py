"""Object sets: a TOML file of object kinds with parameter ranges, counts and a seed.

Each kind is a spec class plus a pure shape function (see kinds.py); adding a kind is adding
one entry to KINDS (or to FILE_KINDS for kinds that read user files).
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, fields
from pathlib import Path

from ...errors import SpecError
from ..fields import Problems, Span, parse
from ...seeds import rng_for
from .external import MeshSpec, check_mesh, mesh_file
from .kinds import KINDS
from .model import Common, ObjectInstance, instance
from .urdf_files import UrdfFileSpec, UrdfFolderSpec, check_urdf_file, check_urdf_folder, urdf_instances

__all__ = ["ObjectSet", "load_object_set", "generate", "ALL_KINDS", "ObjectInstance"]

# kinds whose entries read files: spec class, file check, shape function (None: instances are the files)
FILE_KINDS = {
    "mesh": (MeshSpec, check_mesh, mesh_file),
    "urdf": (UrdfFileSpec, check_urdf_file, None),
    "urdf-folder": (UrdfFolderSpec, check_urdf_folder, None),
}
ALL_KINDS = sorted([*KINDS, *FILE_KINDS])
_TOP_KEYS = ("name", "seed", "description", "object")


@dataclass(frozen=True)
class ObjectSet:
    file: Path
    name: str
    seed: int
    description: str
    entries: tuple[Common, ...]


def _spec_class(kind):
    return KINDS[kind][0] if kind in KINDS else FILE_KINDS[kind][0]


def load_object_set(path, raw):
    """Validate an object set (all entries, all files) and return it; SpecError lists every problem."""
    path = Path(path)
    problems = Problems(path)
    for key in raw:
        if key not in _TOP_KEYS:
            near = difflib.get_close_matches(key, _TOP_KEYS, n=1, cutoff=0.6)
            problems.add(key, "is not a known key" + (f"; did you mean '{near[0]}'?" if near else
                                                      f"; known keys: {', '.join(_TOP_KEYS)}"))
    name, seed = raw.get("name"), raw.get("seed")
    if not isinstance(name, str) or not name.strip():
        problems.add("name", f"must be a non-empty text naming the set; got {name!r}")
    if seed is None:
        problems.add("seed", "is missing; it must be a whole number >= 0")
    elif not isinstance(seed, int) or isinstance(seed, bool) or seed < 0:
        problems.add("seed", f"must be a whole number >= 0; got {seed!r}")
    items = raw.get("object")
    if not isinstance(items, list) or not items:
        problems.add("object", "must list at least one object kind as [[object]] tables; the set is empty")
        items = []
    entries, names = [], set()
    for i, item in enumerate(items):
        at = f"object[{i}]"
        if not isinstance(item, dict):
            problems.add(at, f"must be a table ([[object]] with name, kind, ...); got {item!r}")
            continue
        name_given = item.get("name")
        if isinstance(name_given, str):
            if name_given in names:
                problems.add(f"{at}.name", f"must be unique within the set; {name_given!r} is used twice")
            names.add(name_given)
        kind = item.get("kind")
        if not isinstance(kind, str) or (kind not in KINDS and kind not in FILE_KINDS):
            near = difflib.get_close_matches(str(kind), ALL_KINDS, n=1, cutoff=0.5)
            problems.add(f"{at}.kind", f"must be one of {', '.join(ALL_KINDS)}; got {kind!r}"
                         + (f"; did you mean '{near[0]}'?" if near else ""))
            continue
        entry = parse(_spec_class(kind), item, problems, at)
        if entry is None:
            continue
        if kind in FILE_KINDS:
            FILE_KINDS[kind][1](entry, path, problems, at)
        entries.append(entry)
    problems.raise_if_any()
    return ObjectSet(path, name, seed, raw.get("description", ""), tuple(entries))


def _draws(entry, rng):
    """Draw the kind's own geometry spans, in declaration order (SI values)."""
    own = [f for f in fields(entry) if f.name not in {g.name for g in fields(Common)}]
    return {f.name: getattr(entry, f.name).draw(rng) for f in own if isinstance(getattr(entry, f.name), Span)}


def generate(object_set: ObjectSet):
    """Every instance of the set, in file order (pure: no files written). SpecError if two instances
    share a name (a folder's file stems can repeat another entry's names)."""
    out = []
    for entry in object_set.entries:
        if FILE_KINDS.get(entry.kind, (None, None, True))[2] is None:
            out += urdf_instances(object_set, entry)
            continue
        for i in range(entry.count):
            name = f"{entry.name}-{i}" if entry.count > 1 else entry.name
            rng = rng_for(object_set.seed, entry.name, i)
            draws = _draws(entry, rng)
            if entry.kind in KINDS:
                shape = KINDS[entry.kind][1](draws, entry, rng)
            else:
                shape = FILE_KINDS[entry.kind][2](draws, entry, rng, object_set.file)
            out.append(instance(entry, object_set.name, name, shape, rng, draws))
    seen = {}
    for inst in out:
        if inst.name in seen:
            raise SpecError(object_set.file, [(f"object {inst.entry!r}", f"gives an instance named {inst.name!r}, "
                                               f"a name entry {seen[inst.name]!r} gives too; instance names must be "
                                               "unique within a set (rename the entry or the file)")])
        seen[inst.name] = inst.entry
    return out
