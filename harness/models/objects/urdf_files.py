"""Object kinds read from URDF files made elsewhere: one file (`urdf`) or a folder of them (`urdf-folder`).

A URDF object here is one rigid body: its links must be joined by fixed joints. It is read into
the same data a generated kind gives (convex collision parts in the base link's frame, their
mass properties, bounding-box extents) and written back as a one-link URDF of our own, so every
quantity the routines and metrics use (extents, grip height, torque scale, contacts on link -1)
comes from the geometry the engine collides with. Mesh collision pieces become the convex parts
the engine would collide with (a closed concave mesh is decomposed, as for the `mesh` kind; an
open one is taken as its hull); primitives stay primitives.

Mass properties follow the entry's `inertia` policy, which `show` and the run record name:
- "file": the links' <inertial> elements, combined about the common centre of mass (parallel-axis
  theorem); missing, zero, non-positive-definite or implausible values are an error naming the
  file and the link, and suggesting the other policy.
- "geometry": uniform density over the collision geometry, with the file's total mass, or the
  entry's `mass_g` or `density_kg_m3`.

Material: the files' own pybullet-style <contact> values (lateral_friction, restitution, stiffness,
damping) are used unless the entry gives `friction`, `restitution` or `stiffness_n_m` /
`damping_n_s_m`; otherwise the harness's defaults. Rolling and spinning friction are not read
(every object in the harness has none).

Every check runs when the set is loaded, so a bad file stops the run before any simulation.
"""

from __future__ import annotations

import functools
import hashlib
import math
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from pathlib import Path, PurePosixPath

import numpy as np

from ..fields import Span, param
from ..massprops import MassProps, box_inertia, combine, cylinder_inertia, inertia_problem, polyhedron, sphere_inertia
from ..sources import inside
from .external import MESH_SUFFIXES, _load_mesh
from .model import Common, Part, Shape, instance

__all__ = ["UrdfFolderSpec", "UrdfFileSpec", "check_urdf_folder", "check_urdf_file", "urdf_folder_files",
           "read_urdf_object", "urdf_instances", "INERTIA_POLICIES", "DEFAULT_MATERIAL"]

INERTIA_POLICIES = ("file", "geometry")
GEOMETRY_HINT = ('; set inertia = "geometry" on this object set entry to compute mass properties from the '
                 "collision geometry (with the file's mass, or mass_g / density_kg_m3)")
# Material of an object whose file and entry say nothing (the same values Common defaults to).
DEFAULT_MATERIAL = {"friction": 0.8, "restitution": 0.1}
_CONTACT_TAGS = {"lateral_friction": "friction", "restitution": "restitution", "stiffness": "stiffness",
                 "damping": "damping"}


@dataclass(frozen=True, kw_only=True)
class UrdfSpec(Common):
    """Keys shared by the two URDF kinds."""

    inertia: str = param("inertia", "text", choices=INERTIA_POLICIES, default="file",
                         doc="'file': each URDF's <inertial>; 'geometry': uniform density over the collision geometry")
    friction: Span | None = param("friction", "span", gt=0, le=10, default=None,
                                  doc="overrides the files' <contact><lateral_friction>")
    restitution: Span | None = param("restitution", "span", ge=0, le=1, default=None,
                                     doc="overrides the files' <contact><restitution>")

    def check(self):
        yield from super().check()
        if self.inertia == "file" and (self.mass is not None or self.density is not None):
            key = "mass_g" if self.mass is not None else "density_kg_m3"
            yield key, (f"must not be given for '{self.kind}' with inertia = \"file\": mass and inertia come from "
                        "each URDF's <inertial>; with inertia = \"geometry\" they come from the collision geometry "
                        "and this value")
        if self.mass is not None and self.density is not None:
            yield "mass_g", "and 'density_kg_m3' must not both be given; give one of them"


@dataclass(frozen=True, kw_only=True)
class UrdfFolderSpec(UrdfSpec):
    folder: str = param("folder", "path", doc="folder of URDF objects, relative to the object set's folder")
    pattern: str = param("pattern", "text", default="**/*.urdf",
                         doc="glob inside the folder: '*.urdf' flat, '*/*.urdf' one folder per object, "
                             "'**/*.urdf' (default) any depth")

    def check(self):
        yield from super().check()
        parts = PurePosixPath(self.pattern).parts
        if PurePosixPath(self.pattern).is_absolute() or ".." in parts or not self.pattern.endswith(".urdf"):
            yield "pattern", ("must be a glob inside the folder ending in .urdf, without '..', e.g. '*.urdf', "
                              f"'*/*.urdf' or '**/*.urdf'; got {self.pattern!r}")


