"""`urdf`: bring your own URDF plus a role map naming the joints that close, pivot and roll.

Closing joints must close for positive motion; roll joints must draw in for positive speed.
Mesh files the URDF references must lie inside the spec's folder; they are carried along
with the model so a run folder is self-contained.
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from pathlib import Path

from ..build import content_key
from ..fields import param, section
from ..massprops import inertia_problem
from ..sources import inside
from .model import GripperModel, Surface
from ..sources import spec_hash

__all__ = ["Params", "build", "check_files"]

_ALLOWED_TYPES = {"close": ("revolute", "prismatic"), "pivot": ("revolute",), "roll": ("continuous", "revolute")}


@dataclass(frozen=True, kw_only=True)
class Roles:
    close: tuple[str, ...] = param("close", "texts", length=(1, 16))
    pivot: tuple[str, ...] = param("pivot", "texts", default=(), length=(0, 16))
    roll: tuple[str, ...] = param("roll", "texts", default=(), length=(0, 16))
    roller_radius: float | None = param("roller_radius_mm", unit="mm", gt=0, default=None)

    def check(self):
        if self.roll and self.roller_radius is None:
            yield "roller_radius_mm", "is missing; it is needed when 'roll' names joints"
        names = [*self.close, *self.pivot, *self.roll]
        for name in sorted({n for n in names if names.count(n) > 1}):
            yield "", f"names joint {name!r} in more than one role"


@dataclass(frozen=True, kw_only=True)
class Params:
    urdf: str = param("urdf", "path", doc="the URDF file, relative to the spec's folder")
    friction: float = param("friction", gt=0, le=10, default=1.0, doc="Coulomb mu given to every link")
    roles: Roles = section("roles")


def _read(path):
    return ET.fromstring(Path(path).read_bytes())


def check_files(params, spec_file, problems):
    """The URDF exists inside the folder, parses, and names every role joint with a fitting type."""
    target = inside(spec_file, params.urdf, "urdf", problems)
    if target is None:
        return
    try:
        root = _read(target)
    except (ET.ParseError, OSError) as exc:
        problems.add("urdf", f"must be a readable URDF (XML); {target} gives: {exc}")
        return
    if root.tag != "robot":
        problems.add("urdf", f"must be a URDF whose root element is <robot>; got <{root.tag}>")
        return
    links = {lk.get("name") for lk in root.findall("link")}
    joints = {j.get("name"): j for j in root.findall("joint")}
    for j in joints.values():
        for end in ("parent", "child"):
            el = j.find(end)
            if el is None or el.get("link") not in links:
                problems.add("urdf", f"joint {j.get('name')!r} of {target.name} names a missing {end} link")
    for lk in root.findall("link"):
        _check_inertial(lk, target, problems)
        for mesh in lk.iter("mesh"):
            inside(target, mesh.get("filename", ""), f"urdf (mesh of link {lk.get('name')!r})", problems)
    for role, allowed in _ALLOWED_TYPES.items():
        for name in getattr(params.roles, role):
            if name not in joints:
                problems.add(f"roles.{role}", f"names joint {name!r}, which {target.name} lacks; "
                                              f"its movable joints are {sorted(n for n, j in joints.items() if j.get('type') != 'fixed')}")
            elif joints[name].get("type") not in allowed:
                problems.add(f"roles.{role}", f"joint {name!r} must be of type {' or '.join(allowed)}; "
                                              f"got {joints[name].get('type')!r}")


def _check_inertial(link, target, problems):
    """A link's <inertial> must be a rigid body's: mass > 0, finite, positive-definite inertia whose
    principal moments obey the triangle inequality (massprops.inertia_problem)."""
    el = link.find("inertial")
    if el is None:
        return
    keys = ("ixx", "ixy", "ixz", "iyy", "iyz", "izz")
    try:
        mass = float(el.find("mass").get("value"))
        i = {k: float(el.find("inertia").get(k, 0)) for k in keys}
        values = [i["ixx"], i["iyy"], i["izz"]]
    except (AttributeError, TypeError, ValueError):
        problems.add("urdf", f"link {link.get('name')!r} of {target.name} has an unreadable <inertial>")
        return
    if not (math.isfinite(mass) and mass > 0 and all(math.isfinite(v) and v > 0 for v in values)):
        problems.add("urdf", f"link {link.get('name')!r} of {target.name} must have a finite mass > 0 and "
                             f"inertia diagonal > 0; got mass {mass}, diagonal {values}")
        return
    tensor = [[i["ixx"], i["ixy"], i["ixz"]], [i["ixy"], i["iyy"], i["iyz"]], [i["ixz"], i["iyz"], i["izz"]]]
    why = inertia_problem(mass, tensor)
    if why:
        problems.add("urdf", f"link {link.get('name')!r} of {target.name} <inertial>: {why}")


def build(spec, variant):
    p: Params = variant.params
    source = (Path(spec.file).resolve().parent / p.urdf).resolve()
    root = _read(source)
    files = {}
    for mesh in root.iter("mesh"):
        rel = mesh.get("filename")
        data = (source.parent / rel).resolve().read_bytes()
        files[rel] = data
    urdf_text = source.read_text()
    links = [lk.get("name") for lk in root.findall("link")]
    return GripperModel(
        name=variant.name, family="urdf", key=spec_hash("urdf", p, content_key(urdf_text, files)),
        urdf=urdf_text, close_joints=p.roles.close, pivot_joints=p.roles.pivot, roll_joints=p.roles.roll,
        roller_radius=p.roles.roller_radius, surfaces={name: Surface(p.friction) for name in links}, files=files,
        summary={"urdf": p.urdf, "links": len(links), "close_joints": len(p.roles.close),
                 "roll_joints": len(p.roles.roll), "friction": p.friction},
    )
