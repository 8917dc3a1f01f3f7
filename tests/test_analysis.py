"""The analysis API and its CLI glue on synthetic results tables with planted effects.

References are named in a comment beside each check (scipy, statsmodels, or the planted truth).
"""

from __future__ import annotations

import argparse
import io
import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats as st
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.proportion import proportion_confint

from harness.analysis import compare, compare_variants, fit_rasch, gate_exit_code, rank, summary
from harness.commands import analysis as commands
from harness.analysis import synthetic_results
from harness.analysis.compare import ALL
from harness.errors import HarnessError

DROP_CELL = ("candidate", "obj-002", "roll")


@pytest.fixture(scope="module")
def planted():
    """Two variants x 6 objects x 2 routines x 60 trials; the candidate loses 2 logits on one cell."""
    return synthetic_results(objects=6, routines=("draw-in", "roll"), trials=60, seed=11,
                             difficulty=np.linspace(-1, 1, 6), success_shift={DROP_CELL: -2.5})


def row(result, obj, routine):
    return result[(result["object"] == obj) & (result["routine"] == routine)].iloc[0]


def paired_frame(df, base="base", cand="candidate"):
    """Trials of the two variants joined on pair_key, valid on both sides (independent of compare)."""
    ok = ~df["outcome"].isin(["invalid", "error", "timeout"])
    b = df[ok & (df["variant"] == base)]
    c = df[ok & (df["variant"] == cand)]
    return b.merge(c, on=["object", "routine", "pair_key"], suffixes=("_b", "_c"))


# --- summary ---------------------------------------------------------------------------------------

def hand_table():
    outcomes = ["held"] * 6 + ["dropped", "missed", "invalid", "error"]
    return pd.DataFrame({
        "trial_key": [f"k{i}" for i in range(10)], "pair_key": [f"p{i}" for i in range(10)],
        "gripper": "g", "variant": "g[a=1]", "object": "cup", "object_set": "kitchen", "routine": "draw-in",
        "seed": range(10), "outcome": outcomes,
        "success": [True] * 6 + [False, False, True, True],  # invalid and error rows claim success
        "slip_mm": [1, 2, 3, 4, 5, 6, 7, np.nan, 1000, 1000], "slip_peak_mm_s": 1.0,
        "drift_mm": [0.5] * 10, "drift_deg": [2.0] * 10, "epsilon": [0.1] * 10, "wall_s": 1.0,
    })


def test_summary_counts_invalid_and_error_but_excludes_them_from_rates():
    s = summary(hand_table()).iloc[0]
    assert (s["trials"], s["valid"], s["successes"]) == (10, 8, 6)
    assert (s["invalid"], s["error"], s["held"], s["timeout"]) == (1, 1, 6, 0)
    assert s["success_rate"] == 6 / 8
    # Reference: statsmodels proportion_confint(method="wilson") on 6 of 8 valid trials
    assert (s["success_lo"], s["success_hi"]) == pytest.approx(proportion_confint(6, 8, method="wilson"), abs=1e-12)
    # Reference: numpy median / linear 90th percentile of the held trials' slip (the dropped
    # trial's 7 mm and the missed trial's glancing touches are not a grasp's slip)
    held_slip = [1, 2, 3, 4, 5, 6]
    assert s["slip_mm_p50"] == np.median(held_slip)
    assert s["slip_mm_p90"] == pytest.approx(np.percentile(held_slip, 90))


def test_summary_text_says_what_is_excluded():
    text = commands.summary_text(hand_table())
    # Reference: the Wilson 95 % interval for 6 of 8 is [0.4093, 0.9285] (statsmodels
    # proportion_confint(6, 8, method="wilson"), run when this literal was written; the summary test
    # above compares against it live); printed to three decimals
    assert "0.750 [0.409, 0.929]" in text
    assert "1 invalid, 1 error, 0 timeout trial(s) are counted above but excluded from success rates" in text


