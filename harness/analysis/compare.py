"""Regression verdicts: a candidate against a baseline, cell by cell and overall.

Trials are paired by `pair_key` (the same object, routine and perturbation draw in both tables;
`trial_key` when a table has no pair_key). A cell with shared keys is compared on its pairs
(exact McNemar on success, Wilcoxon signed-rank on slip and drift); a cell without any falls
back to unpaired tests (Fisher exact; Mann-Whitney U). p-values are Holm-adjusted across all rows
of the comparison, per metric. Invalid, error and timeout trials are left out.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import HarnessError
from . import stats
from .summary import CELL, checked, valid_mask

__all__ = ["compare", "compare_variants", "gate_exit_code", "ALL"]

ALL = "(all)"  # the key shown in the overall row's cell columns
PLACE = CELL[1:]  # object_set, object, routine: the cell within one variant
METRICS = ("slip_mm", "drift_mm")
COMPARE_COLUMNS = [*CELL, "outcome", "success", *METRICS]
NO_CHANGE = "no detectable change"


def compare(base, cand, margin=0.05, alpha=0.05, variants=None):
    """Compare two results tables; one row per variant x cell plus an overall row per variant.

    `variants=(base_variant, cand_variant)` compares those two (one from each table). Otherwise a
    table pair holding one variant each is compared as is, and tables with several variants are
    compared variant by variant on the names they share.

    Success effect: difference in success rate (candidate - base) with a 95 % interval, Newcombe's
    method 10 for paired data (Statistics in Medicine 17:2635-2650, 1998) in paired cells, his
    hybrid score interval for independent proportions (Statistics in Medicine 17:873-890, 1998)
    in unpaired ones. Slip and drift effect: median paired difference (or difference of medians)
    with a McKean-Schrader interval (see `stats.median_difference`).

    A row is "worse" when the Holm-adjusted success p-value is below `alpha` and the candidate's
    rate is lower, "better" when it is higher; `beyond_margin` marks worse rows whose drop exceeds
    `margin` (the gate of `gate_exit_code`). slip_verdict and drift_verdict read the same way, a
    rise in slip or drift counting as worse.
    """
    checked(base, COMPARE_COLUMNS, "base table")
    checked(cand, COMPARE_COLUMNS, "candidate table")
    if not 0 <= margin < 1 or not 0 < alpha < 1:
        raise HarnessError(f"margin must be in [0, 1) and alpha in (0, 1); got margin {margin}, alpha {alpha}")
    base, cand = _matched(base, cand, variants)
    key = "pair_key" if "pair_key" in base.columns and "pair_key" in cand.columns else "trial_key"
    merged = _side(base, key, "base").merge(_side(cand, key, "candidate"), how="outer",
                                            on=["variant", *PLACE, key], suffixes=("_b", "_c"),
                                            indicator=True)
    rows = [{**dict(zip(CELL, cell)), **_cell_stats(g)}
            for cell, g in merged.groupby(CELL, sort=True)]
    rows += [{"variant": v, **dict.fromkeys(PLACE, ALL), **_cell_stats(g)}
             for v, g in merged.groupby("variant", sort=True)]
    return _verdicts(pd.DataFrame(rows), margin, alpha)


def compare_variants(df, base_variant, cand_variant, margin=0.05, alpha=0.05):
    """Compare two variants of one results table, paired by their shared perturbation draws."""
    return compare(df, df, margin, alpha, variants=(base_variant, cand_variant))


def gate_exit_code(result):
    """1 when any row is significantly worse by more than the margin, else 0 (a CI gate)."""
    return int(result["beyond_margin"].any())


def _matched(base, cand, variants):
    """The two tables restricted to the variants being compared, under one shared variant label."""
    if variants is not None:
        b, c = variants
        _need_variant(base, b, "base")
        _need_variant(cand, c, "candidate")
        label = b if b == c else f"{b} -> {c}"
        return (base[base["variant"] == b].assign(variant=label),
                cand[cand["variant"] == c].assign(variant=label))
    names_b, names_c = set(base["variant"].unique()), set(cand["variant"].unique())
    if len(names_b) == 1 and len(names_c) == 1:
        return _matched(base, cand, (names_b.pop(), names_c.pop()))
    shared = names_b & names_c
    if not shared:
        raise HarnessError(f"the tables share no variant name (base: {', '.join(sorted(names_b))}; "
                           f"candidate: {', '.join(sorted(names_c))}); name the two to compare")
    return base[base["variant"].isin(shared)], cand[cand["variant"].isin(shared)]


def _need_variant(df, name, side):
    names = sorted(df["variant"].unique())
    if name not in names:
        raise HarnessError(f"unknown {side} variant '{name}'; the {side} table holds: {', '.join(names)}")


def _side(df, key, side):
    """The columns a comparison needs; success is NaN for trials that say nothing."""
    if key not in df.columns:
        raise HarnessError(f"the {side} table lacks column(s) pair_key and trial_key; one is needed for pairing")
    valid = valid_mask(df)
    out = df[[*CELL, key, *METRICS]].copy()
    out["success"] = np.where(valid, df["success"].to_numpy(float), np.nan)
    out.loc[~valid, list(METRICS)] = np.nan
    repeated = out.duplicated(["variant", key])
    if repeated.any():
        first = out.loc[repeated, key].iloc[0]
        raise HarnessError(f"the {side} table repeats {key} '{first}' within one variant; "
                           f"each key must occur once per variant to pair trials")
    return out


def _cell_stats(g):
    """Tests and effects of one cell: paired on its shared keys, unpaired when it has none."""
    both = g["_merge"].to_numpy() == "both"
    if both.any():
        return _paired(g[both])
    return _unpaired(g[g["_merge"] == "left_only"], g[g["_merge"] == "right_only"])


def _paired(p):
    sb, sc = p["success_b"].to_numpy(), p["success_c"].to_numpy()
    ok = ~(np.isnan(sb) | np.isnan(sc))
    sb, sc = sb[ok].astype(bool), sc[ok].astype(bool)
    a, b, c, d = (int(np.sum(x)) for x in (sb & sc, sb & ~sc, ~sb & sc, ~sb & ~sc))
    lo, hi = stats.paired_difference_interval(a, b, c, d)
    row = {"pairing": "paired", "n_base": len(sb), "n_cand": len(sc),
           **_rates(a + b, len(sb), a + c, len(sc), lo, hi),
           "p_success": float(stats.mcnemar_exact_p(b, c))}
    for m in METRICS:
        diff = p[f"{m}_c"].to_numpy() - p[f"{m}_b"].to_numpy()
        row.update(_metric_effect(m, stats.median_difference(diff), stats.wilcoxon_p(diff)))
    return row


def _unpaired(b, c):
    sb, sc = b["success_b"].dropna().to_numpy(), c["success_c"].dropna().to_numpy()
    kb, kc = int(sb.sum()), int(sc.sum())
    lo, hi = stats.difference_interval(kb, len(sb), kc, len(sc))
    row = {"pairing": "unpaired", "n_base": len(sb), "n_cand": len(sc),
           **_rates(kb, len(sb), kc, len(sc), lo, hi),
           "p_success": stats.fisher_exact_p(kb, len(sb), kc, len(sc))}
    for m in METRICS:
        xb, xc = b[f"{m}_b"].to_numpy(), c[f"{m}_c"].to_numpy()
        row.update(_metric_effect(m, stats.median_difference(xc, xb), stats.mann_whitney_p(xc, xb)))
    return row


def _rates(kb, nb, kc, nc, lo, hi):
    rb = kb / nb if nb else np.nan
    rc = kc / nc if nc else np.nan
    return {"base_rate": rb, "cand_rate": rc, "diff": rc - rb, "diff_lo": float(lo), "diff_hi": float(hi)}


def _metric_effect(metric, effect, p):
    name = metric.split("_")[0]
    est, lo, hi = effect
    return {f"{name}_diff": est, f"{name}_lo": lo, f"{name}_hi": hi, f"p_{name}": p}


def _verdict(adjusted, change, alpha, worse_sign):
    """'worse' / 'better' / no detectable change from Holm-adjusted p and the change's sign."""
    significant = adjusted < alpha
    worse = significant & (np.sign(change) == worse_sign)
    better = significant & (np.sign(change) == -worse_sign)
    return np.select([worse, better], ["worse", "better"], NO_CHANGE)


def _verdicts(out, margin, alpha):
    for name, worse_sign in (("success", -1), ("slip", 1), ("drift", 1)):
        out[f"p_{name}_holm"] = stats.holm(out[f"p_{name}"])
        change = out["diff"] if name == "success" else out[f"{name}_diff"]
        column = "verdict" if name == "success" else f"{name}_verdict"
        out[column] = _verdict(out[f"p_{name}_holm"].to_numpy(), change.to_numpy(), alpha, worse_sign)
    out["beyond_margin"] = (out["verdict"] == "worse") & (-out["diff"] > margin)
    return out
