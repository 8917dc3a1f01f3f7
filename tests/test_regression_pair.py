"""The demo regression pair end to end: two runs of campaigns that differ only in the gripper
revision (roller friction 1.0 vs 0.3, a worn tread), compared on their shared trial draws.

The shipped files are planned with detect_drop = 0.3 (44 trials per cell, about ten minutes of
physics on two cores): the default tests run copies cut to 6 trials per cell; the re-planned pair,
with the candidate run sequentially against the base, is a benchmark (pytest -m benchmark)."""

from pathlib import Path

import pytest

from harness.analysis import compare, gate_exit_code
from harness.commands.campaign import run_campaign
from harness.campaigns.runs import load_run

CAMPAIGNS = Path(__file__).resolve().parents[1] / "campaigns"


def _cut(tmp, side, trials):
    """A copy of the shipped campaign with `trials` per cell (root pointing at the repository)."""
    text = (CAMPAIGNS / f"regression-{side}.toml").read_text()
    text = text.replace("trials = 44", f"trials = {trials}").replace('root = ".."', f'root = "{CAMPAIGNS.parent}"')
    path = tmp / f"regression-{side}.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    out = tmp_path_factory.mktemp("runs")
    tables = {}
    for side in ("base", "candidate"):
        assert run_campaign(_cut(out, side, 6), workers=2, out=out, progress=False,
                            echo=lambda *a, **k: None) == 0
        (folder,) = out.glob(f"regression-{side}-*")
        tables[side] = load_run(folder)
    return tables


def test_compare_finds_the_planted_regression(runs):
    # A worn tread (pair friction about 0.46 instead of 0.84 on a mu 0.7 object) loses objects under
    # shaking that the fresh one holds: the overall paired comparison must call it worse and gate.
    result = compare(runs["base"], runs["candidate"], margin=0.05)
    overall = result[result["object"] == "(all)"].iloc[0]
    assert overall["pairing"] == "paired"
    assert overall["cand_rate"] < overall["base_rate"]
    assert overall["verdict"] == "worse"
    assert gate_exit_code(result) == 1


def test_a_run_compared_with_itself_shows_no_change(runs):
    result = compare(runs["base"], runs["base"], margin=0.05)
    assert set(result["verdict"]) == {"no detectable change"}
    assert gate_exit_code(result) == 0


def test_the_shipped_pair_is_planned_for_a_30_point_drop_per_cell():
    from harness.campaigns.campaign import expand, load_campaign
    from harness.commands.campaign import power_lines
    for side in ("base", "candidate"):
        campaign = load_campaign(CAMPAIGNS / f"regression-{side}.toml")
        text = "\n".join(power_lines(campaign, expand(campaign)))
        assert campaign.detect_drop == 0.3 and campaign.trials == 44
        assert "a cell of 44 pairs can show a drop of 0.30 or more" in text
        assert "detect_drop 0.3 needs 44 trials per cell; trials = 44: enough." in text


def test_six_trials_per_cell_can_never_flag_a_cell_and_compare_says_so(runs):
    from harness.commands.analysis import compare_text
    text, code = compare_text(runs["base"], runs["candidate"])
    assert "28 of 28 cells have fewer and can never be flagged" in text
    assert code == 1 and "overall: worse: success" in text and "after Holm" in text


@pytest.mark.benchmark
def test_replanned_pair_flags_the_worn_tread_per_cell_with_the_candidate_run_sequentially(tmp_path):
    import time
    echo = []
    start = time.perf_counter()
    assert run_campaign(CAMPAIGNS / "regression-base.toml", workers=2, out=tmp_path, progress=False,
                        echo=lambda *a, **k: None) == 0
    (base,) = tmp_path.glob("regression-base-*")
    assert run_campaign(CAMPAIGNS / "regression-candidate.toml", workers=2, out=tmp_path, progress=False,
                        echo=lambda *a, **k: echo.append(" ".join(map(str, a))), against=base) == 0
    (cand,) = tmp_path.glob("regression-candidate-*")
    b, c = load_run(base), load_run(cand)
    result = compare(b, c)
    cells = result[result["object"] != "(all)"]
    print(f"\n{time.perf_counter() - start:.0f} s; base {len(b)} trials, candidate {len(c)} of {len(b)} "
          f"(sequential); cells worse: {list(cells.loc[cells['beyond_margin'], 'object'] + ' / ' + cells.loc[cells['beyond_margin'], 'routine'])}")
    print([line for line in echo if "Sequential gate" in line])
    assert cells["beyond_margin"].sum() >= 1  # flagged per cell, not only overall
    assert len(c) < len(b) / 2  # the sequential candidate ran less than half the base's trials
    assert gate_exit_code(result) == 1
