"""Small scenes shared by the physics reference tests, built with the harness's own generators."""

import math

import numpy as np

from harness.models.objects import generate, load_object_set
from harness.sim.transforms import quat_from_euler
from harness.sim.world import World, add_object


def one_object(kind, **fields):
    """Generate a single object instance of `kind` from spec-file style fields."""
    raw = {"name": "scene", "seed": 1, "object": [{"name": kind, "kind": kind, "restitution": 0.0, **fields}]}
    return generate(load_object_set("scene.toml", raw))[0]


def on_incline(world: World, instance, tilt, mu_table, lift=0.0):
    """Put `instance` (resting on its lowest face, its half height `lift` above the surface) on a
    table tilted by `tilt` rad about y; returns (body, downhill unit vector)."""
    world.add_table(size=(3.0, 1.0, 0.05), tilt=tilt, friction=mu_table)
    normal = np.array([math.sin(tilt), 0.0, math.cos(tilt)])
    orn = quat_from_euler((0, tilt, 0))
    body = add_object(world, instance, (normal * lift).tolist(), orn)
    return body, np.array([math.cos(tilt), 0.0, -math.sin(tilt)])


def roller_hand(flex=None, **roller):
    """The duo-roller demo gripper (12 mm rollers), with roller (and flex motor) fields overridden."""
    import tomllib
    from pathlib import Path

    from harness.models.grippers import build_models
    from harness.models.specs import load_gripper
    path = Path(__file__).resolve().parents[1] / "models" / "grippers" / "duo-roller.toml"
    raw = tomllib.loads(path.read_text())
    raw.pop("sweep")
    raw["finger"]["roller"].update(roller)
    raw["finger"]["flex"].update(flex or {})
    return build_models(load_gripper(path, raw))[0]


def ball_between_rollers(world, model, ball, below_palm=0.095, hand_height=0.3, fixed=False):
    """Hand pointing down at `hand_height`, ball centred `below_palm` under the palm, fingers closed on it."""
    from harness.sim.hand import Hand
    hand = Hand(world, model, (0, 0, hand_height))
    body = add_object(world, ball, (0, 0, hand_height - below_palm), fixed=fixed)
    for _ in range(round(0.25 / world.settings.time_step)):  # 0.25 s, whatever the physics step
        hand.close()
        world.step()
    return hand, body
