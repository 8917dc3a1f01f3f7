"""The physics world every routine, hand, contact and metric talks to, whatever engine runs it.

`engines.open_world(settings)` opens the engine named by `settings.engine` (bullet_world.py:
pybullet; mujoco_world.py: MuJoCo, an optional extra). This class states the operations they share; an
engine implements them with every physics setting explicit and recorded, chosen so both pass the
same reference checks (DEVELOPERS.md, "Engines"):
- a pair's Coulomb friction is sqrt(mu_a mu_b) of the two bodies' own coefficients (the value the
  journal records),
- no damping, no sleeping, deterministic stepping (the same commands give the same numbers).

Bodies are ints; a body's links are ints with -1 for its base. A contact between body A and B is a
tuple laid out as pybullet reports it, so the hot paths read it without conversion:
[3] link of A, [4] link of B, [5] point on A, [6] point on B (m, world), [7] normal on B pointing
into A, [8] signed distance (m, negative when overlapping), [9] normal force (N), [10] first
friction force (N) along [11], [12] second friction force along [13]; points are those found at the
start of the last step (see contact.py), velocities are end-of-step.
"""

from __future__ import annotations

import math
import os
from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np

from ..constants import ENGINES, GRAVITY

__all__ = ["CONTROL_HZ", "ENGINES", "PhysicsSettings", "World", "JointInfo", "pair_friction", "model_cache",
           "add_object"]


CONTROL_HZ = 60  # Hz; the controller and the metrics run at this servo rate whatever the physics step


@dataclass(frozen=True)
class PhysicsSettings:
    """The engine's numerics and the bench's constants. The defaults come from the convergence study
    recorded in the README (`grasp-harness converge`): at 960 Hz slip, drift and hold slip agree with
    1920 Hz within the tolerances of analysis/numerics.py and more solver iterations change nothing;
    draw-in grasp success still moves with the step (README), which `crosscheck` reports per cell."""

    step_hz: int = 960  # physics steps per second; a multiple of CONTROL_HZ
    solver_iterations: int = 100  # constraint-solver iterations per step
    gravity: float = GRAVITY  # m/s^2 along -z
    max_joint_speed: float = 1000.0  # rad/s; lifts the engine's 100 rad/s cap so roller limits come from specs
    table_friction: float = 1.0  # the table's own mu; pair value with an object is sqrt(mu_table mu_obj)
    engine: str = "pybullet"  # one of ENGINES

    @property
    def time_step(self):
        """Physics step (s)."""
        return 1.0 / self.step_hz

    @property
    def steps_per_tick(self):
        """Physics steps per control tick."""
        return self.step_hz // CONTROL_HZ

    def refined(self, iterations=4, step=2):
        """These settings with `iterations` x the solver iterations and the step divided by `step`."""
        return replace(self, solver_iterations=self.solver_iterations * iterations, step_hz=self.step_hz * step)

    def label(self):
        engine = "" if self.engine == "pybullet" else f" ({self.engine})"
        return f"{self.solver_iterations} it @ {self.step_hz} Hz{engine}"

    def record(self):
        """The settings as recorded in runs and payloads; the default engine is left out, so runs made
        before there was a choice keep their campaign hashes."""
        out = asdict(self)
        if self.engine == "pybullet":
            out.pop("engine")
        return out


def pair_friction(mu_a, mu_b):
    """The pair's Coulomb coefficient when each body carries sqrt(its own mu): sqrt(mu_a mu_b)."""
    return math.sqrt(mu_a * mu_b)


def model_cache():
    """Folder for generated URDFs and meshes (content-hashed, safe to share)."""
    return Path(os.environ.get("GRASP_HARNESS_CACHE", Path.home() / ".cache" / "grasp-harness" / "models"))


@dataclass(frozen=True)
class JointInfo:
    """A joint of a loaded body: its index is its child link's."""

    name: str
    link_name: str  # its child link
    lower: float  # rad (or m)
    upper: float
    effort: float  # N m (or N), the motor's limit
    speed: float  # rad/s (or m/s)
    axis: tuple  # unit axis in the child link's frame
    parent: int  # parent link, -1 for the base


