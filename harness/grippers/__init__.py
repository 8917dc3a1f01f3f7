"""Gripper families. Each module exports `Params` (a spec section class) and `build(variant) -> GripperModel`.

Adding a family is adding one module and one line here.
"""

from . import jaw, roller_finger, urdf_family
from .model import GripperModel, Surface, build_models

FAMILIES = {
    "roller-finger": roller_finger,
    "jaw": jaw,
    "urdf": urdf_family,
}

__all__ = ["FAMILIES", "GripperModel", "Surface", "build_models"]
