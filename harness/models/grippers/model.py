"""What a gripper family produces: URDF text plus the roles of its joints and the materials of its surfaces."""

from __future__ import annotations

from dataclasses import dataclass, field

from ..fields import param

__all__ = ["GripperModel", "Surface", "Pad"]


@dataclass(frozen=True)
class Surface:
    """Contact material of one link: Coulomb friction (pair value when the object's is 1),
    contact stiffness (N/m) and damping (N s/m); None leaves the engine's rigid contact."""

    friction: float
    stiffness: float | None = None
    damping: float | None = None


@dataclass(frozen=True, kw_only=True)
class Pad:
    """A passive friction pad (spec section shared by the families): size, mass and material."""

    length: float = param("length_mm", unit="mm", gt=0)
    thickness: float = param("thickness_mm", unit="mm", gt=0)
    mass: float = param("mass_kg", gt=0, default=0.005)
    friction: float = param("friction", gt=0, le=10)
    stiffness: float = param("stiffness_n_m", gt=0)
    damping: float = param("damping_n_s_m", ge=0)

    def surface(self):
        return Surface(self.friction, self.stiffness, self.damping)


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
    opening: float | None = None  # widest object (m) that fits between the open fingertips; None: unknown
    surfaces: dict[str, Surface] = field(default_factory=dict)
    files: dict[str, bytes] = field(default_factory=dict)  # extra files beside the URDF
    summary: dict[str, object] = field(default_factory=dict)  # key properties for `show`
