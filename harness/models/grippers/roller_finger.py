"""`roller-finger`: 2 to 4 fingers on a palm, each with a flexing base joint, a pivot that turns
the fingertip roller's axis, and a continuously rotating, velocity-controlled roller.

Hand frame: the palm face is the plane z = 0 and fingers point along +z (the approach
direction). Finger i sits at angle a_i on a circle of `placement_radius` (any angles, e.g. two
opposed pairs; bases that would overlap on the palm are refused); in its own frame x points
radially outward, y along the circle, z along the finger. Joint ranges may span -180 to 180 deg.

- flex joint (finger{i}_flex): axis -y at the palm face, so a positive angle swings the tip
  inward (closing).
- pivot joint (finger{i}_pivot): axis -x through the roller centre, i.e. along the line from
  the roller to the grasp centre; turning it turns the roller axis within the plane that faces
  the object, so the roller's curved surface keeps facing the object at any pivot angle.
- roll joint (finger{i}_roll): axis -y at pivot 0, so a positive speed moves the roller's inner
  surface towards the palm (draw-in); at pivot 90 deg the same speed moves it sideways
  (turning an object about the approach axis).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from .. import urdf as U
from ..fields import param, section
from ..massprops import box_inertia, cylinder_inertia
from .model import GripperModel, Pad, Surface
from ..sources import spec_hash

__all__ = ["Params", "build"]

STRUCTURE_FRICTION = 0.5  # palm and finger links: a plain plastic part (common practice value)


@dataclass(frozen=True, kw_only=True)
class Palm:
    radius: float = param("radius_mm", unit="mm", gt=0, doc="palm disc radius")
    thickness: float = param("thickness_mm", unit="mm", gt=0)
    mass: float = param("mass_kg", gt=0)


@dataclass(frozen=True, kw_only=True)
class Motor:
    """A position-controlled revolute joint: range, torque limit and speed limit."""

    lower: float = param("lower_deg", unit="deg", ge=-180, le=180)
    upper: float = param("upper_deg", unit="deg", ge=-180, le=180)
    torque: float = param("torque_nm", gt=0)
    speed: float = param("speed_deg_s", unit="deg", gt=0)

    def check(self):
        if self.lower >= self.upper:
            yield "upper_deg", f"must be greater than lower_deg ({math.degrees(self.lower):g})"


@dataclass(frozen=True, kw_only=True)
class Roller:
    radius: float = param("radius_mm", unit="mm", gt=0)
    width: float = param("width_mm", unit="mm", gt=0)
    mass: float = param("mass_kg", gt=0)
    friction: float = param("friction", gt=0, le=10, doc="Coulomb mu of the tread (pybullet clamps at 10)")
    stiffness: float = param("stiffness_n_m", gt=0, doc="contact stiffness of the tread")
    damping: float = param("damping_n_s_m", ge=0)
    torque: float = param("torque_nm", gt=0, doc="roller motor torque limit")
    speed: float = param("speed_rpm", unit="rpm", gt=0, doc="roller motor speed limit")


@dataclass(frozen=True, kw_only=True)
class Finger:
    count: int = param("count", "integer", ge=2, le=4)
    angles: tuple[float, ...] | None = param("angles_deg", "numbers", unit="deg", ge=-360, le=360, default=None,
                                             doc="placement angles on the palm; default evenly spaced")
    placement_radius: float = param("placement_radius_mm", unit="mm", gt=0)
    length: float = param("length_mm", unit="mm", gt=0)
    width: float = param("width_mm", unit="mm", gt=0)
    thickness: float = param("thickness_mm", unit="mm", gt=0)
    mass: float = param("mass_kg", gt=0)
    flex: Motor = section("flex")
    pivot: Motor = section("pivot")
    roller: Roller = section("roller")
    pad: Pad | None = section("pad", optional=True)

    def check(self):
        if self.angles is not None and len(self.angles) != self.count:
            yield "angles_deg", f"must list one angle per finger ({self.count}); got {len(self.angles)}"
        if 2 * self.roller.radius <= self.thickness:
            yield "roller.radius_mm", (f"must exceed half the finger thickness ({self.thickness * 500:g} mm) "
                                       "so the roller, not the finger, meets the object")
        if self.roller.radius > self.length:
            # plausibility: a fingertip roller larger than the finger carrying it is a unit slip
            # (e.g. 1200 for 12 mm), not a design; the finger length is our own limit
            yield "roller.radius_mm", (f"must not exceed the finger length ({self.length * 1e3:g} mm); "
                                       f"got {self.roller.radius * 1e3:g}")
        if self.roller.width > 4 * self.width:
            yield "roller.width_mm", (f"must not exceed 4 times the finger width ({4 * self.width * 1e3:g} mm); "
                                      f"got {self.roller.width * 1e3:g}")
        if self.pad is not None and self.pad.length > self.length:
            yield "pad.length_mm", f"must not exceed the finger length ({self.length * 1e3:g} mm)"
        if self.angles is not None and len(self.angles) == self.count:
            yield from self._clear_of_each_other()

    def _clear_of_each_other(self):
        """Finger bases must not overlap on the palm: the bases' centres (on the placement circle)
        stay at least the diagonal of a finger's cross-section apart (a conservative clearance)."""
        need = math.hypot(self.width, self.thickness)
        angles = self.placement_angles()
        for i in range(self.count):
            for j in range(i + 1, self.count):
                apart = 2 * self.placement_radius * abs(math.sin((angles[i] - angles[j]) / 2))  # chord
                if apart < need:
                    yield "angles_deg", (
                        f"fingers {i} and {j} (at {math.degrees(angles[i]):g} and {math.degrees(angles[j]):g} deg) "
                        f"collide in the palm: their bases are {apart * 1e3:.1f} mm apart, less than "
                        f"{need * 1e3:.1f} mm (the diagonal of a finger's width and thickness); place them "
                        "further apart or raise placement_radius_mm")

    def placement_angles(self):
        if self.angles is not None:
            return self.angles
        return tuple(2 * math.pi * i / self.count for i in range(self.count))


