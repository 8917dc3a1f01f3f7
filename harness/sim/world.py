"""One headless pybullet client with every physics setting explicit and recorded.

Honest defaults, each chosen against an engine default that biases results:
- linear and angular damping 0 on every link (the engine's 0.04 drag slows free rollers),
- friction anchors on, so held objects do not creep through solver drift and a measured slip
  is a real one,
- a pair's Coulomb friction is chosen deliberately: the engine multiplies the two bodies'
  coefficients, so each body gets sqrt(its own mu) and the pair acts with the geometric mean
  sqrt(mu_a mu_b), which is what the journal records as the pair's value,
- deterministic overlapping pairs, so the same commands give the same numbers,
- no sleeping: a resting body would ignore its motors' next command (a roller pressed on a
  fixed object did not turn at any torque until sleeping was disabled).
"""

from __future__ import annotations

import math
import os
from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np

from ..constants import GRAVITY

__all__ = ["CONTROL_HZ", "PhysicsSettings", "World", "pair_friction", "model_cache"]


CONTROL_HZ = 60  # Hz; the controller and the metrics run at this servo rate whatever the physics step


@dataclass(frozen=True)
class PhysicsSettings:
    """The engine's numerics and the bench's constants. The defaults come from the convergence study
    recorded in the README (`grasp-harness converge`): the cheapest setting whose campaign results
    agree with much finer numerics within the tolerances of analysis/numerics.py."""

    step_hz: int = 480  # physics steps per second; a multiple of CONTROL_HZ
    solver_iterations: int = 100  # constraint-solver iterations per step
    gravity: float = GRAVITY  # m/s^2 along -z
    max_joint_speed: float = 1000.0  # rad/s; lifts the engine's 100 rad/s cap so roller limits come from specs
    table_friction: float = 1.0  # the table's own mu; pair value with an object is sqrt(mu_table mu_obj)

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
        return f"{self.solver_iterations} it @ {self.step_hz} Hz"

    def record(self):
        return asdict(self)


def pair_friction(mu_a, mu_b):
    """The pair's Coulomb coefficient when each body carries sqrt(its own mu): sqrt(mu_a mu_b)."""
    return math.sqrt(mu_a * mu_b)


def model_cache():
    """Folder for generated URDFs and meshes (content-hashed, safe to share)."""
    return Path(os.environ.get("GRASP_HARNESS_CACHE", Path.home() / ".cache" / "grasp-harness" / "models"))


