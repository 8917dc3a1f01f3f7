"""Replay: a trial of a run made with 2 workers re-simulates to the journal's row bit for bit;
rendering reads state only; frames show the hand, the object and change over time; the trial plot
from the recorder is a readable PNG.

`tiny_run` (also used by test_report.py) runs an 8-trial campaign in a temporary folder.
"""

from __future__ import annotations

import argparse
import math
import shutil
from pathlib import Path

import numpy as np
import pytest

from harness.commands.campaign import run_campaign
from harness.errors import HarnessError
from harness.campaigns.journal import Journal
from harness.views.plots import TrialRecorder, trial_plot
from harness.views.replay import open_trial, replay, row_differences, simulate
from harness.commands.report import cmd_replay, register
from harness.campaigns.runs import load_run

REPO = Path(__file__).resolve().parents[1]

CAMPAIGN = """
name = "tiny-replay"
seed = 3
trials = 2
objects = ["set.toml"]
timeout_s = 60
gripper = [{ spec = "duo.toml", variants = ["duo-roller[finger.roller.radius_mm=12]"] }, { spec = "jaw.toml" }]
routine = [{ name = "pinch-lift" }]
perturbation = { object_xy_mm = 3, yaw_deg = 20, friction_scale = [0.8, 1.2], mass_scale = [0.9, 1.1], wrist_tilt_deg = 2, actuator_lag_s = 0.02 }
"""

OBJECTS = """
name = "two-things"
seed = 9
object = [{ name = "vial", kind = "cylinder", radius_mm = 9, height_mm = 50, mass_g = 14, friction = 0.6 },
          { name = "ball", kind = "sphere", radius_mm = 20, mass_g = 30, friction = 0.7 }]
"""


def tiny_run(folder: Path, workers=2, engine=None):
    """(run folder, campaign file) of the 8-trial campaign above, run with `workers` processes (on
    `engine` instead of the campaign's)."""
    folder.mkdir(parents=True, exist_ok=True)
    shutil.copy(REPO / "models/grippers/duo-roller.toml", folder / "duo.toml")
    shutil.copy(REPO / "models/grippers/pad-jaw.toml", folder / "jaw.toml")
    (folder / "set.toml").write_text(OBJECTS)
    campaign = folder / "tiny.toml"
    campaign.write_text(CAMPAIGN)
    out = folder / "runs"
    assert run_campaign(campaign, out=out, workers=workers, progress=False, echo=lambda *a, **k: None,
                        engine=engine) == 0
    (run,) = list(out.iterdir())
    return run, campaign


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    return tiny_run(tmp_path_factory.mktemp("replay"))[0]


def test_replay_reproduces_the_journal_bit_for_bit_for_trials_run_on_two_workers(run):
    df = load_run(run)
    assert len(df) == 8
    # one trial of each variant x object, from both workers' shares of the run
    sample = df.groupby(["variant", "object"]).head(1)["trial_key"].tolist()
    assert len(sample) == 4
    for key in sample:
        result = replay(run, key)
        assert result.source.logged is not None
        assert result.differences == [], key
        assert result.matches
        assert result.row["outcome"] == df.loc[df["trial_key"] == key, "outcome"].item()


def test_a_run_on_mujoco_names_its_engine_and_replays_bit_for_bit(tmp_path):
    from harness.campaigns.runs import read_campaign
    from harness.sim.engines import engine_available
    if not engine_available("mujoco"):
        pytest.skip("engine 'mujoco' is not installed (pip install -e '.[mujoco]')")
    run, _ = tiny_run(tmp_path, engine="mujoco")
    record = read_campaign(run)
    assert record["engine"].startswith("mujoco ") and record["physics"]["engine"] == "mujoco"
    df = load_run(run)
    assert len(df) == 8 and set(df["engine"]) == {"mujoco"}
    for key in df.groupby(["variant", "object"]).head(1)["trial_key"]:
        result = replay(run, key)  # reloads the campaign with the run's engine
        assert result.differences == [], key
    # the same trial on the other engine is another simulation
    other = replay(run, df["trial_key"].iloc[0], engine="pybullet")
    assert other.row["engine"] == "pybullet" and ("engine", "mujoco", "pybullet") in other.differences


