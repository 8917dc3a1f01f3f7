"""One trial: a gripper variant, an object instance, a routine and a perturbation draw, run from a
seed in a fresh world, returned as one flat row of metrics.

The scene: a table whose top is at z = 0; the object resting on it (stable side down, nudged and
turned by the perturbation, settled); the hand pointing down above it, fingers open, its wrist
driven like an arm's flange (hand.py). Every control input goes through `TrialContext`, which
applies the actuator perturbations (a first-order lag on roller and pivot commands, a per-roller
speed error) and samples the metrics at every control tick (world.CONTROL_HZ, a whole number of
physics steps).
"""

from __future__ import annotations

import math
import time
from dataclasses import asdict, dataclass, field

import numpy as np

from .contact import add_link_slips, sample_contacts, step_slips, worst_displacement
from ..errors import HarnessError
from .hand import DOWN, Hand
from .metrics import SLIP_NOISE_FLOOR, SlipTally, blowup, contact_load, pose_error
from .quality import grasp_quality
from ..seeds import rng_for
from .transforms import multiply, quat_from_euler, rotation
from .engines import open_world
from .world import CONTROL_HZ, PhysicsSettings, World, add_object, pair_friction

__all__ = ["Perturbation", "TrialContext", "Blowup", "run_trial", "OUTCOMES"]

OUTCOMES = ("held", "dropped", "missed", "ejected", "stalled", "invalid", "error", "timeout")
# kinds generated with a flat base stand on it; round ones lie with their smallest size vertical
STANDING_KINDS = {"cylinder", "box", "plate", "disc", "ring", "cup", "polytope", "mesh", "urdf", "urdf-folder"}
SETTLE_TIME = 0.5  # s; longest wait for the object to come to rest on the table
REST_SPEED = 1e-3  # m/s; the object counts as resting below this
APPROACH_CLEARANCE = 0.04  # m; the hand starts this far above its grasp pose
TABLE_CLEARANCE = 0.003  # m; lowest gap between a fingertip and the table at the grasp pose
TOP_RAYS = 25  # rays per side of the grid cast down to find an object's top (2 mm apart over a 50 mm part)
TOP_RAYS_FIRST = 7  # a first, coarse grid: its rays are among the fine grid's (6 divides 24), and most parts' box is their own
BOX_EXCESS = 0.005  # m; a bounding box this far above the rays' top is a turned hull's, not the part's
# Rolling resistance of the bench (arm, m): a plastic tube on a laminate bench has a rolling
# resistance coefficient of a few thousandths (recalled from memory), about 5e-5 m for a 10 mm
# tube; without it a round object set down lying keeps rolling from the smallest disturbance.
TABLE_ROLLING = 5e-5
# The controller (phase logic, commands, actuator lag) and the metrics, sanity checks and observers
# run at world.CONTROL_HZ (60 Hz, a servo rate), every settings.steps_per_tick physics steps. The
# closing lead (hand.CLOSE_LEAD_TIME = 1/60 s of travel) is sized so fingers still close at full speed.
BRAKE_SPEED = 0.01  # rad/s; 0.1 mm/s at a 12 mm roller, far below the slip noise floor
BRAKE_GAIN = 30.0  # 1/s; a stopped roller returns to its stopping angle with a 33 ms time constant
EJECT_SPEED = 0.5  # m/s; an object leaving the hand faster than this was thrown, not dropped
# Preload on the work surface (surface draw-in): the wrist's height target moves with the error of
# the measured roller-surface force, an admittance servo, as an arm's force-limited flange would be
# driven. PRESS_GAIN (m/s per N) gives a time constant of about 0.1 s against two 30 kN/m treads
# (1 / (0.1 s x 60 kN/m) = 1.7e-4); PRESS_SPEED caps the wrist's speed while nothing touches.
PRESS_GAIN = 1.7e-4
PRESS_SPEED = 0.01  # m/s; at 0.03 the first touch spiked to 40 N against a 2 N preload (measured)


