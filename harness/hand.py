"""A gripper loaded in a World: its wrist driven like an arm's flange, its joints by role.

The wrist is a fixed constraint between the palm and the world whose target pose moves and
whose force is limited, as an arm's flange would be: the hand can be pushed back by contact.
Closing joints and pivots are position-controlled with the spec's torque and speed limits;
rollers are velocity-controlled with theirs.
"""

from __future__ import annotations

import numpy as np

from .build import materialise
from .grippers import GripperModel
from .world import World, model_cache

__all__ = ["Hand", "DOWN"]

DOWN = (1.0, 0.0, 0.0, 0.0)  # quaternion (x, y, z, w): hand z (approach) pointing along world -z
WRIST_FORCE = 500.0  # N; an arm's flange is far stiffer than a finger (common practice value)
# Closing joints are driven as if geared to one actuator: each finger's target leads the mean
# closure by this much (rad), so every finger pushes with its full torque while the fingers stay
# within about this angle of each other. Without it, equal torques on an object are only
# neutrally stable and the object is shoved until one finger hits its stop.
CLOSE_LEAD = 0.02


class Hand:
    def __init__(self, world: World, model: GripperModel, position, orientation=DOWN, wrist_force=WRIST_FORCE):
        p, cid = world.p, world.cid
        self.world, self.model = world, model
        path = materialise(model.name, model.urdf, model.files, model_cache())
        self.body = world.load(path, position, orientation)
        names = {p.getJointInfo(self.body, j, physicsClientId=cid)[1].decode(): j
                 for j in range(p.getNumJoints(self.body, physicsClientId=cid))}
        self.link_of = {p.getJointInfo(self.body, j, physicsClientId=cid)[12].decode(): j for j in names.values()}
        self.link_of[p.getBodyInfo(self.body, physicsClientId=cid)[0].decode()] = -1
        self.close_j = [names[n] for n in model.close_joints]
        self.pivot_j = [names[n] for n in model.pivot_joints]
        self.roll_j = [names[n] for n in model.roll_joints]
        info = [p.getJointInfo(self.body, j, physicsClientId=cid) for j in range(len(names))]
        self.limits = {j: (i[8], i[9], i[10], i[11]) for j, i in enumerate(info)}  # lower, upper, effort, speed
        for link_name, surface in model.surfaces.items():
            if link_name in self.link_of:
                world.set_surface(self.body, self.link_of[link_name], surface.friction, 0.0,
                                  surface.stiffness, surface.damping)
        # the wrist constraint acts at the URDF frame of the palm, not at its centre of mass
        dyn = p.getDynamicsInfo(self.body, -1, physicsClientId=cid)
        self._frame_in_com = p.invertTransform(dyn[3], dyn[4])  # URDF frame seen from the palm's COM frame
        self.wrist = p.createConstraint(self.body, -1, -1, -1, p.JOINT_FIXED, (0, 0, 0), self._frame_in_com[0],
                                        (0, 0, 0), childFrameOrientation=(0, 0, 0, 1),
                                        parentFrameOrientation=self._frame_in_com[1], physicsClientId=cid)
        self.wrist_force = wrist_force
        self.move_wrist(position, orientation)
        # every driven joint starts held: pivots at 0 (or the nearest limit), rollers at rest
        self.set_pivots(0.0)
        self.set_rollers(0.0)

    # --- commands -----------------------------------------------------------------------------

    def move_wrist(self, position, orientation=DOWN):
        self.wrist_target = (np.asarray(position, dtype=float), tuple(orientation))
        self.world.p.changeConstraint(self.wrist, jointChildPivot=list(position), jointChildFrameOrientation=orientation,
                                      maxForce=self.wrist_force, physicsClientId=self.world.cid)

    def _position(self, joints, targets, torque_scale=1.0):
        p = self.world.p
        for j, target in zip(joints, targets):
            lower, upper, effort, speed = self.limits[j]
            p.setJointMotorControl2(self.body, j, p.POSITION_CONTROL, targetPosition=float(np.clip(target, lower, upper)),
                                    force=effort * torque_scale, maxVelocity=speed, physicsClientId=self.world.cid)

    def close(self, fraction=1.0, torque_scale=1.0):
        """Drive closing joints toward `fraction` of their range (1: fully closed), synchronised,
        with their torque limit (times `torque_scale`). Call again each control step."""
        q = self.joint_positions(self.close_j)
        lead = q.mean() - q + CLOSE_LEAD  # relative to each joint's own position
        goal = [lo + fraction * (hi - lo) for lo, hi, *_ in (self.limits[j] for j in self.close_j)]
        self._position(self.close_j, np.minimum(q + lead, goal), torque_scale)

    def open(self):
        self._position(self.close_j, [self.limits[j][0] for j in self.close_j])

    def set_pivots(self, angles):
        self._position(self.pivot_j, np.broadcast_to(angles, (len(self.pivot_j),)))

    def set_rollers(self, speeds, torque_scale=1.0):
        """Roller speeds (rad/s, positive draws in), clipped to each motor's speed limit."""
        p = self.world.p
        for j, speed in zip(self.roll_j, np.broadcast_to(speeds, (len(self.roll_j),))):
            _, _, effort, limit = self.limits[j]
            p.setJointMotorControl2(self.body, j, p.VELOCITY_CONTROL, targetVelocity=float(np.clip(speed, -limit, limit)),
                                    force=effort * torque_scale, physicsClientId=self.world.cid)

    # --- state --------------------------------------------------------------------------------

    def joint_positions(self, joints):
        states = self.world.p.getJointStates(self.body, joints, physicsClientId=self.world.cid)
        return np.array([s[0] for s in states])

    def joint_speeds(self, joints):
        states = self.world.p.getJointStates(self.body, joints, physicsClientId=self.world.cid)
        return np.array([s[1] for s in states])

    def frame(self):
        """Pose of the palm's URDF frame (the hand frame): position (3,), rotation matrix (3, 3)."""
        p, cid = self.world.p, self.world.cid
        pos, orn = p.getBasePositionAndOrientation(self.body, physicsClientId=cid)
        pos, orn = p.multiplyTransforms(pos, orn, *self._frame_in_com)
        return np.array(pos), np.array(p.getMatrixFromQuaternion(orn)).reshape(3, 3)
