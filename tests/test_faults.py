"""Fault injection at the campaign level, a journal read while it is written, hostile inputs through
the real command line, and simulation blow-ups.

Covered elsewhere and not repeated here:
- kill -9 at five seeded instants, resume after each, every trial exactly once:
  tests/test_journal.py (test_kill_9_at_five_random_instants_then_resume_records_every_trial_once,
  with dummy tasks); with real trials, kill -9 then resume equals an uninterrupted run, and Ctrl-C
  exits 130 with a resume hint: tests/test_campaign.py
  (test_ctrl_c_exits_130_with_a_resume_hint_and_kill_9_loses_nothing_recorded);
- a worker that segfaults, hangs, raises or exits, with 1 and 2 workers and on dask, the pool
  recovering, and workers of a killed driver exiting: tests/test_executors.py (with dummy tasks);
- a second process reading the journal while dummy tasks are written:
  tests/test_journal.py (test_a_second_process_reads_the_journal_while_a_run_writes_it); here the
  `summary` command reads a real campaign run;
- every malformed spec, object set and campaign in process, messages pinned: tests/test_bad_specs.py
  (CASES) and tests/test_campaign.py (BAD); here the same corpora go through the installed command
  in subprocesses, with a time limit, a private model cache and an empty working folder;
- an absurdly soft object sinking through the table: tests/test_trials.py.

What is added: real campaign trials that crash, hang or raise inside campaign workers (the worker
function is swapped in the parent with monkeypatch; spawned workers import the swap by name from
this module, as with tests/dummy_tasks.py, so no production hook is needed), `summary` run by a
second process while a run is writing, new malformed inputs (URDFs with a missing link, 100 MB junk
files as spec, mesh, URDF and campaign; generated in tmp_path, never committed), and light objects
crushed in a grip, which truly blow up, next to absurdly stiff contacts, which do not.
"""

from __future__ import annotations

import json
import os
import random
import subprocess
import sys
import time
import tomllib
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import dummy_tasks
import pytest
from physics_scenes import one_object, roller_hand
from test_bad_specs import CASES, MESH, PART_URDF_OBJECT, append, hand_urdf, make, put, write_base
from test_campaign import BAD, DUO, REPO, SET, TINY, _run, _start, _wait_for_rows, write
from test_trials import MODELS, gripper, same_row

import harness.campaigns.campaign
from harness.campaigns.campaign import expand, load_campaign, run_payload
from harness.commands.campaign import ERRORED
from harness.campaigns.journal import Journal
from harness.models.grippers import build_models
from harness.models.specs import load_gripper
from harness.sim.routines import make_routine
from harness.sim.trial import run_trial
from harness.sim.world import PhysicsSettings

TIMEOUT_S = 5.0  # per trial in the fault campaign; its trials take 0.1-0.5 s
FAULT_AT = {1: "segfault", 2: "hang", 4: "raise"}  # plan_index -> dummy_tasks.FAULTS
REASONS = {
    "segfault": ("error", "worker crashed (signal 11, SIGSEGV)"),
    "hang": ("timeout", f"ran past the time limit of {TIMEOUT_S:g} s"),
    "raise": ("error", "ValueError: injected failure"),
}
CLI = [sys.executable, "-m", "harness.cli"]
JUNK_BYTES = 100 * 2**20


def faulty_run_payload(payload):
    """The campaign worker function, with a fault injected into the trials FAULT_AT names."""
    fault = FAULT_AT.get(payload["plan_index"])
    if fault:
        dummy_tasks.FAULTS[fault]()
    return run_payload(payload)


def campaign_file(tmp_path, trials, timeout_s=60.0, name="c.toml"):
    """The tiny campaign of tests/test_campaign.py (2 variants x 1 vial x draw-in) with `trials` per cell."""
    (tmp_path / "duo.toml").write_text((REPO / DUO).read_text())
    (tmp_path / "set.toml").write_text(SET)
    text = TINY.replace("trials = 2", f"trials = {trials}").replace("timeout_s = 60", f"timeout_s = {timeout_s:g}")
    return write(tmp_path, text, name)


