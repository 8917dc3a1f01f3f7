"""Roller steering: the roller speeds and pivot angles that move a held object at a commanded twist.

Kinematics (grasp map / hand Jacobian, Murray, Li and Sastry 1994, "A Mathematical Introduction
to Robotic Manipulation", ch. 5), all in the world frame, SI units:

- The object's twist is t = (v, w), shape (6,): v the linear velocity (m/s) of its reference
  point `origin`, w its angular velocity (rad/s).
- At contact i (object point x_i, unit normal n_i pointing from the roller into the object) the
  object's material velocity is J_i t = v + w x (x_i - origin); J_i is row block i of
  `contact_jacobian`.
- Roller i (centre c_i, unit axis a_i, radius r_i) spinning at omega_i about a_i moves its
  surface at the contact with omega_i a_i x (x_i - c_i) = omega_i r_i d_i, where
  d_i = a_i x unit(x_i - c_i) is the rolling direction. Sign convention: a positive speed is a
  right-handed spin about a_i and moves the roller's surface, and so the object, along +d_i.
- No-slip rolling with the fingers held still: n_i . J_i t = 0 (a roller cannot push along the
  normal) and the tangential part of J_i t equals omega_i r_i d_i.
- The pivot turns a_i about the pivot axis p_i (through the roller centre, pointing from the
  roller to the grasp centre, so p_i ~ n_i); a positive pivot angle is a right-handed turn about
  p_i. The axis at pivot angle phi is a_i(phi) = Rot(p_i, phi) a0_i, where
  a0_i = Rot(p_i, -pivot_angle_i) a_i is the axis at pivot angle 0. With p_i = n_i this turns
  d_i by phi within the tangent plane; d and -d are the same direction up to the sign of the
  speed, so a pivot range of 180 deg reaches every tangent direction.

Achievable set. Without steering (each roller's pivot stays where it is) contact i allows only
contact velocities along its current d_i: two rows per contact, n_i . J_i t = 0 and
(n_i x d_i) . J_i t = 0. With steering only the normal rows remain, one per contact; they are
the columns of `grasp_matrix` (the frictionless-contact grasp map). The achievable twists are the
null space of the stacked rows, and `steer` returns the least-squares projection of the command
onto it in the weighted metric |t|^2 = |v|^2 + (length_scale |w|)^2, so every norm is in m/s and
the result does not depend on the world frame's orientation or on where its origin is placed
(given the same physical reference point).

Under-constrained grasps: when the contacts are too few to pin the twist (one contact, or two,
which leave the spin about the line through them free), the projection is still exact, the
achievable set is just large and the command is usually fully achieved. The roller settings are
then consistent with the returned twist but do not force it: other twists produce the same
contact velocities. `SteeringResult.determined` says whether the contacts pin the twist (the
stacked 3n x 6 contact Jacobian has rank 6).

Steering is modelled as linear: a steerable contact (steer_pivots and a non-zero pivot range)
is assumed able to roll in any tangent direction, which holds for a range of at least 180 deg
and a pivot axis along the normal. Where a narrower range or a tilted pivot axis cannot reach
the wanted direction, the nearest reachable one is returned and `SteeringResult.slip` shows the
mismatch; `achieved` is then still the projection, not what those settings produce.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["RollerContact", "SteeringResult", "steer", "contact_jacobian", "grasp_matrix",
           "rolling_direction", "RANK_RTOL"]

# Rank tolerance: a singular value of the length-scaled constraint matrix counts as zero when it
# is at most RANK_RTOL times the largest one. Every normal row of that matrix has a unit linear
# part, so the largest singular value is at least 1 and the cut-off is at least 1e-9 absolute:
# constraints weaker than that (a near-degenerate contact layout) are treated as absent.
RANK_RTOL = 1e-9

_GRID = 721  # samples of the pivot range when no in-range angle reaches the wanted direction


def _vec(value, name):
    v = np.array(value, dtype=float).reshape(-1)
    if v.shape != (3,) or not np.all(np.isfinite(v)):
        raise ValueError(f"{name} must be 3 finite numbers; got {value!r}")
    return v


def _unit(value, name):
    v = np.array(value, dtype=float).reshape(-1)
    if v.shape != (3,) or not np.all(np.isfinite(v)):
        raise ValueError(f"{name} must be 3 finite numbers; got {value!r}")
    norm = np.linalg.norm(v)
    if norm < 1e-12:
        raise ValueError(f"{name} must be a non-zero direction; got {value!r}")
    v = v / norm
    return v


def _rotate(v, axis, angle):
    """Rodrigues: `v` turned by `angle` (rad, right-handed) about the unit vector `axis`."""
    c, s = math.cos(angle), math.sin(angle)
    return v * c + np.cross(axis, v) * s + axis * (axis @ v) * (1.0 - c)


def _skew(x):
    return np.array([[0.0, -x[2], x[1]], [x[2], 0.0, -x[0]], [-x[1], x[0], 0.0]])


@dataclass(frozen=True, eq=False)
class RollerContact:
    """One roller touching the object; every vector (3,) in the world frame, SI units.

    point: the contact point on the object (m). normal: unit normal pointing from the roller
    into the object. centre: the roller centre (m). axis: the roller's spin axis at the current
    pivot angle (normalised here; its sign fixes the sign of the speed). radius: roller radius (m).
    pivot_axis: the pivot joint's axis (normalised); None means the contact normal.
    pivot_angle: the pivot joint's current angle (rad). pivot_range: (lower, upper) pivot limits
    (rad); a zero-width range means the roller cannot be steered.
    Vectors are stored as float64 copies (not read-only: some scipy routines reject those).
    """

    point: np.ndarray
    normal: np.ndarray
    centre: np.ndarray
    axis: np.ndarray
    radius: float
    pivot_axis: np.ndarray | None = None
    pivot_angle: float = 0.0
    pivot_range: tuple[float, float] = (-math.pi / 2, math.pi / 2)

    def __post_init__(self):
        put = object.__setattr__
        put(self, "point", _vec(self.point, "point"))
        put(self, "normal", _unit(self.normal, "normal"))
        put(self, "centre", _vec(self.centre, "centre"))
        put(self, "axis", _unit(self.axis, "axis"))
        if self.pivot_axis is not None:
            put(self, "pivot_axis", _unit(self.pivot_axis, "pivot_axis"))
        radius, angle = float(self.radius), float(self.pivot_angle)
        if not (math.isfinite(radius) and radius > 0):
            raise ValueError(f"radius must be a positive length; got {self.radius!r}")
        if not math.isfinite(angle):
            raise ValueError(f"pivot_angle must be finite; got {self.pivot_angle!r}")
        lo, hi = (float(x) for x in self.pivot_range)
        if not (math.isfinite(lo) and math.isfinite(hi) and lo <= hi):
            raise ValueError(f"pivot_range must be (lower, upper) with lower <= upper; got {self.pivot_range!r}")
        if np.linalg.norm(self.point - self.centre) < 1e-12:
            raise ValueError("point and centre coincide; the contact must lie on the roller's surface")
        put(self, "radius", radius)
        put(self, "pivot_angle", angle)
        put(self, "pivot_range", (lo, hi))

    @property
    def pivot(self):
        """The unit pivot axis actually used: `pivot_axis`, or the normal when it is None."""
        return self.normal if self.pivot_axis is None else self.pivot_axis

    @property
    def steerable(self):
        """Whether the pivot can move at all (a non-zero range)."""
        return self.pivot_range[1] > self.pivot_range[0]

    def axis_at(self, phi):
        """The unit roller axis (3,) at pivot angle `phi` (rad)."""
        p = self.pivot
        return _rotate(_rotate(self.axis, p, -self.pivot_angle), p, phi)

    def surface_gain(self, phi):
        """Tangential surface velocity (3,) in m/s per rad/s of roller speed at pivot angle `phi`:
        r a(phi) x unit(x - c), projected onto the tangent plane (that projection changes
        nothing when the contact lies on the tread, x - c parallel to the normal)."""
        return _tangent(self.radius * np.cross(self.axis_at(phi), _unit_of(self.point - self.centre)),
                        self.normal)


def rolling_direction(contact, phi=None):
    """Unit rolling direction d (3,) of `contact` at pivot angle `phi` (default: the current one),
    i.e. the tangent direction a positive roller speed moves the object; zeros if the roller
    cannot move the contact tangentially (its axis along x - c)."""
    g = contact.surface_gain(contact.pivot_angle if phi is None else phi)
    norm = np.linalg.norm(g)
    return g / norm if norm > 1e-12 * contact.radius else np.zeros(3)


def _unit_of(x):
    return x / np.linalg.norm(x)


def _tangent(x, n):
    return x - n * (n @ x)


def contact_jacobian(points, origin):
    """Hand-side contact Jacobian J, shape (3n, 6), for points (n, 3) and origin (3,): J @ t is the
    stacked material velocities (n * 3,) of the object's points for a twist t = (v, w) taken at
    `origin`; block i is [I, -skew(x_i - origin)], so J_i t = v + w x (x_i - origin)."""
    pts = np.asarray(points, dtype=float).reshape(-1, 3)
    o = np.asarray(origin, dtype=float).reshape(3)
    blocks = [np.hstack([np.eye(3), -_skew(x - o)]) for x in pts]
    return np.vstack(blocks) if blocks else np.zeros((0, 6))


def grasp_matrix(points, normals, origin):
    """Frictionless-contact grasp map G, shape (6, n), for points (n, 3), unit normals (n, 3)
    and origin (3,): column i is the wrench (force, torque about `origin`) of a unit force
    along n_i at x_i, i.e. (n_i, (x_i - origin) x n_i). Its transpose maps a twist to the normal
    contact velocities: (G.T @ t)[i] = n_i . (v + w x (x_i - origin))."""
    pts = np.asarray(points, dtype=float).reshape(-1, 3)
    nrm = np.asarray(normals, dtype=float).reshape(-1, 3)
    if pts.shape != nrm.shape:
        raise ValueError(f"points {pts.shape} and normals {nrm.shape} must have the same shape")
    o = np.asarray(origin, dtype=float).reshape(3)
    return np.vstack([nrm.T, np.cross(pts - o, nrm).T]) if len(pts) else np.zeros((6, 0))


@dataclass(frozen=True, eq=False)
class SteeringResult:
    """What `steer` returns, for n contacts; twists are (v, w) at the given origin, world frame.

    speeds (n,) rad/s: roller speeds, positive = right-handed about each returned axis, moving
    the object along +rolling_dirs[i].
    pivot_angles (n,) rad: target pivot angles, inside each range when steering (unchanged
    current angles otherwise, and for rollers with a zero-width range).
    achieved (6,): the projection of the command onto the achievable twists.
    residual (6,): command - achieved, the part no roller setting can produce.
    residual_norm: |residual| in m/s, angular part multiplied by length_scale.
    rolling_dirs (n, 3): unit rolling direction at each returned pivot angle (zeros if the roller
    cannot move its contact tangentially).
    slip (n,) m/s: |tangential material velocity under `achieved` - surface velocity of the
    returned settings| at each contact. Zero (round-off) whenever the settings produce `achieved`;
    positive only where a pivot range narrower than the needed turn, or a pivot axis far from
    the normal, cannot reach the wanted direction (the nearest reachable one is returned).
    dof: dimension of the achievable set (6 - rank of the constraints).
    determined: whether the contacts pin the twist (see the module docstring).
    """

    speeds: np.ndarray
    pivot_angles: np.ndarray
    achieved: np.ndarray
    residual: np.ndarray
    residual_norm: float
    rolling_dirs: np.ndarray
    slip: np.ndarray
    dof: int
    determined: bool


def _project(rows, scale, twist, rtol):
    """Weighted least-squares projection of `twist` onto {t : rows @ t = 0}.

    With S = diag(scale) the metric is |S t|; in tau = S t coordinates the constraint matrix is
    rows @ S^-1 and the projection is Euclidean onto its null space from an SVD. Returns
    (projected twist, dimension of the null space)."""
    if rows.shape[0] == 0:
        return twist.copy(), 6
    m = rows / scale
    _, sigma, vt = np.linalg.svd(m, full_matrices=True)
    rank = int(np.count_nonzero(sigma > rtol * sigma[0]))
    basis = vt[rank:].T  # (6, 6 - rank), orthonormal in tau coordinates
    tau = scale * twist
    return basis @ (basis.T @ tau) / scale, 6 - rank


def _rank(matrix, rtol):
    if matrix.shape[0] == 0:
        return 0
    sigma = np.linalg.svd(matrix, compute_uv=False)
    return int(np.count_nonzero(sigma > rtol * sigma[0]))


def _pivot_for(contact, u, tiny):
    """Pivot angle in range and roller speed whose surface velocity best matches the tangential
    velocity `u` (3,). Returns (phi, speed).

    The surface gain is g(phi) = A + B cos(phi) + C sin(phi) (Rodrigues expansion), so
    "g(phi) parallel to u" is one scalar equation alpha + beta cos(phi) + gamma sin(phi) = 0 with
    the in-plane normal q = n x unit(u): closed-form roots delta +- acos(-alpha / R). Of the
    roots (and their 2 pi shifts) inside the range, the one nearest the current angle wins
    (then the one needing the lower speed); speed = u . g / |g|^2, negative when the roller runs backwards.
    If no root is in range, the angle in range that best aligns g with u (least-squares speed)
    is taken from a sampled search."""
    lo, hi = contact.pivot_range
    current = min(max(contact.pivot_angle, lo), hi)
    if np.linalg.norm(u) <= tiny:
        return current, 0.0
    n, p, r = contact.normal, contact.pivot, contact.radius
    m = _unit_of(contact.point - contact.centre)
    a0 = _rotate(contact.axis, p, -contact.pivot_angle)
    pa, pxm = p @ a0, np.cross(p, m)
    A = _tangent(r * pa * pxm, n)
    B = _tangent(r * (np.cross(a0, m) - pa * pxm), n)
    C = _tangent(r * np.cross(np.cross(p, a0), m), n)
    size = max(np.linalg.norm(A), np.linalg.norm(B), np.linalg.norm(C), 1e-300)
    uh = u / np.linalg.norm(u)
    q = np.cross(n, uh)
    alpha, beta, gamma = q @ A, q @ B, q @ C
    amp = math.hypot(beta, gamma)

    def gain(phi):
        return A + B * math.cos(phi) + C * math.sin(phi)

    roots = []
    if amp > 1e-12 * size:
        c = -alpha / amp
        if abs(c) <= 1.0 + 1e-9:
            delta, s = math.atan2(gamma, beta), math.acos(min(max(c, -1.0), 1.0))
            roots = [delta + s, delta - s]
    elif abs(alpha) <= 1e-12 * size:
        roots = [current]  # g(phi) is parallel to u at every angle
    slack = 1e-12 * max(1.0, abs(lo), abs(hi))
    best = None
    for root in roots:
        k0 = math.ceil((lo - slack - root) / (2 * math.pi))
        k1 = math.floor((hi + slack - root) / (2 * math.pi))
        for k in range(k0, k1 + 1):
            phi = min(max(root + 2 * math.pi * k, lo), hi)
            g = gain(phi)
            reach = abs(uh @ g)
            if reach <= 1e-9 * size:
                continue
            key = (round(abs(phi - current), 12), -round(reach / size, 9), phi)
            if best is None or key < best[0]:
                best = (key, phi, g)
    if best is None:  # nothing in range is parallel: the best-aligned angle, sampled then refined
        phi = _best_aligned(A, B, C, uh, lo, hi, current, size)
        g = gain(phi)
        if g @ g <= (1e-12 * size) ** 2:
            return current, 0.0
        best = (None, phi, g)
    _, phi, g = best
    return float(phi), float(u @ g / (g @ g))


def _best_aligned(A, B, C, uh, lo, hi, current, size):
    """The angle in [lo, hi] maximising cos^2 between g(phi) and uh: a grid of _GRID samples,
    then two finer grids around the best sample (final step about 1e-8 (hi - lo))."""
    a, b = lo, hi
    for _ in range(3):
        phis = np.linspace(a, b, _GRID)
        g = A[None] + np.cos(phis)[:, None] * B[None] + np.sin(phis)[:, None] * C[None]
        gg = np.einsum("ij,ij->i", g, g)
        score = np.where(gg > (1e-12 * size) ** 2, (g @ uh) ** 2 / np.maximum(gg, 1e-300), 0.0)
        best = np.flatnonzero(score >= score.max() - 1e-12)
        i = int(best[np.argmin(np.abs(phis[best] - current))])
        step = (b - a) / (_GRID - 1)
        a, b = max(lo, phis[i] - step), min(hi, phis[i] + step)
    return float(phis[i])


def steer(twist, origin, contacts, length_scale, steer_pivots=True, rtol=RANK_RTOL):
    """Roller speeds and pivot angles that move the held object at `twist`, as nearly as possible.

    twist (6,): commanded (v, w) of the object at `origin` (3,), world frame.
    contacts: sequence of RollerContact. length_scale (m, > 0): weight of the angular part in
    the metric (the object's size is a natural choice). steer_pivots: True lets each steerable
    roller's pivot turn (only the normal constraints remain); False keeps every pivot where it is.
    rtol: rank tolerance of the SVD (see RANK_RTOL).

    The achieved twist is the weighted least-squares projection of the command onto the
    achievable set (see the module docstring); each roller's speed and pivot angle then
    reproduce the tangential part of the achieved contact velocity. A contact whose wanted
    tangential speed is below rtol * |command| keeps its current pivot angle (clipped into the
    range) with speed 0.
    """
    t = np.array(twist, dtype=float).reshape(-1)
    if t.shape != (6,) or not np.all(np.isfinite(t)):
        raise ValueError(f"twist must be 6 finite numbers (v, w); got {twist!r}")
    o = _vec(origin, "origin")
    L = float(length_scale)
    if not (math.isfinite(L) and L > 0):
        raise ValueError(f"length_scale must be a positive length; got {length_scale!r}")
    contacts = list(contacts)
    for c in contacts:
        if not isinstance(c, RollerContact):
            raise TypeError(f"contacts must be RollerContact; got {type(c).__name__}")
    scale = np.array([1.0, 1.0, 1.0, L, L, L])

    rows = []
    gains = []
    steering = []
    for c in contacts:
        jac = contact_jacobian(c.point[None], o)
        rows.append(c.normal @ jac)
        steers = steer_pivots and c.steerable
        steering.append(steers)
        g = c.surface_gain(c.pivot_angle)
        gains.append(g)
        if steers:
            continue
        gn = np.linalg.norm(g)
        if gn > 1e-12 * c.radius:
            rows.append(np.cross(c.normal, g / gn) @ jac)
        else:  # the roller cannot move this contact tangentially: it must stay put
            rows.append(jac - np.outer(c.normal, c.normal @ jac))  # the two tangent rows (rank 2)
    constraints = np.vstack([np.atleast_2d(r) for r in rows]) if rows else np.zeros((0, 6))
    achieved, dof = _project(constraints, scale, t, rtol)
    residual = t - achieved
    command_size = float(np.linalg.norm(scale * t))
    tiny = max(rtol * command_size, 1e-300)

    n = len(contacts)
    speeds, angles = np.zeros(n), np.zeros(n)
    dirs, slip = np.zeros((n, 3)), np.zeros(n)
    for i, c in enumerate(contacts):
        u = _tangent(contact_jacobian(c.point[None], o) @ achieved, c.normal)
        if steering[i]:
            angles[i], speeds[i] = _pivot_for(c, u, tiny)
            g = c.surface_gain(angles[i])
        else:
            g = gains[i]
            angles[i] = c.pivot_angle
            gg = g @ g
            speeds[i] = u @ g / gg if gg > (1e-12 * c.radius) ** 2 else 0.0
        gn = np.linalg.norm(g)
        dirs[i] = g / gn if gn > 1e-12 * c.radius else 0.0
        slip[i] = np.linalg.norm(u - speeds[i] * g)

    full = contact_jacobian([c.point for c in contacts], o) / scale
    return SteeringResult(
        speeds=speeds, pivot_angles=angles, achieved=achieved, residual=residual,
        residual_norm=float(np.linalg.norm(scale * residual)), rolling_dirs=dirs, slip=slip,
        dof=dof, determined=_rank(full, rtol) == 6,
    )
