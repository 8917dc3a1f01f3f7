"""Routines: scripted sequences of phases run on one gripper and one object.

A phase is a function `phase(ctx, params, log) -> bool` that drives the hand through a
TrialContext for a while and says whether its own goal was met; `log` (a PhaseLog) takes its
drift and a note. A routine is a name, a parameter section (declared with `fields.param`, so a
campaign file is validated like a spec) and a tuple of phases, each with what a failure of that
phase means for the trial's outcome:

- GRASP phases (approach, close, draw-in, spread): failing means the object was `missed`.
- HOLD phases (lift, hold, shake, pivot, roll, shift): failing with the object still held means the
  manoeuvre `stalled`; losing the object means `dropped`, or `ejected` when it left the hand faster
  than trial.EJECT_SPEED.
- release: failing (the object sticks to the hand) is `stalled`.

The phases themselves live in phases.py. Register a routine by adding it to ROUTINES (see
DEVELOPERS.md).
"""


from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..models.fields import Problems, param, parse
from .phases import (
    approach,
    below_reach,
    climb,
    close,
    draw_in,
    hold,
    inside_approach,
    lift,
    pivot,
    roll,
    shake,
    shift,
    spread,
    straddle,
    touch_down,
)
from .bite import bite_note, roller_friction
from .trial import EJECT_SPEED, STANDING_KINDS, TABLE_CLEARANCE, rest_height
from .world import pair_friction

__all__ = ["ROUTINES", "Routine", "make_routine"]

GRASP, HOLD, RELEASE = "grasp", "hold", "release"


# --- parameters ----------------------------------------------------------------------------

@dataclass(frozen=True, kw_only=True)
class Params:
    """Parameters every routine takes (SI in code; the file's unit is in the key)."""

    approach_s: float = param("approach_s", gt=0, default=0.4)
    grip_height: float = param("grip_height_share", gt=0, le=1, default=0.5,
                               doc="where the fingertips meet the object, as a share of its height")
    grip_torque: float = param("grip_torque_share", gt=0, le=1, default=1.0, doc="share of the closing motors' limit")
    close_s: float = param("close_s", gt=0, default=None,
                           doc="longest closing time; default: the fingers' free closing time over their whole travel plus 0.3 s")
    lift: float = param("lift_mm", unit="mm", gt=0, default=0.06)
    lift_s: float = param("lift_s", gt=0, default=0.6)
    hold_s: float = param("hold_s", gt=0, default=1.0)


@dataclass(frozen=True, kw_only=True)
class DrawInParams(Params):
    draw_speed: float = param("draw_speed_share", gt=0, le=1, default=0.6, doc="share of the roller speed limit")
    draw_s: float = param("draw_s", gt=0, default=1.5, doc="longest draw-in time")
    seat: bool = param("seat", "boolean", default=True,
                       doc="draw the object in until it seats against the palm or fingers; false: "
                           "stop with its centre level with the rollers (a fingertip grasp, for rolling)")


@dataclass(frozen=True, kw_only=True)
class RollParams(DrawInParams):
    seat: bool = param("seat", "boolean", default=False, doc="see draw-in-grasp; rolling needs a fingertip grasp")
    axis: tuple = param("axis", "numbers", length=(3, 3), default=(0.0, 0.0, 1.0), doc="in the hand frame")
    angle: float = param("angle_deg", unit="deg", gt=0, default=math.pi / 2)
    speed: float = param("speed_deg_s", unit="deg", gt=0, default=math.pi / 2)
    tolerance: float = param("tolerance_deg", unit="deg", gt=0, default=math.radians(10))

    def check(self):
        if np.linalg.norm(self.axis) < 1e-9:
            yield "axis", "must not be the zero vector"


@dataclass(frozen=True, kw_only=True)
class AngledRollParams(RollParams):
    pivot: float = param("pivot_deg", unit="deg", default=math.pi / 4, doc="roller pivot angle before rolling")
    pivot_s: float = param("pivot_s", gt=0, default=0.5)


@dataclass(frozen=True, kw_only=True)
class ShiftParams(DrawInParams):
    seat: bool = param("seat", "boolean", default=False, doc="see draw-in-grasp; shifting needs a fingertip grasp")
    direction: tuple = param("direction", "numbers", length=(3, 3), default=(0.0, 0.0, -1.0), doc="in the hand frame")
    distance: float = param("distance_mm", unit="mm", gt=0, default=0.008)
    speed: float = param("speed_mm_s", unit="mm", gt=0, default=0.01)
    tolerance: float = param("tolerance_mm", unit="mm", gt=0, default=0.003)

    def check(self):
        if np.linalg.norm(self.direction) < 1e-9:
            yield "direction", "must not be the zero vector"


