"""Reference checks of grasp quality: harness.sim.quality against linear programming and textbook cases.

Every reference value names its source in a comment. The independent reference is linear
programming (scipy.optimize.linprog, HiGHS), which never builds a hull: the distance from the
origin to the hull boundary along a direction, and the existence of a hyperplane through the
origin with every wrench on one side, are both small LPs over the primitive wrenches.
"""

from __future__ import annotations

import functools
import math

import numpy as np
import pytest
from scipy.optimize import linprog
from scipy.spatial import ConvexHull
from scipy.spatial.transform import Rotation

from harness.sim import quality as Q

ORIGIN = np.zeros(3)
LP_TOL = 1e-6  # HiGHS' default primal feasibility tolerance is 1e-7; its optimal t is exact to ~1e-8
EXACT = 1e-9  # both sides are the same polytope computed in float64


# --- linear-programming references ---------------------------------------------------------------

def reach(wrenches, u, t_min=None):
    """Largest t with t * u in the hull of `wrenches` (m, d), by LP; None when no such t exists.

    Variables (lambda (m,), t): maximise t subject to sum_i lambda_i w_i - t u = 0, sum lambda = 1,
    lambda >= 0 (a point of the hull written as a convex combination; common practice).
    """
    m, d = wrenches.shape
    a_eq = np.zeros((d + 1, m + 1))
    a_eq[:d, :m] = wrenches.T
    a_eq[:d, m] = -np.asarray(u)
    a_eq[d, :m] = 1.0
    b_eq = np.zeros(d + 1)
    b_eq[d] = 1.0
    cost = np.zeros(m + 1)
    cost[m] = -1.0
    res = linprog(cost, A_eq=a_eq, b_eq=b_eq, bounds=[(0, None)] * m + [(t_min, None)], method="highs")
    assert res.status in (0, 2), res.message  # optimal or infeasible; never unbounded (the hull is bounded)
    return res.x[m] if res.status == 0 else None


def separation(wrenches):
    """min over directions u with max|u_k| = 1 of max_i w_i . u, by 2d LPs, and the minimising u.

    The origin is strictly inside the hull iff every non-zero u has some w_i . u > 0 (supporting
    hyperplane theorem, e.g. Boyd & Vandenberghe, Convex Optimization, 2004, sec. 2.5); scaling
    u to max|u_k| = 1 fixes one coordinate at +1 or -1, so 2d LPs cover every direction. A
    result <= 0 means a hyperplane through the origin has every wrench on one side (no closure);
    < 0 means the origin is strictly outside.
    """
    m, d = wrenches.shape
    best, best_u = math.inf, None
    for k in range(d):
        for sign in (1.0, -1.0):
            # variables (u (d,), s): minimise s subject to w_i . u - s <= 0, u_k = sign, |u_j| <= 1
            bounds = [(-1.0, 1.0)] * d + [(None, None)]
            bounds[k] = (sign, sign)
            res = linprog(np.r_[np.zeros(d), 1.0], A_ub=np.c_[wrenches, -np.ones(m)], b_ub=np.zeros(m),
                          bounds=bounds, method="highs")
            assert res.status == 0, res.message
            if res.fun < best:
                best, best_u = res.fun, res.x[:d]
    return best, best_u


# --- contact sets ---------------------------------------------------------------------------------

def ring(count, mu, radius=1.0, z=0.0):
    """`count` contacts evenly spaced round a sphere's circle at height z, normals at the centre."""
    a = 2.0 * np.pi * np.arange(count) / count
    r = math.sqrt(radius * radius - z * z)
    p = np.c_[r * np.cos(a), r * np.sin(a), np.full(count, z)]
    return p, -p / radius, mu, ORIGIN, radius


def tetrahedron(mu, radius=1.0):
    """Contacts at a regular tetrahedron's vertices on a sphere, normals at the centre."""
    v = np.array([[1, 1, 1], [1, -1, -1], [-1, 1, -1], [-1, -1, 1]]) / math.sqrt(3.0)
    return v * radius, -v, mu, ORIGIN, radius


