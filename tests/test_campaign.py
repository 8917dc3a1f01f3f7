"""Campaign files, their expansion into paired trials, and running them into run folders.

Malformed campaigns are written to tmp_path with `root` pointing at the repository (so they can
name the demo specs); each must give one SpecError naming the field, exit code 2 from the CLI and
no run folder. The run tests use a tiny campaign (one object, one routine, two variants, two
trials) in tmp_path.
"""

from __future__ import annotations

import json
import shutil
import sqlite3
from pathlib import Path

import pandas as pd
import pytest

from harness.campaigns.campaign import PerturbationRanges, expand, load_campaign
from harness.commands.campaign import run_campaign
from harness.cli import main
from journal_driver import ctrl_c_as_in_a_terminal
from harness.errors import HarnessError, SpecError
from harness.models.fields import Span
from harness.campaigns.journal import Journal, read_events
from harness.campaigns.runs import export, load_run, read_campaign
from harness.seeds import rng_for

REPO = Path(__file__).resolve().parents[1]
DUO = "models/grippers/duo-roller.toml"

GOOD = f"""
name = "case"
root = "{REPO}"
seed = 3
trials = 2
objects = ["models/objects/lab-cell.toml"]

[[gripper]]
spec = "{DUO}"
variants = ["duo-roller[finger.roller.radius_mm=12]"]

[[gripper]]
spec = "models/grippers/pad-jaw.toml"

[[routine]]
name = "draw-in-grasp"

[[routine]]
name = "pinch-lift"
params = {{ hold_s = 0.5 }}

[perturbation]
object_xy_mm = 2
friction_scale = [0.8, 1.2]
"""


def write(tmp_path, text, name="c.toml"):
    path = tmp_path / name
    path.write_text(text)
    return path


def spoil(old, new):
    assert old in GOOD, f"the good campaign no longer has {old!r}"
    return GOOD.replace(old, new)


BAD = {
    "unknown gripper file": (spoil(f'spec = "{DUO}"', 'spec = "models/grippers/nope.toml"'),
                             "gripper[0].spec", "not found"),
    "gripper path leaves the root": (spoil(f'spec = "{DUO}"', 'spec = "../outside.toml"'),
                                     "gripper[0].spec", "must name a path inside the campaign's root"),
    "empty variants list": (spoil('variants = ["duo-roller[finger.roller.radius_mm=12]"]', "variants = []"),
                            "gripper[0].variants", "at least one variant"),
    "unknown variant": (spoil("radius_mm=12]", "radius_mm=13]"), "gripper[0].variants",
                        "unknown: duo-roller[finger.roller.radius_mm=13]"),
    "same variant twice": (GOOD + f'\n[[gripper]]\nspec = "{DUO}"\n', "gripper[2]", "repeats variant"),
    "negative trials": (spoil("trials = 2", "trials = -4"), "trials", "a whole number > 0"),
    "zero trials": (spoil("trials = 2", "trials = 0"), "trials", "a whole number > 0"),
    "fractional trials": (spoil("trials = 2", "trials = 2.5"), "trials", "a whole number"),
    "range low above high": (spoil("[0.8, 1.2]", "[1.2, 0.8]"), "perturbation.friction_scale", "low <= high"),
    "range not positive": (spoil("object_xy_mm = 2", "object_xy_mm = 2\nmass_scale = [0, 1]"),
                           "perturbation.mass_scale", "> 0"),
    "yaw out of range": (spoil("object_xy_mm = 2", "object_xy_mm = 2\nyaw_deg = 400"),
                         "perturbation.yaw_deg", "<= 180"),
    "unknown routine": (spoil('name = "draw-in-grasp"', 'name = "draw-in"'), "routine[0].name",
                        "did you mean 'draw-in-grasp'?"),
    "bad routine parameter": (spoil("hold_s = 0.5", "hold_s = -1"), "routine[1].params.hold_s", "> 0"),
    "unknown routine parameter": (spoil("hold_s = 0.5", "hodl_s = 0.5"), "routine[1].params.hodl_s",
                                  "did you mean 'hold_s'?"),
    "same routine twice": (GOOD + '\n[[routine]]\nname = "draw-in-grasp"\n', "routine[2]", "repeats routine[0]"),
    "no routines": (GOOD.split("[[routine]]")[0] + "[perturbation]\nobject_xy_mm = 1\n", "routine",
                    "at least one [[routine]]"),
    "empty stop table": (GOOD + "\n[stop]\n", "stop", "must give 'hours', 'target_width' or both"),
    "target width not below 1": (GOOD + "\n[stop]\ntarget_width = 1.5\n", "stop.target_width", "< 1"),
    "negative hours": (GOOD + "\n[stop]\nhours = -1\n", "stop.hours", "> 0"),
    "min trials above trials": (GOOD + "\n[stop]\ntarget_width = 0.2\nmin_trials = 10\n", "stop.min_trials",
                                "at most 'trials' (2)"),
    "physics step not a multiple of the control rate": (GOOD + "\n[physics]\nstep_hz = 500\n", "physics.step_hz",
                                                        "multiple of the control rate 60 Hz"),
    "too few solver iterations": (GOOD + "\n[physics]\nsolver_iterations = 2\n", "physics.solver_iterations",
                                  ">= 10"),
    "unknown physics key": (GOOD + "\n[physics]\niterations = 200\n", "physics.iterations",
                            "did you mean 'solver_iterations'?"),
    "unknown key": (spoil("trials = 2", "trails = 2"), "trails", "did you mean 'trials'?"),
    "missing seed": (spoil("seed = 3\n", ""), "seed", "is missing"),
    "object set is a gripper spec": (spoil('objects = ["models/objects/lab-cell.toml"]',
                                           f'objects = ["{DUO}"]'), "objects[0]", "must name an object set"),
    "no object sets": (spoil('objects = ["models/objects/lab-cell.toml"]', "objects = []"), "objects",
                       "at least one object set"),
    "root is not a folder": (spoil(f'root = "{REPO}"', 'root = "no-such-folder"'), "root",
                             "existing folder"),
}


