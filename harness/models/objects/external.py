"""Object kinds read from the user's files: a mesh file (OBJ/STL); URDF objects are in urdf_files.py.

Files are checked when the set is loaded (exists, stays inside the set's folder, parses, is a
closed solid), so a bad file stops the run before any simulation.
"""

from __future__ import annotations

import functools
import hashlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ...constants import CONVEX_VOLUME_SHARE, MAX_CONVEX_PARTS
from ..fields import Span, param
from ..massprops import polyhedron
from ..sources import inside
from .model import Common, Part, Shape

__all__ = ["MeshSpec", "mesh_file", "check_mesh", "MESH_SUFFIXES"]

MESH_SUFFIXES = (".obj", ".stl")


@dataclass(frozen=True, kw_only=True)
class MeshSpec(Common):
    file: str = param("file", "path", doc="OBJ or STL, relative to the object set's folder; units metres")
    scale: Span = param("scale", "span", gt=0, default=Span(1.0, 1.0))


@functools.lru_cache(maxsize=64)
def _load_mesh(path, digest, closed=True):
    """(vertices, faces, convex parts) of a mesh file; cached on the file's content digest.

    closed=False (meshes of URDF objects): an open mesh is taken as its convex hull, which is what
    the engine collides with when it loads such a file on a moving body."""
    import trimesh
    try:
        mesh = trimesh.load(path, force="mesh", process=False)
    except Exception as exc:  # the file parsers raise many kinds of errors on damaged files
        raise ValueError(f"is truncated or damaged; the mesh reader says: {exc}") from None
    if not isinstance(mesh, trimesh.Trimesh) or len(mesh.faces) == 0:
        raise ValueError("holds no triangles")
    if not np.all(np.isfinite(mesh.vertices)):
        raise ValueError("has vertices that are not finite numbers")
    mesh.process()  # merge duplicate vertices only after the finiteness check (NaN would be dropped)
    if not mesh.is_watertight:
        if closed:
            raise ValueError("is not a closed solid (not watertight), so it has no volume")
        hull = _hull(mesh.vertices)
        return np.asarray(hull.vertices), np.asarray(hull.faces), ((np.asarray(hull.vertices), np.asarray(hull.faces)),)
    mesh.fix_normals()
    if mesh.volume <= 0:
        raise ValueError("encloses no volume")
    if mesh.volume >= CONVEX_VOLUME_SHARE * mesh.convex_hull.volume:
        hull = mesh.convex_hull
        parts = ((np.asarray(hull.vertices), np.asarray(hull.faces)),)
    else:
        pieces = mesh.convex_decomposition(maxConvexHulls=MAX_CONVEX_PARTS)
        pieces = pieces if isinstance(pieces, list) else [pieces]
        parts = tuple((np.asarray(p.vertices), np.asarray(p.faces)) for p in pieces)
    return np.asarray(mesh.vertices), np.asarray(mesh.faces), parts


def _hull(vertices):
    import trimesh
    try:
        hull = trimesh.convex.convex_hull(np.asarray(vertices, dtype=float))
    except Exception:  # qhull refuses flat or degenerate point sets
        raise ValueError("is flat or degenerate: its convex hull encloses no volume") from None
    if not hull.is_watertight or hull.volume <= 0:
        raise ValueError("is flat or degenerate: its convex hull encloses no volume")
    return hull


def check_mesh(entry, set_file, problems, path):
    target = inside(set_file, entry.file, f"{path}.file", problems)
    if target is None:
        return
    if target.suffix.lower() not in MESH_SUFFIXES:
        problems.add(f"{path}.file", f"must be an OBJ or STL file; got {entry.file!r}")
        return
    try:
        _load_mesh(str(target), hashlib.sha256(target.read_bytes()).hexdigest())
    except Exception as exc:  # trimesh raises many kinds on junk input; all mean "unusable mesh"
        problems.add(f"{path}.file", f"must be a readable closed mesh; {entry.file!r} {exc}")


def mesh_file(d, entry, rng, set_file):
    """Mass properties from the closed mesh itself; collision from its convex parts."""
    target = (Path(set_file).resolve().parent / entry.file).resolve()
    vertices, faces, parts = _load_mesh(str(target), hashlib.sha256(target.read_bytes()).hexdigest())
    s = d["scale"]
    props = polyhedron(vertices * s, faces)
    mesh_parts = tuple(Part("mesh", vertices=(v * s) - props.com, faces=f) for v, f in parts)
    props.com = np.zeros(3)  # parts are re-centred on the centre of mass
    extents = tuple((vertices.max(axis=0) - vertices.min(axis=0)) * s)
    return Shape(mesh_parts, props, extents)