@dataclass(frozen=True, kw_only=True)
class Params:
    palm: Palm = section("palm")
    finger: Finger = section("finger")

    def check(self):
        if self.finger.placement_radius > self.palm.radius:
            yield "finger.placement_radius_mm", f"must not exceed the palm radius ({self.palm.radius * 1e3:g} mm)"


def tip_opening(f: Finger):
    """Diameter (m) of the circle the rollers' inner surfaces leave free with the fingers fully open.

    A finger flexed by theta (positive closes) puts its roller centre, L + r along the finger, at
    placement_radius - (L + r) sin(theta) from the hand axis; the roller reaches r closer."""
    reach = f.placement_radius - (f.length + f.roller.radius) * math.sin(f.flex.lower) - f.roller.radius
    return max(2.0 * reach, 0.0)


def build(spec, variant):
    """Generate the URDF and roles for one variant."""
    p: Params = variant.params
    f, r = p.finger, p.finger.roller
    parts = [U.link("palm", p.palm.mass, (0, 0, -p.palm.thickness / 2),
                    cylinder_inertia(p.palm.mass, p.palm.radius, p.palm.thickness),
                    [(U.geometry("cylinder", (p.palm.radius, p.palm.thickness)), (0, 0, -p.palm.thickness / 2),
                      (0, 0, 0))], rgba=(0.25, 0.3, 0.35, 1))]
    surfaces = {"palm": Surface(STRUCTURE_FRICTION)}
    carrier_mass = max(0.1 * r.mass, 1e-3)  # the fork holding the roller; visual only
    carrier_size = (f.thickness, r.width * 0.25, r.radius)
    for i, angle in enumerate(f.placement_angles()):
        n = f"finger{i}"
        xyz = (f.placement_radius * math.cos(angle), f.placement_radius * math.sin(angle), 0.0)
        parts.append(U.joint(f"{n}_flex", "revolute", "palm", f"{n}_link", xyz, (0, 0, angle), (0, -1, 0),
                             f.flex.lower, f.flex.upper, f.flex.torque, f.flex.speed))
        parts.append(U.link(f"{n}_link", f.mass, (0, 0, f.length / 2),
                            box_inertia(f.mass, f.thickness, f.width, f.length),
                            [(U.geometry("box", (f.thickness, f.width, f.length)), (0, 0, f.length / 2), (0, 0, 0))]))
        surfaces[f"{n}_link"] = Surface(STRUCTURE_FRICTION)
        parts.append(U.joint(f"{n}_pivot", "revolute", f"{n}_link", f"{n}_carrier", (0, 0, f.length + r.radius),
                             (0, 0, 0), (-1, 0, 0), f.pivot.lower, f.pivot.upper, f.pivot.torque, f.pivot.speed))
        parts.append(U.link(f"{n}_carrier", carrier_mass, (0, 0, 0),
                            box_inertia(carrier_mass, *carrier_size),
                            [(U.geometry("box", carrier_size), (0, 0, -r.radius / 2), (0, 0, 0))], collide=False))
        parts.append(U.joint(f"{n}_roll", "continuous", f"{n}_carrier", f"{n}_roller", axis=(0, -1, 0),
                             effort=r.torque, velocity=r.speed))
        # URDF cylinders lie along z; turning them +90 deg about x lays the axis along y.
        roller_inertia = cylinder_inertia(r.mass, r.radius, r.width)[[0, 2, 1]][:, [0, 2, 1]]
        parts.append(U.link(f"{n}_roller", r.mass, (0, 0, 0), roller_inertia,
                            [(U.geometry("cylinder", (r.radius, r.width)), (0, 0, 0), (math.pi / 2, 0, 0))],
                            rgba=(0.85, 0.45, 0.1, 1)))
        surfaces[f"{n}_roller"] = Surface(r.friction, r.stiffness, r.damping)
        if f.pad is not None:
            pad = f.pad
            size = (pad.thickness, f.width, pad.length)
            parts.append(U.joint(f"{n}_pad_mount", "fixed", f"{n}_link", f"{n}_pad",
                                 (-(f.thickness + pad.thickness) / 2, 0, f.length / 2)))
            parts.append(U.link(f"{n}_pad", pad.mass, (0, 0, 0), box_inertia(pad.mass, *size),
                                [(U.geometry("box", size), (0, 0, 0), (0, 0, 0))], rgba=(0.2, 0.55, 0.3, 1)))
            surfaces[f"{n}_pad"] = pad.surface()
    key = spec_hash("roller-finger", p)
    return GripperModel(
        name=variant.name, family="roller-finger", key=key, urdf=U.robot(variant.name, parts),
        close_joints=tuple(f"finger{i}_flex" for i in range(f.count)),
        pivot_joints=tuple(f"finger{i}_pivot" for i in range(f.count)),
        roll_joints=tuple(f"finger{i}_roll" for i in range(f.count)),
        roller_radius=r.radius, surfaces=surfaces, opening=tip_opening(f),
        summary={"fingers": f.count, "roller_radius_mm": r.radius * 1e3, "opening_mm": round(tip_opening(f) * 1e3, 1),
                 "roller_friction": r.friction,
                 "roller_torque_nm": r.torque, "finger_length_mm": f.length * 1e3,
                 "mass_kg": p.palm.mass + f.count * (f.mass + carrier_mass + r.mass + (f.pad.mass if f.pad else 0))},
    )

