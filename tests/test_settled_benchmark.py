"""(pytest -m benchmark) The quickstart campaign at the default physics against 4x the solver
iterations and half the step, on the same draws: the ensemble must not move.

Long (every quickstart trial twice, the second set at about eight times the cost); the figures it
prints go into the README's Performance section and the closing note of a numerics change.
"""

from pathlib import Path

import pytest

from harness.analysis.numerics import ALPHA, OVERALL_SHIFT, agreement
from harness.commands.campaign import run_campaign
from harness.commands.convergence import CROSSCHECK_FOLDER
from harness.campaigns.runs import load_run

REPO = Path(__file__).resolve().parents[1]


@pytest.mark.benchmark
def test_quickstart_at_the_defaults_agrees_with_finer_numerics(tmp_path):
    out = tmp_path / "runs"
    assert run_campaign(REPO / "campaigns/quickstart.toml", out=out, progress=False, echo=print, crosscheck=1.0) == 0
    (run,) = out.iterdir()
    a = agreement(load_run(run), load_run(run / CROSSCHECK_FOLDER))
    print(f"\nquickstart: {a['pairs']} pairs; success {a['success_coarse']:.3f} (defaults) vs "
          f"{a['success_fine']:.3f} (4x iterations, half step); McNemar p {a['p']:.3g}; flip share "
          f"{a['flip_share']:.3f} ({a['only_coarse']} + {a['only_fine']}); cells significant after Holm "
          f"{a['cells_significant']}; flagged {a['cells_flagged']}; median slip {a['slip_coarse_mm']:.3g} vs "
          f"{a['slip_fine_mm']:.3g} mm; median drift {a['drift_coarse_mm']:.3g} vs {a['drift_fine_mm']:.3g} mm; "
          f"wall per trial {a['wall_coarse_s']:.2f} vs {a['wall_fine_s']:.2f} s")
    assert abs(a["difference"]) <= OVERALL_SHIFT
    assert a["p"] >= ALPHA
    assert a["cells_significant"] == 0
    assert not a["failures"], a["failures"]