def rest_height(instance):
    """Height (m) of an object's top as it rests on the table (TrialContext places it): standing
    kinds on their base, the others with their smallest size vertical."""
    return float(instance.extents[2] if instance.kind in STANDING_KINDS else min(instance.extents))


class Blowup(HarnessError):
    """The simulation became untrustworthy (see metrics.blowup); the trial is `invalid`."""


@dataclass(frozen=True)
class Perturbation:
    """One draw of realistic variation; SI units (m, rad, s); the zero draw is the nominal trial."""

    object_dx: float = 0.0
    object_dy: float = 0.0
    object_yaw: float = 0.0
    friction_scale: float = 1.0
    mass_scale: float = 1.0
    wrist_dx: float = 0.0
    wrist_dy: float = 0.0
    wrist_dz: float = 0.0
    wrist_tilt: float = 0.0  # about the hand's x axis
    actuator_lag: float = 0.0  # time constant of roller and pivot responses
    speed_noise: float = 0.0  # each roller's speed is off by a factor drawn in 1 +- this (from the seed)

    def columns(self):
        units = {"object_dx": 1e3, "object_dy": 1e3, "wrist_dx": 1e3, "wrist_dy": 1e3, "wrist_dz": 1e3,
                 "object_yaw": 180 / math.pi, "wrist_tilt": 180 / math.pi}
        suffix = {1e3: "_mm", 180 / math.pi: "_deg"}
        kept = {"actuator_lag": "_s"}  # already in its column's unit
        return {f"pert_{k}{kept.get(k) or suffix.get(units.get(k), '')}": v * units.get(k, 1.0)
                for k, v in asdict(self).items()}


@dataclass
class PhaseLog:
    """What a phase left for the row: its own slip tally, drift and success."""

    label: str
    tally: SlipTally = field(default_factory=SlipTally)
    ok: bool | None = None
    drift: tuple[float, float] | None = None  # (m, rad) against the phase's reference
    note: str = ""


