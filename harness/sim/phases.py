"""Phases: the building blocks of routines, each `phase(ctx, params, log) -> bool`.

A phase drives the hand through a trial.TrialContext for a while (`ctx.run(seconds, each)` calls
`each` at the control rate), may leave its drift against its own reference in `log.drift` and a
short `log.note`, and says whether its own goal was met. routines.py strings phases together and
says what a failed phase means for the trial's outcome.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.spatial.transform import Rotation

from .steering import RollerContact, contact_jacobian, steer
from .bite import bite_note
from .trial import APPROACH_CLEARANCE, STANDING_KINDS, TABLE_CLEARANCE, drift_of, rest_height

__all__ = ["approach", "inside_approach", "close", "spread", "draw_in", "lift", "hold", "shake", "pivot",
           "roll", "shift", "release", "roller_contacts", "cavity_radius", "STEER_RTOL",
           "touch_down", "straddle", "climb", "contact_elevation", "below_reach"]

LOSS_TIME = 0.1  # s without any touch after the grasp: the object is gone
STILL_SPEED = 0.002  # m/s (or rad/s for joints); below this a closing or drawing motion has stopped
BORE_CLEARANCE = 0.0005  # m; pre-shaped tips (their collision boxes, which overstate round parts) clear a bore by this
PUSH_LIMIT = 0.005  # m; an approach that shoves the object further than this missed it
GAIN = 6.0  # 1/s; pose feedback of closed-loop steering (a 0.17 s time constant)
SETTLE = 1.0  # s of feedback toward the final pose after a steered manoeuvre, before its drift is read
# Rank tolerance of closed-loop steering: measured contact normals are off by 1-4 degrees (a ball's
# normals miss its centre by 0.5-1.3 mm at 20 mm radius, measured), which turns a free spin into a
# weak false constraint; constraints weaker than this share of the strongest are taken as noise.
# 0.05 kept a false constraint that stopped a roll about a horizontal axis (singular value ratio
# 0.052); 0.1 dropped a real one (vertical translation with near-horizontal normals, ratio 0.095).
STEER_RTOL = 0.07
STRADDLE_CLEARANCE = 0.004  # m; pre-shaped rollers clear the object's horizontal extent by this
STRADDLE_SPEED = 0.02  # m/s; the rollers' inward speed while they close on the object
TOUCH_HEIGHT = 0.008  # m; the rollers' lowest points start this far above the table
PRESS_TOLERANCE = 0.25  # share of the preload; the press has settled once within it for 0.1 s
PIVOT_SLACK = math.radians(25)  # a pivot target this far past a limit is taken at the limit (cos 25 deg = 0.9)


def smooth(s):
    """Smoothstep 0..1 (zero speed at both ends)."""
    s = min(max(s, 0.0), 1.0)
    return s * s * (3 - 2 * s)



SECTION_SAMPLES = 16  # heights at which the object's width is probed for the approach
SECTION_TIE = 0.0005  # m; sections within this of the widest count as equally wide


def section_widths(ctx, heights):
    """Width (m) of the object's collision geometry along the hand's x axis (the line the first
    finger closes along) at each world height: rays cast inward from both sides through the rest
    position. 0 where the rays miss it."""
    axis = ctx.hand.frame()[1][:, 0] * [1, 1, 0]
    axis = axis / (np.linalg.norm(axis) or 1.0)
    far = 0.5
    x, y = ctx.rest_position[:2]
    starts, ends = [], []
    for h in heights:
        c = np.array([x, y, h])
        starts += [c + far * axis, c - far * axis]
        ends += [c, c]
    hits = ctx.world.ray_hits(starts, ends)
    out = []
    for a, b in zip(hits[0::2], hits[1::2]):
        if a[0] == ctx.obj and b[0] == ctx.obj:
            out.append(float(np.linalg.norm(np.array(a[1]) - np.array(b[1]))))
        else:
            out.append(0.0)
    return np.array(out)


def _outside_target(ctx, p):
    """Tips' centre at the object's widest section they can reach (rays through its collision
    geometry), the one nearest `grip_height` among equally wide ones, so irregular objects
    (polytopes, superquadrics, meshes) are met where they bulge."""
    top = ctx.object_top()
    centre, low = ctx.tip_span()
    reach = low - centre + TABLE_CLEARANCE  # lowest height of the tips' centre over the table
    heights = np.linspace(min(reach, top), top, SECTION_SAMPLES + 1)[:-1]
    widths = section_widths(ctx, heights)
    wanted = p.grip_height * top
    wide = np.flatnonzero(widths >= widths.max() - SECTION_TIE)
    best = heights[wide[np.argmin(np.abs(heights[wide] - wanted))]] if widths.max() > 0 else wanted
    return ctx.wrist_for_grip_height(float(best))


def _inside_target(ctx, p):
    """Fingers pre-closed until the tips fit the cavity (the least closure that clears the bore by
    BORE_CLEARANCE, else the closure with the smallest tip circle), tips' centre halfway down it."""
    bore = cavity_radius(ctx.instance)
    radii = {}
    for fraction in np.linspace(0.0, 1.0, 41):
        ctx.hand.reset_joints(fraction)
        radii[float(fraction)] = _tip_radius(ctx)
    fitting = [f for f, r in radii.items() if r < bore - BORE_CLEARANCE]
    ctx.preshape = fitting[0] if fitting else min(radii, key=radii.get)
    ctx.hand.reset_joints(ctx.preshape)
    top = ctx.world.aabb(ctx.obj)[1][2]  # an upright ring or cup: its box is its own (rays can miss a thin rim)
    floor = top - ctx.instance.draws.get("height", 0.0) + ctx.instance.draws.get("base", 0.0)
    return ctx.wrist_for_grip_height((top + floor) / 2)


