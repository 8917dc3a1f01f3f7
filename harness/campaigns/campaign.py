"""Campaign files: which grippers, objects and routines to try, under which perturbations, how often.

A campaign (campaigns/*.toml) is validated like a spec: every field is declared once with
`fields.param`, and every problem in the file (including problems in the gripper specs and object
sets it names, and in the routine parameters) is reported in one SpecError before anything runs.

Expansion turns a campaign into trials: every gripper variant x object instance x routine x trial
index where the routine suits the pair. Keys are stable across runs, processes and machines:

- pair_key = sha256 of (object set, object, routine, routine parameters, trial index), 16 hex digits;
- trial_key = sha256 of (variant key, pair_key).

The trial's seed and its perturbation draw come from `rng_for(campaign seed, pair_key)`, so every
variant meets the same draw for the same pair_key (paired trials across variants).

A task payload is a small dict (paths, names, numbers); `run_payload` runs it in any process.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import SpecError
from ..models.fields import Problems, Span, param, parse, section
from ..seeds import rng_for
from ..models.sources import inside, load_toml, normalised
from ..sim.engines import engine_available
from ..sim.world import CONTROL_HZ, ENGINES, PhysicsSettings

__all__ = ["Campaign", "TrialTask", "Expansion", "load_campaign", "expand", "run_payload",
           "failure_inputs", "payload_settings", "physics_settings", "stable_hash", "PhysicsTable"]

_LIST_KEYS = ("gripper", "routine")


@dataclass(frozen=True, kw_only=True)
class PerturbationRanges:
    """How far each trial may stray from the nominal one (SI in code, file units in the keys)."""

    object_xy: float = param("object_xy_mm", unit="mm", ge=0, le=50, default=0.0,
                             doc="largest object offset from the nominal spot (uniform in a disc)")
    yaw: float = param("yaw_deg", unit="deg", ge=0, le=180, default=0.0, doc="object yaw in +- this")
    friction_scale: Span = param("friction_scale", "span", gt=0, le=10, default=Span(1.0, 1.0))
    mass_scale: Span = param("mass_scale", "span", gt=0, le=10, default=Span(1.0, 1.0))
    wrist_xy: float = param("wrist_xy_mm", unit="mm", ge=0, le=50, default=0.0,
                            doc="largest wrist offset (uniform in a disc)")
    wrist_z: float = param("wrist_z_mm", unit="mm", ge=0, le=50, default=0.0, doc="wrist height error in +- this")
    wrist_tilt: float = param("wrist_tilt_deg", unit="deg", ge=0, le=45, default=0.0, doc="wrist tilt in +- this")
    actuator_lag: float = param("actuator_lag_s", ge=0, le=1, default=0.0, doc="lag time constant in [0, this]")
    speed_noise: float = param("speed_noise", ge=0, lt=1, default=0.0, doc="roller speed error amplitude")

    def draw(self, rng):
        """One Perturbation; always the same number of draws, so streams line up across campaigns."""
        from ..sim.trial import Perturbation
        u = rng.uniform(0.0, 1.0, 9)
        r_obj, a_obj = self.object_xy * math.sqrt(u[0]), 2 * math.pi * u[1]
        r_wr, a_wr = self.wrist_xy * math.sqrt(u[2]), 2 * math.pi * u[3]
        sym = lambda x, v: x * (2 * v - 1)  # noqa: E731  uniform in [-x, x]
        span = lambda s, v: s.lo + (s.hi - s.lo) * v  # noqa: E731
        return Perturbation(
            object_dx=r_obj * math.cos(a_obj), object_dy=r_obj * math.sin(a_obj),
            object_yaw=sym(self.yaw, u[4]), friction_scale=span(self.friction_scale, u[5]),
            mass_scale=span(self.mass_scale, u[6]), wrist_dx=r_wr * math.cos(a_wr),
            wrist_dy=r_wr * math.sin(a_wr), wrist_dz=sym(self.wrist_z, u[7]),
            wrist_tilt=sym(self.wrist_tilt, u[8]),
            actuator_lag=self.actuator_lag * float(rng.uniform()), speed_noise=self.speed_noise)


@dataclass(frozen=True, kw_only=True)
class StopRules:
    """Optional early stopping: a time budget and/or a target width of each cell's success interval."""

    hours: float = param("hours", gt=0, default=None, doc="time budget of the whole run")
    target_width: float = param("target_width", gt=0, lt=1, default=None,
                                doc="stop a cell once its 95 % interval is at most this wide")
    min_trials: int = param("min_trials", "integer", gt=0, default=5,
                            doc="trials a cell runs before its interval may stop it")