@pytest.mark.parametrize("case", sorted(BAD))
def test_malformed_campaign_is_one_spec_error_naming_the_field(tmp_path, case, capsys):
    text, field, words = BAD[case]
    path = write(tmp_path, text)
    with pytest.raises(SpecError) as err:
        load_campaign(path)
    message = str(err.value)
    assert f"field '{field}'" in message and words in message, message
    assert all(line.startswith(str(path)) for line in message.splitlines())
    out = tmp_path / "runs"
    assert main(["run", str(path), "--out", str(out)]) == 2
    assert not out.exists()
    assert "Traceback" not in capsys.readouterr().err


def test_every_problem_is_listed_at_once(tmp_path):
    text = spoil("trials = 2", "trials = 0").replace("[0.8, 1.2]", "[2, 1]").replace('"pinch-lift"', '"pinch"')
    with pytest.raises(SpecError) as err:
        load_campaign(write(tmp_path, text))
    fields = [f for f, _ in err.value.problems]
    assert fields == ["trials", "perturbation.friction_scale", "routine[1].name"], fields


def test_a_problem_inside_a_named_gripper_spec_is_reported_under_the_campaign_field(tmp_path):
    spec = (REPO / DUO).read_text().replace("radius_mm = 12\n", "radius_mm = -12\n", 1)
    (tmp_path / "bad.toml").write_text(spec)
    text = spoil(f'root = "{REPO}"', 'root = "."').replace(f'spec = "{DUO}"', 'spec = "bad.toml"')
    text = text.replace("models/objects/lab-cell.toml", "set.toml")
    shutil.copy(REPO / "models/objects/lab-cell.toml", tmp_path / "set.toml")
    with pytest.raises(SpecError) as err:
        load_campaign(write(tmp_path, text))
    assert "field 'gripper[0].spec' names a gripper spec" in str(err.value)
    assert "finger.roller.radius_mm" in str(err.value)


# --- expansion ---------------------------------------------------------------------------------

def test_expansion_skips_unsuited_combinations_and_counts_them(tmp_path):
    plan = expand(load_campaign(write(tmp_path, GOOD)))
    n_objects = 14  # lab-cell instances
    assert plan.skipped == n_objects * 2  # pad-jaw has no rollers: draw-in-grasp skipped, 2 trials each
    assert len(plan.tasks) == (2 * n_objects + n_objects) * 2
    assert all(r == "draw-in-grasp" and v == "pad-jaw" for v, _, r, _ in plan.skipped_cells)