def _tip_radius(ctx):
    """Largest distance of any tip's collision box from the hand axis (m)."""
    frame = ctx.hand.frame()
    return max(float(np.linalg.norm(ctx.hand.link_box(link, frame)[:, :2], axis=1).max()) for link in ctx.tips)


def cavity_radius(instance):
    d = instance.draws
    return d["inner_radius"] if instance.kind == "ring" else d["outer_radius"] - d["wall"]


def below_reach(top):
    """Why an approach from above misses an object whose top is `top` (m) over the table."""
    return (f"object top {top * 1e3:.1f} mm, lowest fingertip reach {TABLE_CLEARANCE * 1e3:.1f} mm "
            "(surface-draw-in picks parts this low)")


def approach(ctx, p, log, target=_outside_target):
    """Come down from above onto the grasp pose, fingers open (or pre-shaped)."""
    lo, hi = ctx.world.aabb(ctx.obj)
    top = hi[2]
    if target is _outside_target and hi[2] - lo[2] <= TABLE_CLEARANCE:
        # the tips stop TABLE_CLEARANCE above the table: they would close over the object untouched
        # (judged on the object's own height: a soft body sunk into the table is a blow-up, not this)
        log.note = below_reach(top)
        return False
    goal = target(ctx, p)
    start = goal + [0.0, 0.0, APPROACH_CLEARANCE]
    ctx.hand.teleport(start, ctx.wrist_orientation)
    ctx.grip = (ctx.preshape, p.grip_torque) if ctx.preshape else None
    ctx.wrist_goal = goal
    ctx.run(p.approach_s, lambda t: ctx.move_wrist(start + (goal - start) * smooth(t / p.approach_s)))
    ctx.run(0.05)  # let the wrist arrive
    pushed = float(np.linalg.norm(ctx.world.pose(ctx.obj)[0][:2] - ctx.rest_position[:2]))
    log.note = f"object pushed {pushed * 1e3:.1f} mm"
    return pushed < PUSH_LIMIT


