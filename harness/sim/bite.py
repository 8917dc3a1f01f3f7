"""The bite condition of driven rollers drawing a part off the work surface: the least roller-part
friction coefficient with which a pair of rollers resting on the surface lifts a part into the hand.

Rolling-mill theory (G. E. Dieter, Mechanical Metallurgy, chapter on the rolling of metals; S.
Kalpakjian and S. R. Schmid, Manufacturing Engineering and Technology, chapter on rolling): two
counter-rotating rolls draw a body into their gap unaided only when mu >= tan(alpha), alpha the angle
between the contact normal and the line of the roll centres. On a surface the line of the roll
centres is level (both rollers touch it), so alpha is the angle of the contact normal below level:

- a lying cylinder of radius R between rollers of radius r: the line of centres rises from the part
  to the roller by r - R over a length r + R, sin(beta) = (r - R) / (r + R);
- a plate or disc edge of height h < r meets the roller at theta from its lowest point,
  cos(theta) = (r - h) / r, its normal beta = 90 deg - theta below level: mu > cot(theta).

Rigid contact, weight small against the squeeze; tests/test_surface_bite.py derives the correction
for weight and roller-surface friction.
"""

from __future__ import annotations

import math

__all__ = ["SHAPES", "bite_angle", "required_mu", "roller_friction", "thinnest_part", "bite_note"]

SHAPES = ("cylinder", "disc", "plate")  # lying cylinder; standing disc and plate (an edge of height h)


def bite_angle(shape, roller_radius, height):
    """Angle (rad) of the roller-part contact normal below level for a part of `height` (m) resting
    on the surface between rollers of `roller_radius` (m) that touch it; 0 when the part reaches
    the roller centres (the rollers then squeeze it level or push it up)."""
    r = roller_radius
    if shape == "cylinder":
        R = height / 2
        return math.asin((r - R) / (r + R)) if R < r else 0.0
    if shape in ("disc", "plate"):
        return math.pi / 2 - math.acos((r - height) / r) if height < r else 0.0
    raise ValueError(f"shape must be one of {', '.join(SHAPES)}; got {shape!r}")


def required_mu(shape, roller_radius, height):
    """The least roller-part friction coefficient that draws the part in: tan of the bite angle."""
    return math.tan(bite_angle(shape, roller_radius, height))


def bite_note(roller_radius, pair_mu, height, edge):
    """Why rollers of `roller_radius` (m) resting on the surface cannot draw in a part `height` (m)
    high (an edge, or a round part lying) at the pair friction `pair_mu`, in numbers; None if they can."""
    shape = "disc" if edge else "cylinder"
    need = required_mu(shape, roller_radius, height)
    if pair_mu > need:
        return None
    return (f"object top {height * 1e3:.1f} mm: {roller_radius * 1e3:.0f} mm rollers on the surface meet "
            f"{'its edge' if edge else 'it'} {math.degrees(bite_angle(shape, roller_radius, height)):.0f} deg below "
            f"level, drawing in needs mu > {need:.2f}, the pair's mu is {pair_mu:.2f}")


def thinnest_part(shape, roller_radius, mu):
    """The lowest part height (m) rollers of `roller_radius` (m) draw in at friction `mu`: the
    height whose bite angle is atan(mu) (required_mu inverted)."""
    s = math.sin(math.atan(mu))
    if shape == "cylinder":
        return 2 * roller_radius * (1 - s) / (1 + s)  # sin(beta) = (r - R)/(r + R)
    if shape in ("disc", "plate"):
        return roller_radius * (1 - s)  # cos(theta) = sin(beta) = (r - h)/r
    raise ValueError(f"shape must be one of {', '.join(SHAPES)}; got {shape!r}")


def roller_friction(model):
    """The rollers' own friction coefficient: their surfaces' (roller-finger names them `*_roller`),
    else the one every link of a urdf-family hand shares, else the engine's default 1."""
    rollers = [s.friction for name, s in model.surfaces.items() if name.endswith("_roller")]
    others = [s.friction for s in model.surfaces.values()]
    return (rollers or others or [1.0])[0]
