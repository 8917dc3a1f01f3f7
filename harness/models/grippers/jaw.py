"""`jaw`: a plain parallel-jaw baseline. Two prismatic jaws close along x towards the hand axis,
each carrying a friction pad on its inner face. Hand frame as for every family: palm face at
z = 0, jaws pointing along +z. A positive slide closes."""

from __future__ import annotations

from dataclasses import dataclass

from .. import urdf as U
from ..fields import param, section
from ..massprops import box_inertia
from .model import GripperModel, Pad, Surface
from ..sources import spec_hash

__all__ = ["Params", "build"]

STRUCTURE_FRICTION = 0.5  # palm and jaw bodies: plain machined parts (common practice value)


@dataclass(frozen=True, kw_only=True)
class Palm:
    width: float = param("width_mm", unit="mm", gt=0)
    depth: float = param("depth_mm", unit="mm", gt=0)
    thickness: float = param("thickness_mm", unit="mm", gt=0)
    mass: float = param("mass_kg", gt=0)


@dataclass(frozen=True, kw_only=True)
class Jaw:
    opening: float = param("opening_mm", unit="mm", gt=0, doc="gap between the pads when fully open")
    stroke: float = param("stroke_mm", unit="mm", gt=0, doc="travel of each jaw")
    length: float = param("length_mm", unit="mm", gt=0)
    width: float = param("width_mm", unit="mm", gt=0)
    thickness: float = param("thickness_mm", unit="mm", gt=0)
    mass: float = param("mass_kg", gt=0)
    force: float = param("force_n", gt=0, doc="force limit of each jaw")
    speed: float = param("speed_mm_s", unit="mm", gt=0)

    def check(self):
        if 2 * self.stroke > self.opening:
            yield "stroke_mm", f"must be at most half the opening ({self.opening * 500:g} mm) so the jaws cannot cross"


@dataclass(frozen=True, kw_only=True)
class JawPad(Pad):
    width: float = param("width_mm", unit="mm", gt=0)


@dataclass(frozen=True, kw_only=True)
class Params:
    palm: Palm = section("palm")
    jaw: Jaw = section("jaw")
    pad: JawPad = section("pad")

    def check(self):
        if self.pad.length > self.jaw.length:
            yield "pad.length_mm", f"must not exceed the jaw length ({self.jaw.length * 1e3:g} mm)"
        span = self.jaw.opening + 2 * (self.pad.thickness + self.jaw.thickness)
        if self.palm.width < span:
            yield "palm.width_mm", f"must be at least {span * 1e3:g} mm to carry the open jaws"


def build(spec, variant):
    p: Params = variant.params
    j, pad = p.jaw, p.pad
    palm_size = (p.palm.width, p.palm.depth, p.palm.thickness)
    parts = [U.link("palm", p.palm.mass, (0, 0, -p.palm.thickness / 2), box_inertia(p.palm.mass, *palm_size),
                    [(U.geometry("box", palm_size), (0, 0, -p.palm.thickness / 2), (0, 0, 0))],
                    rgba=(0.25, 0.3, 0.35, 1))]
    surfaces = {"palm": Surface(STRUCTURE_FRICTION)}
    jaw_size = (j.thickness, j.width, j.length)
    pad_size = (pad.thickness, pad.width, pad.length)
    for i, side in enumerate((1.0, -1.0)):
        n = f"jaw{i}"
        x = side * (j.opening / 2 + pad.thickness + j.thickness / 2)
        parts.append(U.joint(f"{n}_slide", "prismatic", "palm", n, (x, 0, 0), (0, 0, 0), (-side, 0, 0),
                             0.0, j.stroke, j.force, j.speed))
        parts.append(U.link(n, j.mass, (0, 0, j.length / 2), box_inertia(j.mass, *jaw_size),
                            [(U.geometry("box", jaw_size), (0, 0, j.length / 2), (0, 0, 0))]))
        surfaces[n] = Surface(STRUCTURE_FRICTION)
        parts.append(U.joint(f"{n}_pad_mount", "fixed", n, f"{n}_pad",
                             (-side * (j.thickness + pad.thickness) / 2, 0, j.length - pad.length / 2)))
        parts.append(U.link(f"{n}_pad", pad.mass, (0, 0, 0), box_inertia(pad.mass, *pad_size),
                            [(U.geometry("box", pad_size), (0, 0, 0), (0, 0, 0))], rgba=(0.2, 0.55, 0.3, 1)))
        surfaces[f"{n}_pad"] = pad.surface()
    return GripperModel(
        name=variant.name, family="jaw", key=spec_hash("jaw", p), urdf=U.robot(variant.name, parts),
        close_joints=("jaw0_slide", "jaw1_slide"), surfaces=surfaces, opening=j.opening,
        summary={"fingers": 2, "opening_mm": j.opening * 1e3, "stroke_mm": j.stroke * 1e3,
                 "pad_friction": pad.friction, "force_n": j.force,
                 "mass_kg": p.palm.mass + 2 * (j.mass + pad.mass)},
    )
