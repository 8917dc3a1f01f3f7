"""Replay one trial of a run: re-simulate it from the run's campaign, render it, check its numbers.

The trial is found by its key in the expansion of the campaign the run recorded (campaign.json:
file and hash); the campaign must still resolve to the same hash, or the replay would test other
models. It runs in a fresh physics client, as `run_trial` does without a `world`.

Rendering uses pybullet's CPU renderer (TinyRenderer, DIRECT mode) through an `on_step` observer
that only reads state. A rendered replay runs the trial twice: a survey pass (no images) records
per step where the hand and object are, the largest slip speed and the phases, which fixes the
camera and the slip colour scale for the whole replay and picks moments of interest; the render
pass draws the frames. Both passes' rows are compared, so every rendered replay also checks that
rendering left the physics unchanged. A "step" below is one sample: one call of the observer
(run_trial calls it after every sampled physics step), numbered from 0 in both passes.

Contacts are drawn on each frame by projecting the contact points through the camera's view and
projection matrices: a disc per contact (size grows with its normal force, colour with its slip
speed on a perceptually uniform map) and an arrow along the slip direction above the noise floor.
"""

from __future__ import annotations

import json
import math
import struct
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import HarnessError
from ..sim.metrics import SLIP_NOISE_FLOOR
from .plots import TrialRecorder

__all__ = ["TrialSource", "open_trial", "find_task", "simulate", "row_differences", "Survey", "Camera",
           "FrameRenderer", "Frame", "survey", "render", "replay", "ReplayResult", "IGNORED_COLUMNS",
           "SLIP_COLOURMAP", "replay_command"]

IGNORED_COLUMNS = ("wall_s",)  # the only column a replay may change: it measures the machine, not the trial
SLIP_COLOURMAP = "plasma"  # perceptually uniform and readable with colour-vision deficiencies
FOV_DEG = 40.0
TURN_DEG = 15.0  # the camera looks through the widest gap between the fingers, turned by this for depth
ELEVATION_DEG = 22.0  # above the table's plane
FRAME_RATE = 30  # frames per simulated second when no --every is given
NEAR_HAND = 0.25  # m; an object farther than this from the palm (thrown away) is left out of the framing


@dataclass
class TrialSource:
    """Everything needed to replay one trial: the run, its campaign, the task and the journal row."""

    run: Path
    record: dict  # campaign.json
    campaign: object  # campaign.Campaign
    task: object  # campaign.TrialTask
    logged: dict | None  # the journal's row (None if the run has not finished this trial)

    @property
    def payload(self):
        return self.task.payload

    def title(self):
        p = self.payload
        return f"{p['variant']} / {p['object']} / {p['routine']}"


def replay_command(run, trial_key, *extra):
    """The shell command that replays a trial (quoted only where needed)."""
    import shlex
    return " ".join(["grasp-harness", "replay", shlex.quote(str(run)), trial_key, *map(shlex.quote, extra)])


def open_trial(run, trial_key, campaign_file=None, engine=None) -> TrialSource:
    """The trial of `run` whose key is `trial_key` (or a unique prefix of it); `engine`: re-simulate it
    on that engine instead of the run's."""
    from dataclasses import replace

    from ..campaigns.journal import Journal
    from ..campaigns.runs import run_campaign_of
    run = Path(run)
    record, campaign = run_campaign_of(run, campaign_file, "a replay would test other models")
    if engine:
        campaign = replace(campaign, physics=replace(campaign.physics, engine=engine))
    task = find_task(campaign, trial_key)
    with Journal(run, create=False) as journal:
        logged = next((row for row in journal.rows() if row.get("trial_key") == task.trial_key), None)
    return TrialSource(run, record, campaign, task, logged)


def find_task(campaign, trial_key):
    """The TrialTask of `campaign` with this key (or unique key prefix); HarnessError otherwise."""
    from ..campaigns.campaign import expand
    tasks = expand(campaign).tasks
    found = [t for t in tasks if t.trial_key.startswith(trial_key)] if trial_key else []
    exact = [t for t in found if t.trial_key == trial_key]
    if exact or len(found) == 1:
        return (exact or found)[0]
    what = "matches several trials" if found else "is no trial of"
    raise HarnessError(f"trial key {trial_key!r} {what} campaign {campaign.name!r} ({len(tasks)} trials)")