def test_a_changed_bit_is_a_difference(run):
    with Journal(run, create=False) as journal:
        logged = journal.rows()[0]
    changed = dict(logged, slip_mm=math.nextafter(logged["slip_mm"], math.inf), wall_s=logged["wall_s"] + 1.0)
    assert row_differences(logged, changed) == [("slip_mm", logged["slip_mm"], changed["slip_mm"])]
    missing = dict(logged)
    del missing["outcome"]
    assert [c for c, *_ in row_differences(logged, missing)] == ["outcome"]


def test_rendered_frames_show_hand_and_object_change_over_time_and_leave_physics_alone(run, tmp_path):
    df = load_run(run)
    key = df.loc[df["variant"].str.startswith("duo-roller"), "trial_key"].iloc[0]
    frames, gif = tmp_path / "frames", tmp_path / "trial.gif"
    result = replay(run, key, frames=frames, gif=gif, every=6, width=160, height=120)
    assert result.matches and result.render_differences == []
    files = sorted(frames.glob("frame-*.png"))
    assert len(files) == result.frames_written >= 5
    from PIL import Image
    images = [np.asarray(Image.open(f).convert("L"), dtype=float) for f in files]
    assert images[0].shape == (120, 160)
    assert all(im.std() > 10.0 for im in images)  # not blank: a flat image has std 0
    assert np.abs(images[0] - images[-1]).mean() > 2.0  # the hand moved between first and last frame
    with Image.open(gif) as animation:
        assert animation.n_frames == result.frames_written


def test_segmentation_sees_hand_and_object_in_a_frame(run):
    from harness.views.replay import render, survey
    df = load_run(run)
    source = open_trial(run, df["trial_key"].iloc[0])
    first, surveyed = survey(source)
    again, renderer = render(source, surveyed, steps={0, len(surveyed) - 1}, width=160, height=120)
    assert row_differences(first, again) == []
    assert [f.step for f in renderer.frames] == [0, len(surveyed) - 1]
    for frame in renderer.frames:
        assert frame.object_pixels > 20 and frame.hand_pixels > 200, frame.step


def test_replay_command_prints_the_match_and_rejects_unknown_keys(run, capsys):
    parser = argparse.ArgumentParser()
    register(parser.add_subparsers(dest="command"))
    key = load_run(run)["trial_key"].iloc[-1]
    assert cmd_replay(parser.parse_args(["replay", str(run), key[:8]])) == 0
    out = capsys.readouterr().out
    assert f"trial {key}:" in out and "match: all" in out
    assert cmd_replay(parser.parse_args(["replay", str(run), "nope"])) == 2
    assert "is no trial of campaign 'tiny-replay'" in capsys.readouterr().err


def test_replay_needs_the_campaign_the_run_was_made_from(run, tmp_path):
    key = load_run(run)["trial_key"].iloc[0]
    campaign = tmp_path / "changed.toml"
    campaign.write_text((run.parent.parent / "tiny.toml").read_text().replace("seed = 3", "seed = 4"))
    for name in ("duo.toml", "jaw.toml", "set.toml"):
        shutil.copy(run.parent.parent / name, tmp_path / name)
    with pytest.raises(HarnessError, match="no longer resolves to the campaign"):
        open_trial(run, key, campaign)


def test_trial_plot_from_the_recorder_is_a_png(run, tmp_path):
    import matplotlib.image as mpimg
    df = load_run(run)
    source = open_trial(run, df["trial_key"].iloc[0])
    recorder = TrialRecorder()
    row = simulate(source, recorder)
    assert row_differences(source.logged, row) == []  # recording reads state only
    assert len(recorder) > 10 and recorder.phase_spans()[0][0] == "approach"
    image = mpimg.imread(trial_plot(recorder, tmp_path / "trial.png", title=source.title()))
    assert image.ndim == 3 and image.shape[0] > 400 and image.shape[1] > 400
    assert image[..., :3].std() > 0.05