def test_summary_has_one_row_per_cell(planted):
    s = summary(planted)
    assert len(s) == 2 * 6 * 2
    assert s["trials"].sum() == len(planted)
    # Reference: pandas crosstab of the raw table
    counts = pd.crosstab([planted["variant"], planted["object"], planted["routine"]], planted["outcome"])
    assert s.set_index(["variant", "object", "routine"])["held"].to_dict() == counts["held"].to_dict()


@pytest.mark.parametrize("fmt", ["csv", "json", "markdown"])
def test_summary_formats(planted, fmt):
    out = commands.summary_text(planted, fmt)
    if fmt == "csv":
        back = pd.read_csv(io.StringIO(out))
        assert len(back) == 24 and "success_lo" in back.columns
    elif fmt == "json":
        assert len(json.loads(out)) == 24
    else:
        lines = out.splitlines()  # the planted table has error trials: their reasons come first
        cells = next(i for i, line in enumerate(lines) if line.startswith("| variant"))
        assert lines[cells + 1].startswith("|---|") and "excluded from success rates" in out
        assert lines[0].endswith("ended in error or timeout; by reason (replay the example trial to see it fail):")


# --- compare ---------------------------------------------------------------------------------------

def test_planted_drop_is_worse_in_its_cell_and_fails_the_gate(planted):
    result = compare_variants(planted, "base", "candidate")
    worse = result[result["verdict"] == "worse"]
    assert set(zip(worse["object"], worse["routine"])) <= {DROP_CELL[1:], (ALL, ALL)}
    assert row(result, "obj-002", "roll")["verdict"] == "worse"
    assert row(result, "obj-002", "roll")["diff_hi"] < 0
    assert gate_exit_code(result) == 1
    assert commands.compare_text(planted, planted, variants=("base", "candidate"))[1] == 1


def test_a_drop_within_the_margin_passes_the_gate(planted):
    result = compare_variants(planted, "base", "candidate", margin=0.9)
    assert row(result, "obj-002", "roll")["verdict"] == "worse"
    assert gate_exit_code(result) == 0


def test_comparing_a_table_with_itself_finds_no_change(planted):
    result = compare(planted, planted)
    assert (result["verdict"] == "no detectable change").all()
    assert (result[["slip_verdict", "drift_verdict"]] == "no detectable change").all().all()
    assert (result["diff"] == 0).all() and (result["pairing"] == "paired").all()
    assert gate_exit_code(result) == 0
    text, code = commands.compare_text(planted, planted)
    assert code == 0 and "exit code 0" in text


def test_variants_without_a_planted_effect_show_no_change():
    df = synthetic_results(objects=6, routines=("draw-in", "roll"), trials=60, seed=12)
    result = compare_variants(df, "base", "candidate")
    assert not (result["verdict"] == "worse").any()
    assert gate_exit_code(result) == 0


def test_paired_tests_equal_scipy_on_the_shared_pairs(planted):
    result = compare_variants(planted, "base", "candidate")
    pairs = paired_frame(planted)
    cell = pairs[(pairs["object"] == "obj-002") & (pairs["routine"] == "roll")]
    b = int((cell["success_b"] & ~cell["success_c"]).sum())
    c = int((~cell["success_b"] & cell["success_c"]).sum())
    got = row(result, "obj-002", "roll")
    # Reference: scipy.stats.binomtest on the discordant pairs (exact McNemar)
    assert got["p_success"] == pytest.approx(st.binomtest(b, b + c, 0.5).pvalue, rel=1e-10)
    # Reference: scipy.stats.wilcoxon on the pairs with both slips present
    slips = cell[["slip_mm_b", "slip_mm_c"]].dropna()
    assert got["p_slip"] == pytest.approx(st.wilcoxon(slips["slip_mm_b"], slips["slip_mm_c"]).pvalue, rel=1e-12)
    # Reference: statsmodels multipletests(method="holm") over every row's p-value
    np.testing.assert_allclose(result["p_success_holm"], multipletests(result["p_success"], method="holm")[1])


