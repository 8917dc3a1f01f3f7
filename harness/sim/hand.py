"""A gripper loaded in a World: its wrist driven like an arm's flange, its joints by role.

The wrist is a fixed constraint between the palm and the world whose target pose moves and
whose force is limited, as an arm's flange would be: the hand can be pushed back by contact.
Closing joints and pivots are position-controlled with the spec's torque and speed limits;
rollers are velocity-controlled with theirs.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..models.build import materialise
from ..models.grippers import GripperModel
from .transforms import invert, multiply, rotation
from .world import World, model_cache

__all__ = ["Hand", "DOWN", "RollerJoints"]

DOWN = (1.0, 0.0, 0.0, 0.0)  # quaternion (x, y, z, w): hand z (approach) pointing along world -z
WRIST_FORCE = 500.0  # N; an arm's flange is far stiffer than a finger (common practice value)
# Closing joints are driven as if geared to one actuator: each finger's target leads the mean
# closure by what the joint travels at full speed in CLOSE_LEAD_TIME, so every finger pushes with
# its full torque while the fingers stay within that distance of each other. Without it, equal
# torques on an object are only neutrally stable and the object is shoved until one finger hits
# its stop. The position gain is set so that this lead commands exactly the joint's speed limit
# (the engine's motor moves gain x error per step).
CLOSE_LEAD_TIME = 1.0 / 60.0  # s
# The lead is renewed once a control tick and the servo's time constant is that tick, so a free
# joint covers 1 - 1/e of the lead per tick: fingers close at 63 % of their speed limit (measured:
# 64 % for the jaw and the duo-roller flex joints at 240, 480, 960 and 1920 Hz).
CLOSING_SPEED_SHARE = 1.0 - np.exp(-1.0)
# Time constant of the other position servos (pivots, opening fingers). The engine's motor moves
# gain x error per physics step, so a fixed gain would make the servo 4x faster at 960 Hz than at
# 240 Hz: a trial's numbers would depend on the step. The gain is derived from this time instead
# (0.1 per step at 240 Hz, as before).
SERVO_TIME = 1.0 / 24.0  # s


@dataclass(frozen=True)
class RollerJoints:
    """A roller's spin joint, the pivot joint that turns it (None if it has none) and its radius."""

    roll: int
    pivot: int | None
    radius: float