# --- faults inside a campaign's workers ---------------------------------------------------------

def test_campaign_records_a_segfault_a_hang_and_a_raise_and_completes_the_rest(tmp_path, monkeypatch):
    campaign = campaign_file(tmp_path, trials=4, timeout_s=TIMEOUT_S)
    monkeypatch.setattr(harness.campaigns.campaign, "run_payload", faulty_run_payload)
    started = time.monotonic()
    folder = _run(campaign, tmp_path / "runs", workers=2, expect=ERRORED)  # 3 of 8 trials failed to run
    assert time.monotonic() - started < 60
    with Journal(folder, create=False) as journal:
        rows = {row["plan_index"]: row for row in journal.rows()}
    payloads = [t.payload for t in expand(load_campaign(campaign)).tasks]
    assert sorted(rows) == list(range(len(payloads))) == list(range(8))  # every trial exactly once
    for index, fault in FAULT_AT.items():
        row, payload = rows.pop(index), payloads[index]
        assert (row["outcome"], row["error"]) == REASONS[fault], fault
        assert not row["success"]
        assert (row["variant"], row["object"], row["trial_key"]) == (payload["variant"], payload["object"],
                                                                       payload["trial_key"])
    # the others, run by the same workers or their replacements, equal the trial run here directly
    for index, row in rows.items():
        same_row(row, run_payload(payloads[index]))


# --- the journal read while it is written -------------------------------------------------------

def test_summary_in_a_second_process_reads_a_run_while_it_is_written(tmp_path):
    campaign = campaign_file(tmp_path, trials=30)  # 60 trials: several seconds, time for a few summaries
    run = _start(campaign, tmp_path / "runs")
    folder = _wait_for_rows(tmp_path / "runs", 1, run)
    seen = []  # (trials the summary counted, whether the run was still going when it returned)
    while run.poll() is None:
        done = subprocess.run([*CLI, "summary", str(folder), "--to", "json"], capture_output=True, text=True,
                              timeout=60, cwd=REPO)
        assert done.returncode == 0 and "Traceback" not in done.stderr, done.stderr
        seen.append((sum(cell["trials"] for cell in json.loads(done.stdout)), run.poll() is None))
    _, err = run.communicate(timeout=120)
    assert run.returncode == 0, err
    during = [n for n, running in seen if running]
    assert during, "no summary finished while the run was writing"
    assert during == sorted(during) and 1 <= during[0] and during[-1] <= 60


# --- malformed inputs through the command line --------------------------------------------------

def junk(rng_seed=7):
    return random.Random(rng_seed).randbytes(JUNK_BYTES)


@pytest.fixture
def scratch(tmp_path):
    """tmp_path, with the 100 MB junk files deleted afterwards (pytest keeps its last three tmp trees)."""
    yield tmp_path
    for f in tmp_path.rglob("*"):
        if f.is_file() and f.stat().st_size >= JUNK_BYTES:
            f.unlink()


def _urdf_folder_missing_link(folder):
    (folder / "parts").mkdir()
    (folder / "parts" / "palm.urdf").write_text(hand_urdf().replace('<child link="finger1"/>',
                                                                    '<child link="finger7"/>'))


# id: (base, edit of the spec text or None, make extra files (folder, junk bytes), what stderr must say)
NEW_SPECS = {
    "urdf_joint_names_missing_child_link": (
        "hand", None, lambda f, j: (f / "hand.urdf").write_text(
            hand_urdf().replace('<child link="finger1"/>', '<child link="finger9"/>')),
        "joint 'finger1_flex' of hand.urdf names a missing child link"),
    "urdf_joint_names_missing_parent_link": (
        "hand", None, lambda f, j: (f / "hand.urdf").write_text(
            hand_urdf().replace('<parent link="palm"/><child link="camera"/>',
                                '<parent link="base"/><child link="camera"/>')),
        "joint 'camera_mount' of hand.urdf names a missing parent link"),
    "urdf_folder_object_with_missing_link": (
        "lab", append(PART_URDF_OBJECT), lambda f, j: _urdf_folder_missing_link(f),
        "file palm.urdf: has joint 'finger1_flex' whose child link 'finger7' is missing"),
    "junk_100mb_as_mesh": (
        "stress", put("[[object]]", "file", '"meshes/junk.obj"', **MESH),
        lambda f, j: (f / "meshes" / "junk.obj").write_bytes(j), "'meshes/junk.obj' is truncated or damaged"),
    "junk_100mb_as_urdf": (
        "hand", None, lambda f, j: (f / "hand.urdf").write_bytes(j), "field 'urdf' must be a readable URDF"),
}


