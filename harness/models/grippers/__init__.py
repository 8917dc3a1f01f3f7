"""Gripper families. Each module exports `Params` (a spec section class) and `build(variant) -> GripperModel`.

Adding a family is adding one module and one line here.
"""

from . import jaw, roller_finger, urdf_family
from .model import GripperModel, Surface

FAMILIES = {
    "roller-finger": roller_finger,
    "jaw": jaw,
    "urdf": urdf_family,
}

__all__ = ["FAMILIES", "GripperModel", "Surface", "build_models"]


def build_models(spec):
    """Every variant of a GripperSpec as a GripperModel (pure: no files written)."""
    family = FAMILIES[spec.family]
    return [family.build(spec, variant) for variant in spec.variants]
