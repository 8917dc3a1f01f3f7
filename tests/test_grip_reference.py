"""A two-finger friction grip holds a mass m only when each finger presses with N >= m g / (2 mu)."""

import tomllib
from pathlib import Path

import pytest
from physics_scenes import one_object

from harness.constants import GRAVITY
from harness.models.grippers import build_models
from harness.sim.hand import Hand
from harness.models.specs import load_gripper
from harness.sim.engines import open_world
from harness.sim.world import PhysicsSettings, add_object

JAW = Path(__file__).resolve().parents[1] / "models" / "grippers" / "pad-jaw.toml"


def _drop_in_half_a_second(engine, force, mu, mass):
    """Metres a box slides out of the pad-jaw pads in 0.5 s when the jaws press with `force` N each."""
    raw = tomllib.loads(JAW.read_text())
    raw["jaw"]["force_n"] = force
    raw["pad"]["friction"] = mu  # pad and box both mu: the pair's value is mu (see world.pair_friction)
    model = build_models(load_gripper(JAW, raw))[0]
    with open_world(PhysicsSettings(gravity=0.0, engine=engine)) as w:
        hand = Hand(w, model, (0, 0, 0.3))
        box = one_object("box", size_x_mm=40, size_y_mm=30, size_z_mm=30, mass_g=mass * 1000, friction=mu)
        body = add_object(w, box, (0, 0, 0.3 - 0.055))
        for _ in range(round(0.5 / w.settings.time_step)):  # 0.5 s to close on the box without weight,
            hand.close()                                     # then gravity on for 0.5 s
            w.step()
        start = w.pose(body)[0][2]
        w.set_gravity((0, 0, -GRAVITY))
        for _ in range(round(0.5 / w.settings.time_step)):
            hand.close()
            w.step()
        return start - w.pose(body)[0][2]


@pytest.mark.parametrize("mu, mass", [(0.5, 0.2), (0.8, 0.1)])
def test_two_finger_grip_holds_only_above_mg_over_two_mu(engine, mu, mass):
    # Coulomb friction at two opposed contacts carries at most 2 mu N, so the grip holds the weight
    # m g only when N >= m g / (2 mu) (friction grip statics, common practice; e.g. Murray, Li and
    # Sastry 1994, ch. 5). Checked 10 % either side of the threshold.
    threshold = mass * GRAVITY / (2 * mu)
    assert _drop_in_half_a_second(engine, threshold * 0.9, mu, mass) > 0.05  # slides out
    assert _drop_in_half_a_second(engine, threshold * 1.1, mu, mass) < 1e-4  # held, under 0.1 mm of creep