class TrialContext:
    """The running trial: world, hand, object, control state and metric tallies."""

    def __init__(self, world: World, model, instance, perturbation: Perturbation, seed: int, on_step=None):
        self.world, self.model, self.instance, self.pert = world, model, instance, perturbation
        self.on_step = on_step  # called as on_step(ctx) after every control tick (plots, replay frames)
        self.rng = rng_for(seed, "trial")
        world.add_table(size=(0.8, 0.8, 0.05), rolling=TABLE_ROLLING)
        self.obj = self._place_object()
        self.rest_position, _ = world.pose(self.obj)
        self.size = max(instance.extents)
        self.wrist_orientation = quat_from_euler((perturbation.wrist_tilt, 0, 0))
        self.wrist_orientation = multiply((0, 0, 0), DOWN, (0, 0, 0), self.wrist_orientation)[1]
        self.hand = Hand(world, model, (0, 0, 1.0), self.wrist_orientation)
        self.hand.reset_joints(0.0)
        self.tips = self.hand.tip_links()
        self.friction_of_link = {link: pair_friction(surface.friction, instance.friction * perturbation.friction_scale)
                                 for name, surface in model.surfaces.items()
                                 for link in [self.hand.link_of.get(name)] if link is not None}
        default = pair_friction(1.0, instance.friction * perturbation.friction_scale)
        self.friction_of_link.update({k: default for k in self.hand.link_of.values() if k not in self.friction_of_link})
        # contact compliance (m/N) of each hand link against this object: soft contacts sink by
        # force x compliance, which is no penetration error
        soft = 1.0 / instance.stiffness if instance.stiffness else 0.0
        self.compliance = np.zeros(max(self.hand.link_of.values()) + 2)  # indexed by link + 1
        for name, surface in model.surfaces.items():
            if name in self.hand.link_of and surface.stiffness:
                self.compliance[self.hand.link_of[name] + 1] = 1.0 / surface.stiffness
        self.compliance += soft
        n = len(self.hand.rollers)
        self.speed_factor = 1.0 + perturbation.speed_noise * self.rng.uniform(-1.0, 1.0, n)
        self.roller_cmd, self.roller_out = np.zeros(n), np.zeros(n)
        self.brake_at = np.full(n, np.nan)  # angle (rad) each stopped roller is held at
        self.pivot_cmd = np.zeros(len(self.hand.pivot_j))
        self.pivot_out = self.pivot_cmd.copy()
        self.grip = None  # (fraction, torque_scale) while the fingers are driven
        self.clamp = None  # fixed closing-joint targets once the grasp is formed (Hand.clamp_targets)
        self.press = None  # downward force (N) the wrist holds the rollers on the table with, or None
        self.press_touched = False  # the rollers have touched the table since the press began
        self.press_offset = 0.0  # m; height of the rollers' lowest point above z = 0 the preload servo aims at
        self._sent = {}  # last command sent per actuator group
        self.total = SlipTally()
        self._slipping = True  # integrate slip step by step until a sample shows the grasp sticking
        self._quiet = False  # no actuator or wrist motion in this tick (see tick)
        self.phases: list[PhaseLog] = []
        self.last = None  # latest ContactSample of the object against the hand
        self.grasp_time = math.nan  # first time the object was held (s from the approach's start)
        self.grasp_quality = None  # GraspQuality at the grasp instant (when the lift starts)
        self.steps = 0
        # left by the phases for the row
        self.preshape = 0.0  # closing fraction the fingers are pre-shaped to (inside grasps)
        self.wrist_goal = None  # current wrist target (m, world)
        self.loss_speed = 0.0  # object's speed relative to the hand when it was last touched
        self.rotation = (math.nan, math.nan)  # (achieved, commanded) rad about the roll axis
        self.shifted = (math.nan, math.nan)  # (achieved, commanded) m along the shift direction
        self.residual = math.nan  # largest steering residual norm during a steered phase (m/s)
        self.first_elevation = math.nan  # rad; roller contact normals above level at the first touch (surface draw-in)
        self.straddle_rate = math.nan  # closing fraction per s while the rollers close on the object (surface draw-in)

    # --- scene -----------------------------------------------------------------------------

    def _place_object(self):
        inst, pert, w = self.instance, self.pert, self.world
        tilt = (0.0, 0.0, 0.0)
        if inst.kind not in STANDING_KINDS:  # smallest size vertical
            axis = int(np.argmin(inst.extents))
            tilt = [(0.0, math.pi / 2, 0.0), (math.pi / 2, 0.0, 0.0), (0.0, 0.0, 0.0)][axis]
        lay = quat_from_euler(tilt)
        yaw = quat_from_euler((0.0, 0.0, pert.object_yaw))
        orn = multiply((0, 0, 0), yaw, (0, 0, 0), lay)[1]
        body = add_object(w, inst, (pert.object_dx, pert.object_dy, 0.5), orn,
                          friction_scale=pert.friction_scale, mass_scale=pert.mass_scale)
        low = w.aabb(body)[0][2]
        w.reset_pose(body, (pert.object_dx, pert.object_dy, 0.5 - low + 2e-4), orn)
        for _ in range(int(SETTLE_TIME / w.settings.time_step)):
            w.step()
            v, spin = w.velocity(body)
            if np.linalg.norm(v) + np.linalg.norm(spin) * max(inst.extents) / 2 < REST_SPEED and w.time > 0.05:
                break
        w.time = 0.0  # trial time starts when the scene is ready
        return body

    def object_top(self):
        """Height (m) of the object's highest point: its bounding box's top, or the top found by rays
        cast down over it where the box stands more than BOX_EXCESS higher. The engine's box of a
        turned convex hull is the hull's own box turned, so it can stand far above the part (a
        resting 18 mm polytope had a 36 mm box, measured)."""
        lo, hi = self.world.aabb(self.obj)
        for n in (TOP_RAYS_FIRST, TOP_RAYS):
            grid = [(x, y) for x in np.linspace(lo[0], hi[0], n) for y in np.linspace(lo[1], hi[1], n)]
            hits = self.world.ray_hits([(x, y, hi[2] + 1e-3) for x, y in grid], [(x, y, lo[2] - 1e-3) for x, y in grid])
            tops = [float(point[2]) for body, point in hits if body == self.obj]
            # the box where it is close: rays report spheres and plates about 1 mm above their surfaces
            # and hulls 1 mm above (their margin), measured, where an upright part's box is exact. A
            # coarse grid that finds the box's top already gives the fine grid's answer.
            if tops and max(tops) >= hi[2] - BOX_EXCESS:
                return float(hi[2])
        return max(tops) if tops else float(hi[2])

    def tip_span(self):
        """(depth of the tips' centre below the palm, depth of their lowest point) in the hand frame, m."""
        frame = self.hand.frame()
        boxes = [self.hand.link_box(link, frame)[:, 2] for link in self.tips]
        return float(np.mean([b.mean() for b in boxes])), float(np.max([b.max() for b in boxes]))

    def wrist_for_grip_height(self, grip_height):
        """World wrist position that puts the tips' centre at `grip_height` over the object, keeping
        the tips TABLE_CLEARANCE above the table; wrist pose error included."""
        centre, low = self.tip_span()
        z = max(grip_height + centre, low + TABLE_CLEARANCE)
        x, y = self.rest_position[:2]
        return np.array([x + self.pert.wrist_dx, y + self.pert.wrist_dy, z + self.pert.wrist_dz])

    # --- control ---------------------------------------------------------------------------

    @property
    def control_dt(self):
        """Period (s) of the controller: phase callbacks, commands and metric samples."""
        return 1.0 / CONTROL_HZ

    def move_wrist(self, position):
        self.hand.move_wrist(position, self.wrist_orientation)

    def set_rollers(self, speeds):
        self.roller_cmd = np.broadcast_to(np.asarray(speeds, dtype=float), self.roller_cmd.shape).copy()

    def set_pivots(self, angles):
        self.pivot_cmd = np.broadcast_to(np.asarray(angles, dtype=float), self.pivot_cmd.shape).copy()

    def surface_load(self):
        """Total normal force (N) of the hand's rollers on the table (loaded contact points only)."""
        rollers = {r.roll for r in self.hand.rollers}
        return float(sum(c[9] for c in self.world.contacts(self.hand.body, self.world.table)
                         if c[3] in rollers and c[9] > 0.0))

    def _press(self):
        """One tick of the preload servo. The wrist follows the rollers' lowest point (closing
        fingers swing the rollers up and down by a millimetre or so, which a force servo alone
        tracks only with a large force error) plus an offset that the force error trims: down
        while the rollers press the table less than `press`, up while they press more."""
        load = self.surface_load()
        self.press_touched = self.press_touched or load > 0.0
        # nothing touched yet: come down at the capped speed (the servo alone would creep); once the
        # rollers have touched, a lost touch is a bounce, and coming down at full speed again kept
        # four stiff rollers in a limit cycle (0, 52, 13 N against a 2 N preload, measured)
        rate = PRESS_GAIN * (load - self.press) if self.press_touched else -PRESS_SPEED
        self.press_offset += min(max(rate, -PRESS_SPEED), PRESS_SPEED) * self.control_dt
        self.wrist_goal = np.array([*self.wrist_goal[:2], self.hand.roller_reach() + self.press_offset])
        self.move_wrist(self.wrist_goal)

    def _actuate(self):
        """Send the commands of one control tick (a motor keeps its last
        command, so unchanged roller, pivot and clamp commands are not sent again)."""
        dt = self.control_dt
        if self.press is not None:
            self._press()
        gain = 1.0 if self.pert.actuator_lag <= 0 else 1.0 - math.exp(-dt / self.pert.actuator_lag)
        self.roller_out += gain * (self.roller_cmd * self.speed_factor - self.roller_out)
        # a lagging roller told to stop comes to rest and brakes once it is slower than BRAKE_SPEED
        self.roller_out[(self.roller_cmd == 0.0) & (np.abs(self.roller_out) < BRAKE_SPEED)] = 0.0
        self.pivot_out += gain * (self.pivot_cmd - self.pivot_out)
        if len(self.roller_out):
            speeds = self._braked(self.roller_out)
            if self._changed("rollers", speeds):
                self.hand.set_rollers(speeds)
        pivots_moved = bool(len(self.pivot_out)) and self._changed("pivots", self.pivot_out)
        if pivots_moved:
            self.hand.set_pivots(self.pivot_out)
        wrist_moved = self._changed("wrist", (tuple(self.hand.wrist_target[0].tolist()), self.hand.wrist_target[1]))
        self._quiet = (self.grip is None or self.clamp is not None) and not self.roller_out.any() \
            and not wrist_moved and not pivots_moved
        if self.grip is None:
            if self._changed("fingers", "open"):
                self.hand.open()
        elif self.clamp is not None:
            if self._changed("fingers", (*self.clamp, self.grip[1])):
                self.hand.hold_closing(self.clamp, self.grip[1])
        else:
            self._sent.pop("fingers", None)
            self.hand.close(*self.grip)

    def _braked(self, speeds):
        """Roller speed commands with stopped rollers held where they stopped. A velocity motor
        told to stop lets a loaded roller creep wherever the solver has not converged (2.5 mm
        under a held ball in a 1 s hold at 100 iterations, measured), so a stopped roller is
        steered back to its stopping angle at BRAKE_GAIN. (The engine's position motor holds too,
        but it upsets the contact forces: a finger's moment balance was off by up to 17 %.)"""
        stopped = speeds == 0.0
        if not stopped.any():
            self.brake_at[:] = np.nan
            return speeds
        angles = self.hand.joint_positions(self.hand.roll_j)
        self.brake_at[~stopped] = np.nan
        fresh = stopped & np.isnan(self.brake_at)
        self.brake_at[fresh] = angles[fresh]
        return np.where(stopped, BRAKE_GAIN * (self.brake_at - angles), speeds)

    def _changed(self, what, value):
        value = tuple(value) if isinstance(value, np.ndarray) else value
        if self._sent.get(what) == value:
            return False
        self._sent[what] = value
        return True

    def tick(self):
        """One control tick: actuation, the tick's physics steps, then the metric sample, the
        sanity check and the observer."""
        self._actuate()
        w = self.world
        n, step = w.settings.steps_per_tick, w.settings.time_step
        # Slip distance: held from a 60 Hz sample it read up to a third low in transients (slip that
        # starts and stops between samples), so every physics step's slip velocity is integrated while
        # anything can change the contact forces: an actuator or the wrist in motion, or the object
        # slipping at the last sample. Each link's steps add up as a vector over the tick, and the
        # tick counts the largest link's displacement: summed as speeds, a contact vibrating in place
        # read as slip that grew as the step shrank (a pinched tip rack: 0.3 mm at 960 Hz, 16 mm at
        # 1920 Hz while it moved 2 mm in the hand, measured). A quiet, sticking grasp (a hold) skips
        # that work and holds its end-of-tick sample for the tick: a slip starting there shows in
        # that sample and is then integrated step by step.
        slipping = self._slipping or not self._quiet
        moved = {}
        if slipping:
            for _ in range(n - 1):
                w.step()
                add_link_slips(step_slips(w, self.obj, self.hand.body), step, moved)
            w.step()
        else:
            w.step(n)
        self.steps += n
        state = w.raw_state(self.obj, -1)  # engine tuples, used twice
        self.last = sample_contacts(w, self.obj, self.hand.body, obj_state=state)
        dt = self.control_dt
        load = contact_load(self.last, self.friction_of_link)
        speed = load[0] if load else 0.0
        if slipping:  # the tick's last step, from the sample
            add_link_slips(self.last.slip_rows(), step, moved)
        slipped = worst_displacement(moved) if slipping else speed * dt
        self._slipping = speed > SLIP_NOISE_FLOOR
        self.total.add(load, dt, slipped)
        if self.phases:
            self.phases[-1].tally.add(load, dt, slipped)
        pos, _, v, spin = state
        excess = self.last.depth - self.last.normal_force * self.compliance[self.last.links + 1]
        why = blowup(pos, v, spin, excess, self.instance.extents)
        if why is None and pos[2] < -0.05:
            why = "object fell through the table"
        if why:
            raise Blowup(why)
        if self.on_step is not None:
            self.on_step(self)

    def run(self, seconds, each=None):
        """Run for `seconds` (whole control ticks); `each(t)` runs before every tick and may return
        True to stop early."""
        dt = self.control_dt
        for k in range(max(1, round(seconds / dt))):
            if each is not None and each(k * dt):
                return False
            self.tick()
        return True

    # --- observations ----------------------------------------------------------------------

    def object_in_hand(self):
        """Object pose in the hand frame: position (3,) of its COM and rotation matrix (3, 3)."""
        hp, hr = self.hand.frame()
        pos, orn = self.world.pose(self.obj)
        rot = rotation(orn)
        return (pos - hp) @ hr, hr.T @ rot

    def touching_links(self):
        return set(self.last.links.tolist()) if self.last is not None else set()

    def tips_touching(self):
        return len(self.touching_links() & set(self.tips))

    def on_table(self):
        return any(c[9] > 0 for c in self.world.contacts(self.obj, self.world.table))

    def held(self):
        """In the hand and off the table: touched by at least two links and not resting on the table."""
        return len(self.touching_links()) >= 2 and not self.on_table()

    def relative_speed(self):
        hv = self.world.velocity(self.hand.body)[0]
        return float(np.linalg.norm(self.world.velocity(self.obj)[0] - hv))

    def watch_grasp(self):
        """Note the first instant the object is held."""
        if math.isnan(self.grasp_time) and self.held():
            self.grasp_time = self.world.time

    def record_grasp(self):
        """Grasp quality of the current contacts: Ferrari-Canny epsilon with each link's pair mu,
        torque scale half the object's largest size (common practice: the object's radius)."""
        s = self.last
        mu = np.array([self.friction_of_link[int(k)] for k in s.links])
        self.grasp_quality = grasp_quality(s.points, s.normals, mu, self.world.pose(self.obj)[0], self.size / 2)

    def begin(self, label):
        self.phases.append(PhaseLog(label))
        return self.phases[-1]


