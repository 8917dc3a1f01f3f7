"""What a gripper family produces: URDF text plus the roles of its joints and the materials of its surfaces."""

from __future__ import annotations

from dataclasses import dataclass, field

__all__ = ["GripperModel", "Surface", "build_models"]


@dataclass(frozen=True)
class Surface:
    """Contact material of one link: Coulomb friction (pair value when the object's is 1),
    contact stiffness (N/m) and damping (N s/m); None leaves the engine's rigid contact."""

    friction: float
    stiffness: float | None = None
    damping: float | None = None


@dataclass(frozen=True)
class GripperModel:
    """A ready-to-load gripper variant. Joint names refer to the URDF; lengths in metres."""

    name: str
    family: str
    key: str  # hash of the normalised variant parameters
    urdf: str
    close_joints: tuple[str, ...]
    pivot_joints: tuple[str, ...] = ()
    roll_joints: tuple[str, ...] = ()
    roller_radius: float | None = None
    surfaces: dict[str, Surface] = field(default_factory=dict)
    files: dict[str, bytes] = field(default_factory=dict)  # extra files beside the URDF
    summary: dict[str, object] = field(default_factory=dict)  # key properties for `show`


def build_models(spec):
    """Every variant of a GripperSpec as a GripperModel (pure: no files written)."""
    from . import FAMILIES
    family = FAMILIES[spec.family]
    return [family.build(spec, variant) for variant in spec.variants]
