"""Angle of bite: counter-rotating rollers draw a body into their gap unaided only when
mu >= tan(alpha), alpha the angle between the contact normal and the line of the roll centres.

Source: rolling-mill theory, G. E. Dieter, Mechanical Metallurgy (McGraw-Hill), chapter on the
rolling of metals (condition for the roll to bite the workpiece); the same result in S. Kalpakjian
and S. R. Schmid, Manufacturing Engineering and Technology, chapter on rolling. Force balance along
the line through the body's centre perpendicular to the roll centres, per roller: drive mu N cos(alpha)
against the normal's push-out N sin(alpha); the body enters when mu >= tan(alpha).

Measured with the duo-roller's 12 mm rollers and a 10 mm ball (ball travel after 1 s):
the switch lies between 0.90 and 0.95 tan(alpha) at 10 deg and between 0.95 and 1.05 tan(alpha) at
20 and 30 deg, both at the default numerics (100 iterations, 240 Hz) and at 400 iterations, 480 Hz.

A 10 mm cylinder lying along the roller axes (line contacts between two implicit cylinders), its
travel after 1 s at 0.8 to 1.5 tan(alpha) in steps: at 100 it @ 480 Hz the switch lies between 1.0
and 1.05 tan(alpha) at 10 and 20 deg (with one outlier pushed out at 1.1 at 10 deg) and between 1.1
and 1.2 at 30 deg; at 400 it @ 960 Hz between 0.9 and 1.05 at 10 deg (drawn in at 0.95, pushed out
at 1.0), 1.0 and 1.05 at 20 deg, 1.05 and 1.1 at 30 deg. The cylinder test therefore checks 1.2 and
0.9 tan(alpha): the engine's line contacts settle the switch less sharply than a ball's point contacts.
"""

import math

import numpy as np
import pytest

from harness.sim.hand import Hand
from harness.sim.engines import open_world
from harness.sim.world import PhysicsSettings, add_object
from physics_scenes import one_object, roller_hand

R_BALL = 0.010  # m
SQUEEZE = 0.00005  # m; the rollers start this far into the ball (a 0.3 mm overlap in the 30 kN/m tread fired the ball out at 10 deg)


def _bite(engine, alpha, mu, seconds=1.0, speed=2.0, shape="sphere", settings=None):
    """Hand-frame travel (m, positive toward the palm) of a ball (or a cylinder of the same radius
    lying along the roller axes) placed so each roller meets it at `alpha` from the line of the roll
    centres, the rollers driving their surfaces toward the palm; gravity off. The fingers press with
    a quarter of their torque."""
    model = roller_hand(friction=1.0)
    r = model.roller_radius
    if shape == "sphere":
        ball = one_object("sphere", radius_mm=R_BALL * 1e3, mass_g=10, friction=mu * mu)  # pair mu = sqrt(1 x mu^2)
    else:  # 30 mm long, wider than the 18 mm rollers
        ball = one_object("cylinder", radius_mm=R_BALL * 1e3, height_mm=30, mass_g=10, friction=mu * mu)
    along_rollers = (math.sin(math.pi / 4), 0.0, 0.0, math.cos(math.pi / 4))  # its axis (z) turned onto y
    settings = settings or PhysicsSettings(gravity=0.0, engine=engine)
    with open_world(settings) as world:
        hand = Hand(world, model, (0, 0, 0.3))
        # flex angle whose roller centres sit (r + R) cos(alpha) - SQUEEZE from the hand axis
        lo, hi = hand.limits[hand.close_j[0]][:2]
        fractions = np.linspace(0, 1, 2001)
        radial = []
        for f in fractions:
            hand.reset_joints(f)
            radial.append(abs(world.link_state(hand.body, hand.roll_j[0])[0][0]))
        want = (r + R_BALL) * math.cos(alpha) - SQUEEZE
        f = float(fractions[int(np.argmin(np.abs(np.array(radial) - want)))])
        hand.reset_joints(f)
        centre_z = float(np.mean([world.link_state(hand.body, j)[0][2] for j in hand.roll_j]))
        start = centre_z - (r + R_BALL) * math.sin(alpha)  # below the roll centres: away from the palm
        body = add_object(world, ball, (0.0, 0.0, start), along_rollers if shape == "cylinder" else (0, 0, 0, 1))
        apart = 0  # steps since the ball last touched a roller
        for k in range(int(seconds * world.settings.step_hz)):
            if k % world.settings.steps_per_tick == 0:
                hand.close(1.0, 0.25)
                hand.set_rollers(speed)
            world.step()
            apart = 0 if world.contacts(body, hand.body) else apart + 1
            # gone once out of touch for a control tick (MuJoCo's sliding contacts skip steps: see
            # DEVELOPERS.md, Engines)
            if apart >= world.settings.steps_per_tick:
                break
        return float(world.pose(body)[0][2] - start), (r + R_BALL) * math.sin(alpha)


@pytest.mark.parametrize("alpha_deg", [10, 20, 30])
def test_rollers_bite_a_ball_above_tan_alpha_and_push_it_out_below(engine, alpha_deg):
    alpha = math.radians(alpha_deg)
    drawn, to_centres = _bite(engine, alpha, 1.1 * math.tan(alpha))
    pushed, _ = _bite(engine, alpha, 0.9 * math.tan(alpha))
    assert drawn > to_centres, f"mu = 1.1 tan(alpha): moved {drawn * 1e3:.1f} mm, the line of centres is {to_centres * 1e3:.1f} mm up"
    assert pushed < -0.002, f"mu = 0.9 tan(alpha): moved {pushed * 1e3:.1f} mm, expected pushed out"


# MuJoCo collides two parallel cylinders at one point on a roller's rim, which jumps between the
# rim's two ends (y = -9 and +9 mm) with the normals tilted along the axis, so the line contact
# never forms and the cylinder is pushed out even at 1.5 tan(alpha) (measured at 10, 20, 30 deg:
# -10 to +23 mm). Strict, so a MuJoCo that forms line contacts shows here.
MUJOCO_RIM_CONTACT = pytest.mark.xfail(strict=True, reason="MuJoCo: parallel cylinders touch at one rim point")


@pytest.mark.parametrize("alpha_deg", [10, 20, 30])
def test_rollers_bite_a_lying_cylinder_above_tan_alpha_and_push_it_out_below(engine, alpha_deg, request):
    # the same force balance holds in the plane across a cylinder lying along the roller axes (line
    # contacts instead of point contacts); the measured switch is in the module docstring
    if engine == "mujoco":
        request.applymarker(MUJOCO_RIM_CONTACT)
    alpha = math.radians(alpha_deg)
    drawn, to_centres = _bite(engine, alpha, 1.2 * math.tan(alpha), shape="cylinder")
    pushed, _ = _bite(engine, alpha, 0.9 * math.tan(alpha), shape="cylinder")
    assert drawn > to_centres, f"mu = 1.2 tan(alpha): moved {drawn * 1e3:.1f} mm, the line of centres is {to_centres * 1e3:.1f} mm up"
    assert pushed < -0.002, f"mu = 0.9 tan(alpha): moved {pushed * 1e3:.1f} mm, expected pushed out"