def _closing(ctx, p, log, fraction, touching, torque=None):
    """Drive the fingers toward `fraction` (with `torque`, default the grip's share of the motors'
    limit) until they stop on the object; `touching()` counts the contacts that make a grasp (at least two)."""
    ctx.grip = (fraction, p.grip_torque if torque is None else torque)
    still = [0.0]

    def settled(t):
        speeds = np.abs(ctx.hand.joint_speeds(ctx.hand.close_j))
        still[0] = still[0] + ctx.control_dt if speeds.max() < STILL_SPEED * 10 else 0.0
        return t > 0.15 and still[0] > 0.1 and touching() >= 2

    ctx.run(p.close_s or ctx.hand.closing_time() + 0.3, settled)
    ctx.watch_grasp()
    return touching() >= 2


def close(ctx, p, log):
    """Close the fingers with the chosen share of their torque until their tips stop on the object."""
    frame = ctx.hand.frame()
    tips = min(float(frame[0][2] - ctx.hand.link_box(k, frame)[:, 2].mean()) for k in ctx.tips)  # world height
    ok = _closing(ctx, p, log, 1.0, ctx.tips_touching)
    log.note = f"{ctx.tips_touching()} fingertips touching"
    if not ok:  # the top read after the fingers missed it (its rays cost 3 % of a trial's time)
        top = ctx.object_top()
        log.note += f"; object top {top * 1e3:.1f} mm, fingertip centres {tips * 1e3:.1f} mm above the table as they closed"
        centres = _roller_heights(ctx)
        if len(centres) and centres.min() > top:
            log.note += (f"; the roller centres rose to {centres.min() * 1e3:.1f} mm, above its top: they meet only "
                         "its top edge (surface-draw-in picks parts this low)")
    return ok


def spread(ctx, p, log):
    """Open the pre-shaped fingers against the inside wall (any part of a finger may bear on it)."""
    ok = _closing(ctx, p, log, 0.0, lambda: len(ctx.touching_links()))
    log.note = f"{len(ctx.touching_links())} finger links touching"
    return ok


def draw_in(ctx, p, log):
    """Counter-rotate the rollers so their contact surfaces pull the object up into the hand,
    until it is seated (touches a link other than a roller), stops rising, or the time is up."""
    limit = np.array([ctx.hand.limits[j][3] for j in ctx.hand.roll_j])
    ctx.set_rollers(p.draw_speed * limit)
    start_depth = ctx.object_in_hand()[0][2]
    still = [0.0, start_depth]

    rollers = {r.roll for r in ctx.hand.rollers}

    def stopped(t):
        ctx.watch_grasp()
        depth = ctx.object_in_hand()[0][2]
        if p.seat and ctx.touching_links() - rollers:
            return True  # seated against the palm or a finger
        if not p.seat and depth <= _roller_depth(ctx):
            return True  # centre level with the rollers: a fingertip grasp
        dt = ctx.control_dt  # `stopped` runs once per control tick
        still[0] = still[0] + dt if (still[1] - depth) / dt < STILL_SPEED else 0.0
        still[1] = depth
        return t > 0.2 and still[0] > 0.1

    ctx.run(p.draw_s, stopped)
    ctx.set_rollers(0.0)
    rise = start_depth - ctx.object_in_hand()[0][2]
    log.note = f"drawn in {rise * 1e3:.1f} mm"
    return ctx.held()


def _roller_depth(ctx):
    """Mean depth (m, hand frame) of the roller centres."""
    return float(np.mean([ctx.hand.to_hand(ctx.world.link_state(ctx.hand.body, r.roll)[0])[2]
                          for r in ctx.hand.rollers]))


