"""The engine-neutral world: both engines honour the same contract (contact tuple layout, forces,
joints, boxes), and an engine that is not there is one clear error."""

import pytest
from physics_scenes import one_object, roller_hand

from harness.constants import GRAVITY
from harness.errors import HarnessError
from harness.sim.engines import open_world
from harness.sim.hand import Hand
from harness.sim.world import PhysicsSettings, add_object


def test_a_resting_block_presses_with_its_weight_along_a_normal_into_it(engine):
    # Statics of a block at rest on a level table: the normal forces sum to m g, the normals point
    # up into the block (body A), the friction forces vanish (any statics text; Meriam & Kraige).
    block = one_object("box", size_x_mm=40, size_y_mm=30, size_z_mm=20, mass_g=200, friction=0.5)
    with open_world(PhysicsSettings(engine=engine)) as w:
        w.add_table()
        body = add_object(w, block, (0, 0, 0.0101))
        w.step(w.settings.step_hz // 2)
        contacts = w.contacts(body, w.table)
        assert contacts
        assert sum(c[9] for c in contacts) == pytest.approx(0.2 * GRAVITY, rel=0.01)
        for c in contacts:
            assert c[7][2] == pytest.approx(1.0, abs=1e-6)  # normal on B (table) pointing into A (block)
            # the two surface points are the signed distance apart along the normal (negative: overlap)
            assert [a - b for a, b in zip(c[5], c[6])] == pytest.approx([c[8] * n for n in c[7]], abs=1e-6)
            assert -1e-3 < c[8] <= 1e-6
            assert abs(c[10]) + abs(c[12]) < 1e-3 * c[9] + 1e-6
        lo, hi = w.aabb(body)
        assert [h - l for l, h in zip(lo, hi)] == pytest.approx([0.04, 0.03, 0.02], abs=2e-4)


def test_a_hand_shows_the_same_joints_limits_and_links_on_both_engines(engine):
    with open_world(PhysicsSettings(engine=engine, gravity=0.0)) as w, \
            open_world(PhysicsSettings(gravity=0.0)) as reference:
        hands = [Hand(world, roller_hand(), (0, 0, 0.3)) for world in (w, reference)]
        assert hands[0].limits == hands[1].limits and hands[0].link_of == hands[1].link_of
        assert hands[0].tip_links() == hands[1].tip_links()
        for hand in hands:
            hand.reset_joints(0.5)
        assert hands[0].joint_positions(hands[0].close_j) == pytest.approx(
            hands[1].joint_positions(hands[1].close_j), abs=1e-12)


def test_an_unknown_engine_is_one_clear_error():
    with pytest.raises(HarnessError, match="unknown physics engine 'bullet'; allowed: pybullet, mujoco"):
        open_world(PhysicsSettings(engine="bullet"))