def _inputs(campaign, payload):
    """(model, instance, routine, perturbation, seed) of a task, taken from the loaded campaign."""
    from ..sim.trial import Perturbation
    model = next(m for _, models in campaign.grippers for m in models if m.name == payload["variant"])
    inst = next(i for s, instances in campaign.object_sets if s.name == payload["object_set"]
                for i in instances if i.name == payload["object"])
    use = next(u for u in campaign.routines if u.routine.name == payload["routine"]
               and u.table == payload["routine_table"])
    return model, inst, use.routine, Perturbation(**payload["perturbation"]), payload["seed"]


def simulate(source: TrialSource, on_step=None) -> dict:
    """Run the trial in a fresh physics client; its row as the journal would hold it."""
    from ..campaigns.campaign import failure_inputs, payload_settings
    from ..campaigns.journal import to_json
    from ..sim.trial import run_trial
    model, inst, routine, pert, seed = _inputs(source.campaign, source.payload)
    row = {**failure_inputs(source.payload), **run_trial(model, inst, routine, pert, seed=seed, on_step=on_step,
                                                         settings=payload_settings(source.payload))}
    return json.loads(to_json(row))  # the journal's own round trip, so types compare like for like


def _bits(value):
    if isinstance(value, float):
        return struct.pack("<d", value)
    return value


def row_differences(logged: dict, replayed: dict, ignore=IGNORED_COLUMNS):
    """[(column, logged value, replayed value)] for every column that is not bit for bit the same."""
    keys = [k for k in dict.fromkeys([*logged, *replayed]) if k not in ignore]
    missing = object()
    return [(k, logged.get(k, missing), replayed.get(k, missing)) for k in keys
            if k not in logged or k not in replayed or type(logged[k]) is not type(replayed[k])
            or _bits(logged[k]) != _bits(replayed[k])]


# --- survey ---------------------------------------------------------------------------------------

@dataclass
class Survey(TrialRecorder):
    """A TrialRecorder that also records, per step, the box (lo, hi) around the hand and the object."""

    boxes: list = field(default_factory=list)
    tip_angles: list = field(default_factory=list)  # rad, azimuth of each fingertip around the palm at the start

    def __call__(self, ctx):
        super().__call__(ctx)
        world, body = ctx.world, ctx.hand.body
        if not self.tip_angles:
            palm = ctx.hand.frame()[0]
            for link in ctx.tips:
                x, y = np.asarray(world.raw_state(body, link)[0][:2]) - palm[:2]
                self.tip_angles.append(math.atan2(y, x))
        corners = [world.aabb(body, link) for link in [-1, *ctx.hand.limits]]
        palm = ctx.hand.frame()[0]
        if np.linalg.norm(world.pose(ctx.obj)[0] - palm) < NEAR_HAND:
            corners.append(world.aabb(ctx.obj))
        lo = np.min([c[0] for c in corners], axis=0)
        hi = np.max([c[1] for c in corners], axis=0)
        self.boxes.append((lo, hi))

    def box(self, steps=None):
        """The box around every surveyed step (or the given steps)."""
        picked = self.boxes if steps is None else [self.boxes[k] for k in steps]
        return np.min([b[0] for b in picked], axis=0), np.max([b[1] for b in picked], axis=0)

    def azimuth(self):
        """Camera azimuth (deg): the middle of the widest gap between fingertips, turned by TURN_DEG."""
        candidates = np.arange(0.0, 360.0, 5.0)
        tips = np.degrees(self.tip_angles)
        if not len(tips):
            return candidates[0] + TURN_DEG
        gap = np.abs((candidates[:, None] - tips[None, :] + 180.0) % 360.0 - 180.0).min(axis=1)
        return float(candidates[np.argmax(gap)] + TURN_DEG)

    def slip_scale(self):
        """Top of the slip colour scale (m/s): the trial's largest slip speed rounded up, at least 2 mm/s."""
        top = max(max(self.slip_speed, default=0.0), 2e-3)
        step = 10 ** math.floor(math.log10(top))
        return math.ceil(top / step) * step

    def moment(self, kind, logged=None):
        """Step of interest: 'drop' (0.1 s after the last contact), 'slip' (peak slip speed), 'drift'
        (end of the phase with the largest drift in `logged`), or 'end' (the last step)."""
        last = len(self) - 1
        if kind == "slip":
            return int(np.argmax(self.slip_speed))
        if kind == "drop":
            touched = self.last_contact_step()
            dt = self.time[1] - self.time[0] if len(self) > 1 else 0.0
            return last if touched is None else min(last, touched + (round(0.1 / dt) if dt else 0))
        if kind == "drift" and logged:
            drifts = {label: logged.get(f"{label}_drift_mm") for label, _, _ in self.phase_spans()}
            drifts = {k: v for k, v in drifts.items() if isinstance(v, float) and math.isfinite(v)}
            if drifts:
                worst = max(drifts, key=drifts.get)
                return max(end for label, _, end in self.phase_spans() if label == worst)
        return last