def _watch_loss(ctx, extra=None):
    """A per-step check that stops a holding phase once the object has left the hand."""
    lost = [0.0]
    dt = ctx.control_dt

    def check(t):
        ctx.watch_grasp()
        if ctx.last is not None and ctx.last.count:
            lost[0] = 0.0
        else:
            if lost[0] == 0.0:
                ctx.loss_speed = ctx.relative_speed()
            lost[0] += dt
        if lost[0] > LOSS_TIME:
            return True
        return extra(t) if extra else False

    return check


def lift(ctx, p, log):
    """Clamp the fingers where they are (the grasp instant) and raise the wrist; rollers braked."""
    ctx.record_grasp()
    ctx.clamp = ctx.hand.clamp_targets(spreading=ctx.grip[0] < ctx.preshape)
    start = ctx.wrist_goal.copy()
    ctx.wrist_goal = start + [0.0, 0.0, p.lift]
    ctx.run(p.lift_s, _watch_loss(ctx, lambda t: ctx.move_wrist(start + [0, 0, p.lift * smooth(t / p.lift_s)])))
    ctx.run(0.1, _watch_loss(ctx))
    risen = ctx.world.pose(ctx.obj)[0][2] - ctx.rest_position[2]
    log.note = f"object raised {risen * 1e3:.1f} mm"
    return ctx.held() and risen > 0.5 * p.lift


def hold(ctx, p, log):
    """Keep still; drift against the pose in the hand at the start of the hold."""
    ref = ctx.object_in_hand()
    ctx.run(p.hold_s, _watch_loss(ctx))
    log.drift = drift_of(ctx, ref)
    return ctx.held()


def shake(ctx, p, log):
    """Move the wrist on a horizontal circle with constant acceleration and swing gravity's direction."""
    ref = ctx.object_in_hand()
    centre = ctx.wrist_goal
    w = 2 * math.pi * p.frequency
    radius = p.accel * ctx.world.settings.gravity / w ** 2
    g = ctx.world.settings.gravity
    ramp = 1.0 / p.frequency  # one period to spin up, so the wrist does not start with a jerk

    def move(t):
        a = min(t / ramp, 1.0)
        ctx.move_wrist(centre + radius * a * np.array([math.cos(w * t) - 1, math.sin(w * t), 0.0]))
        tilt = p.tilt * math.sin(w * t / 4)
        ctx.world.set_gravity((0, g * math.sin(tilt), -g * math.cos(tilt)))

    try:
        ctx.run(p.shake_s, _watch_loss(ctx, move))
    finally:
        ctx.world.set_gravity((0, 0, -g))
    ctx.move_wrist(centre)
    ctx.run(0.2, _watch_loss(ctx))
    log.drift = drift_of(ctx, ref)
    return ctx.held()


def roller_contacts(ctx):
    """The hand's rollers now touching the object, as steering.RollerContact (world frame)."""
    sample, hand, out = ctx.last, ctx.hand, []
    for roller in hand.rollers:
        mask = sample.links == roller.roll
        if not mask.any():
            continue
        fn = sample.normal_force[mask]
        point = fn @ sample.points[mask] / fn.sum()
        normal = fn @ sample.normals[mask]
        centre = ctx.world.link_state(hand.body, roller.roll)[0]
        pivot_kw = {}
        if roller.pivot is not None:
            lo, hi = hand.limits[roller.pivot][:2]
            pivot_kw = {"pivot_axis": hand.joint_axis(roller.pivot), "pivot_range": (lo, hi),
                        "pivot_angle": float(hand.joint_positions([roller.pivot])[0])}
        else:
            pivot_kw = {"pivot_range": (0.0, 0.0)}
        out.append((roller, RollerContact(point, normal, centre, hand.joint_axis(roller.roll), roller.radius, **pivot_kw)))
    return out


