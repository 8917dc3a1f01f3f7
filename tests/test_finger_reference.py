"""A finger joint with torque tau pressing through a lever of length L pushes with tau / L."""

import numpy as np
import pytest
from physics_scenes import one_object, roller_hand

from harness.sim.contact import sample_contacts
from harness.sim.hand import Hand
from harness.sim.transforms import rotation
from harness.sim.engines import open_world
from harness.sim.world import PhysicsSettings, add_object


@pytest.mark.parametrize("torque", [1.0, 2.5])
def test_finger_presses_with_torque_over_lever(engine, torque):
    # Static equilibrium of a lever: a joint torque tau balanced by a contact force at perpendicular
    # distance L gives F = tau / L (any statics text, e.g. Meriam & Kraige, Statics, ch. 3).
    # Gravity off, so only the motor torque loads the contact; the block is fixed in space.
    model = roller_hand(flex={"torque_nm": torque})
    with open_world(PhysicsSettings(gravity=0.0, engine=engine)) as w:
        hand = Hand(w, model, (0, 0, 0.3))
        box = one_object("box", size_x_mm=40, size_y_mm=40, size_z_mm=40, mass_g=50, friction=1.0)
        block = add_object(w, box, (0, 0, 0.3 - 0.092), fixed=True)
        for _ in range(round(0.5 / w.settings.time_step)):  # 0.5 s, whatever the physics step
            hand.close()
            w.step()
        joint = hand.close_j[0]
        position, orientation = w.link_frame(hand.body, joint)
        origin = np.array(position)  # the joint sits at the origin of its child link's URDF frame
        axis = rotation(orientation) @ np.array(w.joints(hand.body)[joint].axis)
        s = sample_contacts(w, block, hand.body)
        finger0 = [hand.link_of[n] for n in ("finger0_link", "finger0_carrier", "finger0_roller", "finger0_pad")]
        on = np.isin(s.links, finger0)
        assert on.any()
        normal = s.normals[on].mean(axis=0)
        lever = np.linalg.norm(np.cross(s.points[on].mean(axis=0) - origin, normal / np.linalg.norm(normal)))
        assert s.normal_force[on].sum() == pytest.approx(torque / lever, rel=0.05)
        # and the moment of all contact forces on the finger about its joint axis balances the motor
        on_finger = -(s.normals[on] * s.normal_force[on, None]) - s.friction_force[on]
        moment = sum(np.cross(p - origin, f) @ axis for p, f in zip(s.points[on], on_finger))
        assert abs(moment) == pytest.approx(torque, rel=0.05)