def run_trial(model, instance, routine, perturbation=Perturbation(), seed=0, settings=PhysicsSettings(), world=None,
              on_step=None):
    """Run one trial and return its flat row (dict). `routine` is a routines.Routine.

    A fresh world is used unless `world` is given (it is reset first, so a worker can reuse one
    client; the numbers are the same either way). Simulation blow-ups give outcome `invalid`;
    exceptions from the harness's own code propagate (the campaign runner records them as `error`).
    `on_step(ctx)` (a TrialContext) is called after every control tick; it may read anything
    (poses, `ctx.last` contacts, camera images) but must not command the world, or the trial's
    numbers change.
    """
    problem = routine.unsuitable(model, instance)
    if problem:
        raise HarnessError(f"routine {routine.name!r} cannot run on {model.name} / {instance.name}: {problem}")
    started = time.perf_counter()
    own = world is None
    world = open_world(settings) if own else world
    if not own:
        world.reset()
    try:
        ctx = TrialContext(world, model, instance, perturbation, seed, on_step)
        try:
            outcome, reason = routine.run(ctx)
        except Blowup as exc:
            outcome, reason = "invalid", str(exc)
        row = routine.describe(ctx, outcome, reason)
    finally:
        if own:
            world.close()
    row.update({
        "gripper": model.name.split("[")[0], "variant": model.name,  # variants are named spec[key=value]
        "variant_key": model.key, "family": model.family, "object": instance.name,
        "object_set": instance.set_name, "kind": instance.kind, "seed": int(seed),
        "solver_iterations": world.settings.solver_iterations, "step_hz": world.settings.step_hz,
        "engine": world.settings.engine,
        **perturbation.columns(), "wall_s": time.perf_counter() - started,
    })
    return row


def drift_of(ctx, reference):
    """Drift (m, rad) of the object's pose in the hand against `reference` = (position, rotation)."""
    return pose_error(*ctx.object_in_hand(), *reference)