class World:
    """The engine-neutral world; `engines.open_world(settings)` opens the engine's own subclass. Use
    it as a context manager or call close(). Subclasses implement every operation below."""

    def __init__(self, settings: PhysicsSettings = PhysicsSettings()):
        self.settings = settings
        self.time = 0.0  # s since the last reset (the trial resets it when its scene is ready)
        self.table = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def _todo(self, *args, **kwargs):
        raise NotImplementedError(f"{type(self).__name__} does not implement this operation")

    # lifetime
    reset = close = _todo  # reset(): empty the world, apply the settings again (engines.engine_version names it)

    # bodies and materials
    load = _todo  # load(urdf_path, position, orientation, fixed=False, implicit_cylinders=True) -> body;
    #               position and orientation of the URDF frame
    set_surface = _todo  # set_surface(body, link, friction, restitution=0, stiffness=None, damping=None,
    #                      rolling=0, spinning=0): a link's own mu (pairs act with sqrt(mu_a mu_b))
    add_table = _todo  # add_table(size, top=0, tilt=0, friction=None, rolling=0) -> body (static box)
    scale_mass = _todo  # scale_mass(body, factor): the base's mass and inertia times factor
    com_frame = _todo  # com_frame(body) -> (position, quaternion) of the base's COM in its URDF frame
    joints = _todo  # joints(body) -> [JointInfo], index = joint = child link
    base_name = _todo  # base_name(body) -> the base link's name

    # stepping and state
    step = _todo  # step(n=1)
    set_gravity = _todo  # set_gravity((gx, gy, gz)) m/s^2
    reset_pose = _todo  # reset_pose(body, position, orientation): the base's COM pose, at rest
    reset_joint = _todo  # reset_joint(body, joint, position): at rest
    raw_state = _todo  # raw_state(body, link) -> (com position, quaternion, velocity, spin) as tuples
    raw_states = _todo  # raw_states(body, links) -> {link: raw_state}
    joint_states = _todo  # joint_states(body, joints) -> [(position, speed)]
    link_orientation = _todo  # link_orientation(body, link) -> quaternion of the link's URDF frame (may lag a step)
    link_frame = _todo  # link_frame(body, link) -> (position, quaternion) of the link's URDF frame, current
    aabb = _todo  # aabb(body, link=-1) -> (lo (3,), hi (3,)) world-aligned box around its collision shapes
    contacts = _todo  # contacts(body_a, body_b, link_b=None) -> contact tuples (module doc)
    ray_hits = _todo  # ray_hits(starts, ends) -> [(body or -1, hit point)], the first hit along each ray

    # actuators
    drive_position = _todo  # drive_position(body, joint, target, force, max_speed, gain): a servo
    #   commanding speed gain x error / step, capped at max_speed, with at most `force`
    drive_velocity = _todo  # drive_velocity(body, joint, speed, force)
    add_wrist = _todo  # add_wrist(body, frame_in_com) -> wrist: a fixed, force-limited attachment of the
    #   base (at frame_in_com, a pose in its COM frame) to a moving target pose
    move_wrist = _todo  # move_wrist(wrist, position, orientation, max_force)
    camera_image = _todo  # camera_image(width, height, view, projection) -> (rgb, segmentation)

    # conveniences built on the above
    def pose(self, body):
        """Centre-of-mass position (3,) and quaternion (4,) of a body's base."""
        pos, orn, _, _ = self.raw_state(body, -1)
        return np.array(pos), np.array(orn)

    def velocity(self, body):
        _, _, v, w = self.raw_state(body, -1)
        return np.array(v), np.array(w)

    def link_state(self, body, link):
        """COM position, orientation, linear and angular velocity of a link (link -1: the base)."""
        return tuple(np.array(x) for x in self.raw_state(body, link))


def add_object(world, instance, position, orientation=(0, 0, 0, 1), friction_scale=1.0, mass_scale=1.0, fixed=False):
    """Load an ObjectInstance with its own material; `position` is of its URDF frame (m)."""
    from ..models.build import materialise
    path = materialise(instance.name, instance.urdf, instance.files, model_cache())
    body = world.load(path, position, orientation, fixed=fixed)
    world.set_surface(body, -1, instance.friction * friction_scale, instance.restitution,
                      instance.stiffness, instance.damping)
    if mass_scale != 1.0:
        world.scale_mass(body, mass_scale)
    return body