def test_overall_row_pools_every_pair(planted):
    overall = row(compare_variants(planted, "base", "candidate"), ALL, ALL)
    pairs = paired_frame(planted)
    assert overall["n_base"] == len(pairs)
    assert overall["cand_rate"] == pytest.approx(pairs["success_c"].mean())


def test_unpaired_fallback_when_keys_do_not_overlap(planted):
    base = planted[planted["variant"] == "base"]
    cand = planted[planted["variant"] == "candidate"].assign(pair_key=lambda d: "other-" + d["pair_key"])
    result = compare(base, cand)
    assert (result["pairing"] == "unpaired").all()
    assert row(result, "obj-002", "roll")["verdict"] == "worse"
    assert gate_exit_code(result) == 1
    valid = lambda d: d[~d["outcome"].isin(["invalid", "error", "timeout"])  # noqa: E731
                        & (d["object"] == "obj-002") & (d["routine"] == "roll")]
    kb, nb = int(valid(base)["success"].sum()), len(valid(base))
    kc, nc = int(valid(cand)["success"].sum()), len(valid(cand))
    got = row(result, "obj-002", "roll")
    # Reference: scipy.stats.fisher_exact on the valid trials' 2x2 table
    assert got["p_success"] == pytest.approx(st.fisher_exact([[kb, nb - kb], [kc, nc - kc]]).pvalue, rel=1e-12)
    # Reference: scipy.stats.mannwhitneyu on the valid trials' drift
    ref = st.mannwhitneyu(valid(cand)["drift_mm"].dropna(), valid(base)["drift_mm"].dropna()).pvalue
    assert got["p_drift"] == pytest.approx(ref, rel=1e-12)


def test_two_runs_are_compared_variant_by_variant(planted):
    # Same design and seed without the planted drop: the base variant's trials are identical.
    before = synthetic_results(objects=6, routines=("draw-in", "roll"), trials=60, seed=11,
                               difficulty=np.linspace(-1, 1, 6))
    result = compare(before, planted)
    assert set(result["variant"]) == {"base", "candidate"}
    assert (result.loc[result["variant"] == "base", "diff"] == 0).all()
    worse = result[result["verdict"] == "worse"]
    assert set(zip(worse["variant"], worse["object"], worse["routine"])) <= {DROP_CELL, ("candidate", ALL, ALL)}
    assert row(result[result["variant"] == "candidate"], "obj-002", "roll")["verdict"] == "worse"


def test_two_single_variant_runs_pair_on_their_keys(planted):
    base = planted[planted["variant"] == "base"]
    cand = planted[planted["variant"] == "candidate"]
    result = compare(base, cand)
    assert set(result["variant"]) == {"base -> candidate"}
    assert result.equals(compare_variants(planted, "base", "candidate"))


def test_slip_increase_is_worse():
    df = synthetic_results(objects=3, trials=80, seed=4, slip_factor={("candidate", "obj-001", "draw-in"): 3.0})
    result = compare_variants(df, "base", "candidate")
    assert row(result, "obj-001", "draw-in")["slip_verdict"] == "worse"
    assert row(result, "obj-000", "draw-in")["slip_verdict"] == "no detectable change"


# --- rank ------------------------------------------------------------------------------------------

def rasch_table(difficulty, ability, trials=30, seed=3, **kw):
    return synthetic_results(variants=[f"v{i}" for i in range(len(ability))], objects=len(difficulty),
                             trials=trials, difficulty=difficulty, ability=ability, pairing=0.0,
                             broken_share=0.0, seed=seed, **kw)


