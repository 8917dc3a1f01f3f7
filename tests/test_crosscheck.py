"""Crosscheck: a finished run's trials re-run under finer numerics, cells flagged when they move.

A run at deliberately poor numerics (20 solver iterations) must be caught; a run at the default
settings (chosen by the convergence study in the README) must come out (nearly) clean.
"""

import json
import shutil
from pathlib import Path

import pytest

from harness.commands.campaign import run_campaign
from harness.cli import main
from harness.analysis.numerics import CROSSCHECK_NAME, numerics_flags
from harness.commands.convergence import crosscheck
from harness.views.report import build_report

REPO = Path(__file__).resolve().parents[1]

SET = """
name = "bench-few"
seed = 2

[[object]]
name = "vial"
kind = "cylinder"
radius_mm = 8
height_mm = 45
mass_g = 12
friction = 0.7

[[object]]
name = "cap"
kind = "cylinder"
radius_mm = 14
height_mm = 12
mass_g = 6
friction = 0.6

[[object]]
name = "ball"
kind = "sphere"
radius_mm = 18
mass_g = 30
friction = 0.5
"""

CAMPAIGN = """
name = "xcheck"
seed = 5
trials = {trials}
objects = ["set.toml"]
timeout_s = 120

[[gripper]]
spec = "duo.toml"
variants = ["duo-roller[finger.roller.radius_mm=12]"]

[[gripper]]
spec = "jaw.toml"

[[routine]]
name = "draw-in-grasp"

[[routine]]
name = "pinch-lift"

[perturbation]
object_xy_mm = 3
yaw_deg = 20
friction_scale = [0.8, 1.2]
mass_scale = [0.9, 1.1]
{physics}
"""


def campaign(tmp_path, trials, physics=""):
    shutil.copy(REPO / "models/grippers/duo-roller.toml", tmp_path / "duo.toml")
    shutil.copy(REPO / "models/grippers/pad-jaw.toml", tmp_path / "jaw.toml")
    (tmp_path / "set.toml").write_text(SET)
    path = tmp_path / "c.toml"
    path.write_text(CAMPAIGN.format(trials=trials, physics=physics))
    return path


def quiet(*args, **kwargs):
    pass


def test_a_run_at_poor_numerics_is_flagged_and_the_flags_reach_report_and_compare(tmp_path, capsys):
    path = campaign(tmp_path, 6, "[physics]\nsolver_iterations = 20\nstep_hz = 240\n")
    assert run_campaign(path, out=tmp_path / "runs", progress=False, echo=quiet, workers=2) == 0
    (run,) = (tmp_path / "runs").iterdir()
    result = crosscheck(run, sample=0.5, workers=2, progress=False, echo=quiet)
    flags = numerics_flags(run)
    record = json.loads((run / CROSSCHECK_NAME).read_text())
    assert record["refined_settings"]["solver_iterations"] == 80 and record["refined_settings"]["step_hz"] == 480
    assert record["pairs"] == result["pairs"] >= 20  # 27 re-run; trials invalid at either setting drop out
    print(f"20 iterations: {record['pairs']} pairs, success {record['success_coarse']:.2f} vs "
          f"{record['success_fine']:.2f}, flips {record['flip_share']:.2f}, {len(flags)} flagged: {record['failures']}")
    assert flags, "a run at 20 solver iterations should have numerics-sensitive cells"
    assert result["failures"], "and its ensemble should not count as settled"
    # the report frames flagged cells and lists them; compare names verdicts that rest on them
    report = build_report(run, tmp_path / "r.html", worst=0)
    html = report.path.read_text()
    assert "numerics-sensitive: " in html
    assert main(["compare", str(run), str(run)]) in (0, 1)
    assert "flagged numerics- or engine-sensitive" in capsys.readouterr().out


def test_a_run_at_the_default_physics_crosschecks_nearly_clean(tmp_path):
    path = campaign(tmp_path, 4)
    assert run_campaign(path, out=tmp_path / "runs", progress=False, echo=quiet, workers=2, crosscheck=0.5) == 0
    (run,) = (tmp_path / "runs").iterdir()
    record = json.loads((run / CROSSCHECK_NAME).read_text())
    # 9 cells of 2 re-run trials each: one flagged cell at most (a cell this small can flip by chance:
    # chaos). The ensemble figure is the convergence study's (README), not this small sample's.
    print(f"defaults: {record['pairs']} pairs, success {record['success_coarse']:.2f} vs {record['success_fine']:.2f}, "
          f"{len(record['flagged'])} flagged: {record['flagged']}")
    assert len(record["flagged"]) <= 1, record["flagged"]


def test_crosscheck_of_a_folder_that_is_no_run_is_one_clear_error(tmp_path, capsys):
    assert main(["crosscheck", str(tmp_path)]) == 2
    assert "is not a run folder" in capsys.readouterr().err


def test_crosscheck_on_the_other_engine_flags_engine_sensitive_cells_apart_from_numerics(tmp_path, capsys):
    from harness.analysis.numerics import ENGINE_CROSSCHECK_NAME, sensitive_flags
    from harness.sim.engines import engine_available
    if not engine_available("mujoco"):
        pytest.skip("engine 'mujoco' is not installed (pip install -e '.[mujoco]')")
    path = campaign(tmp_path, 2)
    assert run_campaign(path, out=tmp_path / "runs", progress=False, echo=quiet, workers=2) == 0
    (run,) = (tmp_path / "runs").iterdir()
    lines = []
    result = crosscheck(run, sample=1.0, engine="mujoco", workers=2, progress=False, echo=lines.append)
    record = json.loads((run / ENGINE_CROSSCHECK_NAME).read_text())
    assert not (run / CROSSCHECK_NAME).exists()  # the numerics crosscheck's file is its own
    # same draws and numerics, the other engine
    assert record["refined_settings"] == {**record["run_settings"], "engine": "mujoco"}
    assert record["pairs"] == result["pairs"] == len(result["cells"]) * 2 - record["dropped_invalid"]
    cells = result["cells"]
    assert ((cells["agreement_lo"] <= cells["outcome_agreement"]) & (cells["outcome_agreement"] <= cells["agreement_hi"])).all()
    assert {"slip_coarse_mm", "slip_fine_mm", "drift_coarse_mm", "drift_fine_mm"} <= set(cells.columns)
    print("\n".join(lines))
    assert any("engine-sensitive" in line for line in lines)
    flags = sensitive_flags(run)
    assert len(flags) == len(record["flagged"]) and all(w.startswith("engine-sensitive: ") for w in flags.values())
    if flags:  # the report frames them and compare names the verdicts resting on them
        assert "engine-sensitive: " in build_report(run, tmp_path / "r.html", worst=0).path.read_text()
        assert main(["compare", str(run), str(run)]) in (0, 1)
        assert "numerics- or engine-sensitive" in capsys.readouterr().out
    with pytest.raises(Exception, match="ran on pybullet already"):
        crosscheck(run, engine="pybullet", progress=False, echo=quiet)


@pytest.mark.parametrize("option, value", [("--iterations", "100,x"), ("--step-hz", "0,960"), ("--iterations", "")])
def test_converge_refuses_a_setting_list_that_is_not_whole_numbers_before_any_trial(tmp_path, capsys, option, value):
    # one clear error naming the option, and no run folder written
    assert main(["converge", str(REPO / "campaigns/quickstart.toml"), option, value, "--out", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert option in err and "whole numbers > 0" in err
    assert not any(tmp_path.iterdir())
