"""Reference physics: the engine set up by the harness, and its slip metric, against textbook results."""

import math

import numpy as np
import pytest
from physics_scenes import on_incline, one_object

from harness.sim.contact import sample_contacts
from harness.sim.engines import open_world
from harness.sim.world import PhysicsSettings, pair_friction


def _slide(engine, mu, tilt_deg, seconds=1.0):
    """Distance (m) a block slides along an incline in `seconds`, and its mean contact slip speed (m/s)."""
    block = one_object("box", size_x_mm=40, size_y_mm=40, size_z_mm=20, mass_g=200, friction=mu)
    with open_world(PhysicsSettings(engine=engine)) as w:
        body, downhill = on_incline(w, block, math.radians(tilt_deg), mu, lift=0.0101)
        w.step(round(0.1 / w.settings.time_step))  # settle the 0.1 mm drop
        start = w.pose(body)[0]
        slips = []
        for _ in range(int(seconds / w.settings.time_step)):
            w.step()
            s = sample_contacts(w, body, w.table)
            slips.append(s.slip_speed().max() if s.count else 0.0)
        return float((w.pose(body)[0] - start) @ downhill), float(np.mean(slips))


@pytest.mark.parametrize("mu", [0.3, 0.5, 0.8])
def test_block_on_incline_starts_sliding_at_atan_mu(engine, mu):
    # Coulomb friction: a block on an incline slides once tan(theta) > mu (any statics textbook,
    # e.g. Meriam & Kraige, Engineering Mechanics: Statics, ch. 6). Onset found by bisection on
    # "slid more than 1 mm in 1 s"; it must lie within 0.5 degree of atan(mu).
    onset = math.degrees(math.atan(mu))
    lo, hi = onset - 2.0, onset + 2.0
    assert _slide(engine, mu, lo)[0] < 1e-3 and _slide(engine, mu, hi)[0] > 1e-3
    for _ in range(7):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if _slide(engine, mu, mid)[0] < 1e-3 else (lo, mid)
    assert abs((lo + hi) / 2 - onset) < 0.5


def test_incline_slip_metric_is_zero_while_the_block_sticks(engine):
    mu = 0.5
    moved, slip = _slide(engine, mu, math.degrees(math.atan(mu)) - 1.5)
    assert moved < 1e-4 and slip < 1e-3  # sticking: under 1 mm/s of measured slip


# MuJoCo's convex contact model lets a sliding contact separate at about mu x its slip speed: the
# block hops, touching the incline in about one step of five (DEVELOPERS.md, Engines), so the
# per-step slip reads low there. Kept as a strict expected failure so a change that fixes it shows.
MUJOCO_HOPS = pytest.mark.xfail(strict=True, reason="MuJoCo: a sliding block touches in ~1 step of 5")


def test_incline_slip_metric_equals_the_sliding_speed(engine, request):
    if engine == "mujoco":
        request.applymarker(MUJOCO_HOPS)
    mu = 0.5
    moved, slip = _slide(engine, mu, math.degrees(math.atan(mu)) + 3.0)
    assert moved > 0.01
    # the block does not rotate, so its mean slip speed is its mean sliding speed
    assert slip == pytest.approx(moved / 1.0, rel=0.05)


def _roll(engine, mu, tilt_deg):
    """Acceleration (m/s^2) of a 20 mm ball along an incline, fitted over 1 s, its peak slip speed
    (m/s) and its peak slip as a share of the ball's speed at that step."""
    ball = one_object("sphere", radius_mm=20, mass_g=100, friction=mu)
    with open_world(PhysicsSettings(engine=engine)) as w:
        body, downhill = on_incline(w, ball, math.radians(tilt_deg), mu, lift=0.02)
        w.step(round(0.1 / w.settings.time_step))  # settle the drop (0.1 s)
        times, travel, slips, shares = [], [], [], []
        for _ in range(round(1.0 / w.settings.time_step)):  # fit over 1 s whatever the step
            w.step()
            s = sample_contacts(w, body, w.table)
            slips.append(s.slip_speed().max() if s.count else 0.0)
            shares.append(slips[-1] / max(float(np.linalg.norm(w.velocity(body)[0])), 1e-3))
            times.append(w.time)
            travel.append(w.pose(body)[0] @ downhill)
        return 2 * np.polyfit(times, travel, 2)[0], max(slips), max(shares)


@pytest.mark.parametrize("tilt_deg", [10.0, 20.0])
def test_sphere_rolls_down_incline_at_five_sevenths_g_sin_theta(engine, tilt_deg):
    # A solid sphere rolling without slipping accelerates at (5/7) g sin(theta)
    # (I = 2/5 m r^2; e.g. Goldstein, Classical Mechanics; recalled from memory).
    accel, _, peak_share = _roll(engine, 0.8, tilt_deg)
    assert accel == pytest.approx(5 / 7 * 9.81 * math.sin(math.radians(tilt_deg)), rel=0.01)
    # rolling: the contact point is at rest, slip under 1 % of the ball's speed at every step (at
    # 960 and 1920 Hz one step shows 1.8 to 2.5 mm/s at about 0.4 m/s, measured in pybullet 3.2.7)
    assert peak_share < 0.01


def test_sphere_slips_when_friction_is_too_low_to_roll(engine):
    # Rolling needs mu >= (2/7) tan(theta); with tan(theta) > 3.5 mu the ball must slide
    # (same textbook result). Sliding acceleration is then g (sin - mu cos) at the start.
    mu, tilt = 0.05, 30.0
    assert math.tan(math.radians(tilt)) > 3.5 * mu
    accel, peak_slip, _ = _roll(engine, mu, tilt)
    assert accel > 5 / 7 * 9.81 * math.sin(math.radians(tilt)) * 1.1
    assert peak_slip > 0.5  # m/s: plainly slipping


def test_pair_friction_is_the_geometric_mean_of_the_two_surfaces():
    # Our deliberate combination rule (see harness/world.py): each body carries sqrt(mu).
    assert pair_friction(0.25, 1.0) == pytest.approx(0.5)
    assert pair_friction(0.6, 0.6) == pytest.approx(0.6)
