"""Per-trial and per-phase metrics: slip, friction use, drift, and the checks that call a run invalid.

Slip (see contact.py for how each contact's slip velocity is measured): at each sample the hand's
links touching the object are taken one by one; a link's slip speed is the normal-force-weighted
mean over its contact points (one patch of a pad reports up to four manifold points: summing them
would count one sliding patch four times). The sample's slip speed is the largest link's, i.e. the
worst contact; the peak is its maximum (both at the control ticks). Slip distance integrates each
link's slip velocity over every physics step while the grasp can change, as a vector over each
control tick, and adds the largest link's displacement per tick (trial.TrialContext.tick,
contact.add_link_slips): a contact vibrating in place within a tick adds nothing, and a slip that
reverses within one tick (1/60 s) counts only its net travel. The slipping share is the part of the
contact time whose mean slip speed over a control interval exceeds SLIP_NOISE_FLOOR.

Friction use of a link is |sum of its friction forces| / (mu x sum of its normal forces): 1 means
the contact is on the edge of its friction cone (sliding or about to). Mean over contact time and
peak are reported, the largest link's value at each sample.

Drift is the object's pose error against a reference, both in the hand frame: position (m) and the
geodesic angle between orientations (rad).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .contact import MIN_LOAD

__all__ = ["SlipTally", "contact_load", "pose_error", "blowup", "SLIP_NOISE_FLOOR", "MAX_SPEED", "MAX_DEPTH"]

SLIP_NOISE_FLOOR = 1e-3  # m/s; a held vial's solver jitter is about 1e-5 mm/s (measured in a 1 s hold), real slip far above
MAX_SPEED = 8.0  # m/s; nothing in a bench-top grasp moves this fast: a faster object means the solver blew up
MAX_DEPTH = 0.005  # m of penetration beyond a soft contact's own give (force x compliance): a solver failure


@dataclass
class SlipTally:
    """Accumulates slip and friction use over samples of one phase (or the whole trial)."""

    slip_distance: float = 0.0  # m
    slip_peak: float = 0.0  # m/s
    contact_time: float = 0.0  # s
    slipping_time: float = 0.0  # s
    use_integral: float = 0.0  # friction use x s
    use_peak: float = 0.0

    def add(self, load, dt, slipped=0.0):
        """One control interval of `dt` seconds: the sample's `contact_load` at its end (None when
        nothing touched) and the slip displacement `slipped` (m) over it."""
        self.slip_distance += slipped
        if load is None:
            return
        worst_slip, worst_use = load
        self.slip_peak = max(self.slip_peak, worst_slip)
        self.contact_time += dt
        self.slipping_time += dt if slipped > SLIP_NOISE_FLOOR * dt else 0.0
        self.use_integral += worst_use * dt
        self.use_peak = max(self.use_peak, worst_use)

    def columns(self, prefix=""):
        """Flat columns in reporting units (mm, mm/s, shares)."""
        t = self.contact_time
        return {
            f"{prefix}slip_mm": self.slip_distance * 1e3,
            f"{prefix}slip_peak_mm_s": self.slip_peak * 1e3,
            f"{prefix}slip_share": self.slipping_time / t if t > 0 else math.nan,
            f"{prefix}friction_use_mean": self.use_integral / t if t > 0 else math.nan,
            f"{prefix}friction_use_peak": self.use_peak if t > 0 else math.nan,
        }


def contact_load(sample, friction_of_link):
    """(slip speed m/s, friction use) of the worst hand link touching the object in one
    ContactSample, or None without contact; `friction_of_link` maps link -> pair mu."""
    if sample.count == 0:
        return None
    # per link: sum of normal forces, of force x slip speed, and the friction force vector;
    # plain floats, as a grasp has a handful of contacts
    sums = {}
    for link, fn, (sx, sy, sz), (fx, fy, fz) in zip(sample.links.tolist(), sample.normal_force.tolist(),
                                                    sample.slip.tolist(), sample.friction_force.tolist()):
        s = sums.setdefault(link, [0.0, 0.0, 0.0, 0.0, 0.0])
        s[0] += fn
        s[1] += fn * math.sqrt(sx * sx + sy * sy + sz * sz)
        s[2] += fx
        s[3] += fy
        s[4] += fz
    worst_slip, worst_use = 0.0, 0.0
    for link, (total, weighted, fx, fy, fz) in sums.items():
        if total <= MIN_LOAD:  # no defined slip or friction use
            continue
        worst_slip = max(worst_slip, weighted / total)
        worst_use = max(worst_use, math.sqrt(fx * fx + fy * fy + fz * fz) / (friction_of_link[link] * total))
    return worst_slip, worst_use


def pose_error(position, rotation, ref_position, ref_rotation):
    """(distance m, geodesic angle rad) between two poses given as position (3,) and matrix (3, 3)."""
    distance = float(np.linalg.norm(np.asarray(position) - ref_position))
    relative = np.asarray(ref_rotation).T @ rotation
    # geodesic angle on SO(3): theta = acos((trace R - 1) / 2), clipped against round-off
    angle = math.acos(float(np.clip((np.trace(relative) - 1.0) / 2.0, -1.0, 1.0)))
    return distance, angle


def blowup(position, velocity, spin, depth, extents):
    """Why the simulation of the object is not to be trusted, or None.

    NaN or infinite state; a speed above MAX_SPEED (an energy jump: a grasp cannot throw things
    that fast); a contact whose `depth` (penetration beyond its compliant give, m) exceeds
    MAX_DEPTH or half the object's smallest size."""
    if not all(math.isfinite(x) for x in (*position, *velocity, *spin)):
        return "non-finite object state"
    speed = math.hypot(*velocity) + math.hypot(*spin) * max(extents) / 2
    if speed > MAX_SPEED:
        return f"energy jump: object surface moving at {speed:.3g} m/s"
    if len(depth) and depth.max() > min(MAX_DEPTH, min(extents) / 2):
        return f"deep interpenetration: {depth.max() * 1e3:.3g} mm"
    return None
