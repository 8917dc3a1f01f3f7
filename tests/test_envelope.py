"""Pick envelope (`grasp-harness envelope`): the analytic bite boundary, the measured boundary of
surface draw-in against it, and the command's files and input checks."""

import math
from pathlib import Path

import pandas as pd
import pytest

from harness.campaigns.envelope import BOUNDARY_CSV, CHART_PNG, POINTS_CSV, boundary, sweep
from harness.cli import main
from harness.sim.bite import required_mu
from harness.sim.world import PhysicsSettings

SPEC = Path(__file__).resolve().parents[1] / "models" / "grippers" / "duo-roller.toml"
VARIANT = "duo-roller[finger.roller.radius_mm=12]"
R = 0.012  # m, that variant's roller radius


def test_bite_boundary_formulas():
    # rolling-mill angle of bite (Dieter, Mechanical Metallurgy, chapter on rolling; Kalpakjian and
    # Schmid, chapter on rolling): mu = tan(beta); values worked by hand
    # lying cylinder R = 6 mm, r = 12 mm: sin(beta) = 6/18 = 1/3, tan(beta) = 1/sqrt(8)
    assert required_mu("cylinder", R, 0.012) == pytest.approx(1 / math.sqrt(8), rel=1e-12)
    # an edge of height h = r/2: cos(theta) = 1/2, theta = 60 deg, cot(theta) = 1/sqrt(3)
    assert required_mu("disc", R, 0.006) == pytest.approx(1 / math.sqrt(3), rel=1e-12)
    assert required_mu("plate", R, 0.006) == required_mu("disc", R, 0.006)
    # parts as high as the roller centres need no friction to enter
    assert required_mu("cylinder", R, 2 * R) == 0.0 and required_mu("disc", R, R) == 0.0
    with pytest.raises(ValueError, match="shape must be one of cylinder, disc, plate; got 'cone'"):
        required_mu("cone", R, 0.01)


# Measured (nominal trials, duo-roller, 5 g lying cylinders 7 to 18 mm across): no part drawn in at
# or below 1.0 tan(beta), every one from 1.2 tan(beta) at 100 it @ 480 Hz; at 400 it @ 960 Hz the
# switch lies between 1.1 and 1.2 (1.3 for 5 mm). The band stated for the envelope: the measured
# boundary lies between 0.85 and 1.4 x the analytic one.
BAND = (0.85, 1.4)


@pytest.mark.parametrize("settings,heights", [(PhysicsSettings(), (0.007, 0.010, 0.014)),
                                              (PhysicsSettings().refined(), (0.010,))],
                         ids=["default", "refined"])
def test_measured_boundary_of_lying_cylinders_lies_in_the_band(settings, heights):
    rows = []
    for h in heights:
        mus = [k * required_mu("cylinder", R, h) for k in BAND]
        rows.append(sweep(SPEC, VARIANT, ["cylinder"], [h], mus, settings))
    edge = boundary(pd.concat(rows, ignore_index=True))
    for b in edge.itertuples():
        assert b.mu_below == pytest.approx(BAND[0] * b.required_mu), f"{b.height_mm} mm drawn in below the band"
        assert b.mu_from == pytest.approx(BAND[1] * b.required_mu), f"{b.height_mm} mm not drawn in above the band"


def test_boundary_is_the_lowest_mu_drawing_in_with_the_next_one_and_counts_misses_above():
    df = pd.DataFrame({"shape": "disc", "height_mm": 5.0, "required_mu": 0.6, "mu": [0.2, 0.4, 0.6, 0.8, 1.0, 1.2],
                       "drawn_in": [True, False, False, True, True, False]})
    b = boundary(df).iloc[0]
    assert (b.mu_below, b.mu_from, b.measured_mu, b.misses_above) == (0.6, 0.8, pytest.approx(0.7), 1)
    never = boundary(df.assign(drawn_in=False)).iloc[0]
    assert math.isnan(never.mu_from) and math.isnan(never.measured_mu) and never.mu_below == 1.2
    top_only = boundary(df.assign(drawn_in=[False] * 5 + [True])).iloc[0]
    assert (top_only.mu_from, top_only.mu_below) == (1.2, 1.0)


def test_envelope_command_writes_points_boundary_and_chart(tmp_path, capsys):
    code = main(["envelope", str(SPEC), "--shapes", "plate", "--heights-mm", "8", "--mu", "0.15,1.0",
                 "--physics", "step_hz=480", "--out", str(tmp_path)])
    assert code == 0
    points = pd.read_csv(tmp_path / POINTS_CSV)
    assert list(points["mu"]) == [0.15, 1.0] and set(points["shape"]) == {"plate"}
    assert {"height_mm", "required_mu", "outcome", "drawn_in", "held", "reason", "step_hz"} <= set(points.columns)
    assert (tmp_path / BOUNDARY_CSV).exists()
    assert (tmp_path / CHART_PNG).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    out = capsys.readouterr().out
    assert "analytic_mu" in out and "Simulated success is no guarantee" in out


@pytest.mark.parametrize("args,message", [
    (["--shapes", "cone"], "--shapes: field 'cone' must list some of cylinder, disc, plate; got ['cone']"),
    (["--mu", "0.5,-1"], "--mu: field '0.5,-1' must be a comma-separated list of numbers > 0"),
    (["--heights-mm", "x"], "--heights-mm: field 'x' must be a comma-separated list of numbers > 0"),
    (["--set", "preload_n=-2"], "field 'preload_n' must be a number > 0 and <= 50; got -2"),
])
def test_envelope_command_rejects_bad_input_before_any_trial(tmp_path, capsys, args, message):
    assert main(["envelope", str(SPEC), *args, "--out", str(tmp_path / "e")]) == 2
    assert message in capsys.readouterr().err
    assert not (tmp_path / "e").exists()


def test_envelope_command_needs_a_hand_with_rollers(tmp_path, capsys):
    jaw = SPEC.parent / "pad-jaw.toml"
    assert main(["envelope", str(jaw), "--out", str(tmp_path)]) == 2
    assert "needs driven rollers; the jaw family has none" in capsys.readouterr().err