def _steer_towards(ctx, reference, feedforward):
    """Set rollers (and pivots) for the hand-frame twist `feedforward` (v, w) plus pose feedback
    toward `reference` = (position, rotation) in the hand frame; returns the residual norm."""
    found = roller_contacts(ctx)
    if len(found) < 2:
        ctx.set_rollers(0.0)
        return math.nan
    pos, rot = ctx.object_in_hand()
    _, hand_rot = ctx.hand.frame()
    v = feedforward[:3] + GAIN * (reference[0] - pos)
    w = feedforward[3:] + GAIN * Rotation.from_matrix(reference[1] @ rot.T).as_rotvec()
    twist = np.concatenate([hand_rot @ v, hand_rot @ w])
    contacts, origin = [c for _, c in found], ctx.world.pose(ctx.obj)[0]
    # pivots head for the angles that produce the twist; meanwhile each roller drives only the part
    # of its contact's wanted velocity along its current rolling direction (driving at the target
    # angle's speed while the pivot is half-way pushes the object the wrong way, and the feedback
    # then flips the pivots back and forth)
    aim = steer(twist, origin, contacts, ctx.size / 2, rtol=STEER_RTOL)
    speeds = np.zeros(len(ctx.hand.rollers))
    pivots = ctx.pivot_cmd.copy()
    for (roller, c), angle in zip(found, aim.pivot_angles):
        wanted = contact_jacobian(c.point[None], origin) @ aim.achieved
        wanted -= (wanted @ c.normal) * c.normal
        gain = c.surface_gain(c.pivot_angle)  # along the roller's current rolling direction
        gg, ww = gain @ gain, wanted @ wanted
        # the part along the current direction, faded by cos^2 of the misalignment: the rest of a
        # misaligned roller's push goes sideways (e.g. a ball being spun is driven down)
        speed = float(wanted @ gain / gg) * float((wanted @ gain) ** 2 / (gg * ww)) if gg > 0 and ww > 0 else 0.0
        i = ctx.hand.rollers.index(roller)
        speeds[i] = speed
        if roller.pivot is not None:
            k = ctx.hand.pivot_j.index(roller.pivot)
            pivots[k] = _continuous(angle, pivots[k], c.pivot_range)
    ctx.set_rollers(speeds)
    ctx.set_pivots(pivots)
    return aim.residual_norm


def _continuous(angle, previous, limits):
    """`angle` or `angle` +- 180 deg (the same rolling line, the speed's sign flips), whichever
    in range is nearest the previous target: near a half-turn tie the plain choice flips every
    tick and the pivot never leaves the middle."""
    lo, hi = limits
    near = [a for a in (angle - math.pi, angle + math.pi) if lo - PIVOT_SLACK <= a <= hi + PIVOT_SLACK]
    return min([angle, *(min(max(a, lo), hi) for a in near)], key=lambda a: abs(a - previous))


def _steered(ctx, log, axis, rate, duration, moves):
    """Run a steered manoeuvre: `moves(t)` gives the reference motion in the hand frame as
    (displacement (3,), rotation vector (3,)); feedforward is its rate."""
    pos0, rot0 = ctx.object_in_hand()
    residuals = []

    def reference(t):
        shift, turn = moves(min(t, duration))
        return pos0 + shift, Rotation.from_rotvec(turn).as_matrix() @ rot0

    spin = [0.0]
    dt = ctx.control_dt

    def control(t):
        ff = rate if t < duration else np.zeros(6)
        residuals.append(_steer_towards(ctx, reference(t), ff))
        _, w_obj = ctx.world.velocity(ctx.obj)
        _, w_hand = ctx.world.velocity(ctx.hand.body)
        spin[0] += float((w_obj - w_hand) @ (ctx.hand.frame()[1] @ axis)) * dt
        return False

    ctx.run(duration + SETTLE, _watch_loss(ctx, control))
    ctx.set_rollers(0.0)
    log.drift = drift_of(ctx, reference(duration))
    finite = [r for r in residuals if math.isfinite(r)]
    ctx.residual = max(finite) if finite else math.nan
    return spin[0]