def _junk_spec(folder, data):
    folder.mkdir(parents=True)
    (folder / "junk.toml").write_bytes(data)
    return folder / "junk.toml"


def _cli(args, tmp_path, timeout=120):
    """Run the command in an empty working folder with a private model cache; both must stay empty."""
    work, cache = tmp_path / "cwd", tmp_path / "cache"
    work.mkdir(parents=True, exist_ok=True)
    env = {**os.environ, "GRASP_HARNESS_CACHE": str(cache)}
    done = subprocess.run([*CLI, *map(str, args)], capture_output=True, text=True, timeout=timeout, cwd=work,
                          env={**env, "PYTHONPATH": str(REPO)})
    assert "Traceback" not in done.stdout + done.stderr, done.stderr[-2000:]
    assert list(work.iterdir()) == [] and not (cache.exists() and any(cache.iterdir())), "something was written"
    return done


def _one_error_each(done, paths):
    assert done.returncode == 2, done.stderr[-2000:]
    errors = [line for line in done.stderr.splitlines() if line.startswith("error: ")]
    assert len(errors) == len(paths), errors
    for path in paths:
        assert sum(line.startswith(f"error: {path}: ") for line in errors) == 1, path


def test_every_malformed_spec_and_object_set_fails_check_with_exit_2_and_writes_nothing(scratch):
    tmp_path = scratch
    data = junk()
    files, says = [], []
    for case in CASES:
        if case.xfail is None:
            files.append(make(case, tmp_path / case.id))
            says.append(case.says)
    for name, (base, edit, extra, text) in NEW_SPECS.items():
        spec = write_base(tmp_path / name / "spec", base)
        if edit:
            spec.write_text(edit(spec.read_text()))
        extra(spec.parent, data)
        files.append(spec)
        says.append((text,))
    files.append(_junk_spec(tmp_path / "junk-spec", data))
    says.append(("cannot be read as TOML text",))
    assert len(files) >= 50
    started = time.monotonic()
    done = _cli(["check", *files], tmp_path)
    assert time.monotonic() - started < 60
    _one_error_each(done, files)
    assert "ok:" not in done.stdout
    for fragments in says:
        assert all(f in done.stderr for f in fragments), fragments


def test_every_malformed_campaign_fails_plan_with_exit_2_and_writes_nothing(scratch):
    tmp_path = scratch
    cases = {name: write(tmp_path, text, f"{k:02d}.toml") for k, (name, (text, *_)) in enumerate(sorted(BAD.items()))}
    cases["junk 100 MB"] = _junk_spec(tmp_path / "junk", junk())

    def plan(k, name, path):
        return name, path, _cli(["plan", path], tmp_path / f"plan-{k}", timeout=60)

    with ThreadPoolExecutor(2) as pool:  # two at a time: each is a fresh interpreter
        results = list(pool.map(plan, range(len(cases)), *zip(*cases.items())))
    for name, path, done in results:
        _one_error_each(done, [path])
        if name in BAD:
            assert f"field '{BAD[name][1]}'" in done.stderr, name


