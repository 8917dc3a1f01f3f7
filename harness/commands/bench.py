"""`grasp-harness bench`: the harness's speed and memory, measured on this machine in one run.

Every figure is measured when the command runs; nothing is stored or assumed. The scenario is the
draw-in-grasp routine on the duo-roller demo gripper (the quickstart's 12 mm roller variant) and the
lab-cell objects, trial i on object i (cycling) with seed i and the nominal perturbation.

overhead
    Harness trials against bare pybullet on the same scene, steps and commands. Each trial runs
    once with the physics client wrapped in a recorder that keeps every call that changes the
    engine's state (resetSimulation, settings, loadURDF, changeDynamics, createConstraint,
    setJointMotorControl2, changeConstraint, resetBasePositionAndOrientation, resetJointState,
    stepSimulation, ...) with its arguments, in order; queries (get*, transforms) are not kept.
    This is the harness's own scene setup (World.reset, TrialContext) and control, step by step.
    Then, unwrapped and timed: `run_trial` in a reused world (as a worker runs it), and the bare
    replay of the recorded calls alone in the same client, which is the engine doing exactly the
    same work with no Python in between. After both, every body's pose must be bit-identical
    (`replay exact`), which shows the replay reproduced the trial. Each of the two is timed
    `REPEATS` times per trial, best time kept; overhead = sum of harness times / sum of bare times.
    Both include the scene setup (file loading and settling); `loop overhead` divides what is left
    after subtracting the replay time of the setup calls (all calls before the first control step)
    from both, for whoever optimises the step loop.
    With `--engine mujoco` the bare side is MuJoCo's own stepping: per run of steps on one compiled
    model with no state written in between, the state before its first step and each step's inputs
    (speed-constraint references, clutch efforts, gravity) are recorded; the replay sets them and
    calls mj_step, nothing else (scene building and compiling are harness time there). The final
    joint positions must match bit for bit. The other figures run the quickstart on that engine.
scaling
    Throughput (trials/s) of a batch of quickstart-campaign payloads run by `harness.campaigns.executors`
    with `harness.campaigns.campaign.run_payload` on 2 workers over 1 worker; whole-batch wall time, worker
    start-up (spawn, imports, model loading) included. The sums of the trials' own wall times
    (their `wall_s`) on 1 and on 2 workers are given beside it: when they differ, the two workers
    slowed each other down (shared caches, memory bandwidth, other work on the machine); what is
    left is start-up and idle time.
memory
    Resident memory of one executor worker (from /proc/self/statm: resident pages x page size, the
    current RSS, not the peak) after its 5,000th draw-in trial minus after its 100th (--quick:
    1,000th minus 100th). Not available where /proc is missing.
start-up
    Wall time of `grasp-harness --help` in a fresh subprocess, best of 5.
throughput
    The quickstart campaign run into a temporary folder with one worker per core (journal,
    scheduler and all): recorded trials / wall time / cores. --quick runs its first trial index of
    every cell only (trials = 1).

Each figure also records the 1-minute load average before and after it (the bench's own workers
raise it too); the table gives the load before the first figure: other work on the machine skews
every timing.

`--profile` prints cProfile's top functions (cumulative and own time) over the overhead trials.
"""

from __future__ import annotations

import copy
import json
import os
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

from ..constants import ENGINES

__all__ = ["register", "cmd_bench", "measure_overhead", "measure_scaling", "measure_memory",
           "measure_startup", "measure_throughput", "TARGETS", "REPEATS"]