@dataclass(frozen=True, kw_only=True)
class UrdfFileSpec(UrdfSpec):
    file: str = param("file", "path", doc="one URDF object, relative to the object set's folder")


# --- finding files ----------------------------------------------------------------------------

def urdf_folder_files(entry, set_file):
    """The entry's URDF files, sorted, each inside the set's folder (symbolic links included)."""
    base = Path(set_file).resolve().parent
    folder = (base / entry.folder).resolve()
    found = (f for f in folder.glob(entry.pattern) if f.is_file() and f.suffix.lower() == ".urdf")
    return sorted(f for f in found if f.resolve().is_relative_to(base))


def _names(files, folder):
    """Instance names: the file's stem, or its path inside the folder when stems repeat."""
    stems = [f.stem for f in files]
    return [f.stem if stems.count(f.stem) == 1 else "-".join(f.relative_to(folder).with_suffix("").parts)
            for f in files]


def check_urdf_folder(entry, set_file, problems, path):
    folder = inside(set_file, entry.folder, f"{path}.folder", problems, want="folder")
    if folder is None:
        return
    files = urdf_folder_files(entry, set_file)
    if not files:
        problems.add(f"{path}.folder", f"must hold at least one URDF file matching pattern {entry.pattern!r}; "
                                       f"{entry.folder!r} has none")
    for f in files:
        _check_one(entry, f, set_file, problems, f"{path}.folder", f"file {f.relative_to(folder)}")


def check_urdf_file(entry, set_file, problems, path):
    target = inside(set_file, entry.file, f"{path}.file", problems)
    if target is None:
        return
    if target.suffix.lower() != ".urdf":
        problems.add(f"{path}.file", f"must be a .urdf file; got {entry.file!r}")
        return
    _check_one(entry, target, set_file, problems, f"{path}.file", f"file {entry.file}")


def _check_one(entry, file, set_file, problems, field, label):
    try:
        obj = read_urdf_object(file, Path(set_file).resolve().parent)
        _mass_properties(entry, obj, None)
    except ValueError as exc:
        problems.add(field, f"{label}: {exc}")


# --- reading one file ---------------------------------------------------------------------------

@dataclass(frozen=True)
class UrdfObject:
    """A URDF object read and checked: geometry in the base link's frame and what the file says."""

    shape: Shape  # convex collision parts, unit-density mass properties, extents (m)
    box: tuple  # (low (3,), high (3,)) of the collision geometry, m
    file_mass: float  # sum of the links' <mass>, kg (0 when none is given)
    file_props: tuple | None  # (mass kg, com (3,) m, inertia (3, 3) kg m^2) combined from <inertial>
    file_problem: str  # why file_props is None ("" when it is not)
    material: dict  # values the file's <contact> gives: friction, restitution, stiffness, damping


def read_urdf_object(file, root):
    """Read a URDF object whose meshes must lie inside `root` (the object set's folder); ValueError
    with a message naming the link and element when it cannot be used."""
    file = Path(file).resolve()
    data = file.read_bytes()
    return _read(str(file), str(Path(root).resolve()), hashlib.sha256(data).hexdigest(), data)