# --- camera and frames ----------------------------------------------------------------------------

@dataclass(frozen=True)
class Camera:
    """A pinhole camera looking at a box from a fixed direction, far enough to see all of it."""

    view: tuple  # 16 numbers, column-major (pybullet's layout)
    projection: tuple
    width: int
    height: int

    @classmethod
    def framing(cls, p, box, azimuth_deg, width=480, height=360, fill=0.9):
        """Looking at the box's centre from `azimuth_deg` and ELEVATION_DEG, its corners filling `fill`
        of the image's half-size along the tighter axis."""
        lo, hi = (np.asarray(b, dtype=float) for b in box)
        target = (lo + hi) / 2
        radius = max(float(np.linalg.norm(hi - lo)) / 2, 0.02)
        az, el = math.radians(azimuth_deg), math.radians(ELEVATION_DEG)
        direction = np.array([math.cos(el) * math.cos(az), math.cos(el) * math.sin(az), math.sin(el)])
        half_fov = math.radians(FOV_DEG) / 2 * min(1.0, width / height)  # the narrower of the two angles
        distance = radius / math.sin(half_fov)  # the box's sphere fits; then close in on its corners
        corners = np.array([[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], hi[1]) for z in (lo[2], hi[2])])
        for _ in range(3):
            camera = cls._at(p, target, direction, distance, radius, width, height)
            px, _ = camera.project(corners)
            spread = np.max(np.abs(px - [width / 2, height / 2]) / [width / 2, height / 2])
            distance *= spread / fill
        return cls._at(p, target, direction, distance, radius, width, height)

    @classmethod
    def _at(cls, p, target, direction, distance, radius, width, height):
        view = p.computeViewMatrix((target + distance * direction).tolist(), target.tolist(), [0, 0, 1])
        projection = p.computeProjectionMatrixFOV(FOV_DEG, width / height, max(0.005, distance - 3 * radius),
                                                  distance + 6 * radius)
        return cls(tuple(view), tuple(projection), width, height)

    def project(self, points):
        """Pixel coordinates (k, 2) of world points (k, 3), and whether each lies in front of the camera."""
        points = np.asarray(points, dtype=float).reshape(-1, 3)
        v = np.array(self.view).reshape(4, 4).T  # column-major to row-major
        m = np.array(self.projection).reshape(4, 4).T @ v
        clip = np.c_[points, np.ones(len(points))] @ m.T
        w = clip[:, 3]
        ndc = clip[:, :2] / np.where(np.abs(w) > 1e-12, w, 1e-12)[:, None]
        px = np.c_[(ndc[:, 0] + 1) / 2 * self.width, (1 - ndc[:, 1]) / 2 * self.height]
        return px, w > 0

    def image(self, world):
        """(rgb (h, w, 3) uint8, segmentation (h, w) int: body unique id per pixel, -1 for background)."""
        return world.camera_image(self.width, self.height, self.view, self.projection)


@dataclass
class Frame:
    """One rendered step: the annotated image and what is in it."""

    step: int
    time: float
    phase: str
    image: np.ndarray  # (h, w, 3) uint8 with the contact overlay
    object_pixels: int  # pixels showing the object (segmentation mask)
    hand_pixels: int
    contacts: int

    def save(self, path):
        from PIL import Image
        Image.fromarray(self.image).save(path)
        return path


