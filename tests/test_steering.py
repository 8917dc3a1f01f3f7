"""Reference checks of harness.sim.steering: roller speeds and pivot angles for a commanded object twist.

Every reference value names its source in a comment. The kinematic facts used are textbook ones:
the velocity of a rigid body's material point x is v + w x (x - o), and a roller of radius r
spinning at omega about its axis a moves its surface at omega a x (x - c), of magnitude omega r
(no-slip rolling contact; Murray, Li and Sastry 1994, "A Mathematical Introduction to Robotic
Manipulation", ch. 5, or any kinematics text). The independent references are
scipy.spatial.transform.Rotation (to turn roller axes by the returned pivot angles) and
scipy.linalg.null_space (to build the achievable set without harness code).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.linalg import null_space
from scipy.spatial.transform import Rotation

from harness.sim.steering import (RollerContact, contact_jacobian, grasp_matrix, rolling_direction,
                              steer)

TIGHT = 1e-9  # m/s (or relative): both sides are exact linear algebra in float64


def unit(x):
    x = np.asarray(x, dtype=float)
    return x / np.linalg.norm(x)


def material_velocity(twist, origin, x):
    """Rigid-body point velocity v + w x (x - o) (Murray, Li and Sastry 1994, ch. 2)."""
    return np.asarray(twist[:3]) + np.cross(twist[3:], np.asarray(x) - origin)


def axis_after(contact, phi):
    """The roller axis at pivot angle phi, turned by scipy rather than harness code."""
    p = contact.normal if contact.pivot_axis is None else contact.pivot_axis
    back = Rotation.from_rotvec(-contact.pivot_angle * np.asarray(p))
    return Rotation.from_rotvec(phi * np.asarray(p)).apply(back.apply(contact.axis))


def surface_velocity(contact, phi, omega):
    """Roller surface velocity at the contact, omega a x (x - c) (no-slip rolling; any kinematics text)."""
    return omega * np.cross(axis_after(contact, phi), contact.point - contact.centre)


def tangential(x, n):
    return x - n * (n @ x)


def weighted(L):
    return np.diag([1.0, 1.0, 1.0, L * L, L * L, L * L])


def random_contacts(rng, count, origin, size=0.05, tilt=0.0, full_range=False):
    """Consistent roller contacts around `origin`: c = x - r n, axis perpendicular to n.
    `tilt` (rad) turns the pivot axis away from the normal."""
    out = []
    for _ in range(count):
        n = unit(rng.normal(size=3))
        x = origin + rng.uniform(-size, size, 3)
        r = rng.uniform(0.005, 0.02)
        a = unit(np.cross(n, rng.normal(size=3)))
        p = None
        if tilt:
            p = Rotation.from_rotvec(tilt * unit(np.cross(n, rng.normal(size=3)))).apply(n)
        lo, hi = (-math.pi, math.pi) if full_range else (-math.pi / 2, math.pi / 2)
        out.append(RollerContact(x, n, x - r * n, a, r, pivot_axis=p,
                                 pivot_angle=rng.uniform(lo, hi), pivot_range=(lo, hi)))
    return out


def reference_projection(twist, origin, contacts, L, steer_pivots):
    """Achievable set from scipy.linalg.null_space of the constraint rows built here, and the
    W-orthogonal projection Z (Z' W Z)^-1 Z' W t onto it (weighted least squares)."""
    rows = []
    for c in contacts:
        lever = c.point - origin
        rows.append(np.concatenate([c.normal, np.cross(lever, c.normal)]))
        if not steer_pivots:
            d = np.cross(c.axis, unit(c.point - c.centre))
            e = np.cross(c.normal, unit(d))
            rows.append(np.concatenate([e, np.cross(lever, e)]))
    C = np.array(rows).reshape(-1, 6)
    Z = null_space(C, rcond=1e-12) if len(rows) else np.eye(6)
    W = weighted(L)
    return Z @ np.linalg.solve(Z.T @ W @ Z, Z.T @ W @ twist), C, Z


def check_settings_reproduce(result, twist, origin, contacts, atol):
    """The returned speeds and pivot angles, turned and rolled with scipy, give the tangential
    material velocity of the achieved twist at every contact (no slip)."""
    for i, c in enumerate(contacts):
        want = tangential(material_velocity(result.achieved, origin, c.point), c.normal)
        got = surface_velocity(c, result.pivot_angles[i], result.speeds[i])
        np.testing.assert_allclose(got, want, rtol=0, atol=atol, err_msg=f"contact {i}")


# --- single roller --------------------------------------------------------------------------------

@pytest.mark.parametrize("steer_pivots", [True, False])
def test_single_roller_speed_is_v_over_r(steer_pivots):
    rng = np.random.default_rng(3)
    origin = np.zeros(3)
    c = random_contacts(rng, 1, origin)[0]
    d = unit(np.cross(c.axis, c.point - c.centre))
    v = 0.037
    result = steer(np.concatenate([v * d, np.zeros(3)]), origin, [c], 0.05, steer_pivots)
    # no-slip rolling: surface speed = omega r, so omega = |v| / r (Murray, Li and Sastry 1994, ch. 5)
    assert result.speeds[0] == pytest.approx(v / c.radius, rel=TIGHT)
    assert result.residual_norm < TIGHT
    assert result.pivot_angles[0] == pytest.approx(c.pivot_angle, abs=TIGHT)
    np.testing.assert_allclose(result.rolling_dirs[0], d, atol=TIGHT)
    np.testing.assert_allclose(surface_velocity(c, result.pivot_angles[0], result.speeds[0]), v * d, atol=TIGHT)
    # one contact cannot pin the twist: the achievable set is large, the settings do not force it
    assert not result.determined
    assert result.dof == (5 if steer_pivots else 4)


def test_single_contact_accepts_any_normal_free_twist():
    """Under-constrained: with one steerable roller every twist whose contact velocity is normal-free
    is achieved exactly (the projection holds; the settings just don't determine the twist)."""
    rng = np.random.default_rng(11)
    origin = np.array([0.1, -0.2, 0.3])
    c = random_contacts(rng, 1, origin)[0]
    twist = rng.normal(size=6)
    twist[:3] -= c.normal * (c.normal @ material_velocity(twist, origin, c.point))  # remove the normal part
    result = steer(twist, origin, [c], 0.05)
    assert result.residual_norm < TIGHT
    np.testing.assert_allclose(result.achieved, twist, atol=TIGHT)
    check_settings_reproduce(result, twist, origin, [c], TIGHT)


# --- sphere held at three equator contacts --------------------------------------------------------

R_SPHERE, R_ROLLER = 0.04, 0.012


def sphere_grip(pivot_range=(-math.pi / 2, math.pi / 2)):
    """Contacts at 0, 120, 240 deg on the equator of a sphere at the origin; normals point to the
    centre, roller centres at R + r from it, pivot axes = normals. At pivot 0 the roller axis is
    the equator tangent t = (-sin, cos, 0), so d = t x (-e_r) = +z: rolling direction vertical."""
    out = []
    for k in range(3):
        th = 2 * math.pi * k / 3
        e = np.array([math.cos(th), math.sin(th), 0.0])
        t = np.array([-math.sin(th), math.cos(th), 0.0])
        out.append(RollerContact(R_SPHERE * e, -e, (R_SPHERE + R_ROLLER) * e, t, R_ROLLER, pivot_axis=-e,
                                 pivot_range=pivot_range))
    return out


def test_sphere_grip_rolls_vertically_at_pivot_zero():
    for c in sphere_grip():
        np.testing.assert_allclose(rolling_direction(c), [0, 0, 1], atol=1e-15)


SPHERE_AXES = {"x": [1, 0, 0], "y": [0, 1, 0], "z": [0, 0, 1], "random": list(unit([0.3, -0.8, 0.52]))}


@pytest.mark.parametrize("name", list(SPHERE_AXES))
def test_sphere_rotations_fully_achievable_when_steering(name):
    contacts = sphere_grip()
    origin = np.zeros(3)
    twist = np.concatenate([np.zeros(3), 2.5 * np.asarray(SPHERE_AXES[name])])
    result = steer(twist, origin, contacts, R_SPHERE, steer_pivots=True)
    assert result.residual_norm < TIGHT
    np.testing.assert_allclose(result.achieved, twist, atol=TIGHT)
    for c, phi in zip(contacts, result.pivot_angles):
        assert c.pivot_range[0] <= phi <= c.pivot_range[1]
    # the settings, turned by scipy and rolled as omega a x (x - c), move every contact with the
    # object's material velocity v + w x (x - o) (normal part is zero on a sphere)
    for i, c in enumerate(contacts):
        want = material_velocity(twist, origin, c.point)
        assert abs(c.normal @ want) < TIGHT
        got = surface_velocity(c, result.pivot_angles[i], result.speeds[i])
        np.testing.assert_allclose(got, want, rtol=0, atol=TIGHT)
    # three contacts not on one line pin the twist
    assert result.determined and result.dof == 4  # free: w (3) and the vertical translation


def test_sphere_spin_about_vertical_needs_steering():
    # By hand, pivots at 0 (d = +z everywhere): the non-rolling tangent at contact k is t_k, and
    # t_k . (v + w x R e_k) = t_k . v + R w_z. The normal rows force v_x = v_y = 0, so w_z = 0:
    # the achievable set is {v_z, w_x, w_y}. A spin about z is W-orthogonal to it, so nothing of
    # it is achieved and the residual is the whole command, of size L |w_z|.
    contacts = sphere_grip()
    twist = np.array([0, 0, 0, 0, 0, 3.0])
    result = steer(twist, np.zeros(3), contacts, R_SPHERE, steer_pivots=False)
    assert result.residual_norm > 0.1
    assert result.residual_norm == pytest.approx(R_SPHERE * 3.0, rel=TIGHT)
    assert abs(result.achieved[5]) < TIGHT
    np.testing.assert_allclose(result.achieved, 0, atol=TIGHT)
    np.testing.assert_allclose(result.speeds, 0, atol=TIGHT)
    np.testing.assert_array_equal(result.pivot_angles, 0)
    assert result.dof == 3


@pytest.mark.parametrize("angle_deg", [0, 35, 90, 200])
def test_sphere_tilt_about_horizontal_axis_without_steering(angle_deg):
    # By hand: for a horizontal w, w x R e_k is vertical (both factors horizontal), i.e. along
    # d = +z, and its normal part is zero, so the rotation is in the achievable set {v_z, w_x, w_y};
    # each roller runs at (w x R e_k)_z / r.
    contacts = sphere_grip()
    a = math.radians(angle_deg)
    w = 1.7 * np.array([math.cos(a), math.sin(a), 0.0])
    twist = np.concatenate([np.zeros(3), w])
    result = steer(twist, np.zeros(3), contacts, R_SPHERE, steer_pivots=False)
    assert result.residual_norm < TIGHT
    for i, c in enumerate(contacts):
        assert result.speeds[i] == pytest.approx(np.cross(w, c.point)[2] / R_ROLLER, abs=TIGHT)
    check_settings_reproduce(result, twist, np.zeros(3), contacts, TIGHT)


@pytest.mark.parametrize("steer_pivots", [True, False])
def test_sphere_horizontal_translation_never_producible(steer_pivots):
    # The normal rows n_k . v = 0 for three horizontal normals spanning the plane forbid any
    # horizontal v, whatever the pivots; vertical v and horizontal-axis rotations are allowed.
    contacts = sphere_grip()
    horizontal = np.array([0.02, -0.05, 0, 0, 0, 0])
    allowed = np.array([0, 0, 0.03, 0.4, -1.1, 0])
    result = steer(horizontal + allowed, np.zeros(3), contacts, R_SPHERE, steer_pivots)
    np.testing.assert_allclose(result.residual, horizontal, atol=TIGHT)
    np.testing.assert_allclose(result.achieved, allowed, atol=TIGHT)
    assert result.residual_norm == pytest.approx(np.linalg.norm(horizontal), rel=TIGHT)
    pure = steer(horizontal, np.zeros(3), contacts, R_SPHERE, steer_pivots)
    np.testing.assert_allclose(pure.achieved, 0, atol=TIGHT)
    np.testing.assert_allclose(pure.speeds, 0, atol=TIGHT)


@pytest.mark.parametrize("steer_pivots", [True, False])
def test_sphere_vertical_draw_in(steer_pivots):
    contacts = sphere_grip()
    v = 0.03
    result = steer([0, 0, v, 0, 0, 0], np.zeros(3), contacts, R_SPHERE, steer_pivots)
    assert result.residual_norm < TIGHT
    # no-slip rolling: omega r = v for every roller (any kinematics text)
    np.testing.assert_allclose(result.speeds, v / R_ROLLER, rtol=TIGHT)
    np.testing.assert_allclose(result.pivot_angles, 0, atol=1e-12)


# --- pivot range and sign flips -------------------------------------------------------------------

def one_roller(pivot_range, pivot_angle=0.0):
    """A roller under the object at the origin: normal +z, axis +x at pivot 0, so d0 = x x z = -y;
    the given axis is the current one, +x turned by pivot_angle about z."""
    r = 0.01
    axis = [math.cos(pivot_angle), math.sin(pivot_angle), 0.0]
    return RollerContact([0, 0, 0], [0, 0, 1], [0, 0, -r], axis, r,
                         pivot_angle=pivot_angle, pivot_range=pivot_range)


@pytest.mark.parametrize("range_deg", [(-90, 90), (-30, 150), (-180, 0), (0, 180)])
def test_pivot_angles_stay_in_range_and_speed_flips(range_deg):
    lo, hi = (math.radians(x) for x in range_deg)
    c = one_roller((lo, hi), pivot_angle=(lo + hi) / 2)
    d0 = np.array([0.0, -1.0, 0.0])
    v = 0.02
    for psi in np.radians(np.arange(-180, 181, 7.5)):
        want = Rotation.from_rotvec(psi * np.array([0, 0, 1.0])).apply(d0)  # d turns by phi about n = p
        result = steer(np.concatenate([v * want, np.zeros(3)]), np.zeros(3), [c], 0.05)
        phi, omega = result.pivot_angles[0], result.speeds[0]
        assert lo - 1e-12 <= phi <= hi + 1e-12
        # the pivot reaches psi or psi +- 180 deg; beyond the range the speed flips sign instead
        turn = math.remainder(psi - phi, 2 * math.pi)
        assert abs(math.remainder(turn, math.pi)) < 1e-9
        sign = 1.0 if abs(turn) < math.pi / 2 else -1.0
        assert omega == pytest.approx(sign * v / c.radius, rel=TIGHT)
        assert result.slip[0] < TIGHT
        np.testing.assert_allclose(surface_velocity(c, phi, omega), v * want, atol=TIGHT)


@pytest.mark.parametrize("current_deg, want_deg, forward", [(-60, -80, False), (60, 100, True)])
def test_wide_range_prefers_nearest_angle(current_deg, want_deg, forward):
    # 100 deg and -80 deg both align d with a direction 100 deg from d0 (plane geometry); the one
    # nearer the current angle wins, and the roller runs backwards at -80
    c = one_roller((-math.pi, math.pi), pivot_angle=math.radians(current_deg))
    want = Rotation.from_rotvec(math.radians(100) * np.array([0, 0, 1.0])).apply([0, -1.0, 0])
    result = steer(np.concatenate([0.01 * want, np.zeros(3)]), np.zeros(3), [c], 0.05)
    assert math.degrees(result.pivot_angles[0]) == pytest.approx(want_deg, abs=1e-9)
    assert (result.speeds[0] > 0) == forward
    assert abs(result.speeds[0]) == pytest.approx(0.01 / c.radius, rel=TIGHT)


def test_narrow_range_reports_slip():
    # A 40 deg range cannot reach a direction 60 deg away (nor its opposite at -120 deg): the
    # nearest reachable direction is the 20 deg limit, 40 deg off, so the best speed gives
    # v cos 40 / r along it and leaves v sin 40 of slip (plane geometry).
    c = one_roller((math.radians(-20), math.radians(20)))
    v = 0.02
    want = Rotation.from_rotvec(math.radians(60) * np.array([0, 0, 1.0])).apply([0, -1.0, 0])
    result = steer(np.concatenate([v * want, np.zeros(3)]), np.zeros(3), [c], 0.05)
    assert math.degrees(result.pivot_angles[0]) == pytest.approx(20, abs=1e-4)
    assert result.speeds[0] == pytest.approx(v * math.cos(math.radians(40)) / c.radius, rel=1e-6)
    assert result.slip[0] == pytest.approx(v * math.sin(math.radians(40)), rel=1e-6)


def test_zero_width_range_is_not_steered():
    c = one_roller((0.3, 0.3), pivot_angle=0.3)
    result = steer([0.01, 0, 0, 0, 0, 0], np.zeros(3), [c], 0.05, steer_pivots=True)
    assert result.pivot_angles[0] == 0.3
    assert result.dof == 4  # the fixed roller keeps its tangential row


def test_zero_command_keeps_pivots():
    contacts = random_contacts(np.random.default_rng(5), 3, np.zeros(3))
    result = steer(np.zeros(6), np.zeros(3), contacts, 0.05)
    np.testing.assert_array_equal(result.speeds, 0)
    np.testing.assert_array_equal(result.pivot_angles, [c.pivot_angle for c in contacts])


# --- invariance and the projection property -------------------------------------------------------

def moved(contact, rot, shift):
    p = None if contact.pivot_axis is None else rot.apply(contact.pivot_axis)
    return RollerContact(rot.apply(contact.point) + shift, rot.apply(contact.normal),
                         rot.apply(contact.centre) + shift, rot.apply(contact.axis), contact.radius,
                         pivot_axis=p, pivot_angle=contact.pivot_angle, pivot_range=contact.pivot_range)


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("steer_pivots", [True, False])
def test_rigid_motion_of_the_scene_changes_nothing(seed, steer_pivots):
    rng = np.random.default_rng(seed)
    origin = rng.normal(size=3) * 0.1
    contacts = random_contacts(rng, int(rng.integers(1, 5)), origin, tilt=0.2 * (seed % 2))
    twist = rng.normal(size=6) * [0.05, 0.05, 0.05, 1, 1, 1]
    rot, shift = Rotation.random(random_state=seed), rng.normal(size=3)
    a = steer(twist, origin, contacts, 0.05, steer_pivots)
    b = steer(np.concatenate([rot.apply(twist[:3]), rot.apply(twist[3:])]), rot.apply(origin) + shift,
              [moved(c, rot, shift) for c in contacts], 0.05, steer_pivots)
    np.testing.assert_allclose(b.speeds, a.speeds, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(b.pivot_angles, a.pivot_angles, atol=1e-9)
    assert b.residual_norm == pytest.approx(a.residual_norm, rel=1e-9, abs=1e-12)
    np.testing.assert_allclose(b.achieved[:3], rot.apply(a.achieved[:3]), atol=1e-12)
    np.testing.assert_allclose(b.achieved[3:], rot.apply(a.achieved[3:]), atol=1e-10)


@pytest.mark.parametrize("count", [1, 2, 3, 4, 5])
@pytest.mark.parametrize("steer_pivots", [True, False])
def test_random_contacts_projection(count, steer_pivots):
    for seed in range(8):
        rng = np.random.default_rng(100 * count + seed)
        origin = rng.normal(size=3) * 0.1
        L = rng.uniform(0.02, 0.2)
        contacts = random_contacts(rng, count, origin)
        twist = rng.normal(size=6) * [0.05, 0.05, 0.05, 1, 1, 1]
        result = steer(twist, origin, contacts, L, steer_pivots)
        ref, C, Z = reference_projection(twist, origin, contacts, L, steer_pivots)
        scale = np.array([1, 1, 1, L, L, L])
        # every constraint holds for the achieved twist (rows have unit linear parts: m/s)
        np.testing.assert_allclose(C @ result.achieved, 0, atol=TIGHT)
        # equal to the independent W-orthogonal projection onto scipy's null space
        np.testing.assert_allclose(scale * result.achieved, scale * ref, atol=TIGHT)
        np.testing.assert_allclose(result.residual, twist - result.achieved, atol=1e-15)
        assert result.residual_norm == pytest.approx(np.linalg.norm(scale * result.residual), rel=1e-12)
        # projection property: the residual is W-orthogonal to every achievable twist
        np.testing.assert_allclose(result.residual @ weighted(L) @ Z, 0, atol=TIGHT)
        assert result.dof == Z.shape[1]
        assert result.determined == (np.linalg.matrix_rank(contact_jacobian([c.point for c in contacts], origin)) == 6)
        # with 180 deg ranges every tangent direction is reachable: the settings reproduce it exactly
        np.testing.assert_allclose(result.slip, 0, atol=TIGHT)
        check_settings_reproduce(result, twist, origin, contacts, TIGHT)


def test_tilted_pivot_axis_general_solution():
    """Pivot axis 15 deg off the normal: d(phi) traces an ellipse, solved in closed form; with a
    full-turn range every direction is reached and scipy's rotation of the axis confirms it."""
    for seed in range(10):
        rng = np.random.default_rng(seed)
        origin = np.zeros(3)
        contacts = random_contacts(rng, 3, origin, tilt=math.radians(15), full_range=True)
        twist = rng.normal(size=6) * [0.05, 0.05, 0.05, 1, 1, 1]
        result = steer(twist, origin, contacts, 0.05)
        np.testing.assert_allclose(result.slip, 0, atol=TIGHT)
        check_settings_reproduce(result, twist, origin, contacts, TIGHT)


# --- helpers and validation -----------------------------------------------------------------------

def test_grasp_matrix_and_contact_jacobian():
    rng = np.random.default_rng(2)
    pts, nrm, o = rng.normal(size=(4, 3)), np.array([unit(x) for x in rng.normal(size=(4, 3))]), rng.normal(size=3)
    J, G = contact_jacobian(pts, o), grasp_matrix(pts, nrm, o)
    assert J.shape == (12, 6) and G.shape == (6, 4)
    twist = rng.normal(size=6)
    for i in range(4):
        np.testing.assert_allclose(J[3 * i:3 * i + 3] @ twist, material_velocity(twist, o, pts[i]), atol=1e-14)
        np.testing.assert_allclose(G[:, i] @ twist, nrm[i] @ material_velocity(twist, o, pts[i]), atol=1e-14)
    assert contact_jacobian(np.zeros((0, 3)), o).shape == (0, 6)


def test_no_contacts_everything_achievable():
    result = steer([1, 2, 3, 4, 5, 6], np.zeros(3), [], 0.1)
    np.testing.assert_array_equal(result.achieved, [1, 2, 3, 4, 5, 6])
    assert result.speeds.shape == (0,) and result.dof == 6 and not result.determined


def test_bad_inputs():
    c = one_roller((-1, 1))
    with pytest.raises(ValueError, match="length_scale"):
        steer(np.zeros(6), np.zeros(3), [c], 0.0)
    with pytest.raises(ValueError, match="twist"):
        steer(np.zeros(5), np.zeros(3), [c], 0.1)
    with pytest.raises(ValueError, match="normal"):
        RollerContact([0, 0, 0], [0, 0, 0], [0, 0, -1], [1, 0, 0], 1.0)
    with pytest.raises(ValueError, match="pivot_range"):
        RollerContact([0, 0, 0], [0, 0, 1], [0, 0, -1], [1, 0, 0], 1.0, pivot_range=(1, -1))
    with pytest.raises(ValueError, match="radius"):
        RollerContact([0, 0, 0], [0, 0, 1], [0, 0, -1], [1, 0, 0], -1.0)
    with pytest.raises(TypeError):
        steer(np.zeros(6), np.zeros(3), ["roller"], 0.1)
