"""Mass properties: handbook formulas for primitives and exact integrals for closed triangle meshes.

Inertia tensors are (3, 3) float in kg m^2 about the centre of mass, in the body's frame.
"""

from __future__ import annotations

import numpy as np

__all__ = ["box_inertia", "cylinder_inertia", "sphere_inertia", "capsule", "polyhedron",
           "combine", "MassProps", "inertia_problem"]


class MassProps:
    """Volume (m^3), centre of mass (3,) m and inertia about it (3, 3) per unit density."""

    __slots__ = ("volume", "com", "inertia")

    def __init__(self, volume, com, inertia):
        self.volume = float(volume)
        self.com = np.asarray(com, dtype=float)
        self.inertia = np.asarray(inertia, dtype=float)


def box_inertia(mass, x, y, z):
    """Solid box with edge lengths x, y, z about its centre (handbook formula)."""
    return np.diag([y * y + z * z, x * x + z * z, x * x + y * y]) * mass / 12.0


def cylinder_inertia(mass, radius, height):
    """Solid cylinder with its axis along z, about its centre (handbook formula)."""
    side = mass * (3.0 * radius * radius + height * height) / 12.0
    return np.diag([side, side, 0.5 * mass * radius * radius])


def sphere_inertia(mass, radius):
    """Solid sphere about its centre (handbook formula)."""
    return np.eye(3) * 0.4 * mass * radius * radius


def capsule(radius, length):
    """Capsule (cylinder of `length` along z capped by two hemispheres), unit density.

    Hemisphere: mass m_h = 2/3 pi r^3, centroid 3r/8 from its flat face, inertia about
    its own centroid across the axis 83/320 m_h r^2 (handbook values).
    """
    r, h = radius, length
    m_c = np.pi * r * r * h
    m_h = 2.0 / 3.0 * np.pi * r ** 3
    axial = 0.5 * m_c * r * r + 2 * 0.4 * m_h * r * r
    d = h / 2.0 + 3.0 * r / 8.0  # hemisphere centroid distance from the capsule centre
    across = m_c * (3 * r * r + h * h) / 12.0 + 2 * (83.0 / 320.0 * m_h * r * r + m_h * d * d)
    return MassProps(m_c + 2 * m_h, np.zeros(3), np.diag([across, across, axial]))


def polyhedron(vertices, faces):
    """Exact volume, centroid and inertia of a closed, outward-wound triangle mesh, unit density.

    Sums signed tetrahedra from the origin; the second moment of a tetrahedron (0, a, b, c)
    is V/20 (aa' + bb' + cc' + ss'), s = a + b + c (divergence-theorem result, as in
    Eberly, "Polyhedral Mass Properties", 2002).
    """
    v = np.asarray(vertices, dtype=float)
    a, b, c = (v[np.asarray(faces)[:, k]] for k in range(3))
    vol6 = np.einsum("ij,ij->i", a, np.cross(b, c))
    volume = vol6.sum() / 6.0
    s = a + b + c
    com = (vol6[:, None] * s).sum(axis=0) / (24.0 * volume)
    second = sum(np.einsum("i,ij,ik->jk", vol6, p, p) for p in (a, b, c, s)) / 120.0
    second -= volume * np.outer(com, com)
    inertia = np.trace(second) * np.eye(3) - second
    return MassProps(volume, com, inertia)


def combine(parts):
    """Union of disjoint parts [(MassProps, offset (3,), rotation (3, 3))] placed in one frame."""
    volume = sum(p.volume for p, _, _ in parts)
    centres = [rot @ p.com + off for p, off, rot in parts]
    com = sum(p.volume * c for (p, _, _), c in zip(parts, centres)) / volume
    inertia = np.zeros((3, 3))
    for (p, _, rot), c in zip(parts, centres):
        d = c - com
        inertia += rot @ p.inertia @ rot.T + p.volume * (d @ d * np.eye(3) - np.outer(d, d))
    return MassProps(volume, com, inertia)


def inertia_problem(mass, inertia, box=None, com=None):
    """Why `mass` (kg) and `inertia` (3, 3) kg m^2 about the centre of mass cannot be a rigid body's,
    or None. With `box` = (low (3,), high (3,)) m, the bounding box of the body's geometry in the
    same frame, also checks the radius of gyration and (with `com` (3,) m) the centre of mass
    against the geometry. The limits are named tolerances in constants.py."""
    from ..constants import COM_OUTSIDE_BOX, GYRATION_ABOVE_DIAGONAL, GYRATION_FLOOR, INERTIA_TRIANGLE_TOL
    i = np.asarray(inertia, dtype=float)
    if not (np.isfinite(mass) and mass > 0):
        return f"mass must be a finite number > 0 kg; got {mass}"
    if not np.all(np.isfinite(i)):
        return "inertia must hold finite numbers; got " + _tensor(i)
    if not np.any(i):
        return "inertia is zero (a common placeholder)"
    moments = np.linalg.eigvalsh((i + i.T) / 2)
    if moments[0] <= 0:
        return f"inertia must be positive-definite; its principal moments are {_moments(moments)} kg m^2"
    if moments[0] + moments[1] < moments[2] * (1 - INERTIA_TRIANGLE_TOL):
        return (f"principal moments {_moments(moments)} kg m^2 break the triangle inequality "
                f"I1 + I2 >= I3 that every rigid body obeys")
    if box is None:
        return None
    low, high = (np.asarray(b, dtype=float) for b in box)
    diagonal = float(np.linalg.norm(high - low))
    gyration = float(np.sqrt(moments[2] / mass))
    if gyration > diagonal * (1 + GYRATION_ABOVE_DIAGONAL):
        return (f"inertia is implausible for a {mass * 1e3:.4g} g part whose geometry spans "
                f"{diagonal * 1e3:.4g} mm corner to corner: its radius of gyration is {gyration * 1e3:.4g} mm, "
                f"more than that diagonal (the most any part of it can have)")
    if gyration < GYRATION_FLOOR * float(np.max(high - low)):
        return (f"inertia is implausible for a {mass * 1e3:.4g} g part {np.max(high - low) * 1e3:.4g} mm long: "
                f"its largest radius of gyration is {gyration * 1e3:.4g} mm, below {GYRATION_FLOOR:g} of its "
                "largest size (a placeholder value?)")
    if com is not None:
        c = np.asarray(com, dtype=float)
        slack = COM_OUTSIDE_BOX * diagonal
        if np.any(c < low - slack) or np.any(c > high + slack):
            return (f"centre of mass ({', '.join(f'{x * 1e3:.4g}' for x in c)}) mm lies outside the collision "
                    "geometry's bounding box")
    return None


def _moments(values):
    return "(" + ", ".join(f"{v:.4g}" for v in values) + ")"


def _tensor(i):
    return "[" + ", ".join(f"{v:.4g}" for v in i.ravel()) + "]"