class World:
    """A DIRECT (no GPU, no display) client. Use as a context manager or call close()."""

    def __init__(self, settings: PhysicsSettings = PhysicsSettings()):
        import pybullet as p
        self.p = p
        self.settings = settings
        self.cid = p.connect(p.DIRECT)
        self.reset()

    def reset(self):
        """Empty the world and apply the settings again (resetSimulation forgets them)."""
        p, s = self.p, self.settings
        p.resetSimulation(physicsClientId=self.cid)
        p.setPhysicsEngineParameter(fixedTimeStep=s.time_step, numSolverIterations=s.solver_iterations,
                                    deterministicOverlappingPairs=1, enableFileCaching=0,
                                    physicsClientId=self.cid)
        p.setGravity(0, 0, -s.gravity, physicsClientId=self.cid)
        self.time = 0.0
        self.table = None

    def close(self):
        if self.cid is not None:
            self.p.disconnect(physicsClientId=self.cid)
            self.cid = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # --- bodies ---------------------------------------------------------------------------

    def load(self, urdf_path, position=(0, 0, 0), orientation=(0, 0, 0, 1), fixed=False, implicit_cylinders=True):
        p = self.p
        flags = p.URDF_USE_INERTIA_FROM_FILE | (p.URDF_USE_IMPLICIT_CYLINDER if implicit_cylinders else 0)
        body = p.loadURDF(str(urdf_path), position, orientation, useFixedBase=fixed, flags=flags,
                          physicsClientId=self.cid)
        for link in range(-1, p.getNumJoints(body, physicsClientId=self.cid)):
            p.changeDynamics(body, link, linearDamping=0.0, angularDamping=0.0, jointDamping=0.0,
                             maxJointVelocity=self.settings.max_joint_speed, frictionAnchor=1,
                             physicsClientId=self.cid)
        p.changeDynamics(body, -1, activationState=p.ACTIVATION_STATE_DISABLE_SLEEPING, physicsClientId=self.cid)
        for j in range(p.getNumJoints(body, physicsClientId=self.cid)):
            # every joint carries a braking velocity motor by default; free them, controllers re-enable
            p.setJointMotorControl2(body, j, p.VELOCITY_CONTROL, force=0.0, physicsClientId=self.cid)
        return body

    def set_surface(self, body, link, friction, restitution=0.0, stiffness=None, damping=None,
                    rolling=0.0, spinning=0.0):
        """Give a link its own Coulomb mu (stored as sqrt, see module doc) and contact compliance."""
        kw = {}
        if stiffness is not None:
            kw = {"contactStiffness": stiffness, "contactDamping": damping or 0.0}
        self.p.changeDynamics(body, link, lateralFriction=math.sqrt(friction), restitution=restitution,
                              rollingFriction=rolling, spinningFriction=spinning, physicsClientId=self.cid, **kw)

    def add_table(self, size=(1.0, 1.0, 0.05), top=0.0, tilt=0.0, friction=None, rolling=0.0):
        """A static box whose top face is at height `top` (m), tilted by `tilt` rad about the y axis;
        `rolling` (m) is its rolling resistance arm (the engine scales it by sqrt(mu) of the other body)."""
        p = self.p
        half = [s / 2 for s in size]
        shape = p.createCollisionShape(p.GEOM_BOX, halfExtents=half, physicsClientId=self.cid)
        visual = p.createVisualShape(p.GEOM_BOX, halfExtents=half, rgbaColor=(0.82, 0.8, 0.75, 1),
                                     physicsClientId=self.cid)
        orn = p.getQuaternionFromEuler((0, tilt, 0))
        centre = np.array([0, 0, top]) - np.array(p.getMatrixFromQuaternion(orn)).reshape(3, 3)[:, 2] * half[2]
        self.table = p.createMultiBody(0, shape, visual, centre.tolist(), orn, physicsClientId=self.cid)
        self.set_surface(self.table, -1, self.settings.table_friction if friction is None else friction,
                         rolling=rolling)
        p.changeDynamics(self.table, -1, frictionAnchor=1, physicsClientId=self.cid)
        return self.table

    # --- stepping and queries ---------------------------------------------------------------

    def step(self, n=1):
        for _ in range(n):
            self.p.stepSimulation(physicsClientId=self.cid)
        self.time += n * self.settings.time_step

    def pose(self, body):
        """Centre-of-mass position (3,) and quaternion (4,) of a body's base."""
        pos, orn = self.p.getBasePositionAndOrientation(body, physicsClientId=self.cid)
        return np.array(pos), np.array(orn)

    def velocity(self, body):
        v, w = self.p.getBaseVelocity(body, physicsClientId=self.cid)
        return np.array(v), np.array(w)

    def link_state(self, body, link):
        """COM position, orientation, linear and angular velocity of a link (link -1: the base)."""
        return tuple(np.array(x) for x in self.raw_state(body, link))

    def raw_state(self, body, link):
        """link_state as the engine's tuples: cheaper where a hot path reads a few floats."""
        p, cid = self.p, self.cid
        if link == -1:
            return (*p.getBasePositionAndOrientation(body, physicsClientId=cid),
                    *p.getBaseVelocity(body, physicsClientId=cid))
        # without forward kinematics a link's pose is the one from before the last step's
        # integration, a step behind its velocity and behind the base's pose (measured in 3.2.7)
        s = p.getLinkState(body, link, computeLinkVelocity=1, computeForwardKinematics=1, physicsClientId=cid)
        return s[0], s[1], s[6], s[7]

    def raw_states(self, body, links):
        """{link: raw_state} of several links of one body, with one engine query for the links >= 0."""
        out = {}
        rest = [link for link in links if link >= 0]
        if -1 in links:
            out[-1] = self.raw_state(body, -1)
        if rest:
            states = self.p.getLinkStates(body, rest, computeLinkVelocity=1, computeForwardKinematics=1,
                                          physicsClientId=self.cid)
            out.update({link: (s[0], s[1], s[6], s[7]) for link, s in zip(rest, states)})
        return out

    def contacts(self, body_a, body_b, link_b=None):
        kw = {} if link_b is None else {"linkIndexB": link_b}
        return self.p.getContactPoints(bodyA=body_a, bodyB=body_b, physicsClientId=self.cid, **kw)


def add_object(world, instance, position, orientation=(0, 0, 0, 1), friction_scale=1.0, mass_scale=1.0, fixed=False):
    """Load an ObjectInstance with its own material; `position` is of its URDF frame (m)."""
    from ..models.build import materialise
    path = materialise(instance.name, instance.urdf, instance.files, model_cache())
    body = world.load(path, position, orientation, fixed=fixed)
    world.set_surface(body, -1, instance.friction * friction_scale, instance.restitution,
                      instance.stiffness, instance.damping)
    if mass_scale != 1.0:
        # scale inertia with mass so the shape's mass distribution stays the same; the engine keeps
        # the principal moments (the file's tensor diagonalised), which is what it expects back
        dyn = world.p.getDynamicsInfo(body, -1, physicsClientId=world.cid)
        world.p.changeDynamics(body, -1, mass=dyn[0] * mass_scale,
                               localInertiaDiagonal=[m * mass_scale for m in dyn[2]], physicsClientId=world.cid)
    return body