def random_contacts(rng):
    """3-5 contacts on a sphere's or a box's surface, inward normals, mu in [0.2, 1], object anywhere.

    Returns (points, normals, mu, centre, torque_scale) with torque_scale the largest distance from
    the centre to a contact.
    """
    k = int(rng.integers(3, 6))
    if rng.random() < 0.5:
        radius = rng.uniform(0.02, 0.1)
        outward = rng.normal(size=(k, 3))
        outward /= np.linalg.norm(outward, axis=1, keepdims=True)
        p = outward * radius
    else:
        half = rng.uniform(0.01, 0.08, size=3)
        area = np.array([half[1] * half[2], half[0] * half[2], half[0] * half[1]])
        axis = rng.choice(3, size=k, p=area / area.sum())  # uniform over the surface
        side = rng.choice([-1.0, 1.0], size=k)
        p = rng.uniform(-half, half, size=(k, 3))
        p[np.arange(k), axis] = side * half[axis]
        outward = np.zeros((k, 3))
        outward[np.arange(k), axis] = side
    offset = rng.uniform(-0.5, 0.5, size=3)  # where the object sits in the world
    scale = float(np.linalg.norm(p, axis=1).max())
    return p + offset, -outward, rng.uniform(0.2, 1.0, size=k), offset, scale


@functools.cache
def random_sets(closures=20, others=8):
    """Seeded random contact sets: `closures` in force closure and `others` not, by epsilon."""
    rng = np.random.default_rng(20240611)
    yes, no = [], []
    for _ in range(2000):
        case = random_contacts(rng)
        group, wanted = (yes, closures) if Q.epsilon(*case) > Q.MIN_EPSILON else (no, others)
        if len(group) < wanted:
            group.append(case)
        if len(yes) == closures and len(no) == others:
            return yes, no
    raise AssertionError("could not draw enough random contact sets")


def random_rotation(seed):
    return Rotation.random(random_state=seed).as_matrix()


# --- epsilon against linear programming -----------------------------------------------------------

@pytest.mark.parametrize("index", range(20))
def test_epsilon_is_the_lp_distance_to_the_hull_boundary(index):
    # Ferrari & Canny 1992: epsilon is the radius of the largest origin-centred ball in the hull,
    # i.e. the minimum over unit directions u of the distance t(u) from the origin to the boundary
    # along u, attained along the normal u* of the nearest facet. t(u) comes from the LP in reach().
    case = random_sets()[0][index]
    w = Q.contact_wrenches(*case)
    eps = Q.epsilon(*case)
    assert eps > Q.MIN_EPSILON

    hull = ConvexHull(w)  # only to name the nearest facet's normal u*; the values come from LPs
    u_star = hull.equations[np.argmax(hull.equations[:, -1]), :6]
    assert reach(w, u_star) == pytest.approx(eps, abs=LP_TOL)
    # the facet is a supporting hyperplane at distance eps: no wrench lies beyond it
    assert (w @ u_star).max() == pytest.approx(eps, abs=EXACT)

    rng = np.random.default_rng(1000 + index)
    u = rng.normal(size=(200, 6))
    u /= np.linalg.norm(u, axis=1, keepdims=True)
    assert min(reach(w, d) for d in u) >= eps - EXACT

    # the origin is strictly inside: every direction has a wrench on its positive side
    assert separation(w)[0] > 0


@pytest.mark.parametrize("index", range(8))
def test_random_sets_without_closure_are_separated_by_lp(index):
    # Supporting hyperplane theorem (see separation()): epsilon 0 must come with a hyperplane
    # through the origin that has every primitive wrench on one side.
    case = random_sets()[1][index]
    w = Q.contact_wrenches(*case)
    assert Q.epsilon(*case) == 0.0 and not Q.force_closure(*case)
    assert separation(w)[0] <= 1e-9


def test_grasp_from_above_has_origin_outside_the_hull():
    # Four contacts on a sphere's upper cap all push down (mu 0.5 keeps every force's z part < 0),
    # so no combination can push up: along +z force the LP finds no t >= 0, and separation() finds
    # a strictly separating hyperplane (common practice: a one-sided grasp cannot hold).
    case = ring(4, 0.5, radius=0.05, z=0.03)
    w = Q.contact_wrenches(*case)
    assert Q.epsilon(*case) == 0.0
    assert reach(w, np.r_[0, 0, 1.0, 0, 0, 0], t_min=0.0) is None
    gap, u = separation(w)
    assert gap < -0.1 and (w @ u).max() < 0