def roll(ctx, p, log):
    """Turn the held object about `axis` (hand frame) by `angle` with the rollers alone, closed-loop."""
    axis = np.asarray(p.axis, dtype=float) / np.linalg.norm(p.axis)
    duration = p.angle / p.speed
    turned = _steered(ctx, log, axis, np.concatenate([np.zeros(3), axis * p.speed]), duration,
                      lambda t: (np.zeros(3), axis * p.speed * t))
    ctx.rotation = (turned, p.angle)
    log.note = f"turned {math.degrees(turned):.1f} of {math.degrees(p.angle):.1f} deg"
    return ctx.held() and abs(turned - p.angle) <= p.tolerance


def shift(ctx, p, log):
    """Translate the held object along `direction` (hand frame) within the grasp, closed-loop."""
    direction = np.asarray(p.direction, dtype=float) / np.linalg.norm(p.direction)
    start = ctx.object_in_hand()[0]
    duration = p.distance / p.speed
    _steered(ctx, log, np.zeros(3), np.concatenate([direction * p.speed, np.zeros(3)]), duration,
             lambda t: (direction * p.speed * t, np.zeros(3)))
    moved = float((ctx.object_in_hand()[0] - start) @ direction)
    ctx.shifted = (moved, p.distance)
    log.note = f"moved {moved * 1e3:.1f} of {p.distance * 1e3:.1f} mm"
    return ctx.held() and abs(moved - p.distance) <= p.tolerance


def pivot(ctx, p, log):
    """Turn every roller's pivot to `pivot` while holding (rollers braked)."""
    ref = ctx.object_in_hand()
    start = ctx.pivot_cmd.copy()
    ctx.run(p.pivot_s, _watch_loss(ctx, lambda t: ctx.set_pivots(start + (p.pivot - start) * smooth(t / p.pivot_s))))
    ctx.run(SETTLE, _watch_loss(ctx))
    log.drift = drift_of(ctx, ref)
    return ctx.held()


def release(ctx, p, log):
    """Open the fingers, rollers stopped; the object should come free."""
    ctx.grip, ctx.clamp = None, None
    ctx.set_rollers(0.0)
    ctx.run(0.5)
    return ctx.last.count == 0



def inside_approach(ctx, p, log):
    """Approach with the fingers pre-shaped to fit a ring's or cup's bore."""
    return approach(ctx, p, log, _inside_target)


inside_approach.__name__ = "approach"  # the same phase, as logged


# --- draw-in from the work surface ----------------------------------------------------------

def _roller_inner_radius(ctx):
    """Smallest distance (m) of any roller's inner surface from the hand axis: centre minus radius
    (roller axes tangent to the hand axis, as roller-finger builds them)."""
    frame = ctx.hand.frame()
    return min(float(np.linalg.norm(ctx.hand.to_hand(ctx.world.link_state(ctx.hand.body, r.roll)[0], frame)[:2]))
               - r.radius for r in ctx.hand.rollers)


def _object_reach(ctx):
    """Largest horizontal distance (m) of the object's collision box corners from the wrist axis."""
    lo, hi = ctx.world.aabb(ctx.obj)
    centre = ctx.rest_position[:2] + [ctx.pert.wrist_dx, ctx.pert.wrist_dy]
    return max(math.hypot(x - centre[0], y - centre[1]) for x in (lo[0], hi[0]) for y in (lo[1], hi[1]))