REPO = Path(__file__).resolve().parents[2]
QUICKSTART = REPO / "campaigns" / "quickstart.toml"
GRIPPER = REPO / "models" / "grippers" / "duo-roller.toml"
OBJECTS = REPO / "models" / "objects" / "lab-cell.toml"
VARIANT = "duo-roller[finger.roller.radius_mm=12]"
ROUTINE = "draw-in-grasp"
REPEATS = 3
# name: (target, "max" if the figure must stay at or below it, "min" if at or above, unit)
TARGETS = {
    "overhead": (1.15, "max", "x"),
    "scaling": (1.8, "min", "x"),
    "memory": (50.0, "max", "MB"),
    "startup": (0.5, "max", "s"),
    "throughput": (None, None, "trials/s/core"),
}
FULL = {"trials": 14, "scaling_batch": 120, "memory": (100, 5000), "quickstart_trials": None}
QUICK = {"trials": 5, "scaling_batch": 16, "memory": (100, 1000), "quickstart_trials": 1}
# pybullet calls that change the engine's state; every other call (get*, transforms) is a query
_MUTATING = ("set", "reset", "change", "create", "load", "step", "remove", "apply", "restore", "save", "enable")


def register(subparsers):
    b = subparsers.add_parser("bench", help="measure overhead, scaling, memory, start-up and throughput",
                              description="Measure the harness on this machine: trial overhead over bare "
                                          "pybullet, 2-worker scaling, a worker's memory growth, --help "
                                          "start-up time and quickstart throughput, each against its target. "
                                          "The full run takes tens of minutes (memory: 5,000 trials).")
    b.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    b.add_argument("--trials", type=int, metavar="N", help=f"overhead trials (default {FULL['trials']}, "
                                                           f"--quick {QUICK['trials']})")
    b.add_argument("--quick", action="store_true", help="smaller batches: memory after 1,000 trials, one "
                                                        "quickstart trial per cell")
    b.add_argument("--only", action="append", choices=list(TARGETS), metavar="NAME",
                   help="measure only this figure (repeatable): " + ", ".join(TARGETS))
    b.add_argument("--engine", choices=ENGINES, default="pybullet",
                   help="physics engine to measure (default pybullet); overhead is against that engine's own "
                        "bare stepping")
    b.add_argument("--profile", action="store_true", help="also print cProfile's top functions of the "
                                                          "overhead trials")


# --- the scenario ------------------------------------------------------------------------------

def _scenario():
    from ..models.grippers import build_models
    from ..models.objects import generate
    from ..sim.routines import make_routine
    from ..models.specs import load_any, load_gripper
    model = next(m for m in build_models(load_gripper(GRIPPER)) if m.name == VARIANT)
    return model, tuple(generate(load_any(OBJECTS))), make_routine(ROUTINE)


class _Recorder:
    """Stands in for the pybullet module: passes every call through and keeps the mutating ones."""

    def __init__(self, module):
        self._module, self.calls = module, []

    def __getattr__(self, name):
        attr = getattr(self._module, name)
        if not callable(attr) or not name.startswith(_MUTATING):
            return attr

        def call(*args, **kwargs):
            kept = (attr, copy.deepcopy(args), copy.deepcopy(kwargs))
            out = attr(*args, **kwargs)
            self.calls.append((*kept, out))
            return out
        return call


def _replay(calls):
    for fn, args, kwargs, _ in calls:
        fn(*args, **kwargs)


def _poses(world):
    p, cid = world.p, world.cid
    return [p.getBasePositionAndOrientation(p.getBodyUniqueId(i, physicsClientId=cid), physicsClientId=cid)
            for i in range(p.getNumBodies(physicsClientId=cid))]


def _setup_calls(calls, settle_steps):
    """The calls before the first control step: everything up to the settle loop's last step, then the
    rest of the scene (the hand) up to the next stepSimulation."""
    steps = [i for i, c in enumerate(calls) if c[0].__name__ == "stepSimulation"]
    return calls[:steps[settle_steps]] if len(steps) > settle_steps else calls


