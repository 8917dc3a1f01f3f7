"""Spec files as sources: TOML text, paths kept inside a spec's folder, normalised forms and content hashes.

Gripper families and object kinds read files through these, so they need nothing from `specs`
(which imports the families' and kinds' registries)."""

from __future__ import annotations

import hashlib
import json
import tomllib
from dataclasses import fields, is_dataclass
from pathlib import Path

from ..errors import SpecError

__all__ = ["load_toml", "inside", "normalised", "spec_hash"]


def load_toml(path):
    """Read a TOML file; a missing or unreadable file or a syntax error is one SpecError."""
    path = Path(path)
    if not path.is_file():
        raise SpecError(path, [("", "file not found" if not path.exists() else "is not a regular file")])
    try:
        with path.open("rb") as fh:
            return tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(path, [("", f"is not valid TOML: {exc}")]) from None
    except (UnicodeDecodeError, OSError) as exc:
        raise SpecError(path, [("", f"cannot be read as TOML text: {exc}")]) from None


def inside(spec_file, relative, field, problems, want="file", folder="the spec's folder"):
    """Resolve `relative` against the spec's folder; it must stay inside that folder and exist.
    `folder` names that folder in the error (a campaign's is its root)."""
    base = Path(spec_file).resolve().parent
    target = (base / relative).resolve()
    if not target.is_relative_to(base):
        problems.add(field, f"must name a path inside {folder} {base}; got {relative!r}, which leaves it")
        return None
    exists = target.is_dir() if want == "folder" else target.is_file()
    if not exists:
        problems.add(field, f"must name an existing {want} relative to {base}; got {relative!r} (not found)")
        return None
    return target


def normalised(obj):
    """A JSON-ready, order-stable form of a parsed spec (SI values), used for hashing and records."""
    if is_dataclass(obj):
        return {f.name: normalised(getattr(obj, f.name)) for f in fields(obj)}
    if isinstance(obj, (tuple, list)):
        return [normalised(x) for x in obj]
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, dict):
        return {str(k): normalised(v) for k, v in sorted(obj.items())}
    return obj


def spec_hash(*parts):
    """First 12 hex digits of SHA-256 over the normalised parts and the tool version."""
    from .. import __version__
    blob = json.dumps([__version__, *[normalised(p) for p in parts]], sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(blob.encode()).hexdigest()[:12]