@dataclass(frozen=True, kw_only=True)
class PhysicsTable:
    """The engine's numerics for every trial of the campaign (defaults: world.PhysicsSettings, from
    the convergence study in the README)."""

    solver_iterations: int = param("solver_iterations", "integer", ge=10, le=10000,
                                   default=PhysicsSettings.solver_iterations,
                                   doc="constraint-solver iterations per physics step")
    step_hz: int = param("step_hz", "integer", ge=CONTROL_HZ, le=9600, default=PhysicsSettings.step_hz,
                         doc=f"physics steps per second, a multiple of the {CONTROL_HZ} Hz control rate")
    engine: str = param("engine", "text", choices=ENGINES, default=PhysicsSettings.engine,
                        doc="physics engine (DEVELOPERS.md, Engines); mujoco needs pip install -e '.[mujoco]'")

    def check(self):
        if not engine_available(self.engine):
            yield "engine", f"{self.engine!r} is not installed here: pip install -e '.[{self.engine}]'"
        if self.step_hz % CONTROL_HZ:
            yield "step_hz", (f"must be a multiple of the control rate {CONTROL_HZ} Hz (e.g. 240, 480, 960); "
                              f"got {self.step_hz}")

    def settings(self):
        return PhysicsSettings(step_hz=self.step_hz, solver_iterations=self.solver_iterations, engine=self.engine)


@dataclass(frozen=True, kw_only=True)
class CampaignFile:
    name: str = param("name", "text")
    description: str = param("description", "text", default="")
    root: str = param("root", "text", default=".",
                      doc="folder the gripper and object paths are relative to (from the campaign's folder); "
                          "no path may leave it")
    seed: int = param("seed", "integer", ge=0)
    trials: int = param("trials", "integer", gt=0, le=100000, doc="trials per cell")
    objects: tuple = param("objects", "texts", doc="object set files relative to the campaign")
    timeout_s: float = param("timeout_s", gt=0, default=120.0, doc="time limit of one trial")
    detect_drop: float = param("detect_drop", gt=0, le=1, default=None,
                               doc="smallest drop in success rate a comparison of this campaign's runs must "
                                   "detect per cell; `plan` says how many trials per cell that needs")
    perturbation: PerturbationRanges = section("perturbation", optional=True)
    stop: StopRules = section("stop", optional=True)
    physics: PhysicsTable = section("physics", optional=True)

    def check(self):
        if not self.objects:
            yield "objects", "must name at least one object set file; got []"
        if self.stop and self.stop.hours is None and self.stop.target_width is None:
            yield "stop", "must give 'hours', 'target_width' or both (omit [stop] to run every trial)"
        if self.stop and self.stop.min_trials > self.trials:
            yield "stop.min_trials", (f"must be at most 'trials' ({self.trials}), the most a cell runs; "
                                      f"got {self.stop.min_trials}")


@dataclass(frozen=True, kw_only=True)
class GripperEntry:
    spec: str = param("spec", "path")
    variants: tuple = param("variants", "texts", default=None, doc="variant names to keep; default: all")


@dataclass(frozen=True, kw_only=True)
class RoutineEntry:
    name: str = param("name", "text")


@dataclass(frozen=True)
class RoutineUse:
    routine: object  # routines.Routine
    table: dict  # its parameters as written (file units), to rebuild it in a worker

    @property
    def label(self):
        return stable_hash(self.routine.name, normalised(self.routine.params))