# --- textbook force-closure cases -----------------------------------------------------------------
# Murray, Li and Sastry, A Mathematical Introduction to Robotic Manipulation, 1994, ch. 5: a grasp is
# in force closure when its contact wrenches positively span the wrench space; in the plane two point
# contacts with friction are in force closure iff the line joining them lies strictly inside both
# friction cones; in space two point contacts cannot resist torque about the line joining them.

def test_antipodal_pair_on_a_sphere_cannot_resist_spin():
    case = ring(2, 0.5, radius=0.04)
    w = Q.contact_wrenches(*case)
    # no primitive wrench has torque about the contact line (x axis): the hull is 5-D
    np.testing.assert_allclose(w[:, 3], 0.0, atol=1e-15)
    assert Q.epsilon(*case) == 0.0 and not Q.force_closure(*case)
    assert separation(w)[0] <= 1e-9


def test_three_contacts_round_the_equator():
    with_friction, frictionless = ring(3, 0.5, radius=0.04), ring(3, 0.0, radius=0.04)
    assert Q.force_closure(*with_friction) and Q.epsilon(*with_friction) > 0.1
    assert separation(Q.contact_wrenches(*with_friction))[0] > 0
    # frictionless: every force is radial in the equator plane, so nothing resists lift or spin
    assert Q.epsilon(*frictionless) == 0.0 and not Q.force_closure(*frictionless)
    assert separation(Q.contact_wrenches(*frictionless))[0] <= 1e-9


def test_tetrahedron_contacts_are_in_force_closure():
    case = tetrahedron(0.3, radius=0.03)
    assert Q.force_closure(*case)
    assert separation(Q.contact_wrenches(*case))[0] > 0


def _tilted_pair(tilt_deg, mu):
    """Contacts at (-1, 0, 0) and (1, 0, 0), normals tilted by tilt_deg off the joining line, both to +y."""
    b = math.radians(tilt_deg)
    p = np.array([[-1.0, 0, 0], [1.0, 0, 0]])
    n = np.array([[math.cos(b), math.sin(b), 0], [-math.cos(b), math.sin(b), 0]])
    return p, n, mu, ORIGIN, 1.0


@pytest.mark.parametrize("tilt_deg, planar_closure",
                         [(5.0, True), (15.0, True), (20.0, False), (40.0, False)])
def test_two_contacts_planar_closure_iff_joining_line_inside_cones(tilt_deg, planar_closure):
    # mu 0.3: cone half-angle atan(0.3) = 16.7 degrees, so the joining line is inside both cones
    # for tilts of 5 and 15 degrees and outside for 20 and 40 (Murray, Li and Sastry, ch. 5).
    case = _tilted_pair(tilt_deg, 0.3)
    w = Q.contact_wrenches(*case)
    # In space two point contacts are never in force closure (spin about the joining line).
    assert Q.epsilon(*case) == 0.0 and not Q.force_closure(*case)
    # Planar wrenches (fx, fy, tau_z): the in-plane part of each pyramid; the pyramid has an edge
    # in the plane (its first tangent points at the centre, which lies in the plane), so the
    # projection is exactly the planar friction cone.
    planar = w[:, [0, 1, 5]]
    assert (separation(planar)[0] > 1e-9) == planar_closure


# --- invariances and monotonicity ---------------------------------------------------------------

def test_epsilon_never_decreases_with_friction():
    # A larger pyramid contains the smaller one (n + mu e = (mu / mu') (n + mu' e) + (1 - mu / mu') n,
    # and n is the mean of the edges), so the hull and its inscribed ball can only grow (common practice).
    grid = np.linspace(0.0, 1.5, 16)
    for make in (lambda m: ring(3, m, radius=0.04), lambda m: tetrahedron(m, radius=0.03),
                 lambda m: (*random_sets()[0][0][:2], m, *random_sets()[0][0][3:])):
        eps = np.array([Q.epsilon(*make(m)) for m in grid])
        assert np.all(np.diff(eps) >= -EXACT), eps
        assert eps[-1] > eps[0] + 0.05