def test_keys_are_stable_and_draws_are_paired_across_variants(tmp_path):
    text = spoil('variants = ["duo-roller[finger.roller.radius_mm=12]"]', "")
    a = expand(load_campaign(write(tmp_path, text)))
    b = expand(load_campaign(write(tmp_path, text, "again.toml")))
    assert [t.trial_key for t in a.tasks] == [t.trial_key for t in b.tasks]
    assert len({t.trial_key for t in a.tasks}) == len(a.tasks)
    assert all(len(t.trial_key) == 16 and int(t.trial_key, 16) >= 0 for t in a.tasks)
    by_pair = {}
    for t in a.tasks:
        by_pair.setdefault(t.payload["pair_key"], []).append(t.payload)
    assert max(len(v) for v in by_pair.values()) == 4  # 3 duo-roller variants + pad-jaw (pinch-lift)
    for payloads in by_pair.values():
        assert len({p["variant"] for p in payloads}) == len(payloads)
        assert all(p["seed"] == payloads[0]["seed"] and p["perturbation"] == payloads[0]["perturbation"]
                   for p in payloads)
    assert len({json.dumps(v[0]["perturbation"]) for v in by_pair.values()}) == len(by_pair)
    # another campaign seed: same keys, other draws
    c = expand(load_campaign(write(tmp_path, text.replace("seed = 3", "seed = 4"), "other.toml")))
    assert [t.trial_key for t in c.tasks] == [t.trial_key for t in a.tasks]
    assert [t.payload["seed"] for t in c.tasks] != [t.payload["seed"] for t in a.tasks]


def test_perturbation_draws_stay_in_their_ranges():
    ranges = PerturbationRanges(object_xy=0.002, yaw=0.3, friction_scale=Span(0.8, 1.2),
                                mass_scale=Span(0.9, 1.0), wrist_xy=0.001, wrist_z=0.002, wrist_tilt=0.05,
                                actuator_lag=0.02, speed_noise=0.1)
    draws = [ranges.draw(rng_for(1, i)) for i in range(300)]
    assert all((d.object_dx ** 2 + d.object_dy ** 2) ** 0.5 <= 0.002 for d in draws)
    assert all(abs(d.object_yaw) <= 0.3 and 0.8 <= d.friction_scale <= 1.2 and 0.9 <= d.mass_scale <= 1.0
               and abs(d.wrist_dz) <= 0.002 and abs(d.wrist_tilt) <= 0.05 and 0 <= d.actuator_lag <= 0.02
               for d in draws)
    assert max(d.friction_scale for d in draws) > 1.15 and min(d.friction_scale for d in draws) < 0.85
    assert PerturbationRanges().draw(rng_for(1, 0)) == PerturbationRanges().draw(rng_for(1, 1))  # nominal


# --- running -----------------------------------------------------------------------------------

TINY = """
name = "tiny"
seed = 11
trials = 2
objects = ["set.toml"]
timeout_s = 60

[[gripper]]
spec = "duo.toml"
variants = ["duo-roller[finger.roller.radius_mm=10]", "duo-roller[finger.roller.radius_mm=14]"]

[[routine]]
name = "draw-in-grasp"

[perturbation]
object_xy_mm = 2
yaw_deg = 30
friction_scale = [0.8, 1.2]

# these tests check records, workers and resumption, not physics: light numerics keep them quick
[physics]
solver_iterations = 50
step_hz = 480
"""

SET = """
name = "one-vial"
seed = 5

[[object]]
name = "vial"
kind = "cylinder"
radius_mm = 8
height_mm = 45
mass_g = 12
friction = 0.7
"""


@pytest.fixture
def tiny(tmp_path):
    shutil.copy(REPO / DUO, tmp_path / "duo.toml")
    (tmp_path / "set.toml").write_text(SET)
    return write(tmp_path, TINY, "tiny.toml")


def _run(campaign, out, expect=0, **kw):
    code = run_campaign(campaign, out=out, progress=False, echo=lambda *a, **k: None, **kw)
    assert code == expect
    (folder,) = [p for p in Path(out).iterdir()] if "resume" not in kw else [Path(kw["resume"])]
    return folder


def _same_rows(a, b):
    pd.testing.assert_frame_equal(a.drop(columns="wall_s"), b.drop(columns="wall_s"))