@functools.lru_cache(maxsize=256)
def _read(file, root, digest, data):
    try:
        robot = ET.fromstring(data)
    except ET.ParseError as exc:
        raise ValueError(f"is not valid XML: {exc}") from None
    links = {lk.get("name"): lk for lk in robot.findall("link")}
    if robot.tag != "robot" or not links:
        raise ValueError("must be a URDF with a <robot> holding at least one <link>")
    poses = _link_poses(robot, links)
    parts, placed, low, high = [], [], np.full(3, np.inf), np.full(3, -np.inf)
    for name, link in links.items():
        for k, collision in enumerate(link.findall("collision")):
            what = f"link {name!r} <collision> {k + 1}"
            offset, rot = _compose(poses[name], _origin(collision, what))
            for part, props, corners in _geometry(collision, what, offset, rot, Path(file), Path(root)):
                parts.append(part)
                placed.append(props)
                low, high = np.minimum(low, corners.min(axis=0)), np.maximum(high, corners.max(axis=0))
    if not parts:
        raise ValueError("has no <collision> geometry, so nothing in it can be touched or grasped")
    props = combine(placed)
    shape = Shape(tuple(parts), props, tuple(float(x) for x in high - low))
    if not (np.isfinite(props.volume) and props.volume > 0 and all(e > 0 for e in shape.extents)):
        raise ValueError(f"has collision geometry of no volume (extents {_mm(high - low)} mm)")
    file_mass, file_props, problem = _file_inertia(links, poses, (low, high))
    return UrdfObject(shape, (low, high), file_mass, file_props, problem, _material(links))


def _link_poses(robot, links):
    """{link: (offset (3,), rotation (3, 3))} in the base link's frame; only fixed joints allowed."""
    parent_of = {}
    for joint in robot.findall("joint"):  # a dangling joint first: the engine refuses such a file outright
        for end in ("parent", "child"):
            named = joint.find(end).get("link") if joint.find(end) is not None else None
            if named not in links:
                raise ValueError(f"has joint {joint.get('name')!r} whose {end} link {named!r} is missing")
    for joint in robot.findall("joint"):
        name = joint.get("name")
        ends = {end: joint.find(end).get("link") for end in ("parent", "child")}
        if joint.get("type") != "fixed":
            raise ValueError(f"joint {name!r} is of type {joint.get('type')!r}; an object is one rigid body, so "
                             "its links may only be joined by fixed joints")
        if ends["child"] in parent_of:
            raise ValueError(f"link {ends['child']!r} is the child of two joints")
        parent_of[ends["child"]] = (ends["parent"], _origin(joint, f"joint {name!r}"))
    roots = [n for n in links if n not in parent_of]
    if len(roots) != 1:
        raise ValueError(f"links must form one tree joined by fixed joints; {len(roots)} links have no parent"
                         + (f" ({', '.join(map(repr, roots))})" if roots else " (the joints form a loop)"))
    poses = {roots[0]: (np.zeros(3), np.eye(3))}

    def pose(name, depth=0):
        if name not in poses:
            if depth > len(links):
                raise ValueError(f"the joints above link {name!r} form a loop")
            parent, origin = parent_of[name]
            poses[name] = _compose(pose(parent, depth + 1), origin)
        return poses[name]
    for name in links:
        pose(name)
    return poses


def _compose(outer, inner):
    (p, r), (q, s) = outer, inner
    return p + r @ q, r @ s


def _numbers(text, n, what, positive=False):
    """`n` finite numbers from an attribute's text; ValueError naming `what` otherwise."""
    try:
        values = np.array([float(x) for x in str(text).split()])
    except ValueError:
        values = np.array([])
    if len(values) != n or not np.all(np.isfinite(values)) or (positive and not np.all(values > 0)):
        allowed = f"{n} finite number(s)" + (" > 0" if positive else "")
        raise ValueError(f"{what} must be {allowed}; got {text!r}")
    return values


def _origin(element, what):
    """(xyz (3,), rotation (3, 3)) of an element's <origin>; URDF's fixed-axis roll-pitch-yaw."""
    origin = element.find("origin")
    if origin is None:
        return np.zeros(3), np.eye(3)
    xyz = _numbers(origin.get("xyz", "0 0 0"), 3, f"{what} <origin xyz>")
    rpy = _numbers(origin.get("rpy", "0 0 0"), 3, f"{what} <origin rpy>")
    return xyz, _rpy_matrix(*rpy)


def _rpy_matrix(roll, pitch, yaw):
    """URDF fixed-axis x-y-z rotation: R = Rz(yaw) Ry(pitch) Rx(roll) (URDF specification)."""
    cr, sr, cp, sp, cy, sy = np.cos(roll), np.sin(roll), np.cos(pitch), np.sin(pitch), np.cos(yaw), np.sin(yaw)
    rx = np.array([[1, 0, 0], [0, cr, -sr], [0, sr, cr]])
    ry = np.array([[cp, 0, sp], [0, 1, 0], [-sp, 0, cp]])
    rz = np.array([[cy, -sy, 0], [sy, cy, 0], [0, 0, 1]])
    return rz @ ry @ rx