class _BulletBare:
    """pybullet: the trial's state-changing engine calls, recorded and replayed in the same client."""

    def __init__(self):
        from ..sim.bullet_world import BulletWorld
        self.world = BulletWorld()

    def record(self, run):
        module = self.world.p
        self.world.p = _Recorder(module)
        try:
            row = run()
        finally:
            self.calls, self.world.p = self.world.p.calls, module
        self.steps = sum(c[0].__name__ == "stepSimulation" for c in self.calls)
        self.setup = _setup_calls(self.calls, self.steps - row["steps"])
        return row

    def state(self):
        return _poses(self.world)

    def replay(self, setup_only=False):
        _replay(self.setup if setup_only else self.calls)
        return _poses(self.world)


class _MujocoBare:
    """MuJoCo: per run of steps on one compiled model with no state written in between (a segment),
    the state before its first step and every step's inputs (speed-constraint references, clutch
    efforts, gravity); the bare replay sets them and steps, with the clutch hand-over (module doc of
    mujoco_world), and nothing else."""

    def __init__(self):
        from ..sim.mujoco_world import MujocoWorld

        class Recorded(MujocoWorld):
            recording = False

            def reset(self):
                super().reset()
                self.segments, self._fresh = [], True

            def _compile(self):
                self._fresh |= self._dirty
                super()._compile()

            def reset_pose(self, *args):
                super().reset_pose(*args)
                self._fresh = True

            def reset_joint(self, *args):
                super().reset_joint(*args)
                self._fresh = True

            def step(self, n=1):
                if not self.recording:
                    return super().step(n)
                self._compile()
                mj, m, d = self.mj, self.model, self.data
                for _ in range(n):
                    if self._fresh:
                        start = mj.MjData(m)
                        mj.mj_copyData(start, m, d)
                        self.segments.append((m, start, self._clutch, []))
                        self._fresh = False
                    self._prepare(m, d)
                    self.segments[-1][3].append((m.eq_data[:, 0].copy(), m.dof_frictionloss.copy(),
                                                 m.opt.gravity.copy()))
                    mj.mj_step(m, d)
                self._stale = True
                self.time += n * self.settings.time_step

        from ..sim.world import PhysicsSettings
        self.world = Recorded(PhysicsSettings(engine="mujoco"))

    def record(self, run):
        self.world.recording = True
        try:
            row = run()
        finally:
            self.world.recording = False
        self.segments = self.world.segments
        self.steps = sum(len(s[3]) for s in self.segments)
        self.settle = self.steps - row["steps"]  # steps before the hand was in the scene
        self.final = self.world.data.qpos.copy()
        return row

    def state(self):
        return self.world.data.qpos.tolist()

    def replay(self, setup_only=False):
        import mujoco
        copies = []
        for m, start, clutch, inputs in self.segments:  # allocated before the timed part below
            d = mujoco.MjData(m)
            mujoco.mj_copyData(d, m, start)
            copies.append(d)
        done = 0
        for (m, _, (slip, motor), inputs), d in zip(self.segments, copies):
            if setup_only and done >= self.settle:
                break
            for eq, effort, gravity in inputs:
                if len(slip):
                    d.qpos[motor] += d.qpos[slip]
                    d.qpos[slip] = 0.0
                m.eq_data[:, 0] = eq
                m.dof_frictionloss[:] = effort
                m.opt.gravity[:] = gravity
                mujoco.mj_step(m, d)
            done += len(inputs)
        return d.qpos.tolist()