def test_run_of_a_campaign_naming_broken_files_exits_2_without_a_run_folder(scratch):
    tmp_path = scratch
    data = junk()
    stress = write_base(tmp_path / "models", "stress")
    stress.write_text(put("[[object]]", "file", '"meshes/junk.obj"', **MESH)(stress.read_text()))
    (stress.parent / "meshes" / "junk.obj").write_bytes(data)
    hand = write_base(tmp_path / "models" / "hand", "hand")
    (hand.parent / "hand.urdf").write_text(hand_urdf().replace('<child link="finger1"/>', '<child link="finger9"/>'))
    text = (f'name = "broken"\nseed = 1\ntrials = 1\nobjects = ["models/stress.toml"]\n\n'
            f'[[gripper]]\nspec = "models/hand/own-hand.toml"\n\n[[routine]]\nname = "pinch-lift"\n')
    campaign = write(tmp_path, text, "broken.toml")
    out = tmp_path / "runs"
    done = _cli(["run", campaign, "--out", out], tmp_path)
    _one_error_each(done, [campaign])
    assert "field 'objects[0]' names an object set" in done.stderr and "junk.obj" in done.stderr
    assert "field 'gripper[0].spec' names a gripper spec" in done.stderr and "missing child link" in done.stderr
    assert not out.exists()


# --- simulation blow-ups --------------------------------------------------------------------------

# A light object pinched by a hand hundreds of times heavier: the solver pushes it several mm into
# the fingers (measured 5-7 mm for 0.1 g to 1 g), a blow-up; the same object at a normal mass is
# gripped sanely (control). Measured: the pad-jaw (44 N) closing at 60 mm/s on a 10 mm sphere:
# 0.3 g invalid, 3 g and 30 g held (at its own 36 mm/s the 0.3 g sphere is held: the blow-up comes
# from the impact); the duo-roller on a 45 mm vial: 0.3 g invalid, 12 g ejected (a valid outcome).
def _fast_jaw():
    raw = tomllib.loads((MODELS / "grippers" / "pad-jaw.toml").read_text())
    raw["jaw"]["speed_mm_s"] = 60
    return build_models(load_gripper(MODELS / "grippers" / "pad-jaw.toml", raw))[0]


LIGHT = [
    (_fast_jaw, "pinch-lift", "sphere", dict(radius_mm=10, friction=0.7), 0.3, 30.0),
    (lambda: gripper("duo-roller"), "draw-in-grasp", "cylinder", dict(radius_mm=8, height_mm=45, friction=0.7),
     0.3, 12.0),
]


@pytest.mark.parametrize("hand, routine, kind, shape, light, normal", LIGHT, ids=["jaw-sphere", "roller-vial"])
def test_a_light_object_crushed_in_a_grip_is_invalid_and_its_normal_twin_is_not(hand, routine, kind, shape, light,
                                                                                 normal):
    # The blow-up check is what is tested, so the scene is run where the engine does blow up: at
    # 240 Hz and 100 iterations a 0.3 g part under a full grip sinks 5+ mm into the fingers
    # (measured); at the finer default (480 Hz) the 0.3 g sphere is simply held.
    coarse = PhysicsSettings(step_hz=240, solver_iterations=100)
    rows = {m: run_trial(hand(), one_object(kind, mass_g=m, **shape), make_routine(routine), seed=0,
                         settings=coarse)
            for m in (light, normal)}
    assert rows[light]["outcome"] == "invalid" and not rows[light]["success"]
    assert "interpenetration" in rows[light]["reason"]
    assert rows[normal]["outcome"] not in ("invalid", "error"), rows[normal]["reason"]


@pytest.mark.parametrize("stiffness, damping", [(1e9, 1e-3), (1e12, 60.0)])
def test_absurdly_stiff_roller_treads_act_as_rigid_contacts_not_blow_ups(stiffness, damping):
    # Not forced to be invalid: the engine turns contact stiffness and damping into an error
    # reduction and a constraint-force mixing per step (recalled from memory, Bullet's contact
    # solver), so a huge stiffness is a rigid contact and stays sane. Measured on the vial above
    # (12 g): held at 1e12 N/m, ejected at 1e9 N/m with little damping, as with the demo's 3e4 N/m.
    vial = one_object("cylinder", radius_mm=8, height_mm=45, mass_g=12, friction=0.7)
    row = run_trial(roller_hand(stiffness_n_m=stiffness, damping_n_s_m=damping), vial,
                    make_routine("draw-in-grasp"), seed=0)
    assert row["outcome"] in ("held", "ejected", "dropped", "missed", "stalled"), row["reason"]
    assert "interpenetration" not in row["reason"]