def _rpy(rot):
    """The URDF roll-pitch-yaw of a rotation matrix (inverse of _rpy_matrix)."""
    import warnings

    from scipy.spatial.transform import Rotation
    with warnings.catch_warnings():  # at pitch +-90 deg scipy warns and folds yaw into roll: the same rotation
        warnings.simplefilter("ignore", UserWarning)
        return tuple(float(a) for a in Rotation.from_matrix(rot).as_euler("xyz"))


def _geometry(collision, what, offset, rot, file, root):
    """[(Part, (MassProps, offset, rotation) for combine, corners (n, 3))] of one <collision>."""
    geometry = collision.find("geometry")
    shape = geometry[0] if geometry is not None and len(geometry) else None
    tag = shape.tag if shape is not None else None
    rpy = _rpy(rot)
    if tag == "box":
        dims = _numbers(shape.get("size"), 3, f"{what} <box size>", positive=True)
        v = float(np.prod(dims))
        corners = np.array([[x, y, z] for x in (-1, 1) for y in (-1, 1) for z in (-1, 1)]) * dims / 2 @ rot.T + offset
        return [(Part("box", tuple(dims), tuple(offset), rpy), (MassProps(v, np.zeros(3), box_inertia(v, *dims)),
                                                                offset, rot), corners)]
    if tag == "cylinder":
        r = _numbers(shape.get("radius"), 1, f"{what} <cylinder radius>", positive=True)[0]
        h = _numbers(shape.get("length"), 1, f"{what} <cylinder length>", positive=True)[0]
        v = math.pi * r * r * h
        # exact bounding box of a turned cylinder: along world axis i, |a_i| h/2 + r sqrt(1 - a_i^2)
        axis = rot[:, 2]
        half = np.abs(axis) * h / 2 + r * np.sqrt(np.clip(1 - axis * axis, 0, 1))
        return [(Part("cylinder", (r, h), tuple(offset), rpy),
                 (MassProps(v, np.zeros(3), cylinder_inertia(v, r, h)), offset, rot), np.array([offset - half, offset + half]))]
    if tag == "sphere":
        r = _numbers(shape.get("radius"), 1, f"{what} <sphere radius>", positive=True)[0]
        v = 4.0 / 3.0 * math.pi * r ** 3
        return [(Part("sphere", (r,), tuple(offset), (0.0, 0.0, 0.0)),
                 (MassProps(v, np.zeros(3), sphere_inertia(v, r)), offset, np.eye(3)), np.array([offset - r, offset + r]))]
    if tag == "mesh":
        target = resolve_mesh(shape.get("filename", ""), file, root, what)
        scale = _numbers(shape.get("scale", "1 1 1"), 3, f"{what} <mesh scale>", positive=True)
        try:
            _, _, convex = _load_mesh(str(target), hashlib.sha256(target.read_bytes()).hexdigest(), closed=False)
        except ValueError as exc:
            raise ValueError(f"{what} mesh {shape.get('filename')!r} {exc}") from None
        out = []
        for vertices, faces in convex:
            v = (vertices * scale) @ rot.T + offset
            out.append((Part("mesh", vertices=v, faces=faces), (polyhedron(v, faces), np.zeros(3), np.eye(3)), v))
        return out
    raise ValueError(f"{what} has {f'<{tag}>' if tag else 'no'} geometry; allowed: box, cylinder, sphere, "
                     "mesh (OBJ or STL)")


