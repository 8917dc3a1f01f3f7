"""What a new user meets first: quiet commands and workers, routine parameters listed with their
units, a plan whose estimate covers every routine and object kind, and plain words when there is
nothing to do or skip."""

from __future__ import annotations

import shutil
import subprocess
import sys

import pytest
from test_campaign import DUO, REPO, SET, TINY, write

from harness.campaigns.campaign import expand, load_campaign
from harness.commands import campaign as campaign_commands
from harness.commands.routines import parameter_rows
from harness.sim.routines import ROUTINES, make_routine

BANNER = "build time"  # the engine's own start-up line


def _cli(*args):
    done = subprocess.run([sys.executable, "-m", "harness.cli", *map(str, args)], cwd=REPO, capture_output=True,
                          text=True, timeout=300)
    return done.returncode, done.stdout + done.stderr


# --- the engine's banner ---------------------------------------------------------------------------

def test_try_prints_its_row_and_no_engine_banner():
    code, out = _cli("try", "models/grippers/pad-jaw.toml", "models/objects/lab-cell.toml", "--object", "vial-0",
                     "--routine", "pinch-lift")
    assert code == 0 and "outcome" in out
    assert BANNER not in out


def test_workers_print_no_banner_and_a_finished_run_resumed_says_there_is_nothing_to_do(tmp_path):
    shutil.copy(REPO / DUO, tmp_path / "duo.toml")
    (tmp_path / "set.toml").write_text(SET)
    campaign = write(tmp_path, TINY, "tiny.toml")
    code, out = _cli("run", campaign, "--out", tmp_path / "runs", "--workers", "2")
    assert code == 0 and BANNER not in out
    (folder,) = (tmp_path / "runs").iterdir()
    code, out = _cli("run", campaign, "--resume", folder)
    assert code == 0 and BANNER not in out
    assert f"nothing to do: 4 of 4 trials recorded in {folder}" in out  # 2 variants x 1 vial x 2 trials


# --- routine parameters ----------------------------------------------------------------------------

UNIT_ENDINGS = ("_s", "_mm", "_deg", "_n", "_hz", "_g", "_share")  # _mm_s and _deg_s end in _s


def test_every_routine_key_names_its_unit_or_is_a_share():
    # the project's rule: a file key says its unit; a fraction of a limit is a `_share`. Switches
    # (true/false) and directions (a vector whose length does not matter) have no unit.
    for name in ROUTINES:
        for row in parameter_rows(name):
            if row["unit"] in ("-", "direction"):
                continue
            assert row["key"].endswith(UNIT_ENDINGS), f"{name}: {row['key']}"


def test_routines_lists_every_parameter_with_unit_range_and_default(capsys):
    from harness.cli import main
    assert main(["routines", "hold-under-shake"]) == 0
    text = capsys.readouterr().out
    for key in ("grip_height_share", "draw_speed_share", "accel_g", "tilt_deg", "shake_s", "seat"):
        assert key in text
    tilt = next(line for line in text.splitlines() if line.startswith("tilt_deg"))
    assert "deg" in tilt and ">= 0 and <= 90" in tilt and " 20 " in tilt  # the default, in degrees
    assert main(["routines"]) == 0
    listing = capsys.readouterr().out
    assert all(f"{name}: needs" in listing for name in ROUTINES)


def test_an_angle_bound_is_in_the_unit_of_its_key():
    # tilt_deg's bound is 90 deg, not 90 deg's value in radians (1.57 deg)
    assert make_routine("hold-under-shake", {"tilt_deg": 30}).params.tilt == pytest.approx(0.5235987756)


# --- plan ------------------------------------------------------------------------------------------

MIXED = TINY.replace('[[routine]]\nname = "draw-in-grasp"', '[[routine]]\nname = "draw-in-grasp"\n\n'
                                                            '[[routine]]\nname = "inside-grasp"')
TWO_KINDS = SET + """
[[object]]
name = "cup"
kind = "cup"
outer_radius_mm = 30
wall_mm = 4
height_mm = 45
base_mm = 3
density_kg_m3 = 1200
friction = 0.5
"""


def test_plan_times_one_trial_of_every_routine_and_object_kind(tmp_path):
    shutil.copy(REPO / DUO, tmp_path / "duo.toml")
    (tmp_path / "set.toml").write_text(TWO_KINDS)
    campaign = load_campaign(write(tmp_path, MIXED, "mixed.toml"))
    plan = expand(campaign)
    total, loading, calibrated = campaign_commands.calibrate(campaign, plan, workers=2)
    # inside-grasp needs a cavity, so the vial has none: three groups, each timed once
    assert set(calibrated) == {"draw-in-grasp / cylinder", "draw-in-grasp / cup", "inside-grasp / cup"}
    assert all(seconds > 0 for seconds in calibrated.values()) and loading >= 0
    kinds = {"vial": "cylinder", "cup": "cup"}
    expected = sum(calibrated[f"{t.payload['routine']} / {kinds[t.payload['object']]}"] for t in plan.tasks)
    assert total == pytest.approx(expected)


def test_plan_says_none_skipped_and_names_the_reasons_when_some_are(tmp_path):
    shutil.copy(REPO / DUO, tmp_path / "duo.toml")
    (tmp_path / "set.toml").write_text(TWO_KINDS)
    plain = load_campaign(write(tmp_path, TINY, "tiny.toml"))
    assert campaign_commands._skipped_text(expand(plain)) == "; none skipped."
    lines = campaign_commands._skipped_text(expand(load_campaign(write(tmp_path, MIXED, "mixed.toml")))).splitlines()
    assert lines[0].endswith("skipped because the routine does not suit them:")
    assert lines[1:] == ["  inside-grasp: needs a ring or a cup to hold from inside; vial is a cylinder "
                         "(2 combination(s))"]