def touch_down(ctx, p, log):
    """Fingers pre-shaped so the rollers straddle the object; the hand comes down until its rollers
    press the table with the preload (measured roller-table force, held by the wrist's servo)."""
    clear = _object_reach(ctx) + STRADDLE_CLEARANCE
    steps = 40  # closing fractions probed: 0, 1/40, ..., 1
    fits, radii = [], []
    for fraction in np.linspace(0.0, 1.0, steps + 1):
        ctx.hand.reset_joints(fraction)
        radii.append(_roller_inner_radius(ctx))
        if radii[-1] >= clear:
            fits.append(float(fraction))
    ctx.preshape = max(fits) if fits else 0.0  # the most closed pose that still clears the object
    # closing rate (share of the range per s) that moves the rollers inward at STRADDLE_SPEED
    ctx.straddle_rate = STRADDLE_SPEED / max(float(np.max(-np.diff(radii))) * steps, 1e-6)
    ctx.hand.reset_joints(ctx.preshape)
    start = ctx.wrist_for_grip_height(0.0)
    start[2] = ctx.hand.roller_reach() + TOUCH_HEIGHT + ctx.pert.wrist_dz
    ctx.hand.teleport(start, ctx.wrist_orientation)
    ctx.grip = (ctx.preshape, p.close_share)
    ctx.wrist_goal = start
    ctx.press, ctx.press_offset, ctx.press_touched = p.preload, TOUCH_HEIGHT, False
    settled = [0.0]

    def pressed(t):
        near = abs(ctx.surface_load() - p.preload) <= PRESS_TOLERANCE * p.preload
        settled[0] = settled[0] + ctx.control_dt if near else 0.0
        return settled[0] > 0.1

    ctx.run(p.touch_s, pressed)
    load = ctx.surface_load()
    pushed = float(np.linalg.norm(ctx.world.pose(ctx.obj)[0][:2] - ctx.rest_position[:2]))
    log.note = f"rollers press the table with {load:.2f} N (preload {p.preload:.2f} N), object pushed {pushed * 1e3:.1f} mm"
    if not fits:
        log.note = (f"the open rollers leave {2 * _roller_inner_radius(ctx) * 1e3:.0f} mm, the object needs "
                    f"{2 * clear * 1e3:.0f} mm to be straddled")
        return False
    return settled[0] > 0.1 and pushed < PUSH_LIMIT


def straddle(ctx, p, log):
    """Close the fingers with `close_share` of their torque, rollers pressing the table and already
    turning to draw in (a braked roller closing on a small bead pressed it into the table, measured),
    until two rollers touch the object (or it has already climbed to the nip). Waiting for the fingers
    to settle instead let a grippy part climb past the nip while they still closed (measured: a 9 mm
    lying tube shot out above the rollers at mu 0.9). The contact angle at the first touch is kept
    for `climb`."""
    ctx.set_rollers([p.surface_speed / r.radius for r in ctx.hand.rollers])
    ctx.first_elevation = math.nan
    both = [0]

    def touching(t):
        # the closing target moves at the straddle rate: closing at the motors' speed limit swung the
        # rollers up and down along the fingers' arcs faster than the preload servo follows (loads
        # of 50 N against a 2 N preload, measured), and a roller lifted by a millimetre landed on
        # top of a small part instead of meeting its side
        ctx.grip = (min(1.0, ctx.preshape + ctx.straddle_rate * t), p.close_share)
        n = _rollers_touching(ctx)
        if n and math.isnan(ctx.first_elevation):
            ctx.first_elevation = contact_elevation(ctx)
        both[0] = both[0] + 1 if n >= 2 else 0
        return both[0] >= 2 or _at_nip(ctx)

    ctx.run(p.close_s or (1.0 - ctx.preshape) / ctx.straddle_rate + 0.3, touching)
    n = _rollers_touching(ctx)
    log.note = f"{n} rollers touching"
    ok = n >= 2 or _at_nip(ctx)
    if not ok:
        top = ctx.object_top()
        log.note += (f"; object top {top * 1e3:.1f} mm, roller lowest points {_roller_low(ctx) * 1e3:.1f} mm "
                     f"above the table, their inner surfaces {2 * _roller_inner_radius(ctx) * 1e3:.1f} mm apart")
    return ok


def _at_nip(ctx, lifted=True):
    """The object's centre is level with the roller centres (or above) and, if `lifted`, off the table."""
    z = ctx.world.pose(ctx.obj)[0][2]
    return z >= _roller_heights(ctx).mean() and not (lifted and ctx.on_table())