def measure_overhead(trials, repeats=REPEATS, profile=None, engine="pybullet"):
    """Harness trials vs the bare replay of their engine work (see the module doc)."""
    from ..sim.trial import Perturbation, run_trial
    model, instances, routine = _scenario()
    harness_s = bare_s = setup_s = 0.0
    steps = ctrl_steps = 0
    exact = True
    outcomes = {}
    bare = _BulletBare() if engine == "pybullet" else _MujocoBare()
    world = bare.world
    try:
        for i in range(trials):
            inst = instances[i % len(instances)]
            ref = bare.record(lambda: run_trial(model, inst, routine, Perturbation(), seed=i, world=world))
            steps += bare.steps
            ctrl_steps += ref["steps"]
            outcomes[ref["outcome"]] = outcomes.get(ref["outcome"], 0) + 1
            best_h = best_b = best_s = float("inf")
            for _ in range(repeats):
                started = time.perf_counter()
                if profile is not None:
                    profile.enable()
                row = run_trial(model, inst, routine, Perturbation(), seed=i, world=world)
                if profile is not None:
                    profile.disable()
                best_h = min(best_h, time.perf_counter() - started)
                after_harness = bare.state()
                started = time.perf_counter()
                replayed = bare.replay()
                best_b = min(best_b, time.perf_counter() - started)
                exact &= replayed == after_harness and row["outcome"] == ref["outcome"]
                started = time.perf_counter()
                bare.replay(setup_only=True)
                best_s = min(best_s, time.perf_counter() - started)
            harness_s, bare_s, setup_s = harness_s + best_h, bare_s + best_b, setup_s + best_s
    finally:
        world.close()
    return {
        "value": harness_s / bare_s, "engine": engine, "trials": trials, "repeats": repeats, "steps": steps,
        "control_steps": ctrl_steps, "harness_s": harness_s, "bare_s": bare_s, "setup_s": setup_s,
        "loop_overhead": (harness_s - setup_s) / (bare_s - setup_s),
        "harness_steps_per_s": steps / harness_s, "bare_steps_per_s": steps / bare_s,
        "trials_per_s": trials / harness_s, "replay_exact": bool(exact), "outcomes": outcomes,
    }


# --- workers -----------------------------------------------------------------------------------

def _quickstart_tasks(trials=None, engine=None):
    """The quickstart campaign's tasks (on `engine` instead of its own); `trials` keeps only trial
    indexes below it."""
    from ..campaigns.campaign import expand, load_campaign
    if not QUICKSTART.is_file():
        from ..errors import HarnessError
        raise HarnessError(f"bench needs the repository's {QUICKSTART.relative_to(REPO)} (not found at {QUICKSTART})")
    tasks = expand(load_campaign(QUICKSTART, engine)).tasks
    return [t for t in tasks if trials is None or t.payload["trial"] < trials]


def _spread(tasks, n):
    """n tasks picked evenly across the plan, so every gripper, object and routine takes part."""
    step = len(tasks) / n
    return [tasks[int(k * step)] for k in range(n)]


def _run_batch(tasks, workers, fn=None):
    from ..campaigns.campaign import run_payload
    from ..campaigns.executors import run_tasks
    rows = []
    started = time.perf_counter()
    run_tasks(((t.trial_key, t.payload) for t in tasks), fn or run_payload, workers=workers,
              timeout=600.0, on_result=lambda key, row: rows.append(row))
    return time.perf_counter() - started, rows


def measure_scaling(batch, engine=None):
    tasks = _spread(_quickstart_tasks(engine=engine), batch)
    one, rows1 = _run_batch(tasks, 1)
    two, rows2 = _run_batch(tasks, 2)
    failed = sum(r.get("outcome") in ("error", "timeout") for r in rows1 + rows2)
    trial1, trial2 = (sum(r.get("wall_s", 0.0) for r in rows) for rows in (rows1, rows2))
    return {"value": one / two, "batch": batch, "one_worker_s": one, "two_workers_s": two,
            "one_worker_trials_per_s": batch / one, "two_workers_trials_per_s": batch / two,
            "trials_s_one_worker": trial1, "trials_s_two_workers": trial2, "failed_rows": failed,
            "cpus": os.cpu_count()}


def resident_mb():
    """This process's current resident set size (MB) from /proc/self/statm (pages x page size)."""
    with open("/proc/self/statm") as f:
        pages = int(f.read().split()[1])
    return pages * os.sysconf("SC_PAGE_SIZE") / 2**20