def test_one_and_two_workers_give_identical_rows_and_resume_runs_only_the_rest(tiny, tmp_path):
    one = _run(tiny, tmp_path / "w1", workers=1)
    two = _run(tiny, tmp_path / "w2", workers=2)
    a, b = load_run(one), load_run(two)
    assert len(a) == 4 and sorted(a["trial_key"]) == sorted(expand(load_campaign(tiny)).tasks[i].trial_key
                                                             for i in range(4))
    _same_rows(a, b)
    # a run folder holding half the trials: resuming runs exactly the other half
    half = tmp_path / "half"
    half.mkdir()
    shutil.copy(one / "campaign.json", half / "campaign.json")
    with Journal(one, create=False) as full, Journal(half) as part:
        kept = full.rows()[:2]
        for row in kept:
            part.add(row)
    _run(tiny, tmp_path / "unused", workers=2, resume=half)
    ran = [e["trial_key"] for e in read_events(half / "events.jsonl") if e["event"] == "trial"]
    assert sorted(ran) == sorted(set(a["trial_key"]) - {r["trial_key"] for r in kept})
    _same_rows(load_run(half), a)
    with sqlite3.connect(half / "journal.sqlite") as db:
        assert db.execute("SELECT COUNT(*), COUNT(DISTINCT trial_key) FROM trials").fetchone() == (4, 4)
    # resuming a finished run runs nothing
    _run(tiny, tmp_path / "unused", workers=1, resume=half)
    assert [e["todo"] for e in read_events(half / "events.jsonl") if e["event"] == "run_start"] == [2, 0]


def test_resume_refuses_a_run_of_another_campaign(tiny, tmp_path):
    folder = tmp_path / "other"
    folder.mkdir()
    (folder / "campaign.json").write_text(json.dumps({"campaign_hash": "0" * 16, "file": "x.toml"}))
    with pytest.raises(HarnessError, match="different campaign"):
        run_campaign(tiny, resume=folder, progress=False, echo=lambda *a, **k: None)
    assert not (folder / "journal.sqlite").exists()


def test_run_folder_records_campaign_and_load_run_types_columns(tiny, tmp_path):
    folder = _run(tiny, tmp_path / "runs", workers=2)
    assert folder.name.startswith("tiny-") and folder.name.endswith("Z")
    record = read_campaign(folder)
    assert record["planned_trials"] == 4 and record["environment"]["libraries"]["pybullet"]
    assert record["environment"]["machine"]["cpus"] >= 1 and record["trials"] == 2
    df = load_run(folder)
    for col in ("trial_key", "pair_key", "gripper", "variant", "object", "object_set", "routine", "outcome"):
        assert pd.api.types.is_string_dtype(df[col]), col
    assert df["success"].dtype == bool
    for col in ("slip_mm", "slip_peak_mm_s", "drift_mm", "drift_deg", "epsilon", "wall_s", "pert_object_dx_mm"):
        assert df[col].dtype == "float64", col
    assert pd.api.types.is_integer_dtype(df["seed"])
    assert set(df["gripper"]) == {"duo-roller"} and set(df["object_set"]) == {"one-vial"}
    assert df.groupby("pair_key")["variant"].nunique().eq(2).all()
    csv = pd.read_csv(export(folder, "csv"), dtype={"trial_key": str, "pair_key": str})
    assert list(csv["trial_key"]) == list(df["trial_key"])
    parquet = pd.read_parquet(export(folder, "parquet"))
    pd.testing.assert_frame_equal(parquet, df, check_dtype=False)


def test_timed_out_trials_are_complete_rows(tiny, tmp_path):
    text = TINY.replace("timeout_s = 60", "timeout_s = 0.001").replace(
        '"duo-roller[finger.roller.radius_mm=10]", ', "").replace("trials = 2", "trials = 1")
    from harness.commands.campaign import ERRORED
    folder = _run(write(tmp_path, text, "fast.toml"), tmp_path / "runs", workers=1, expect=ERRORED)
    df = load_run(folder)
    assert list(df["outcome"]) == ["timeout"]
    row = df.iloc[0]
    assert row["variant"] == "duo-roller[finger.roller.radius_mm=14]" and row["object"] == "vial"
    assert row["routine"] == "draw-in-grasp" and not row["success"] and "time limit" in row["error"]


def test_check_reads_a_campaign_as_a_campaign(tiny, tmp_path, capsys):
    # (it read campaigns as object sets: "field 'perturbation' is not a known key")
    assert main(["check", str(tiny)]) == 0
    assert "campaign of 4 trial(s), 0 skipped as unsuited" in capsys.readouterr().out
    bad = write(tmp_path, tiny.read_text().replace("trials = 2", "trials = -1"), "bad.toml")
    assert main(["check", str(bad)]) == 2
    assert "'trials'" in capsys.readouterr().err