def _moved(case, rot=np.eye(3), shift=ORIGIN, factor=1.0):
    p, n, mu, c, scale = case
    return (p @ rot.T * factor + shift, n @ rot.T, mu, c @ rot.T * factor + shift, scale * factor)


@pytest.mark.parametrize("index", range(6))
def test_epsilon_is_invariant_to_moving_the_whole_grasp(index):
    # Ferrari-Canny epsilon depends only on the grasp relative to the object: a rigid motion maps
    # the wrench hull by an orthogonal map (forces and torques both rotate by R; translating points
    # and centre together leaves p - centre unchanged), and scaling lengths with torque_scale leaves
    # the wrenches unchanged (common practice).
    cases = [ring(3, 0.5, radius=0.04), tetrahedron(0.3, radius=0.03)] + random_sets()[0][:4]
    case = cases[index]
    eps = Q.epsilon(*case)
    assert eps > Q.MIN_EPSILON
    rot = random_rotation(index)
    assert Q.epsilon(*_moved(case, rot=rot)) == pytest.approx(eps, abs=EXACT)
    assert Q.epsilon(*_moved(case, shift=np.array([0.3, -1.2, 0.7]))) == pytest.approx(eps, abs=EXACT)
    both = _moved(case, rot=rot, shift=np.array([2.0, 0.5, -0.4]))
    assert Q.epsilon(*both) == pytest.approx(eps, abs=EXACT)
    assert Q.epsilon(*_moved(case, factor=1000.0)) == pytest.approx(eps, abs=EXACT)  # m -> mm


def test_epsilon_of_face_centre_grasp_of_a_cube_by_hand():
    # Six contacts at the face centres s a e_i of a cube (half-edge a), normals -s e_i, friction m,
    # 4-edge pyramids along the cube's axes, torque_scale a. The primitive wrenches are, for each
    # axis i, side s, tangent axis j != i and sign v (l the third axis, eps_ijl the Levi-Civita sign):
    #     w = (-s e_i + v m e_j,  s v m eps_ijl e_l).
    # Upper bound: along u* = (0, 0, 0, 1, 1, 1) / sqrt(3), w . u* = s v eps_ijl m / sqrt(3) <= m / sqrt(3),
    # so the hyperplane w . u* = m / sqrt(3) supports the hull and epsilon <= m / sqrt(3).
    # Lower bound (m <= 1): for u = (g, k) and a fixed l with {i, j} the other two axes, pick
    # s = -sign(g_i), v = sign(g_j): w . u = |g_i| + m |g_j| +- m |k_l|, and the ordered pair (j, i)
    # gives the opposite sign on the last term, so h(u) = max_w w . u >= m (G_l + |k_l|) with
    # G_l = |g_i| + |g_j|. Then 3 h^2 >= m^2 sum_l (G_l + |k_l|)^2 >= m^2 (sum_l G_l^2 + |k|^2)
    # >= m^2 (2 |g|^2 + |k|^2) >= m^2 |u|^2, so h(u) >= m / sqrt(3) for every unit u.
    # Hence epsilon = m / sqrt(3) exactly (working by hand; Ferrari & Canny 1992 for the definition).
    a = 0.03
    p = np.vstack([np.eye(3), -np.eye(3)]) * a
    for m in (0.25, 0.5, 1.0):
        got = Q.epsilon(p + 0.1, -p / a, m, np.full(3, 0.1), a, edges=4)
        assert got == pytest.approx(m / math.sqrt(3.0), abs=EXACT)


# --- the primitive wrenches themselves ----------------------------------------------------------