@dataclass(frozen=True, kw_only=True)
class ShakeParams(DrawInParams):
    accel: float = param("accel_g", gt=0, le=10, default=1.0, doc="peak wrist acceleration in g")
    frequency: float = param("frequency_hz", gt=0, le=50, default=4.0)
    tilt: float = param("tilt_deg", unit="deg", ge=0, le=90, default=math.radians(20),
                        doc="swing of the gravity direction")
    shake_s: float = param("shake_s", gt=0, default=1.5)


@dataclass(frozen=True, kw_only=True)
class SurfaceParams(Params):
    preload: float = param("preload_n", gt=0, le=50, default=2.0,
                           doc="downward force of the rollers on the work surface, held by the wrist")
    surface_speed: float = param("surface_speed_mm_s", unit="mm", gt=0, default=0.015,
                                 doc="roller surface speed while the object climbs (clipped to the motors' limit)")
    close_share: float = param("close_share", gt=0, le=1, default=0.3,
                               doc="share of the closing motors' torque while the rollers straddle the object")
    touch_s: float = param("touch_s", gt=0, default=1.5, doc="longest time to find the surface and settle the preload")
    draw_s: float = param("draw_s", gt=0, default=2.0, doc="longest climb")


# --- routines ------------------------------------------------------------------------------

@dataclass(frozen=True)
class Routine:
    name: str
    params: Params
    phases: tuple  # ((phase function, GRASP | HOLD | RELEASE), ...)
    needs: str  # "rollers", "cavity" or "" (any gripper and object)

    def unsuitable(self, model, instance):
        """Why this routine cannot run on this gripper / object, or None."""
        if self.needs == "rollers" and not model.roll_joints:
            return f"needs driven rollers; the {model.family} family has none (use pinch-lift)"
        if self.needs == "cavity" and instance.kind not in ("ring", "cup"):
            return f"needs a ring or a cup to hold from inside; {instance.name} is a {instance.kind}"
        if self.needs != "cavity" and model.opening is not None and grasp_width(instance) > model.opening:
            return (f"the object is too large for the hand: {instance.name} is {grasp_width(instance) * 1e3:.0f} mm "
                    f"across at its narrowest as it rests, the open fingertips of {model.name} leave "
                    f"{model.opening * 1e3:.0f} mm")
        return None

    def reach(self, model, instance):
        """Why this routine should miss this object, from geometry alone (before any trial), in
        numbers; None when geometry says nothing against it. The fingertips of an approach from
        above stop trial.TABLE_CLEARANCE over the table; rollers drawing a part off the surface
        need the bite condition (sim/bite.py) at the pair's nominal friction."""
        first = self.phases[0][0]
        height = rest_height(instance)
        if first is approach and height <= TABLE_CLEARANCE:
            return below_reach(height)
        lowest = (model.roller_radius or 0.0) + TABLE_CLEARANCE  # a roller's centre when its rim is lowest
        if first is approach and model.roll_joints and height < lowest:
            return (f"object top {height * 1e3:.1f} mm, the rollers' centres stay above "
                    f"{model.roller_radius * 1e3:.0f} + {TABLE_CLEARANCE * 1e3:.0f} = {lowest * 1e3:.1f} mm: they would "
                    "meet only its top edge (surface-draw-in picks parts this low)")
        if first is touch_down and model.roller_radius:
            mu = pair_friction(roller_friction(model), instance.friction)
            return bite_note(model.roller_radius, mu, height, instance.kind in STANDING_KINDS)
        return None

    def labels(self):
        return [phase.__name__.replace("_", "-") for phase, _ in self.phases]

    def run(self, ctx):
        """Run the phases in order; returns (outcome, reason). Stops at the first failed phase."""
        for (phase, kind), label in zip(self.phases, self.labels()):
            log = ctx.begin(label)
            log.ok = bool(phase(ctx, self.params, log))
            if not log.ok:
                return _failure(ctx, kind), f"{label} failed" + (f": {log.note}" if log.note else "")
        return "held", ""

    def describe(self, ctx, outcome, reason):
        """The trial's flat row: outcome, whole-trial metrics and each phase's own columns."""
        # drift is the pose error of an object that is still in the hand: a dropped or thrown object's
        # "drift" measures its fall, not the grasp
        in_hand = outcome in ("held", "stalled")
        drifts = [log.drift for log in ctx.phases if log.drift is not None and in_hand]
        quality = ctx.grasp_quality
        row = {
            "routine": self.name, "outcome": outcome, "success": outcome == "held", "reason": reason,
            "failed_phase": next((log.label for log in ctx.phases if log.ok is False), ""),
            **ctx.total.columns(),
            "drift_mm": max((d[0] for d in drifts), default=math.nan) * 1e3,
            "drift_deg": math.degrees(max((d[1] for d in drifts), default=math.nan)),
            "rotation_deg": math.degrees(ctx.rotation[0]), "rotation_cmd_deg": math.degrees(ctx.rotation[1]),
            "shift_mm": ctx.shifted[0] * 1e3, "shift_cmd_mm": ctx.shifted[1] * 1e3,
            "steer_residual": ctx.residual,
            "epsilon": quality.epsilon if quality else math.nan,
            "force_closure": bool(quality.force_closure) if quality else False,
            "contacts": quality.n_contacts if quality else 0,
            "time_to_grasp_s": ctx.grasp_time, "sim_s": ctx.world.time, "steps": ctx.steps,
        }
        logs = {log.label: log for log in ctx.phases}
        for label in self.labels():
            log = logs.get(label)
            drift = log.drift if log and log.drift and in_hand else (math.nan, math.nan)
            row[f"{label}_ok"] = bool(log and log.ok)
            tally = log.tally.columns() if log else {}
            row[f"{label}_slip_mm"] = tally.get("slip_mm", math.nan)
            row[f"{label}_friction_use_mean"] = tally.get("friction_use_mean", math.nan)
            row[f"{label}_drift_mm"] = drift[0] * 1e3
            row[f"{label}_drift_deg"] = math.degrees(drift[1])
        return row


