"""Object kinds read from the user's files: a mesh file (OBJ/STL) and a folder of URDF objects.

Files are checked when the set is loaded (exists, stays inside the set's folder, parses, is a
closed solid), so a bad file stops the run before any simulation.
"""

from __future__ import annotations

import functools
import hashlib
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..constants import CONVEX_VOLUME_SHARE, MAX_CONVEX_PARTS
from ..fields import Span, param
from ..massprops import polyhedron
from ..specs import inside
from .model import Common, Part, Shape

__all__ = ["MeshSpec", "mesh_file", "UrdfFolderSpec", "check_mesh", "check_urdf_folder", "urdf_folder_files"]

MESH_SUFFIXES = (".obj", ".stl")


@dataclass(frozen=True, kw_only=True)
class MeshSpec(Common):
    file: str = param("file", "path", doc="OBJ or STL, relative to the object set's folder; units metres")
    scale: Span = param("scale", "span", gt=0, default=Span(1.0, 1.0))


@dataclass(frozen=True, kw_only=True)
class UrdfFolderSpec(Common):
    folder: str = param("folder", "path", doc="folder of *.urdf objects, relative to the object set's folder")

    def check(self):
        yield from super().check()
        if self.mass is not None or self.density is not None:
            yield "mass_g", "must not be given for 'urdf-folder': mass and inertia come from each URDF's <inertial>"


@functools.lru_cache(maxsize=64)
def _load_mesh(path, digest):
    """(vertices, faces, convex parts) of a mesh file; cached on the file's content digest."""
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
        raise ValueError("is not a closed solid (not watertight), so it has no volume")
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


def urdf_folder_files(entry, set_file):
    folder = (Path(set_file).resolve().parent / entry.folder).resolve()
    return sorted(folder.glob("*.urdf"))


def check_urdf_folder(entry, set_file, problems, path):
    folder = inside(set_file, entry.folder, f"{path}.folder", problems, want="folder")
    if folder is None:
        return
    files = urdf_folder_files(entry, set_file)
    if not files:
        problems.add(f"{path}.folder", f"must hold at least one *.urdf file; {entry.folder!r} has none")
    for f in files:
        try:
            read_urdf_object(f)
        except ValueError as exc:
            problems.add(f"{path}.folder", f"file {f.name} {exc}")


def read_urdf_object(file):
    """(mass, com (3,), inertia (3, 3)) of the first link of a URDF object; ValueError if unusable."""
    try:
        root = ET.fromstring(Path(file).read_bytes())
    except ET.ParseError as exc:
        raise ValueError(f"is not valid XML: {exc}") from None
    link = root.find("link")
    if root.tag != "robot" or link is None:
        raise ValueError("must be a URDF with a <robot> holding at least one <link>")
    links = {lk.get("name") for lk in root.findall("link")}
    for joint in root.findall("joint"):  # the engine refuses the whole file over one such joint
        for end in ("parent", "child"):
            named = joint.find(end).get("link") if joint.find(end) is not None else None
            if named not in links:
                raise ValueError(f"has joint {joint.get('name')!r} whose {end} link {named!r} is missing")
    el = link.find("inertial")
    try:
        mass = float(el.find("mass").get("value"))
        origin = el.find("origin")
        xyz = [float(x) for x in (origin.get("xyz", "0 0 0") if origin is not None else "0 0 0").split()]
        rpy = [float(x) for x in (origin.get("rpy", "0 0 0") if origin is not None else "0 0 0").split()]
        i = {k: float(el.find("inertia").get(k, 0)) for k in ("ixx", "ixy", "ixz", "iyy", "iyz", "izz")}
    except (AttributeError, TypeError, ValueError):
        raise ValueError(f"link {link.get('name')!r} needs an <inertial> with <mass> and <inertia>") from None
    inertia = np.array([[i["ixx"], i["ixy"], i["ixz"]], [i["ixy"], i["iyy"], i["iyz"]], [i["ixz"], i["iyz"], i["izz"]]])
    rot = _rpy_matrix(*rpy)  # the file gives the tensor in the inertial frame; we keep the link frame
    inertia = rot @ inertia @ rot.T
    if not (np.isfinite(mass) and mass > 0 and np.all(np.isfinite(inertia)) and np.all(np.linalg.eigvalsh(inertia) > 0)):
        raise ValueError(f"link {link.get('name')!r} must have a finite mass > 0 and a positive-definite inertia")
    for mesh in link.iter("mesh"):
        target = (Path(file).parent / mesh.get("filename", "")).resolve()
        if not target.is_relative_to(Path(file).parent.resolve()) or not target.is_file():
            raise ValueError(f"references mesh {mesh.get('filename')!r}, missing or outside its folder")
    return mass, np.array(xyz), inertia


def _rpy_matrix(roll, pitch, yaw):
    """URDF fixed-axis x-y-z rotation: R = Rz(yaw) Ry(pitch) Rx(roll) (URDF specification)."""
    cr, sr, cp, sp, cy, sy = np.cos(roll), np.sin(roll), np.cos(pitch), np.sin(pitch), np.cos(yaw), np.sin(yaw)
    rx = np.array([[1, 0, 0], [0, cr, -sr], [0, sr, cr]])
    ry = np.array([[cp, 0, sp], [0, 1, 0], [-sp, 0, cp]])
    rz = np.array([[cy, -sy, 0], [sy, cy, 0], [0, 0, 1]])
    return rz @ ry @ rx
