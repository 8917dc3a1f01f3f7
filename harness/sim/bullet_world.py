"""The pybullet world: one headless DIRECT client with every physics setting explicit.

Honest defaults, each chosen against an engine default that biases results:
- linear and angular damping 0 on every link (the engine's 0.04 drag slows free rollers),
- friction anchors on, so held objects do not creep through solver drift and a measured slip
  is a real one,
- the engine multiplies the two bodies' friction coefficients, so each body gets sqrt(its own mu)
  and the pair acts with the geometric mean sqrt(mu_a mu_b) (world.pair_friction),
- deterministic overlapping pairs, so the same commands give the same numbers,
- no sleeping: a resting body would ignore its motors' next command (a roller pressed on a
  fixed object did not turn at any torque until sleeping was disabled).
"""

from __future__ import annotations

import math

import numpy as np

from .world import JointInfo, PhysicsSettings, World

__all__ = ["BulletWorld"]


class BulletWorld(World):
    """A DIRECT (no GPU, no display) pybullet client."""

    def __init__(self, settings: PhysicsSettings = PhysicsSettings()):
        import pybullet as p
        super().__init__(settings)
        self.p = p
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

    def scale_mass(self, body, factor):
        # scale inertia with mass so the shape's mass distribution stays the same; the engine keeps
        # the principal moments (the file's tensor diagonalised), which is what it expects back
        dyn = self.p.getDynamicsInfo(body, -1, physicsClientId=self.cid)
        self.p.changeDynamics(body, -1, mass=dyn[0] * factor, localInertiaDiagonal=[m * factor for m in dyn[2]],
                              physicsClientId=self.cid)

    def com_frame(self, body):
        dyn = self.p.getDynamicsInfo(body, -1, physicsClientId=self.cid)
        return dyn[3], dyn[4]

    def joints(self, body):
        p, cid = self.p, self.cid
        out = []
        for j in range(p.getNumJoints(body, physicsClientId=cid)):
            i = p.getJointInfo(body, j, physicsClientId=cid)
            out.append(JointInfo(i[1].decode(), i[12].decode(), i[8], i[9], i[10], i[11], tuple(i[13]), i[16]))
        return out

    def base_name(self, body):
        return self.p.getBodyInfo(body, physicsClientId=self.cid)[0].decode()

    # --- stepping and state -------------------------------------------------------------------

    def step(self, n=1):
        for _ in range(n):
            self.p.stepSimulation(physicsClientId=self.cid)
        self.time += n * self.settings.time_step

    def set_gravity(self, g):
        self.p.setGravity(*g, physicsClientId=self.cid)

    def reset_pose(self, body, position, orientation):
        self.p.resetBasePositionAndOrientation(body, position, orientation, physicsClientId=self.cid)

    def reset_joint(self, body, joint, position):
        self.p.resetJointState(body, joint, position, physicsClientId=self.cid)

    def pose(self, body):
        pos, orn = self.p.getBasePositionAndOrientation(body, physicsClientId=self.cid)
        return np.array(pos), np.array(orn)

    def velocity(self, body):
        v, w = self.p.getBaseVelocity(body, physicsClientId=self.cid)
        return np.array(v), np.array(w)

    def raw_state(self, body, link):
        p, cid = self.p, self.cid
        if link == -1:
            return (*p.getBasePositionAndOrientation(body, physicsClientId=cid),
                    *p.getBaseVelocity(body, physicsClientId=cid))
        # without forward kinematics a link's pose is the one from before the last step's
        # integration, a step behind its velocity and behind the base's pose (measured in 3.2.7)
        s = p.getLinkState(body, link, computeLinkVelocity=1, computeForwardKinematics=1, physicsClientId=cid)
        return s[0], s[1], s[6], s[7]

    def raw_states(self, body, links):
        out = {}
        rest = [link for link in links if link >= 0]
        if -1 in links:
            out[-1] = self.raw_state(body, -1)
        if rest:
            states = self.p.getLinkStates(body, rest, computeLinkVelocity=1, computeForwardKinematics=1,
                                          physicsClientId=self.cid)
            out.update({link: (s[0], s[1], s[6], s[7]) for link, s in zip(rest, states)})
        return out

    def joint_states(self, body, joints):
        return [s[:2] for s in self.p.getJointStates(body, joints, physicsClientId=self.cid)]

    def link_orientation(self, body, link):
        # as the engine holds it: from before the last step's integration (one step's turn behind)
        return self.p.getLinkState(body, link, physicsClientId=self.cid)[5]

    def link_frame(self, body, link):
        s = self.p.getLinkState(body, link, computeForwardKinematics=1, physicsClientId=self.cid)
        return s[4], s[5]

    def aabb(self, body, link=-1):
        return self.p.getAABB(body, link, physicsClientId=self.cid)

    def contacts(self, body_a, body_b, link_b=None):
        kw = {} if link_b is None else {"linkIndexB": link_b}
        return self.p.getContactPoints(bodyA=body_a, bodyB=body_b, physicsClientId=self.cid, **kw)

    def ray_hits(self, starts, ends):
        hits = self.p.rayTestBatch([list(v) for v in starts], [list(v) for v in ends], physicsClientId=self.cid)
        return [(h[0], h[3]) for h in hits]

    # --- actuators ----------------------------------------------------------------------------

    def drive_position(self, body, joint, target, force, max_speed, gain):
        # the engine's position motor commands gain x error per step as a speed, capped at max_speed
        self.p.setJointMotorControl2(body, joint, self.p.POSITION_CONTROL, targetPosition=target, force=force,
                                     maxVelocity=max_speed, positionGain=gain, physicsClientId=self.cid)

    def drive_velocity(self, body, joint, speed, force):
        self.p.setJointMotorControl2(body, joint, self.p.VELOCITY_CONTROL, targetVelocity=speed, force=force,
                                     physicsClientId=self.cid)

    def add_wrist(self, body, frame_in_com):
        return self.p.createConstraint(body, -1, -1, -1, self.p.JOINT_FIXED, (0, 0, 0), frame_in_com[0], (0, 0, 0),
                                       childFrameOrientation=(0, 0, 0, 1), parentFrameOrientation=frame_in_com[1],
                                       physicsClientId=self.cid)

    def move_wrist(self, wrist, position, orientation, max_force):
        self.p.changeConstraint(wrist, jointChildPivot=list(position), jointChildFrameOrientation=orientation,
                                maxForce=max_force, physicsClientId=self.cid)

    def camera_image(self, width, height, view, projection):
        p = self.p
        _, _, rgba, _, seg = p.getCameraImage(width, height, list(view), list(projection),
                                              renderer=p.ER_TINY_RENDERER, lightDirection=[0.4, -0.6, 1.0],
                                              shadow=0, physicsClientId=self.cid)
        rgb = np.asarray(rgba, dtype=np.uint8).reshape(height, width, 4)[:, :, :3].copy()
        return rgb, np.asarray(seg, dtype=np.int64).reshape(height, width)