def grasp_width(instance):
    """The narrowest horizontal size (m) of an object as it rests on the table: standing kinds stand
    on their base, the others lie with their smallest size vertical (trial.TrialContext). An object
    wider than a hand's opening at every yaw cannot get between its fingertips."""
    if instance.kind in STANDING_KINDS:
        return float(min(instance.extents[:2]))
    return float(sorted(instance.extents)[1])  # lying flat: the middle size is the narrowest across


def _failure(ctx, kind):
    if kind == GRASP:
        return "missed"
    if ctx.held() or kind == RELEASE:
        return "stalled"
    return "ejected" if ctx.loss_speed > EJECT_SPEED else "dropped"


_GRASPED = ((approach, GRASP), (close, GRASP), (draw_in, GRASP), (lift, HOLD))
ROUTINES = {
    "draw-in-grasp": (DrawInParams, (*_GRASPED, (hold, HOLD)), "rollers"),
    "pinch-lift": (Params, ((approach, GRASP), (close, GRASP), (lift, HOLD), (hold, HOLD)), ""),
    "roll": (RollParams, (*_GRASPED, (roll, HOLD), (hold, HOLD)), "rollers"),
    "angled-roll": (AngledRollParams, (*_GRASPED, (pivot, HOLD), (roll, HOLD), (hold, HOLD)), "rollers"),
    "shift": (ShiftParams, (*_GRASPED, (shift, HOLD), (hold, HOLD)), "rollers"),
    "hold-under-shake": (ShakeParams, (*_GRASPED, (shake, HOLD)), "rollers"),
    "surface-draw-in": (SurfaceParams, ((touch_down, GRASP), (straddle, GRASP), (climb, GRASP), (lift, HOLD),
                                        (hold, HOLD)), "rollers"),
    "inside-grasp": (Params, ((inside_approach, GRASP), (spread, GRASP), (lift, HOLD), (hold, HOLD)), "cavity"),
}


def make_routine(name, table=None, file="<routine>", prefix=""):
    """A Routine from its registered name and a table of parameters (file units); SpecError on bad input."""
    problems = Problems(file)
    if name not in ROUTINES:
        problems.add(prefix or "routine", f"must be one of {', '.join(ROUTINES)}; got {name!r}")
        problems.raise_if_any()
    cls, phases, needs = ROUTINES[name]
    params = parse(cls, table or {}, problems, prefix)
    problems.raise_if_any()
    return Routine(name, params, phases, needs)