def test_primitive_wrenches_lie_on_the_linearised_friction_cone():
    # Linearised Coulomb cone (Murray, Li and Sastry, ch. 5): unit normal force, tangential part of
    # length mu on the cone's rim (half-angle atan(mu)), edges evenly spread round the normal, and
    # torque (p - centre) x f about the centre divided by torque_scale.
    p, n, mu, c, scale = random_sets()[0][3]
    edges = 8
    w = Q.contact_wrenches(p, n, mu, c, scale, edges=edges)
    assert w.shape == (len(p) * edges, 6)
    f = w[:, :3].reshape(len(p), edges, 3)
    normal_part = np.einsum("kej,kj->ke", f, n)
    np.testing.assert_allclose(normal_part, 1.0, rtol=0, atol=EXACT)
    tangential = f - normal_part[..., None] * n[:, None, :]
    np.testing.assert_allclose(np.linalg.norm(tangential, axis=2), np.repeat(mu[:, None], edges, 1),
                               atol=EXACT)
    # neighbouring edges are 2 pi / edges apart round the normal
    cos = np.einsum("kej,kej->ke", tangential, np.roll(tangential, -1, axis=1)) / (mu[:, None] ** 2)
    np.testing.assert_allclose(cos, math.cos(2 * math.pi / edges), atol=EXACT)
    torque = np.cross(np.repeat(p - c, edges, axis=0), w[:, :3]) / scale
    np.testing.assert_allclose(w[:, 3:], torque, atol=EXACT)


def test_scalar_and_per_contact_mu_agree_and_order_is_by_contact():
    p, n, _, c, scale = tetrahedron(0.3)
    w = Q.contact_wrenches(p, n, 0.4, c, scale)
    np.testing.assert_array_equal(w, Q.contact_wrenches(p, n, np.full(4, 0.4), c, scale))
    # rows k * edges ... (k + 1) * edges - 1 belong to contact k
    np.testing.assert_allclose(w[8:16, :3] @ n[1], 1.0, atol=EXACT)


def test_grasp_quality_bundles_the_results():
    got = Q.grasp_quality(*ring(3, 0.5, radius=0.04))
    assert got == Q.GraspQuality(Q.epsilon(*ring(3, 0.5, radius=0.04)), True, 3)
    assert Q.grasp_quality(*ring(3, 0.0)) == Q.GraspQuality(0.0, False, 3)


@pytest.mark.parametrize("count", [0, 1])
def test_too_few_contacts_give_zero(count):
    p, n = np.zeros((count, 3)), np.tile([0.0, 0.0, -1.0], (count, 1))
    assert Q.contact_wrenches(p, n, 0.5, ORIGIN, 1.0).shape == (count * 8, 6)
    assert Q.grasp_quality(p, n, 0.5, ORIGIN, 1.0) == Q.GraspQuality(0.0, False, count)


def test_normals_are_normalised():
    p, n, mu, c, scale = tetrahedron(0.3)
    assert Q.epsilon(p, 3.0 * n, mu, c, scale) == Q.epsilon(p, n, mu, c, scale)


# --- bad input --------------------------------------------------------------------------------

GOOD = tetrahedron(0.3)


@pytest.mark.parametrize("position, value, message", [
    (0, np.zeros((4, 2)), r"points must have shape \(n, 3\); got shape \(4, 2\)"),
    (0, np.zeros(3), r"points must have shape \(n, 3\); got shape \(3,\)"),
    (0, np.full((4, 3), np.nan), "points must be finite; got NaN or infinity"),
    (1, np.zeros((3, 3)) + 1.0, r"normals must have one row per point \(4\); got 3"),
    (1, np.zeros((4, 3)), "normals must be non-zero directions; row 0 has length 0"),
    (1, np.full((4, 3), np.inf), "normals must be finite"),
    (2, np.full(3, 0.5), r"mu must be a scalar or have shape \(4,\); got shape \(3,\)"),
    (2, -0.1, "mu must be finite and >= 0"),
    (2, np.nan, "mu must be finite and >= 0"),
    (3, np.zeros(2), r"centre must have shape \(3,\); got shape \(2,\)"),
    (3, np.array([0.0, np.nan, 0.0]), "centre must be finite"),
    (4, 0.0, r"torque_scale must be a finite length > 0 \(m\); got 0.0"),
    (4, np.inf, "torque_scale must be a finite length > 0"),
    (5, 2, "edges must be an integer >= 3; got 2"),
    (5, 6.5, "edges must be an integer >= 3; got 6.5"),
])
def test_bad_input_is_rejected_with_a_clear_message(position, value, message):
    args = list(GOOD) + [8]
    args[position] = value
    for fn in (Q.contact_wrenches, Q.epsilon, Q.force_closure, Q.grasp_quality):
        with pytest.raises(ValueError, match=message):
            fn(*args)