def test_cli_plan_and_export(tiny, tmp_path, capsys):
    assert main(["plan", str(tiny), "--workers", "2"]) == 0
    out = capsys.readouterr().out
    assert "2 cell(s), 4 trial(s); none skipped." in out and "Estimated run time with 2 worker(s)" in out
    assert main(["export", str(tmp_path / "nowhere"), "--to", "csv"]) == 2


# --- stopping rules ----------------------------------------------------------------------------

def _fake_tasks(cells, trials, places=("o",)):
    from harness.campaigns.campaign import TrialTask
    return [TrialTask(f"{c}-{o}-{i}", {"variant": c, "object_set": "s", "object": o, "routine": "r", "i": i,
                                       "pair_key": f"{o}-{i}", "key": f"{c}-{o}-{i}", "seed": i})
            for c in cells for o in places for i in range(trials)]


def test_widest_interval_first_and_a_narrow_cell_closes():
    from harness.commands.campaign import Scheduler
    sched = Scheduler(_fake_tasks("abc", 40), target_width=0.35, min_trials=5)
    handed = []
    for key, payload in sched:
        handed.append(payload["variant"])
        # a always succeeds (interval narrows fast), b alternates, c always fails
        win = {"a": True, "b": payload["i"] % 2 == 0, "c": False}[payload["variant"]]
        sched.record({**payload, "outcome": "held" if win else "dropped", "success": win})
    assert handed[:3] == ["a", "b", "c"]  # untried cells first (width 1), in plan order
    counts = {c: handed.count(c) for c in "abc"}
    # Wilson 95 % interval (Newcombe 1998, method 3), worked by hand: with k = n its width is
    # z^2 / (n + z^2), <= 0.35 from n = 8 (z = 1.96); at k = n / 2 it is 2z sqrt(1/(4n) + z^2/(4n^2)) /
    # (1 + z^2/n): 0.3473 at n = 28, 0.3588 at n = 26 (n = 27, k = 14: 0.3527)
    assert counts == {"a": 8, "b": 28, "c": 8}, counts
    assert all(sched.closed(c) for c in sched.cells)


def test_without_a_target_trials_come_in_rounds_of_pairs_and_a_spent_budget_hands_out_none():
    import time

    from harness.commands.campaign import Scheduler
    tasks = _fake_tasks("ab", 3, places=("o", "p"))
    # rounds over pair keys: every place's first pair (both variants), then every place's second, ...
    assert [k for k, _ in Scheduler(tasks)] == [f"{v}-{o}-{i}" for i in range(3) for o in "op" for v in "ab"]
    assert list(Scheduler(tasks, deadline=time.monotonic() - 1)) == []
    done = [{**tasks[0].payload, "outcome": "held", "success": True}]
    sched = Scheduler(tasks[1:], target_width=0.9, min_trials=1, done_rows=done * 2)
    assert sched.cells[("a", "s", "o", "r")][1:3] == [2, 2]  # finished rows of a resumed run count


def test_a_resumed_run_completes_its_broken_pairs_first():
    from harness.commands.campaign import Scheduler
    tasks = _fake_tasks("abc", 3, places=("o", "p"))
    done = [{**t.payload, "trial_key": t.trial_key, "outcome": "held", "success": True}
            for t in tasks if t.trial_key in ("a-p-1", "b-p-1", "a-o-0", "b-o-0", "c-o-0")]
    keys = [k for k, _ in Scheduler([t for t in tasks if t.trial_key not in {r["trial_key"] for r in done}],
                                    done_rows=done)]
    assert keys[0] == "c-p-1"  # the pair a Ctrl-C left without its third trial
    # then rounds: each place has one pair started; p's cell c has no finished trial yet (width 1), so
    # p's next pair (trial 0) goes before o's (trial 1)
    assert keys[1:7] == ["a-p-0", "b-p-0", "c-p-0", "a-o-1", "b-o-1", "c-o-1"]
    assert sorted(keys) == sorted(t.trial_key for t in tasks if t.trial_key not in {r["trial_key"] for r in done})


