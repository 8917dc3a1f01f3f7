"""Grasp quality at the grasp instant: primitive contact wrenches, Ferrari-Canny epsilon, force closure.

Contacts are point contacts with Coulomb friction. Each friction cone (half-angle atan(mu), unit
normal force) is replaced by the pyramid spanned by `edges` edge vectors inscribed in it, so the
wrench set is a polytope inside the exact one: epsilon lies between the exact-cone values for friction
mu cos(pi / edges) (the pyramid's inscribed cone; 0.92 mu for 8 edges) and mu.

Wrenches are 6-vectors [f, tau / torque_scale] in N per newton of total normal force: force (3,)
and torque about the object's centre of mass divided by a characteristic length (m), so that
both halves are dimensionless and comparable. Epsilon is the Ferrari-Canny L1 quality (Ferrari &
Canny, "Planning optimal grasps", ICRA 1992): the primitive wrenches' convex hull is the set of
wrenches the grasp can apply with normal forces summing to 1, and epsilon is the radius of the
largest origin-centred ball inside it, i.e. the largest wrench (Euclidean norm of the 6-vector)
the grasp can resist whatever its direction, with normal forces summing to 1 N.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import ConvexHull, QhullError

__all__ = ["MIN_EPSILON", "GraspQuality", "contact_wrenches", "epsilon", "force_closure",
           "grasp_quality"]

# Force closure means epsilon > MIN_EPSILON (dimensionless: share of the unit total normal force).
# Qhull's facet offsets carry round-off near 1e-15 for wrenches of size ~1, so an origin lying on
# the hull's boundary (e.g. frictionless contacts that just balance) can come out as +1e-15; 1e-9
# sits six decades above that and far below the epsilon of any grasp that can hold something.
MIN_EPSILON = 1e-9

# The hull counts as flat (not 6-D) when its smallest spread is below this share of its largest
# (singular values of the centred wrenches). Wrenches that are exactly coplanar in theory, such
# as two point contacts that cannot resist spin about the line joining them, are off-plane only
# by round-off (~1e-16); qhull would either fail on them or build a sliver hull.
FLAT_RTOL = 1e-9

# A reference direction for orienting a friction pyramid is unusable when its part in the tangent
# plane is shorter than this share of torque_scale (then it is round-off around zero).
TANGENT_RTOL = 1e-6


@dataclass(frozen=True)
class GraspQuality:
    """Quality of one grasp: epsilon (dimensionless), force closure, and the contacts it used."""

    epsilon: float
    force_closure: bool
    n_contacts: int


def contact_wrenches(points, normals, mu, centre, torque_scale, edges=8):
    """Primitive wrenches (n * edges, 6) of n point contacts with linearised friction cones.

    points (n, 3) m; normals (n, 3) pointing into the object (the direction the finger pushes),
    normalised here; mu scalar or (n,) Coulomb friction >= 0; centre (3,) m, the object's centre
    of mass; torque_scale > 0 m, a characteristic length such as the largest distance from the
    centre to the object's surface. Rows k * edges ... (k + 1) * edges - 1 belong to contact k:
    [f, (p - centre) x f / torque_scale] with f = n + mu (cos a t1 + sin a t2), a = 2 pi j / edges.
    """
    p, n, mu, c, scale, edges = _checked(points, normals, mu, centre, torque_scale, edges)
    if len(p) == 0:
        return np.zeros((0, 6))
    t1 = _tangents(p, n, c, scale)
    t2 = np.cross(n, t1)
    angle = 2.0 * np.pi * np.arange(edges) / edges
    # (n, edges, 3): unit normal force plus a tangential part of length mu on the cone's rim.
    f = n[:, None, :] + mu[:, None, None] * (np.cos(angle)[None, :, None] * t1[:, None, :]
                                             + np.sin(angle)[None, :, None] * t2[:, None, :])
    tau = np.cross((p - c)[:, None, :], f) / scale
    return np.concatenate([f, tau], axis=2).reshape(-1, 6)


def epsilon(points, normals, mu, centre, torque_scale, edges=8):
    """Ferrari-Canny epsilon (L1): radius of the largest origin-centred ball in the hull of the
    primitive wrenches (see contact_wrenches for the arguments).

    0.0 when the origin is outside the hull or on its boundary (no force closure), and when the
    hull is not 6-dimensional (fewer than 7 affinely independent wrenches, e.g. one or two point
    contacts). Within round-off of the boundary the value may be ~1e-15; force_closure compares it
    with MIN_EPSILON.
    """
    return _epsilon_of(contact_wrenches(points, normals, mu, centre, torque_scale, edges))


def force_closure(points, normals, mu, centre, torque_scale, edges=8):
    """True when the linearised grasp resists every wrench: epsilon > MIN_EPSILON."""
    return epsilon(points, normals, mu, centre, torque_scale, edges) > MIN_EPSILON


def grasp_quality(points, normals, mu, centre, torque_scale, edges=8):
    """Epsilon, force closure and contact count in one call (arguments as contact_wrenches)."""
    wrenches = contact_wrenches(points, normals, mu, centre, torque_scale, edges)
    eps = _epsilon_of(wrenches)
    return GraspQuality(eps, eps > MIN_EPSILON, len(wrenches) // int(edges))


def _epsilon_of(wrenches):
    """Distance from the origin to the nearest facet of the hull of wrenches (m, 6), or 0.0."""
    if len(wrenches) < 7:
        return 0.0
    spread = np.linalg.svd(wrenches - wrenches.mean(axis=0), compute_uv=False)
    if spread[5] <= FLAT_RTOL * spread[0]:
        return 0.0
    try:
        hull = ConvexHull(wrenches)
    except QhullError:  # qhull still found the input flat or too thin to hull
        return 0.0
    # equations: unit outward normal a and offset b with a . x + b <= 0 inside, so -b is the
    # signed distance from the origin to each facet's plane (negative when the origin is outside).
    return float(max(0.0, -hull.equations[:, -1].max()))


def _tangents(p, n, c, scale):
    """Unit tangent t1 (n, 3) per contact, orienting its friction pyramid from the grasp itself.

    The pyramid's orientation about the normal is arbitrary, but tying it to world axes would make
    epsilon change (by up to the pyramid's inscribed-cone error) when the whole grasp is rotated.
    So t1 points along the tangential part of (centre - p); where the normal passes through the
    centre (any contact on a sphere) it points towards the next contact in order whose direction
    has a tangential part. Only when every contact and the centre lie on the normal's line does it
    fall back to a world axis, and then the wrenches cannot resist spin about that line, so epsilon
    is 0 whatever the orientation.
    """
    t1 = np.empty_like(n)
    k = len(p)
    for i in range(k):
        refs = [c - p[i]] + [p[(i + j) % k] - p[i] for j in range(1, k)]
        refs += [np.eye(3)[np.argmin(np.abs(n[i]))] * scale]
        for r in refs:
            t = r - (r @ n[i]) * n[i]
            length = np.linalg.norm(t)
            if length > TANGENT_RTOL * scale:
                t1[i] = t / length
                break
    return t1


def _checked(points, normals, mu, centre, torque_scale, edges):
    """Arrays of the right shapes and finite values, or ValueError saying which argument is wrong."""
    p = _array("points", points, (-1, 3))
    n = _array("normals", normals, (-1, 3))
    if len(n) != len(p):
        raise ValueError(f"normals must have one row per point ({len(p)}); got {len(n)}")
    length = np.linalg.norm(n, axis=1)
    if np.any(length < 1e-9):  # not a direction: a unit normal would be ~1
        row = int(np.argmin(length))
        raise ValueError(f"normals must be non-zero directions; row {row} has length {length[row]:.3g}")
    n = n / length[:, None]
    mu = np.asarray(mu, dtype=float)
    if mu.ndim == 0:
        mu = np.full(len(p), float(mu))
    if mu.shape != (len(p),):
        raise ValueError(f"mu must be a scalar or have shape ({len(p)},); got shape {mu.shape}")
    if not np.all(np.isfinite(mu)) or np.any(mu < 0):
        raise ValueError(f"mu must be finite and >= 0; got {mu}")
    c = _array("centre", centre, (3,))
    scale = float(torque_scale)
    if not np.isfinite(scale) or scale <= 0:
        raise ValueError(f"torque_scale must be a finite length > 0 (m); got {torque_scale}")
    if isinstance(edges, bool) or int(edges) != edges or edges < 3:
        raise ValueError(f"edges must be an integer >= 3; got {edges}")
    return p, n, mu, c, scale, int(edges)


def _array(name, value, shape):
    """Float array of `shape` (-1 for any count; an empty input counts as zero rows) with finite entries."""
    a = np.asarray(value, dtype=float)
    if a.size == 0 and shape[0] == -1:
        a = a.reshape(0, *shape[1:])
    if a.ndim != len(shape) or any(s not in (-1, got) for s, got in zip(shape, a.shape)):
        wanted = "(n, 3)" if shape[0] == -1 else str(shape)
        raise ValueError(f"{name} must have shape {wanted}; got shape {a.shape}")
    if not np.all(np.isfinite(a)):
        raise ValueError(f"{name} must be finite; got NaN or infinity")
    return a