@dataclass(frozen=True)
class Campaign:
    file: Path
    name: str
    description: str
    seed: int
    trials: int
    timeout_s: float
    grippers: tuple  # ((GripperSpec, (model, ...)), ...) with only the kept variants
    object_sets: tuple  # ((ObjectSet, (ObjectInstance, ...)), ...)
    routines: tuple[RoutineUse, ...]
    perturbation: PerturbationRanges
    stop: StopRules | None
    physics: PhysicsSettings
    raw: dict = field(repr=False)
    detect_drop: float | None = None

    def fingerprint(self):
        """Hash of the file and of what it resolves to (variant parameters, object sets, routines), so a
        run folder is only resumed by the same campaign on the same models, wherever the files live."""
        return stable_hash(self.raw, self.physics.record(), [[m.key for m in models] for _, models in self.grippers],
                           [[s.name, s.seed, normalised(s.entries)] for s, _ in self.object_sets],
                           [[u.routine.name, normalised(u.routine.params)] for u in self.routines])

    def resolved(self):
        """A JSON-ready record of what the campaign expands to (for the run folder)."""
        return {
            "name": self.name, "description": self.description, "file": str(self.file),
            "path": str(Path(self.file).resolve()), "seed": self.seed,
            "trials": self.trials, "timeout_s": self.timeout_s, "campaign_hash": self.fingerprint(),
            "grippers": [{"spec": str(spec.file), "name": spec.name, "family": spec.family,
                          "variants": [{"name": m.name, "key": m.key} for m in models]}
                         for spec, models in self.grippers],
            "object_sets": [{"file": str(s.file), "name": s.name, "seed": s.seed,
                             "objects": [i.name for i in instances],
                             # objects read from files: the file and where inertia and material came from
                             "sources": {i.name: {"file": i.source, **i.sources} for i in instances if i.sources}}
                            for s, instances in self.object_sets],
            "routines": [{"name": u.routine.name, "params": normalised(u.routine.params), "table": u.table}
                         for u in self.routines],
            "perturbation": normalised(self.perturbation),
            "stop": normalised(self.stop) if self.stop else None,
            "physics": self.physics.record(),
            "source": self.raw,
        }