class FrameRenderer:
    """on_step observer that renders chosen steps (a set, or every `every`-th step) and draws contacts.

    `camera` is a Camera or a callable step -> Camera. Each frame goes to `sink(frame)`, or is kept
    in `frames` when there is no sink.
    """

    def __init__(self, camera, *, steps=None, every=None, slip_scale=0.05, force_scale=10.0, title="", sink=None):
        self.camera, self.steps, self.every = camera, steps, every
        self.slip_scale, self.force_scale, self.title = slip_scale, max(force_scale, 1e-6), title
        self.sink = sink
        self.frames: list[Frame] = []
        self.count = 0
        self.calls = 0  # observer calls so far: the index of the sample, as in the survey's lists

    def wanted(self, step):
        if self.steps is not None and step in self.steps:
            return True
        return bool(self.every) and step % self.every == 0

    def __call__(self, ctx):
        step, self.calls = self.calls, self.calls + 1
        if not self.wanted(step):
            return
        camera = self.camera(step) if callable(self.camera) else self.camera
        rgb, seg = camera.image(ctx.world)
        phase = ctx.phases[-1].label if ctx.phases else ""
        image = overlay(rgb, camera, ctx.last, self.slip_scale, self.force_scale,
                        [self.title, f"t = {ctx.world.time:.2f} s   phase: {phase or '-'}   "
                                     f"contacts: {ctx.last.count}"])
        frame = Frame(step, ctx.world.time, phase, image, int(np.sum(seg == ctx.obj)),
                      int(np.sum(seg == ctx.hand.body)), int(ctx.last.count))
        self.count += 1
        if self.sink is not None:
            self.sink(frame)
        else:
            self.frames.append(frame)


def _font(size):
    from PIL import ImageFont
    try:
        return ImageFont.load_default(size=size)
    except TypeError:  # Pillow < 10.1 has one bitmap size
        return ImageFont.load_default()