def memory_probe(payload):
    """Worker function of the memory figure: run_payload, then the worker's resident memory."""
    from ..campaigns.campaign import run_payload
    return {**run_payload(payload), "rss_mb": resident_mb()}


def measure_memory(first, last, engine=None):
    from ..campaigns.campaign import TrialTask
    if not Path("/proc/self/statm").exists():
        return {"value": None, "note": "no /proc/self/statm on this system"}
    base = [t for t in _quickstart_tasks(engine=engine) if t.payload["variant"] == VARIANT
            and t.payload["routine"] == ROUTINE]
    tasks = [TrialTask(f"{k}", {**base[k % len(base)].payload, "trial_key": f"{k}"}) for k in range(last)]
    seconds, rows = _run_batch(tasks, 1, memory_probe)
    order = sorted(rows, key=lambda r: int(r["trial_key"]))
    rss = [r.get("rss_mb") for r in order]
    if len(rss) != last or None in rss:
        failed = [r.get("error") for r in order if "rss_mb" not in r][:3]
        return {"value": None, "note": f"worker rows without memory: {failed}"}
    return {"value": rss[last - 1] - rss[first - 1], "after_first_mb": rss[first - 1],
            "after_last_mb": rss[last - 1], "first": first, "last": last, "seconds": seconds,
            "source": "/proc/self/statm (current RSS)"}


def measure_startup(runs=5):
    exe = shutil.which("grasp-harness")
    command = [exe, "--help"] if exe else [sys.executable, "-m", "harness.cli", "--help"]
    times = []
    for _ in range(runs):
        # no wait(timeout): it polls with sleeps of up to 50 ms and measured 64 ms for a 37 ms start;
        # a timer kills a child that hangs instead
        started = time.perf_counter()
        proc = subprocess.Popen(command, stdout=subprocess.DEVNULL)
        guard = threading.Timer(60.0, proc.kill)
        guard.start()
        code = proc.wait()
        times.append(time.perf_counter() - started)
        guard.cancel()
        if code != 0:
            raise subprocess.CalledProcessError(code, command)
    return {"value": min(times), "runs": runs, "command": " ".join(Path(command[0]).name if i == 0 else c
                                                                   for i, c in enumerate(command))}


def measure_throughput(trials=None, engine=None):
    """The quickstart campaign (or its first `trials` trial indexes per cell) with one worker per core."""
    from .campaign import run_campaign
    cores = os.cpu_count() or 1
    with tempfile.TemporaryDirectory(prefix="grasp-bench-") as tmp:
        campaign = QUICKSTART
        if trials is not None:
            text = QUICKSTART.read_text()
            text = "\n".join(f"trials = {trials}" if line.startswith("trials =") else
                             f"root = {json.dumps(str(REPO))}" if line.startswith("root =") else line
                             for line in text.splitlines())
            campaign = Path(tmp) / "quickstart.toml"
            campaign.write_text(text)
        started = time.perf_counter()
        code = run_campaign(campaign, workers=cores, out=Path(tmp) / "runs", progress=False,
                            echo=lambda *a, **k: None, engine=engine)
        seconds = time.perf_counter() - started
        from ..campaigns.runs import load_run
        (folder,) = (Path(tmp) / "runs").iterdir()
        rows = len(load_run(folder))
    return {"value": rows / seconds / cores, "trials": rows, "seconds": seconds, "cores": cores,
            "exit_code": code, "campaign": "quickstart" + ("" if trials is None else f" (trials = {trials})")}


# --- the command -------------------------------------------------------------------------------

def verdict(name, value):
    target, sense, _ = TARGETS[name]
    if target is None or value is None:
        return "-"
    ok = value <= target if sense == "max" else value >= target
    return "PASS" if ok else "MISS"


