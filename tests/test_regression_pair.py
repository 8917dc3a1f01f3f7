"""The demo regression pair end to end: two runs of campaigns that differ only in the gripper
revision (roller friction 1.0 vs 0.3, a worn tread), compared on their shared trial draws."""

from pathlib import Path

import pytest

from harness.analysis import compare, gate_exit_code
from harness.campaign_commands import run_campaign
from harness.runs import load_run

CAMPAIGNS = Path(__file__).resolve().parents[1] / "campaigns"


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    out = tmp_path_factory.mktemp("runs")
    tables = {}
    for side in ("base", "candidate"):
        assert run_campaign(CAMPAIGNS / f"regression-{side}.toml", workers=2, out=out, progress=False,
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