def overlay(rgb, camera, sample, slip_scale, force_scale, lines):
    """The image with each contact as a disc (colour: slip speed, size: normal force), slip arrows,
    a caption and the slip colour scale."""
    from matplotlib import colormaps
    from PIL import Image, ImageDraw
    cmap = colormaps[SLIP_COLOURMAP]
    img = Image.fromarray(rgb)
    draw = ImageDraw.Draw(img)
    font = _font(max(10, camera.height // 28))
    if sample is not None and sample.count:
        px, front = camera.project(sample.points)
        speeds = sample.slip_speed()
        order = np.argsort(speeds)  # fastest drawn last, on top
        for k in order:
            if not front[k]:
                continue
            x, y = px[k]
            colour = _rgb(cmap(min(speeds[k] / slip_scale, 1.0)))
            r = 3 + 5 * math.sqrt(min(sample.normal_force[k] / force_scale, 1.0))
            if speeds[k] > SLIP_NOISE_FLOOR:
                _arrow(draw, camera, sample.points[k], sample.slip[k] / speeds[k],
                       8 + 32 * min(speeds[k] / slip_scale, 1.0), colour)
            draw.ellipse([x - r, y - r, x + r, y + r], fill=colour, outline=(0, 0, 0), width=1)
    _caption(draw, lines, font)
    _colour_scale(draw, cmap, slip_scale, camera.width, camera.height, font)
    return np.asarray(img)


def _rgb(rgba):
    return tuple(int(round(c * 255)) for c in rgba[:3])


def _arrow(draw, camera, point, direction, length, colour):
    """An arrow of `length` pixels from the point along the projected world direction."""
    (a, b), _ = camera.project([point, point + 0.005 * direction])
    d = b - a
    norm = float(np.hypot(*d))
    if norm < 1e-9:
        return
    d /= norm
    tip = a + d * length
    side = np.array([-d[1], d[0]])
    head = [tuple(tip), tuple(tip - 7 * d + 4 * side), tuple(tip - 7 * d - 4 * side)]
    draw.line([tuple(a), tuple(tip)], fill=(0, 0, 0), width=4)
    draw.line([tuple(a), tuple(tip)], fill=colour, width=2)
    draw.polygon(head, fill=colour, outline=(0, 0, 0))


def _caption(draw, lines, font):
    lines = [s for s in lines if s]
    if not lines:
        return
    box = draw.multiline_textbbox((6, 4), "\n".join(lines), font=font)
    draw.rectangle([box[0] - 3, box[1] - 2, box[2] + 3, box[3] + 3], fill=(255, 255, 255))
    draw.multiline_text((6, 4), "\n".join(lines), fill=(0, 0, 0), font=font)


def _colour_scale(draw, cmap, slip_scale, width, height, font):
    """A horizontal strip in the bottom-right corner: slip speed from 0 to the scale's top."""
    w, h = max(80, width // 4), 8
    x0, y0 = width - w - 10, height - h - 22
    label = f"slip 0 - {slip_scale * 1e3:.3g} mm/s"
    box = draw.textbbox((x0, y0 + h + 2), label, font=font)
    draw.rectangle([min(x0, box[0]) - 4, y0 - 4, max(x0 + w, box[2]) + 4, box[3] + 3], fill=(255, 255, 255))
    for i in range(w):
        draw.line([(x0 + i, y0), (x0 + i, y0 + h)], fill=_rgb(cmap(i / (w - 1))))
    draw.rectangle([x0, y0, x0 + w, y0 + h], outline=(0, 0, 0))
    draw.text((x0, y0 + h + 2), label, fill=(0, 0, 0), font=font)


# --- the two passes -------------------------------------------------------------------------------

def survey(source: TrialSource):
    """(row, Survey) of a run of the trial without rendering."""
    s = Survey()
    return simulate(source, s), s


def render(source: TrialSource, surveyed: Survey, *, steps=None, every=None, width=480, height=360,
           follow=False, sink=None):
    """(row, FrameRenderer) of a run that renders the given steps and/or every `every`-th step.

    The camera frames the hand and object over the whole trial (fixed), or at each rendered step
    (`follow`, for single thumbnails).
    """
    import pybullet as p  # view and projection matrices are plain arithmetic, no client needed
    azimuth = surveyed.azimuth()
    fixed = Camera.framing(p, surveyed.box(), azimuth, width, height)
    camera = (lambda k: Camera.framing(p, surveyed.box([k]), azimuth, width, height)) if follow else fixed
    renderer = FrameRenderer(camera, steps=set(steps or ()), every=every, slip_scale=surveyed.slip_scale(),
                             force_scale=max(max(surveyed.normal_force, default=1.0), 1.0),
                             title=source.title(), sink=sink)
    return simulate(source, renderer), renderer


@dataclass
class ReplayResult:
    source: TrialSource
    row: dict  # the rendered (or only) replay's row
    differences: list  # against the journal's row; empty when it matches bit for bit
    render_differences: list | None  # rendered pass against the survey pass (None when nothing was rendered)
    frames_written: int = 0
    gif: Path | None = None
    frame_dir: Path | None = None

    @property
    def matches(self):
        return self.source.logged is not None and not self.differences


def replay(run, trial_key, *, frames=None, gif=None, every=None, width=480, height=360, campaign_file=None,
           source=None, engine=None):
    """Replay a trial; write PNG frames to the folder `frames` and/or an animated GIF, and compare rows.

    `every`: render every n-th sample (observer call); default: about FRAME_RATE frames per simulated second.
    """
    source = source or open_trial(run, trial_key, campaign_file, engine)
    if frames is None and gif is None:
        row = simulate(source)
        return ReplayResult(source, row, _against_journal(source, row), None)
    if every is not None and every < 1:
        raise HarnessError(f"--every must be at least 1; got {every}")
    first, surveyed = survey(source)
    period = surveyed.time[1] - surveyed.time[0] if len(surveyed) > 1 else 1.0 / FRAME_RATE
    every = every or max(1, round(1.0 / (FRAME_RATE * period)))
    folder = Path(frames) if frames is not None else None
    if folder is not None:
        folder.mkdir(parents=True, exist_ok=True)
    kept = []

    def sink(frame):
        if folder is not None:
            frame.save(folder / f"frame-{frame.step:05d}.png")
        if gif is not None:
            kept.append(frame.image)

    # the last sample is always drawn, so the final state is in every replay
    row, renderer = render(source, surveyed, steps={len(surveyed) - 1}, every=every, width=width,
                           height=height, sink=sink)
    if gif is not None:
        write_gif(kept, gif, every * period)
    return ReplayResult(source, row, _against_journal(source, row), row_differences(first, row),
                        renderer.count, Path(gif) if gif else None, folder)


def _against_journal(source, row):
    return row_differences(source.logged, row) if source.logged is not None else [("(row)", None, "replayed")]


def write_gif(images, path, seconds_per_frame):
    """An animated GIF playing at trial time (frames at least 20 ms apart, as viewers allow)."""
    from PIL import Image
    if not images:
        raise HarnessError("no frames to write")
    frames = [Image.fromarray(im) for im in images]
    frames[0].save(path, save_all=True, append_images=frames[1:], loop=0,
                   duration=max(20, round(seconds_per_frame * 1000)), optimize=False)
    return Path(path)