def _detail(name, r):
    if r.get("value") is None:
        return r.get("note", "")
    if name == "overhead":
        return (f"{r['trials']} trials ({r['trials_per_s']:.2f} trials/s on one core), {r['steps']} steps, "
                f"harness {r['harness_s']:.2f} s vs bare "
                f"{r['bare_s']:.2f} s (setup {r['setup_s']:.2f} s); loop overhead {r['loop_overhead']:.2f}; "
                f"replay exact: {'yes' if r['replay_exact'] else 'NO'}")
    if name == "scaling":
        return (f"{r['batch']} quickstart trials: 1 worker {r['one_worker_s']:.1f} s, 2 workers "
                f"{r['two_workers_s']:.1f} s (start-up included); trials alone {r['trials_s_one_worker']:.1f} s "
                f"vs {r['trials_s_two_workers']:.1f} s of worker time")
    if name == "memory":
        return (f"RSS after trial {r['last']} minus after trial {r['first']} ({r['after_first_mb']:.0f} -> "
                f"{r['after_last_mb']:.0f} MB, {r['source']}); took {r['seconds']:.0f} s")
    if name == "startup":
        return f"`{r['command']}`, best of {r['runs']}"
    return f"{r['campaign']}: {r['trials']} trials in {r['seconds']:.1f} s on {r['cores']} core(s)"


def run_bench(quick=False, trials=None, only=None, profile=None, log=None, engine="pybullet"):
    sizes = QUICK if quick else FULL
    measures = {
        "overhead": lambda: measure_overhead(trials or sizes["trials"], profile=profile, engine=engine),
        "scaling": lambda: measure_scaling(sizes["scaling_batch"], engine),
        "memory": lambda: measure_memory(*sizes["memory"], engine),
        "startup": measure_startup,
        "throughput": lambda: measure_throughput(sizes["quickstart_trials"], engine),
    }
    results = {}
    for name, measure in measures.items():
        if only and name not in only:
            continue
        if log:
            log(f"measuring {name} ...")
        started, load = time.perf_counter(), os.getloadavg()[0]
        r = measure()
        r["load_before"], r["load_after"] = load, os.getloadavg()[0]
        r["verdict"] = verdict(name, r["value"])
        r["target"], r["unit"], r["elapsed_s"] = TARGETS[name][0], TARGETS[name][2], time.perf_counter() - started
        results[name] = r
    return results


def cmd_bench(args):
    import cProfile
    import pstats
    from ..sim.engines import engine_version
    from ..table import format_table
    if args.trials is not None and args.trials < 1:
        from ..errors import SpecError
        raise SpecError("--trials", [("--trials", f"must be a whole number > 0; got {args.trials}")])
    profile = cProfile.Profile() if args.profile else None
    log = None if args.json else (lambda text: print(text, file=sys.stderr, flush=True))
    results = run_bench(args.quick, args.trials, args.only, profile, log, args.engine)
    if args.json:
        print(json.dumps({"quick": args.quick, "engine": args.engine, "results": results}, default=str))
    else:
        rows = []
        for name, r in results.items():
            target, sense, unit = TARGETS[name]
            value = r["value"]
            rows.append({"figure": name, "value": "n/a" if value is None else f"{value:.3g} {unit}",
                         "target": "-" if target is None else f"{'<=' if sense == 'max' else '>='} {target:g} {unit}",
                         "verdict": r["verdict"], "how": _detail(name, r)})
        print(f"engine: {engine_version(args.engine)}")
        print(format_table(rows))
        start = next(iter(results.values()))["load_before"]
        print(f"\n1-minute load average before the bench: {start:.2f} on {os.cpu_count()} core(s)"
              + ("; other work on the machine skews every timing" if start > 0.5 else ""))
        if args.quick and "memory" in results:
            print("\n--quick: memory after 1,000 trials minus after 100 (the target is for 5,000); smaller batches.")
    if profile is not None:
        stats = pstats.Stats(profile, stream=sys.stderr if args.json else sys.stdout)
        stats.sort_stats("cumulative").print_stats(20)
        stats.sort_stats("tottime").print_stats(20)
    return 0