def stable_hash(*parts) -> str:
    """16 hex digits of SHA-256 over the parts as canonical JSON (the same in every process)."""
    blob = json.dumps(list(parts), sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(blob.encode()).hexdigest()[:16]


def load_campaign(path, engine=None) -> Campaign:
    """Read and validate a campaign and everything it names; one SpecError lists every problem.
    `engine` overrides the [physics] table's engine (`run --engine`; it is part of the campaign hash)."""
    path = Path(path)
    raw = load_toml(path)
    problems = Problems(path)
    top = parse(CampaignFile, raw, problems, known=_LIST_KEYS)
    root = raw.get("root", ".")
    base = _root(path, root if isinstance(root, str) else ".", problems)
    grippers = _grippers(path, base, raw, problems)
    routines = _routines(path, raw, problems)
    sets = _object_sets(base, top.objects if top else (), problems)
    problems.raise_if_any()
    physics = (top.physics or PhysicsTable()).settings()
    if engine and engine != physics.engine:
        physics = physics_settings({**(raw.get("physics") or {}), "engine": engine}, f"{path} (--engine)")
    return Campaign(path, top.name, top.description, top.seed, top.trials, top.timeout_s, grippers, sets,
                    routines, top.perturbation or PerturbationRanges(), top.stop, physics, raw,
                    top.detect_drop)


ROOT_FOLDER = "the campaign's root"  # how errors name the folder a campaign's paths are read from


def _root(path, root, problems):
    """A stand-in file in the root folder, so `specs.inside` keeps paths inside that folder."""
    folder = (path.resolve().parent / root).resolve()
    if not folder.is_dir():
        problems.add("root", f"must name an existing folder relative to {path.resolve().parent}; got {root!r}")
    return folder / path.name


def _entries(raw, key, problems):
    items = raw.get(key)
    if not isinstance(items, list) or not items or not all(isinstance(i, dict) for i in items):
        problems.add(key, f"must list at least one [[{key}]] table; got {items!r}")
        return []
    return items


def _nested(problems, exc, at, what):
    """Report the problems of a file the campaign names, under the campaign field that names it."""
    for sub_field, message in exc.problems:
        where = f" (field '{sub_field}')" if sub_field else ""
        problems.add(at, f"names {what} {exc.file} with a problem{where}: {message}")


def _grippers(path, base, raw, problems):
    from ..models.grippers import build_models
    from ..models.specs import load_gripper
    out, seen = [], {}
    for i, item in enumerate(_entries(raw, "gripper", problems)):
        at = f"gripper[{i}]"
        entry = parse(GripperEntry, item, problems, at)
        if entry is None:
            continue
        file = inside(base, entry.spec, f"{at}.spec", problems, folder=ROOT_FOLDER)
        if file is None:
            continue
        try:
            spec = load_gripper(file)
        except SpecError as exc:
            _nested(problems, exc, f"{at}.spec", "a gripper spec")
            continue
        models = build_models(spec)
        if entry.variants is not None:
            names = [m.name for m in models]
            if not entry.variants:
                problems.add(f"{at}.variants", f"must name at least one variant (omit it to keep all: "
                                                f"{', '.join(names)}); got []")
                continue
            unknown = [v for v in entry.variants if v not in names]
            if unknown:
                problems.add(f"{at}.variants", f"must name variants of {spec.name}: {', '.join(names)}; "
                                                f"unknown: {', '.join(unknown)}")
                continue
            models = [m for m in models if m.name in entry.variants]
        for m in models:
            if m.key in seen:
                problems.add(at, f"repeats variant {m.name} (same parameters as in {seen[m.key]})")
            seen[m.key] = at
        out.append((spec, tuple(models)))
    return tuple(out)


def _routines(path, raw, problems):
    from ..sim.routines import ROUTINES, make_routine
    out, seen = [], {}
    for i, item in enumerate(_entries(raw, "routine", problems)):
        at = f"routine[{i}]"
        entry = parse(RoutineEntry, item, problems, at, known=("params",))
        if entry is None:
            continue
        if entry.name not in ROUTINES:
            import difflib
            near = difflib.get_close_matches(entry.name, list(ROUTINES), n=1, cutoff=0.6)
            problems.add(f"{at}.name", f"must be one of {', '.join(ROUTINES)}; got {entry.name!r}"
                         + (f"; did you mean '{near[0]}'?" if near else ""))
            continue
        table = item.get("params", {})
        if not isinstance(table, dict):
            problems.add(f"{at}.params", f"must be a table of routine parameters; got {table!r}")
            continue
        try:
            use = RoutineUse(make_routine(entry.name, table, file=path, prefix=f"{at}.params"), table)
        except SpecError as exc:
            problems.items.extend(exc.problems)
            continue
        if use.label in seen:
            problems.add(at, f"repeats {seen[use.label]} (same routine and parameters)")
        seen[use.label] = at
        out.append(use)
    return tuple(out)


def _object_sets(base, files, problems):
    from ..models.objects import ObjectSet, generate
    from ..models.specs import load_any
    out, names = [], {}
    for i, rel in enumerate(files):
        at = f"objects[{i}]"
        file = inside(base, rel, at, problems, folder=ROOT_FOLDER)
        if file is None:
            continue
        try:
            spec = load_any(file)
        except SpecError as exc:
            _nested(problems, exc, at, "an object set")
            continue
        if not isinstance(spec, ObjectSet):
            problems.add(at, f"must name an object set; {rel!r} is a gripper spec")
            continue
        if spec.name in names:
            problems.add(at, f"names object set {spec.name!r} again (already {names[spec.name]})")
            continue
        names[spec.name] = at
        out.append((spec, tuple(generate(spec))))
    return tuple(out)


# --- expansion ---------------------------------------------------------------------------------

@dataclass(frozen=True)
class TrialTask:
    trial_key: str
    payload: dict  # everything a worker needs (see run_payload); small and picklable


@dataclass(frozen=True)
class Expansion:
    tasks: tuple[TrialTask, ...]
    skipped: int  # trials of combinations the routine does not suit
    skipped_cells: tuple  # ((variant, object, routine, reason), ...)
    short_reach: tuple = ()  # ((variant, object, routine, why), ...): cells geometry says should miss

    def cells(self):
        """{(variant, object_set, object, routine): number of trials}, in plan order."""
        out = {}
        for t in self.tasks:
            p = t.payload
            cell = (p["variant"], p["object_set"], p["object"], p["routine"])
            out[cell] = out.get(cell, 0) + 1
        return out


def expand(campaign: Campaign) -> Expansion:
    """Every suitable variant x object x routine x trial index, with stable keys and paired draws."""
    tasks, skipped, short = [], [], []
    draws = {}  # pair_key -> (seed, perturbation): the same for every variant
    for spec, models in campaign.grippers:
        for model in models:
            for object_set, instances in campaign.object_sets:
                for inst in instances:
                    for use in campaign.routines:
                        reason = use.routine.unsuitable(model, inst)
                        if reason:
                            skipped.append((model.name, inst.name, use.routine.name, reason))
                            continue
                        why = use.routine.reach(model, inst)
                        if why:
                            short.append((model.name, inst.name, use.routine.name, why))
                        for trial in range(campaign.trials):
                            pair_key = stable_hash(object_set.name, inst.name, use.routine.name,
                                                   normalised(use.routine.params), trial)
                            if pair_key not in draws:
                                rng = rng_for(campaign.seed, pair_key)
                                draws[pair_key] = (int(rng.integers(0, 2**31 - 1)), campaign.perturbation.draw(rng))
                            seed, pert = draws[pair_key]
                            trial_key = stable_hash(model.key, pair_key)
                            tasks.append(TrialTask(trial_key, {
                                "trial_key": trial_key, "pair_key": pair_key, "trial": trial, "seed": seed,
                                "plan_index": len(tasks), "gripper_file": str(spec.file), "gripper": spec.name,
                                "variant": model.name, "object_set_file": str(object_set.file),
                                "object_set": object_set.name, "object": inst.name,
                                "routine": use.routine.name, "routine_table": use.table,
                                "perturbation": normalised(pert), "physics": campaign.physics.record()}))
    return Expansion(tuple(tasks), len(skipped) * campaign.trials, tuple(skipped), tuple(short))


# --- workers -----------------------------------------------------------------------------------

_CACHE: dict = {}  # per process: loaded variants, instances, routines and a physics world per setting


def _cached(key, make):
    if key not in _CACHE:
        _CACHE[key] = make()
    return _CACHE[key]


def _variant(file, name):
    from ..models.grippers import build_models
    from ..models.specs import load_gripper
    models = _cached(("gripper", file), lambda: {m.name: m for m in build_models(load_gripper(file))})
    return models[name]


def _instance(file, name):
    from ..models.objects import generate
    from ..models.specs import load_any
    return _cached(("objects", file), lambda: {i.name: i for i in generate(load_any(file))})[name]


def run_payload(payload: dict) -> dict:
    """Run one planned trial (in a worker process) and return its journal row."""
    from ..sim.routines import make_routine
    from ..sim.trial import Perturbation, run_trial
    from ..sim.engines import open_world
    model = _variant(payload["gripper_file"], payload["variant"])
    inst = _instance(payload["object_set_file"], payload["object"])
    routine = _cached(("routine", payload["routine"], json.dumps(payload["routine_table"], sort_keys=True)),
                      lambda: make_routine(payload["routine"], payload["routine_table"]))
    settings = payload_settings(payload)
    world = _cached(("world", settings), lambda: open_world(settings))
    row = run_trial(model, inst, routine, Perturbation(**payload["perturbation"]), seed=payload["seed"],
                    settings=settings, world=world)
    return {**failure_inputs(payload), **row}


def physics_settings(table, file="<physics>") -> PhysicsSettings:
    """PhysicsSettings from a [physics] table (file units); SpecError on bad input."""
    problems = Problems(file)
    parsed = parse(PhysicsTable, table, problems)
    problems.raise_if_any()
    return parsed.settings()


def payload_settings(payload: dict) -> PhysicsSettings:
    """The physics settings a payload runs with (payloads of runs made before settings were
    recorded run with the settings of that time: 100 iterations at 240 Hz)."""
    return PhysicsSettings(**payload.get("physics", {"solver_iterations": 100, "step_hz": 240}))


def failure_inputs(payload: dict) -> dict:
    """The trial's inputs as row columns: they complete the row of a trial that errored or timed out."""
    from ..sim.trial import Perturbation
    keep = ("trial_key", "pair_key", "trial", "seed", "plan_index", "gripper", "variant", "object_set",
            "object", "routine")
    return {**{k: payload[k] for k in keep}, **Perturbation(**payload["perturbation"]).columns()}