class Hand:
    def __init__(self, world: World, model: GripperModel, position, orientation=DOWN, wrist_force=WRIST_FORCE):
        self.world, self.model = world, model
        path = materialise(model.name, model.urdf, model.files, model_cache())
        self.body = world.load(path, position, orientation)
        info = world.joints(self.body)
        names = {i.name: j for j, i in enumerate(info)}
        self.link_of = {i.link_name: j for j, i in enumerate(info)}
        self.link_of[world.base_name(self.body)] = -1
        self.close_j = [names[n] for n in model.close_joints]
        self.pivot_j = [names[n] for n in model.pivot_joints]
        self.roll_j = [names[n] for n in model.roll_joints]
        self.limits = {j: (i.lower, i.upper, i.effort, i.speed) for j, i in enumerate(info)}
        self._axis = {j: np.array(i.axis) for j, i in enumerate(info)}  # in the child link's frame
        self._parent = {j: i.parent for j, i in enumerate(info)}
        self._lead = float(np.mean([self.limits[j][3] for j in self.close_j])) * CLOSE_LEAD_TIME
        self.rollers = [RollerJoints(roll, self._pivot_of(roll), model.roller_radius) for roll in self.roll_j]
        for link_name, surface in model.surfaces.items():
            if link_name in self.link_of:
                world.set_surface(self.body, self.link_of[link_name], surface.friction, 0.0,
                                  surface.stiffness, surface.damping)
        # the wrist constraint acts at the URDF frame of the palm, not at its centre of mass
        self._frame_in_com = invert(*world.com_frame(self.body))  # URDF frame seen from the palm's COM frame
        self.wrist = world.add_wrist(self.body, self._frame_in_com)
        self.wrist_force = wrist_force
        self.move_wrist(position, orientation)
        # every driven joint starts held: pivots at 0 (or the nearest limit), rollers at rest
        self.set_pivots(0.0)
        self.set_rollers(0.0)

    # --- commands -----------------------------------------------------------------------------

    def move_wrist(self, position, orientation=DOWN):
        self.wrist_target = (np.asarray(position, dtype=float), tuple(orientation))
        self.world.move_wrist(self.wrist, position, orientation, self.wrist_force)

    def teleport(self, position, orientation=DOWN):
        """Put the hand's frame at a pose at once, at rest (before the first step of a scene)."""
        pos, orn = multiply(position, orientation, *invert(*self._frame_in_com))
        self.world.reset_pose(self.body, pos, orn)
        self.move_wrist(position, orientation)

    def _position(self, joints, targets, torque_scale=1.0, gain=None):
        gain = self.world.settings.time_step / SERVO_TIME if gain is None else gain
        for j, target in zip(joints, targets):
            lower, upper, effort, speed = self.limits[j]
            self.world.drive_position(self.body, j, min(max(float(target), lower), upper), effort * torque_scale,
                                      speed, gain)

    def close(self, fraction=1.0, torque_scale=1.0):
        """Drive closing joints toward `fraction` of their range (1: fully closed, 0: fully open),
        synchronised, with their torque limit (times `torque_scale`). Call again each control step.
        Driving toward 0 from a closed pose spreads the fingers with full torque (inside grasps)."""
        states = self.world.joint_states(self.body, self.close_j)
        mean = sum(s[0] for s in states) / len(states)
        targets = []
        for j in self.close_j:  # each target leads the mean toward the joint's goal, never past it
            lo, hi, *_ = self.limits[j]
            goal = lo + fraction * (hi - lo)
            targets.append(min(mean + self._lead, goal) if goal >= mean else max(mean - self._lead, goal))
        self.hold_closing(targets, torque_scale)

    def closing_time(self):
        """Time (s) the slowest closing joint takes over its whole range, closing freely (at
        CLOSING_SPEED_SHARE of its speed limit)."""
        return max((hi - lo) / (speed * CLOSING_SPEED_SHARE) for lo, hi, _, speed in
                   (self.limits[j] for j in self.close_j))

    def clamp_targets(self, spreading=False):
        """Targets that hold the closing joints against the object: where they are plus one lead
        toward closed (toward open when `spreading`), so they press with full torque yet cannot
        close more than the lead if the object moves (no wedging it deeper between the fingers)."""
        return self.joint_positions(self.close_j) + (-self._lead if spreading else self._lead)

    def hold_closing(self, targets, torque_scale=1.0):
        self._position(self.close_j, targets, torque_scale, gain=self.world.settings.time_step / CLOSE_LEAD_TIME)

    def open(self):
        self._position(self.close_j, [self.limits[j][0] for j in self.close_j])

    def reset_joints(self, fraction):
        """Teleport closing joints to `fraction` of their range (before the first step only)."""
        for j in self.close_j:
            lo, hi, *_ = self.limits[j]
            self.world.reset_joint(self.body, j, lo + fraction * (hi - lo))

    def set_pivots(self, angles):
        self._position(self.pivot_j, np.broadcast_to(angles, (len(self.pivot_j),)))

    def set_rollers(self, speeds, torque_scale=1.0):
        """Roller speeds (rad/s, positive draws in), clipped to each motor's speed limit."""
        for j, speed in zip(self.roll_j, np.broadcast_to(speeds, (len(self.roll_j),))):
            _, _, effort, limit = self.limits[j]
            self.world.drive_velocity(self.body, j, float(np.clip(speed, -limit, limit)), effort * torque_scale)

    # --- state --------------------------------------------------------------------------------

    def joint_positions(self, joints):
        return np.array([s[0] for s in self.world.joint_states(self.body, joints)])

    def joint_speeds(self, joints):
        return np.array([s[1] for s in self.world.joint_states(self.body, joints)])

    def joint_axis(self, joint):
        """A joint's unit axis (3,) in the world frame (the axis is stated in its child link's frame)."""
        return rotation(self.world.link_orientation(self.body, joint)) @ self._axis[joint]

    def tip_links(self):
        """Per closing joint, the link of its chain farthest from the palm (roller, pad, jaw)."""
        frame = self.frame()
        depth = {k: self.link_box(k, frame)[:, 2].max() for k in self.limits}  # deepest point along the hand axis
        # ties (a pad flush with its jaw's end) go to the link further down the chain (higher index)
        return [max((k for k in self.limits if self._descends(k, j)), key=lambda k: (round(depth[k], 4), k))
                for j in self.close_j]

    def _descends(self, link, joint):
        while link != -1:
            if link == joint:
                return True
            link = self._parent[link]
        return False

    def _pivot_of(self, roll_joint):
        parent = self._parent[roll_joint]
        while parent != -1:
            if parent in self.pivot_j:
                return parent
            parent = self._parent[parent]
        return None

    def to_hand(self, x, frame=None):
        """World point(s) x (..., 3) in the hand frame (`frame`: a pose from frame(), to reuse)."""
        pos, rot = frame or self.frame()
        return (np.asarray(x) - pos) @ rot

    def roller_reach(self, frame=None):
        """Depth (m) of the lowest roller point below the palm, in the hand frame: the deepest roller
        centre plus its radius."""
        frame = frame or self.frame()
        return max(float(self.to_hand(self.world.link_state(self.body, r.roll)[0], frame)[2]) + r.radius
                   for r in self.rollers)

    def link_box(self, link, frame=None):
        """The 8 corners (8, 3) of a link's world-aligned collision box, in the hand frame."""
        lo, hi = self.world.aabb(self.body, link)
        corners = [[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], hi[1]) for z in (lo[2], hi[2])]
        return self.to_hand(corners, frame)

    def frame(self):
        """Pose of the palm's URDF frame (the hand frame): position (3,), rotation matrix (3, 3)."""
        pos, orn = self.world.raw_state(self.body, -1)[:2]
        pos, orn = multiply(pos, orn, *self._frame_in_com)
        return np.array(pos), rotation(orn)