def _rollers_touching(ctx):
    return len(ctx.touching_links() & {r.roll for r in ctx.hand.rollers})


def _roller_heights(ctx):
    """Heights (m) of the roller centres above the table top (z = 0), one per roller."""
    return np.array([float(ctx.world.link_state(ctx.hand.body, r.roll)[0][2]) for r in ctx.hand.rollers])


def _roller_low(ctx):
    """Height (m) of the lowest roller point above the table top (z = 0)."""
    return float(np.min(_roller_heights(ctx) - [r.radius for r in ctx.hand.rollers]))


def contact_elevation(ctx):
    """Mean angle (rad) of the roller contact normals (pointing into the object) above the hand's
    horizontal plane, weighted by normal force; negative: the rollers push the object down. The
    rolling-mill bite angle is minus this when the roll centres are level."""
    s, rollers = ctx.last, [r.roll for r in ctx.hand.rollers]
    mask = np.isin(s.links, rollers) if s is not None else []
    if s is None or not np.any(mask):
        return math.nan
    n = s.normal_force[mask] @ s.normals[mask]
    up = -ctx.hand.frame()[1][:, 2]  # the hand's z points down into the work
    return float(math.asin(np.clip(n @ up / np.linalg.norm(n), -1, 1)))


def climb(ctx, p, log):
    """Keep the rollers turning so their surfaces at the object move inward and upward (positive
    speed draws in), fingers still pressing with `close_share`, until the object's centre is level
    with the roller centres (the nip: past it the squeeze pushes the object out upward); then grip
    with `grip_torque`, rollers braked, the wrist no longer pressing."""
    ctx.set_rollers([p.surface_speed / r.radius for r in ctx.hand.rollers])
    start = ctx.world.pose(ctx.obj)[0][2]
    best, idle = [start], [0.0]

    def done(t):
        ctx.watch_grasp()
        # a part whose centre is at or above the roller centres (taller than a roller's diameter) is
        # already at the nip, on the table or not: nothing to draw in, grip it
        if _at_nip(ctx, lifted=False):
            return True
        z = ctx.world.pose(ctx.obj)[0][2]
        idle[0] = 0.0 if z > best[0] + 1e-4 else idle[0] + ctx.control_dt
        best[0] = max(best[0], z)
        return t > 0.3 and idle[0] > 0.3

    ctx.run(p.draw_s, done)
    ctx.set_rollers(0.0)
    ctx.press = None
    ctx.grip = (1.0, p.grip_torque)
    ctx.run(0.2, lambda t: ctx.watch_grasp())
    rise = ctx.world.pose(ctx.obj)[0][2] - start
    log.note = f"climbed {rise * 1e3:.1f} mm"
    if _at_nip(ctx, lifted=False) and _rollers_touching(ctx) >= 2:
        log.note += "; gripped at or above its centre (nothing to draw in)"
        return True  # a tall part, still on the table: the lift takes it
    beta = -ctx.first_elevation
    mu = float(np.mean([ctx.friction_of_link[r.roll] for r in ctx.hand.rollers]))
    if not ctx.held() and math.isfinite(beta):
        log.note += (f"; at first touch the roller contact normals were {math.degrees(beta):.0f} deg below level: "
                     f"drawing in needs mu > tan {math.degrees(beta):.0f} deg = {math.tan(beta):.2f}, "
                     f"the pair's mu is {mu:.2f}")
    geometry = bite_note(ctx.hand.rollers[0].radius, mu, rest_height(ctx.instance), ctx.instance.kind in STANDING_KINDS)
    if not ctx.held() and geometry:
        # the rigid bite condition from the part's height, beside the engine's measured normals (a
        # roller on a rim reports them steeper than the rim's geometry, measured: 74 against 61 deg)
        log.note += f"; from geometry, {geometry}"
    return ctx.held()
