"""Generated object kinds. Each kind is a spec class (Common keys plus its own geometry spans) and a
pure function `shape(draws, entry, rng) -> Shape` of the drawn geometry values (SI).

Primitive kinds use the engine's exact primitives and handbook mass properties; the others
are convex meshes (or unions of convex parts, for concave rings and cups) whose mass
properties are integrated exactly over the very mesh the engine collides with.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ...constants import ROUND_SEGMENTS
from ..fields import Span, param
from ..massprops import MassProps, box_inertia, capsule, combine, cylinder_inertia, polyhedron, sphere_inertia
from .model import Common, Part, Shape

__all__ = ["KINDS", "convex_part"]

RING_SECTORS = 16  # convex sectors of a ring or cup wall; inner chords intrude 1 - cos(pi/16) = 1.9 % of the bore
SECTOR_ARC_STEPS = ROUND_SEGMENTS // RING_SECTORS
ICOSPHERE_LEVEL = 3  # 642 vertices: the inscribed mesh's volume is about 0.9 % below the smooth ellipsoid's


def mm(key, **kw):
    return param(key, "span", unit="mm", gt=0, **kw)


def convex_part(points):
    """The convex hull of (n, 3) points as a mesh Part (outward winding)."""
    import trimesh
    hull = trimesh.convex.convex_hull(np.asarray(points, dtype=float))
    return Part("mesh", vertices=np.asarray(hull.vertices), faces=np.asarray(hull.faces))


def mesh_shape(parts):
    """Shape of a union of disjoint convex mesh parts (mass properties integrated exactly)."""
    props = combine([(polyhedron(p.vertices, p.faces), np.zeros(3), np.eye(3)) for p in parts])
    pts = np.vstack([p.vertices for p in parts])
    return Shape(tuple(parts), props, tuple(pts.max(axis=0) - pts.min(axis=0)))


# --- primitives -------------------------------------------------------------------------------

@dataclass(frozen=True, kw_only=True)
class SphereSpec(Common):
    radius: Span = mm("radius_mm")


def sphere(d, entry, rng):
    r = d["radius"]
    v = 4.0 / 3.0 * math.pi * r ** 3
    return Shape((Part("sphere", (r,)),), MassProps(v, np.zeros(3), sphere_inertia(v, r)), (2 * r,) * 3)


@dataclass(frozen=True, kw_only=True)
class CylinderSpec(Common):
    radius: Span = mm("radius_mm")
    height: Span = mm("height_mm")


def cylinder(d, entry, rng):
    r, h = d["radius"], d.get("height", d.get("thickness"))
    v = math.pi * r * r * h
    return Shape((Part("cylinder", (r, h)),), MassProps(v, np.zeros(3), cylinder_inertia(v, r, h)), (2 * r, 2 * r, h))


@dataclass(frozen=True, kw_only=True)
class DiscSpec(Common):
    """A thin disc: a cylinder whose thickness is small against its radius."""

    radius: Span = mm("radius_mm")
    thickness: Span = mm("thickness_mm")


@dataclass(frozen=True, kw_only=True)
class BoxSpec(Common):
    size_x: Span = mm("size_x_mm")
    size_y: Span = mm("size_y_mm")
    size_z: Span = mm("size_z_mm")


def box(d, entry, rng):
    dims = (d["size_x"], d["size_y"], d.get("size_z", d.get("thickness")))
    v = dims[0] * dims[1] * dims[2]
    return Shape((Part("box", dims),), MassProps(v, np.zeros(3), box_inertia(v, *dims)), dims)


@dataclass(frozen=True, kw_only=True)
class PlateSpec(Common):
    """A thin plate: a box whose thickness is small against its sides."""

    size_x: Span = mm("size_x_mm")
    size_y: Span = mm("size_y_mm")
    thickness: Span = mm("thickness_mm")


@dataclass(frozen=True, kw_only=True)
class CapsuleSpec(Common):
    radius: Span = mm("radius_mm")
    length: Span = mm("length_mm", doc="length of the straight part between the caps")


def capsule_shape(d, entry, rng):
    r, h = d["radius"], d["length"]
    parts = (Part("cylinder", (r, h)), Part("sphere", (r,), (0, 0, h / 2)), Part("sphere", (r,), (0, 0, -h / 2)))
    return Shape(parts, capsule(r, h), (2 * r, 2 * r, h + 2 * r))


# --- convex meshes ----------------------------------------------------------------------------

@dataclass(frozen=True, kw_only=True)
class EllipsoidSpec(Common):
    a: Span = mm("a_mm", doc="semi-axis along x")
    b: Span = mm("b_mm")
    c: Span = mm("c_mm")


def ellipsoid(d, entry, rng):
    import trimesh
    unit = trimesh.creation.icosphere(subdivisions=ICOSPHERE_LEVEL).vertices
    return mesh_shape([convex_part(unit * [d["a"], d["b"], d["c"]])])


@dataclass(frozen=True, kw_only=True)
class SuperquadricSpec(Common):
    """|x/a|^(2/e2) + |y/b|^(2/e2) ... ; exponents up to 2 keep it convex."""

    a: Span = mm("a_mm")
    b: Span = mm("b_mm")
    c: Span = mm("c_mm")
    e1: Span = param("e1", "span", ge=0.2, le=2.0, doc="roundness from top to bottom; 1 is an ellipsoid")
    e2: Span = param("e2", "span", ge=0.2, le=2.0, doc="roundness around the z axis")


def superquadric(d, entry, rng):
    def spow(x, e):
        return np.sign(x) * np.abs(x) ** e
    eta = np.linspace(-math.pi / 2, math.pi / 2, 25)[:, None]
    omega = np.linspace(-math.pi, math.pi, 48, endpoint=False)[None, :]
    x = d["a"] * spow(np.cos(eta), d["e1"]) * spow(np.cos(omega), d["e2"])
    y = d["b"] * spow(np.cos(eta), d["e1"]) * spow(np.sin(omega), d["e2"])
    z = d["c"] * spow(np.sin(eta), d["e1"]) * np.ones_like(omega)
    return mesh_shape([convex_part(np.stack([x.ravel(), y.ravel(), z.ravel()], axis=1))])


@dataclass(frozen=True, kw_only=True)
class PolytopeSpec(Common):
    radius: Span = mm("radius_mm", doc="distance of the farthest vertices from the centre")
    vertices: int = param("vertices", "integer", ge=4, le=64, default=12)
    roundness: Span = param("roundness", "span", gt=0, le=1, default=Span(0.7, 0.7),
                            doc="nearest vertex distance as a share of radius_mm")


def polytope(d, entry, rng):
    n = entry.vertices
    directions = rng.normal(size=(n, 3))
    directions /= np.linalg.norm(directions, axis=1, keepdims=True)
    reach = rng.uniform(d["roundness"], 1.0, size=(n, 1)) * d["radius"]
    part = convex_part(directions * reach)
    part = Part("mesh", vertices=part.vertices - polyhedron(part.vertices, part.faces).com, faces=part.faces)
    return mesh_shape([part])


# --- concave: unions of convex parts ----------------------------------------------------------

def _sectors(inner, outer, z0, z1):
    """Convex prisms around the z axis: straight inner chord, outer arc in SECTOR_ARC_STEPS steps."""
    parts = []
    for k in range(RING_SECTORS):
        a0, a1 = 2 * math.pi * k / RING_SECTORS, 2 * math.pi * (k + 1) / RING_SECTORS
        arc = np.linspace(a0, a1, SECTOR_ARC_STEPS + 1)
        ring = [(outer * math.cos(a), outer * math.sin(a)) for a in arc]
        ring += [(inner * math.cos(a), inner * math.sin(a)) for a in (a1, a0)]
        parts.append(convex_part([(x, y, z) for x, y in ring for z in (z0, z1)]))
    return parts


@dataclass(frozen=True, kw_only=True)
class RingSpec(Common):
    outer_radius: Span = mm("outer_radius_mm")
    inner_radius: Span = mm("inner_radius_mm")
    height: Span = mm("height_mm")

    def check(self):
        yield from super().check()
        if self.inner_radius.hi >= self.outer_radius.lo:
            yield "inner_radius_mm", "must stay below outer_radius_mm for every draw (its high end < outer's low end)"


def ring(d, entry, rng):
    h = d["height"]
    return mesh_shape(_sectors(d["inner_radius"], d["outer_radius"], -h / 2, h / 2))


@dataclass(frozen=True, kw_only=True)
class CupSpec(Common):
    outer_radius: Span = mm("outer_radius_mm")
    wall: Span = mm("wall_mm")
    height: Span = mm("height_mm")
    base: Span = mm("base_mm", doc="thickness of the bottom")

    def check(self):
        yield from super().check()
        if self.wall.hi >= self.outer_radius.lo:
            yield "wall_mm", "must stay below outer_radius_mm for every draw"
        if self.base.hi >= self.height.lo:
            yield "base_mm", "must stay below height_mm for every draw"


def cup(d, entry, rng):
    r, h, b = d["outer_radius"], d["height"], d["base"]
    arc = np.linspace(0, 2 * math.pi, ROUND_SEGMENTS, endpoint=False)
    disc = [(r * math.cos(a), r * math.sin(a), z) for a in arc for z in (-h / 2, -h / 2 + b)]
    return mesh_shape([convex_part(disc), *_sectors(r - d["wall"], r, -h / 2 + b, h / 2)])


KINDS = {
    "sphere": (SphereSpec, sphere),
    "cylinder": (CylinderSpec, cylinder),
    "box": (BoxSpec, box),
    "capsule": (CapsuleSpec, capsule_shape),
    "ellipsoid": (EllipsoidSpec, ellipsoid),
    "plate": (PlateSpec, box),
    "disc": (DiscSpec, cylinder),
    "ring": (RingSpec, ring),
    "cup": (CupSpec, cup),
    "polytope": (PolytopeSpec, polytope),
    "superquadric": (SuperquadricSpec, superquadric),
}