def test_rasch_recovers_planted_difficulties():
    difficulty = np.random.default_rng(7).normal(0, 1.2, 20)
    ranking = rank(rasch_table(difficulty, [-0.6, -0.2, 0.2, 0.6]), reps=30)
    got = ranking.objects.set_index("object")["difficulty"]
    planted = pd.Series(difficulty, index=[f"obj-{i:03d}" for i in range(20)])
    # Reference: the planted difficulties (Spearman rank correlation, scipy.stats.spearmanr)
    assert st.spearmanr(got[planted.index], planted).statistic >= 0.9
    assert (ranking.objects["lo"] <= ranking.objects["difficulty"]).all()
    assert (ranking.objects["difficulty"] <= ranking.objects["hi"]).all()
    assert ranking.objects["difficulty"].sum() == pytest.approx(0, abs=1e-9)


def test_unpenalised_rasch_equals_statsmodels_logit():
    difficulty = np.random.default_rng(8).normal(0, 0.8, 20)
    df = rasch_table(difficulty, [-0.5, 0.0, 0.3, 0.7], seed=9)
    v = pd.factorize(df["variant"], sort=True)[0]
    o = pd.factorize(df["object"], sort=True)[0]
    y = df["success"].to_numpy(float)
    # Reference: statsmodels Logit with the same identification: one dummy per variant, and
    # sum-to-zero coding of the objects (difficulty of the last = minus the sum of the others)
    objects = np.eye(20)[o]
    design = np.hstack([np.eye(4)[v], -(objects[:, :-1] - objects[:, [-1]])])
    ref = sm.Logit(y, design).fit(method="newton", tol=1e-12, disp=False).params
    cells = df.groupby([v, o])["success"].agg(["sum", "size"])
    cv, co = (cells.index.get_level_values(i).to_numpy() for i in (0, 1))
    ability, diff, _ = fit_rasch(cells["sum"], cells["size"], cv, co, 4, 20, penalty=0.0)
    np.testing.assert_allclose(ability, ref[:4], atol=1e-3)
    np.testing.assert_allclose(diff, np.append(ref[4:], -ref[4:].sum()), atol=1e-3)


def test_objects_that_separate_nothing_are_flagged():
    difficulty = np.array([-12.0, 0.0, 0.5, 12.0])
    objects = rank(rasch_table(difficulty, [0.0, 0.5]), reps=20).objects.set_index("object")
    assert objects.loc["obj-000", "flag"] == "always succeeds"
    assert objects.loc["obj-003", "flag"] == "never succeeds"
    assert objects.loc["obj-001", "flag"] == ""
    assert objects.index[0] == "obj-003"  # hardest first


def test_object_sets_are_ranked_when_there_are_several():
    difficulty = np.array([-1.0, -0.5, -0.8, 1.0, 0.7, 1.2])  # set-1 holds the hard half
    ranking = rank(rasch_table(difficulty, [0.0, 0.5], object_sets=2), reps=50)
    sets = ranking.sets.set_index("object_set")
    assert sets.index[0] == "set-1" and sets.loc["set-1", "lo"] > sets.loc["set-0", "hi"]
    assert sets.loc["set-1", "objects"] == 3
    assert rank(rasch_table(difficulty, [0.0, 0.5]), reps=5).sets is None


def test_rank_by_slip_orders_by_planted_slip():
    slip = np.linspace(1, 8, 8)[::-1]  # obj-000 slips most
    ranking = rank(rasch_table(np.zeros(8), [0.0, 0.3], object_slip=slip), by="slip", reps=50)
    got = ranking.objects.set_index("object")["slip_mm_median"]
    # Reference: the planted per-object slip medians (Spearman rank correlation, scipy.stats.spearmanr)
    assert st.spearmanr(got[[f"obj-{i:03d}" for i in range(8)]], slip).statistic >= 0.9
    assert ranking.variants is None


def test_rank_is_reproducible_for_a_seed(planted):
    a = rank(planted, reps=20, seed=5).objects
    b = rank(planted, reps=20, seed=5).objects
    c = rank(planted, reps=20, seed=6).objects
    assert a.equals(b) and not a.equals(c)


# --- bad input -------------------------------------------------------------------------------------

