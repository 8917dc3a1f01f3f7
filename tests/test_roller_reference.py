"""Rollers: no-slip rolling moves the contacting surface at w r, and the slip metric stays near zero."""

import numpy as np
import pytest
from physics_scenes import ball_between_rollers, one_object, roller_hand

from harness.sim.contact import sample_contacts
from harness.sim.engines import open_world
from harness.sim.world import PhysicsSettings

R_ROLLER = 0.012  # m, the duo-roller demo's middle sweep value


@pytest.mark.parametrize("speed", [2.0, 4.0])
def test_two_counter_rotating_rollers_draw_a_ball_in_at_w_r(engine, speed):
    # No-slip rolling: a roller of radius r spinning at w moves its surface at w r; a ball pinched
    # symmetrically between two such rollers translates at w r relative to the roller centres while
    # the contact normals are square to the motion (rolling kinematics, e.g. Murray, Li and Sastry
    # 1994, ch. 5). Gravity off so the motor torque is not loaded by the ball's weight; strong roller
    # motors so they hold their commanded speed.
    with open_world(PhysicsSettings(gravity=0.0, engine=engine)) as w:
        hand, ball = ball_between_rollers(w, roller_hand(torque_nm=3.0), one_object("sphere", radius_mm=20, mass_g=30, friction=1.0))
        rollers = [hand.link_of[f"finger{i}_roller"] for i in range(2)]
        hand.set_rollers(speed)
        rel_speed, surface, slips = [], [], []
        for _ in range(round(0.125 / w.settings.time_step)):  # 0.125 s, whatever the physics step
            hand.close()
            w.step()
            states = [w.link_state(hand.body, link) for link in rollers]
            offset = w.pose(ball)[0][2] - np.mean([s[0][2] for s in states])
            if abs(offset) < 0.003:  # contact normals within 9 degrees of square to the motion
                rel_speed.append(w.velocity(ball)[0][2] - np.mean([s[2][2] for s in states]))
                surface.append(hand.joint_speeds(hand.roll_j).mean() * R_ROLLER)
                slips.append(sample_contacts(w, ball, hand.body).slip_speed().max())
        assert len(rel_speed) >= 10
        # the law is about the roller's actual speed; the motor holds its command only roughly
        assert np.mean(rel_speed) == pytest.approx(np.mean(surface), rel=0.05)
        assert np.mean(surface) == pytest.approx(speed * R_ROLLER, rel=0.15)
        assert np.median(slips) < 0.05 * speed * R_ROLLER  # near zero: under 5 % of the surface speed