def resolve_mesh(name, file, root, what):
    """The mesh file a <mesh filename> names: relative to the URDF's folder, or package://PKG/REST with
    PKG a folder (the URDF's own or one of its parents, or one inside them) within `root`. Absolute
    paths and anything leaving `root` are refused."""
    root = root.resolve()
    where = f"{what} mesh {name!r}"
    if name.startswith("package://"):
        package, _, rest = name[len("package://"):].partition("/")
        candidates = []
        for folder in [file.parent, *file.parent.parents]:
            if not folder.is_relative_to(root):
                break
            candidates += [folder / rest] if folder.name == package else []
            candidates.append(folder / package / rest)
        found = [c.resolve() for c in candidates if c.resolve().is_relative_to(root) and c.is_file()]
        if not found:
            raise ValueError(f"{where}: no folder {package!r} holding {rest!r} was found inside {root} (package:// "
                             "paths are looked up in the URDF's folder and its parents up to the object set's folder)")
        target = found[0]
    elif "://" in name or Path(name).is_absolute():
        raise ValueError(f"{where} must be relative to the URDF's folder or a package:// path; absolute paths "
                         "and URLs are refused so a set stays self-contained")
    else:
        target = (file.parent / name).resolve()
        if not target.is_relative_to(root):
            raise ValueError(f"{where} leaves the object set's folder {root}")
        if not target.is_file():
            raise ValueError(f"{where} is missing (looked for {target})")
    if target.suffix.lower() not in MESH_SUFFIXES:
        raise ValueError(f"{where} must be an OBJ or STL file")
    return target


def _inertial(link, name):
    """(mass or None, com (3,), inertia (3, 3) or None) of a link's <inertial>, or None if it has none."""
    el = link.find("inertial")
    if el is None:
        return None
    what = f"link {name!r} <inertial>"
    mass_el, tensor_el = el.find("mass"), el.find("inertia")
    mass = _numbers(mass_el.get("value"), 1, f"{what} <mass value>")[0] if mass_el is not None else None
    xyz, rot = _origin(el, what)
    tensor = None
    if tensor_el is not None:
        keys = ("ixx", "ixy", "ixz", "iyy", "iyz", "izz")
        missing = [k for k in ("ixx", "iyy", "izz") if tensor_el.get(k) is None]
        if not missing:
            i = {k: _numbers(tensor_el.get(k, "0"), 1, f"{what} <inertia {k}>")[0] for k in keys}
            tensor = np.array([[i["ixx"], i["ixy"], i["ixz"]], [i["ixy"], i["iyy"], i["iyz"]],
                               [i["ixz"], i["iyz"], i["izz"]]])
            tensor = rot @ tensor @ rot.T  # the file states it in the inertial frame; we keep the link's
    return mass, xyz, tensor


def _file_inertia(links, poses, box):
    """(total mass, (mass, com, inertia) or None, problem) from the links' <inertial> elements."""
    placed, total, problem = [], 0.0, ""
    for name, link in links.items():
        has_geometry = link.find("collision") is not None
        try:
            got = _inertial(link, name)
        except ValueError as exc:  # unreadable numbers: a problem of the file's inertia only
            problem = problem or str(exc)
            continue
        if got is None:
            if has_geometry and not problem:
                problem = f"link {name!r} has collision geometry but no <inertial>"
            continue
        mass, com, tensor = got
        total += mass if mass is not None and mass > 0 else 0.0
        why = ("has no <mass>" if mass is None else "has no <inertia> with ixx, iyy and izz" if tensor is None
               else inertia_problem(mass, tensor))
        if why:
            if has_geometry or (mass is not None and mass != 0):
                problem = problem or f"link {name!r} <inertial>" + (f" {why}" if why.startswith("has") else f": {why}")
            continue  # else a massless frame link (no geometry, mass 0): it carries nothing
        offset, rot = poses[name]
        placed.append((name, (MassProps(mass, com, tensor), offset, rot)))  # "volume" is the weight: mass
    if problem:
        return total, None, problem
    if not placed:
        return total, None, "no link has an <inertial>"
    whole = combine([p for _, p in placed])
    why = inertia_problem(whole.volume, whole.inertia, box, whole.com)
    if why:
        where = f"link {placed[0][0]!r} <inertial>" if len(placed) == 1 else "the links' <inertial> combined"
        return total, None, f"{where}: {why}"
    return total, (whole.volume, whole.com, whole.inertia), ""