@pytest.mark.parametrize("call, message", [
    (lambda df: summary(df.iloc[:0]), "the results table is empty"),
    (lambda df: summary(df.drop(columns="slip_mm")), "lacks column(s) slip_mm"),
    (lambda df: summary(df.assign(outcome="lost")), "unknown outcome(s) lost; allowed: held, dropped"),
    (lambda df: compare_variants(df, "base", "nope"), "unknown candidate variant 'nope'; the candidate table "
                                                      "holds: base, candidate"),
    (lambda df: compare(df, df.assign(variant="x"), variants=None), "share no variant name"),
    (lambda df: compare_variants(df, "base", "candidate", margin=2), "margin must be in [0, 1)"),
    (lambda df: rank(df, by="speed"), "unknown ranking 'speed'; allowed: success, slip, drift"),
    (lambda df: rank(df, penalty=-1), "reps must be at least 1 and penalty at least 0; got reps 200, penalty -1"),
    (lambda df: compare(pd.concat([df, df.iloc[:1]]), df), "repeats pair_key"),
])
def test_bad_input_names_what_is_wrong(planted, call, message):
    with pytest.raises(HarnessError) as exc:
        call(planted)
    assert message in str(exc.value)


# --- CLI glue --------------------------------------------------------------------------------------

def run_cli(argv, capsys):
    parser = argparse.ArgumentParser(prog="grasp-harness")
    commands.register(parser.add_subparsers(dest="command", required=True))
    args = parser.parse_args(argv)
    handler = {"summary": commands.cmd_summary, "compare": commands.cmd_compare, "rank": commands.cmd_rank}
    code = handler[args.command](args)
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.fixture(scope="module")
def planted_csv(planted, tmp_path_factory):
    path = tmp_path_factory.mktemp("runs") / "results.csv"
    planted.to_csv(path, index=False)
    return str(path)


def test_cli_compare_two_variants_of_one_table(planted_csv, capsys):
    code, out, _ = run_cli(["compare", planted_csv, "--variants", "base", "candidate"], capsys)
    assert code == 1 and "worse" in out and "exit code 1" in out


def test_cli_compare_a_table_with_itself(planted_csv, capsys):
    code, out, _ = run_cli(["compare", planted_csv, planted_csv, "--to", "json"], capsys)
    assert code == 0 and {r["verdict"] for r in json.loads(out)} == {"no detectable change"}


def test_cli_summary_and_rank(planted_csv, capsys):
    code, out, _ = run_cli(["summary", planted_csv, "--to", "csv"], capsys)
    assert code == 0 and len(pd.read_csv(io.StringIO(out))) == 24
    code, out, _ = run_cli(["rank", planted_csv, "--reps", "10", "--to", "json"], capsys)
    assert code == 0 and set(json.loads(out)) == {"objects", "variants"}
    code, out, _ = run_cli(["rank", planted_csv, "--by", "drift", "--reps", "10"], capsys)
    assert code == 0 and "median drift_mm" in out


@pytest.mark.parametrize("argv, message", [
    (["summary", "no/such/file.csv"], "error: no run folder or results file at no/such/file.csv"),
    (["compare", "RESULTS"], "error: compare needs CANDIDATE, or --variants"),
    (["compare", "RESULTS", "--variants", "base", "big"], "error: unknown candidate variant 'big'"),
])
def test_cli_bad_input_gives_one_line_and_exit_2(planted_csv, capsys, argv, message):
    argv = [planted_csv if a == "RESULTS" else a for a in argv]
    code, out, err = run_cli(argv, capsys)
    assert code == 2 and out == "" and err.startswith(message) and err.count("\n") == 1


def test_registering_the_commands_does_not_import_pandas():
    # The CLI builds every subparser on start; --help must stay fast (DEVELOPERS: lazy imports).
    code = ("import argparse, sys; from harness.commands import analysis as commands; "
            "commands.register(argparse.ArgumentParser().add_subparsers()); print('pandas' in sys.modules)")
    assert subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout == "False\n"
