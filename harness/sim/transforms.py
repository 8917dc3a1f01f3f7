"""Pose arithmetic on (x, y, z, w) quaternions, the same for every engine.

Plain arithmetic, no physics client: pybullet's own functions are used so a trial's numbers stay
bit-identical to the ones recorded before the engines were split (pybullet is a core dependency).
"""

from __future__ import annotations

import numpy as np
import pybullet as _p

__all__ = ["quat_from_euler", "multiply", "invert", "rotation"]


def quat_from_euler(rpy):
    """Quaternion of roll, pitch, yaw (rad) about fixed x, y, z."""
    return _p.getQuaternionFromEuler(tuple(rpy))


def multiply(pos_a, orn_a, pos_b, orn_b):
    """Pose a * pose b: (position, quaternion)."""
    return _p.multiplyTransforms(pos_a, orn_a, pos_b, orn_b)


def invert(pos, orn):
    return _p.invertTransform(pos, orn)


def rotation(orn):
    """Rotation matrix (3, 3) of a quaternion."""
    return np.array(_p.getMatrixFromQuaternion(orn)).reshape(3, 3)