def _material(links):
    """The file's <contact> values; several links must agree (one object has one material)."""
    found = {}
    for name, link in links.items():
        contact = link.find("contact")
        if contact is None:
            continue
        for tag, key in _CONTACT_TAGS.items():
            el = contact.find(tag)
            if el is None:
                continue
            value = _numbers(el.get("value"), 1, f"link {name!r} <contact><{tag} value>")[0]
            allowed = {"friction": (0, 10, False), "restitution": (0, 1, True), "stiffness": (0, math.inf, False),
                       "damping": (0, math.inf, True)}[key]
            low, high, closed = allowed
            if not ((value >= low if closed else value > low) and value <= high):
                raise ValueError(f"link {name!r} <contact><{tag} value> must be {'>=' if closed else '>'} {low:g}"
                                 + (f" and <= {high:g}" if math.isfinite(high) else "") + f"; got {value:g}")
            if key in found and found[key][1] != value:
                raise ValueError(f"links {found[key][0]!r} and {name!r} give different <contact><{tag}> values "
                                 f"({found[key][1]:g}, {value:g}); one object has one material here: set "
                                 f"'{'stiffness_n_m' if key == 'stiffness' else 'damping_n_s_m' if key == 'damping' else key}'"
                                 " on the object set entry")
            found[key] = (name, value)
    material = {k: v for k, (_, v) in found.items()}
    if ("stiffness" in material) != ("damping" in material):
        raise ValueError("<contact> must give stiffness and damping together (the engine needs both)")
    return material


# --- instances ----------------------------------------------------------------------------------

def _mass_properties(entry, obj: UrdfObject, rng):
    """(mass kg, com (3,) m, inertia (3, 3) kg m^2, source) under the entry's inertia policy; with
    rng None only checks (draws nothing). ValueError naming what is missing."""
    if entry.inertia == "file":
        if obj.file_props is None:
            raise ValueError(f"{obj.file_problem}{GEOMETRY_HINT}")
        return (*obj.file_props, "file")
    props = obj.shape.props
    if entry.density is not None:
        density = entry.density.draw(rng) if rng is not None else entry.density.lo
        mass, source = density * props.volume, "geometry, density from the set"
    elif entry.mass is not None:
        mass, source = entry.mass.draw(rng) if rng is not None else entry.mass.lo, "geometry, mass from the set"
    elif obj.file_mass > 0:
        mass, source = obj.file_mass, "geometry, mass from the file"
    else:
        raise ValueError("gives no mass > 0 in any <inertial>; with inertia = \"geometry\" give mass_g or "
                         "density_kg_m3 on the object set entry")
    return mass, props.com, props.inertia * (mass / props.volume), source


def _material_of(entry, obj, rng):
    """Friction, restitution and contact compliance, each from the entry, else the file, else the default;
    and where each came from."""
    out, sources = {}, {}
    for key in ("friction", "restitution"):
        span = getattr(entry, key)
        if span is not None:
            out[key], sources[key] = span.draw(rng), "set"
        elif key in obj.material:
            out[key], sources[key] = obj.material[key], "file"
        else:
            out[key], sources[key] = DEFAULT_MATERIAL[key], "default"
    if entry.stiffness is not None:
        out["stiffness"], out["damping"], sources["contact"] = entry.stiffness.draw(rng), entry.damping.draw(rng), "set"
    elif "stiffness" in obj.material:
        out["stiffness"], out["damping"], sources["contact"] = obj.material["stiffness"], obj.material["damping"], "file"
    else:
        out["stiffness"], out["damping"], sources["contact"] = None, None, "rigid"
    return out, sources


def urdf_instances(object_set, entry):
    """The instances of a `urdf` or `urdf-folder` entry (pure: reads files, writes none)."""
    from ...seeds import rng_for
    set_file = Path(object_set.file)
    root = set_file.resolve().parent
    if entry.kind == "urdf":
        files, names = [(root / entry.file).resolve()], [entry.name]
    else:
        files = urdf_folder_files(entry, set_file)
        names = _names(files, (root / entry.folder).resolve())
    out = []
    for file, stem in zip(files, names):
        obj = read_urdf_object(file, root)
        for i in range(entry.count):
            name = f"{stem}-{i}" if entry.count > 1 else stem
            rng = rng_for(object_set.seed, entry.name, str(file.relative_to(root)), i)  # nested names repeat
            mass, com, inertia, source = _mass_properties(entry, obj, rng)
            material, sources = _material_of(entry, obj, rng)
            out.append(instance(entry, object_set.name, name, obj.shape, rng, {}, mass_props=(mass, com, inertia),
                                material=material, sources={"inertia": source, **sources},
                                source=str(file.relative_to(root))))
    return out


def _mm(values):
    return " x ".join(f"{v * 1e3:.4g}" for v in values)
