"""What an object kind produces: geometry parts and mass properties, then a ready-to-load instance."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .. import urdf as U
from ..fields import param, Span
from ..massprops import MassProps

__all__ = ["Common", "Part", "Shape", "ObjectInstance", "obj_text", "instance", "draw_material"]

FILE_MASS_KINDS = ("urdf", "urdf-folder")  # kinds whose mass may come from their files


@dataclass(frozen=True, kw_only=True)
class Common:
    """Keys every [[object]] entry has, whatever its kind."""

    name: str = param("name", "text")
    kind: str = param("kind", "text")
    count: int = param("count", "integer", ge=1, le=10000, default=1)
    mass: Span | None = param("mass_g", "span", unit="g", gt=0, default=None)
    density: Span | None = param("density_kg_m3", "span", gt=0, default=None)
    friction: Span = param("friction", "span", gt=0, le=10, default=Span(0.8, 0.8))
    restitution: Span = param("restitution", "span", ge=0, le=1, default=Span(0.1, 0.1))
    stiffness: Span | None = param("stiffness_n_m", "span", gt=0, default=None)
    damping: Span | None = param("damping_n_s_m", "span", ge=0, default=None)

    def check(self):
        if (self.mass is None) == (self.density is None) and self.kind not in FILE_MASS_KINDS:
            yield "mass_g", "or 'density_kg_m3' must be given, exactly one of them"
        if (self.stiffness is None) != (self.damping is None):
            yield "stiffness_n_m", "and 'damping_n_s_m' must be given together (the engine needs both)"


@dataclass(frozen=True)
class Part:
    """One collision/visual piece in the body frame: a primitive with dims, or a convex mesh."""

    shape: str  # "sphere" (r,), "cylinder" (r, length along z), "box" (x, y, z), "mesh"
    dims: tuple[float, ...] = ()
    xyz: tuple[float, float, float] = (0.0, 0.0, 0.0)
    rpy: tuple[float, float, float] = (0.0, 0.0, 0.0)
    vertices: np.ndarray | None = None  # (n, 3) float, metres, for "mesh"
    faces: np.ndarray | None = None  # (m, 3) int, outward winding


@dataclass(frozen=True)
class Shape:
    """Geometry of one drawn instance: parts, unit-density mass properties, bounding-box extents (m)."""

    parts: tuple[Part, ...]
    props: MassProps
    extents: tuple[float, float, float]


@dataclass(frozen=True)
class ObjectInstance:
    """A generated object, SI units: mass kg, com (3,) m, inertia (3, 3) kg m^2 about the com."""

    name: str
    kind: str
    set_name: str
    entry: str
    mass: float
    volume: float
    com: tuple[float, float, float]
    inertia: tuple[tuple[float, ...], ...]
    extents: tuple[float, float, float]
    friction: float
    restitution: float
    stiffness: float | None
    damping: float | None
    draws: dict[str, float]  # drawn geometry parameters, SI
    urdf: str
    files: dict[str, bytes] = field(default_factory=dict)
    sources: dict[str, str] = field(default_factory=dict)  # where inertia and material came from (file kinds)
    source: str = ""  # the file it was read from, relative to the object set's folder (file kinds)

    def __post_init__(self):
        # the routines and metrics derive sizes, grip heights and torque scales from these: a NaN
        # or a zero here would surface as a confusing failure deep inside a trial
        values = {"mass": [self.mass], "volume": [self.volume], "extents": list(self.extents),
                  "com": list(self.com), "inertia": [x for row in self.inertia for x in row],
                  "friction": [self.friction]}
        for name, xs in values.items():
            if not all(isinstance(x, (int, float)) and math.isfinite(x) for x in xs):
                raise ValueError(f"object {self.name!r}{f' ({self.source})' if self.source else ''}: {name} must "
                                 f"be finite; got {xs}")
            if name in ("mass", "volume", "extents", "friction") and not all(x > 0 for x in xs):
                raise ValueError(f"object {self.name!r}{f' ({self.source})' if self.source else ''}: {name} must "
                                 f"be > 0; got {xs}")


def obj_text(vertices, faces):
    """Wavefront OBJ with fixed number formatting (byte-identical for identical input)."""
    lines = [f"v {U.num(x)} {U.num(y)} {U.num(z)}" for x, y, z in np.asarray(vertices, dtype=float)]
    lines += [f"f {a + 1} {b + 1} {c + 1}" for a, b, c in np.asarray(faces, dtype=int)]
    return ("\n".join(lines) + "\n").encode()


def instance(entry, set_name, name, shape: Shape, rng, draws, mass_props=None, material=None, sources=None,
             source=""):
    """Give a Shape its material (drawn from the entry's spans) and write its URDF text.

    File kinds pass their own `mass_props` (mass kg, com (3,) m, inertia (3, 3) kg m^2 about the com)
    and `material` (friction, restitution, stiffness, damping), with `sources` saying where each came
    from and `source` the file."""
    volume = shape.props.volume
    if mass_props is not None:
        mass, com, inertia = mass_props
    else:
        if entry.mass is not None:
            mass = entry.mass.draw(rng)
            density = mass / volume
        else:
            density = entry.density.draw(rng)
            mass = density * volume
        com, inertia = shape.props.com, shape.props.inertia * density
    material = material if material is not None else draw_material(entry, rng)
    files, geoms = {}, []
    for k, part in enumerate(shape.parts):
        if part.shape == "mesh":
            fname = f"{name}_part{k}.obj"
            files[fname] = obj_text(part.vertices, part.faces)
            geoms.append((U.geometry("mesh", filename=fname), part.xyz, part.rpy))
        else:
            geoms.append((U.geometry(part.shape, part.dims), part.xyz, part.rpy))
    text = U.robot(name, [U.link("body", mass, com, inertia, geoms, rgba=(0.3, 0.5, 0.8, 1))])
    return ObjectInstance(
        name=name, kind=entry.kind, set_name=set_name, entry=entry.name, mass=float(mass), volume=volume,
        com=tuple(map(float, com)), inertia=tuple(tuple(map(float, row)) for row in inertia),
        extents=tuple(map(float, shape.extents)), draws=draws, urdf=text, files=files,
        sources=dict(sources or {}), source=source, **material)


def draw_material(entry, rng):
    """Friction, restitution and contact compliance of one instance, drawn from the entry's spans."""
    return {"friction": entry.friction.draw(rng), "restitution": entry.restitution.draw(rng),
            "stiffness": entry.stiffness.draw(rng) if entry.stiffness else None,
            "damping": entry.damping.draw(rng) if entry.damping else None}