def test_a_budget_spent_mid_campaign_leaves_every_cell_within_one_round_and_only_complete_pairs():
    # Three variants x five places x 12 trials of a fast stand-in trial, in real worker processes; the
    # time budget runs out (deadline set to now) after 40 results, about a fifth of the 180 trials.
    # Place "e" suits only two variants (pairs of two).
    import time

    import dummy_tasks
    from harness.commands.campaign import Scheduler
    from harness.campaigns.executors import run_tasks
    tasks = [t for t in _fake_tasks("abc", 12, places="abcde") if not (t.payload["object"] == "e"
                                                                        and t.payload["variant"] == "c")]
    for t in tasks:
        t.payload["sleep_s"] = 0.01
    sched = Scheduler(tasks, deadline=time.monotonic() + 3600)
    rows = {}

    def on_result(key, row):
        rows[key] = {**next(t.payload for t in tasks if t.trial_key == key), **row}
        sched.record(rows[key])
        if len(rows) == 40:
            sched.deadline = time.monotonic()

    run_tasks(sched, dummy_tasks.trial, on_result=on_result, workers=2)
    assert 40 <= len(rows) < len(tasks) // 2
    counts = {}
    for r in rows.values():
        counts[(r["variant"], r["object"])] = counts.get((r["variant"], r["object"]), 0) + 1
    cells = {(t.payload["variant"], t.payload["object"]) for t in tasks}
    per_cell = [counts.get(c, 0) for c in cells]
    assert max(per_cell) - min(per_cell) <= 1, counts
    by_pair = {}
    for r in rows.values():
        by_pair.setdefault(r["pair_key"], set()).add(r["variant"])
    for key, variants in by_pair.items():
        assert variants == ({"a", "b"} if key.startswith("e") else {"a", "b", "c"}), (key, variants)


def test_campaign_with_a_target_width_stops_early(tiny, tmp_path):
    text = TINY.replace("trials = 2", "trials = 6") + "\n[stop]\ntarget_width = 0.9\nmin_trials = 2\n"
    folder = _run(write(tmp_path, text, "stop.toml"), tmp_path / "runs", workers=2)
    df = load_run(folder)
    assert 4 <= len(df) < 12  # each cell closes after 2 to 5 trials when its outcomes agree
    assert df.groupby("variant").size().min() >= 2


# --- interruption and crash safety --------------------------------------------------------------

def _start(campaign, out, *extra):
    import subprocess
    import sys
    return subprocess.Popen([sys.executable, "-m", "harness.cli", "run", str(campaign), "--out", str(out),
                             "--workers", "2", *extra], cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, preexec_fn=ctrl_c_as_in_a_terminal)


def _wait_for_rows(out, n, proc, limit=60):
    import time
    end = time.monotonic() + limit
    while time.monotonic() < end and proc.poll() is None:
        for journal in Path(out).glob("*/journal.sqlite"):
            try:
                with sqlite3.connect(journal) as db:
                    if db.execute("SELECT COUNT(*) FROM trials").fetchone()[0] >= n:
                        return journal.parent
            except sqlite3.OperationalError:  # the run is creating the file or its table
                pass
        time.sleep(0.05)
    raise AssertionError("the run did not record trials in time")


@pytest.fixture
def longer(tmp_path):
    shutil.copy(REPO / DUO, tmp_path / "duo.toml")
    (tmp_path / "set.toml").write_text(SET)
    # long enough (80 trials of about 0.1 s) that Ctrl-C lands mid-run
    return write(tmp_path, TINY.replace("trials = 2", "trials = 40"), "longer.toml")


def test_ctrl_c_exits_130_with_a_resume_hint_and_kill_9_loses_nothing_recorded(longer, tmp_path):
    import signal
    proc = _start(longer, tmp_path / "a")
    folder = _wait_for_rows(tmp_path / "a", 2, proc)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    assert f"--resume {folder}" in err
    proc = _start(longer, tmp_path / "b", "--resume", str(folder))
    import time
    time.sleep(1.5)
    proc.kill()  # SIGKILL at an arbitrary instant
    proc.communicate(timeout=60)
    assert run_campaign(longer, resume=folder, workers=2, progress=False, echo=lambda *a, **k: None) == 0
    with sqlite3.connect(folder / "journal.sqlite") as db:
        assert db.execute("SELECT COUNT(*), COUNT(DISTINCT trial_key) FROM trials").fetchone() == (80, 80)
    reference = _run(longer, tmp_path / "whole", workers=2)
    _same_rows(load_run(folder), load_run(reference))


# --- cluster backend ----------------------------------------------------------------------------

def test_dask_local_cluster_gives_the_same_rows(tiny, tmp_path):
    pytest.importorskip("dask.distributed")
    local = _run(tiny, tmp_path / "local", workers=1)
    cluster = _run(tiny, tmp_path / "dask", workers=2, executor="dask")
    _same_rows(load_run(cluster), load_run(local))
