"""Regression verdicts: a candidate against a baseline, cell by cell and overall.

Trials are paired by `pair_key` (the same object, routine and perturbation draw in both tables;
`trial_key` when a table has no pair_key). A cell with shared keys is compared on its pairs
(exact McNemar on success, Wilcoxon signed-rank on slip, drift and rotation); a cell without any
falls back to unpaired tests (Fisher exact; Mann-Whitney U). p-values are Holm-adjusted across all
rows of the comparison, per metric. Invalid, error and timeout trials are left out of the tests,
counted per cell and side (`broken_base`, `broken_cand`), and a comparison where more than
`max_broken` of either side's trials are broken is inconclusive (`gate_exit_code` 3).

The gate reads one metric (`GATES`): success (a drop in rate beyond the margin, a fraction), slip,
drift or rotation (a rise beyond the margin, in mm, mm and deg).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import HarnessError
from . import power, stats
from .summary import CELL, checked, valid_mask

__all__ = ["compare", "compare_variants", "gate_exit_code", "ALL", "GATES", "PASS", "WORSE", "BAD_INPUT",
           "INCONCLUSIVE", "MAX_BROKEN"]

ALL = "(all)"  # the key shown in the overall row's cell columns
PLACE = CELL[1:]  # object_set, object, routine: the cell within one variant
METRICS = {"slip_mm": "slip", "drift_mm": "drift", "drift_deg": "rotation"}  # column -> name in the output
COMPARE_COLUMNS = [*CELL, "outcome", "success", *METRICS]
NO_CHANGE = "no detectable change"
# gate name -> (verdict column, change column, sign of a worse change, default margin, unit); names of our own
GATES = {"success": ("verdict", "diff", -1, 0.05, ""), "slip": ("slip_verdict", "slip_diff", 1, 0.5, "mm"),
         "drift": ("drift_verdict", "drift_diff", 1, 0.5, "mm"),
         "rotation": ("rotation_verdict", "rotation_diff", 1, 1.0, "deg")}
PASS, WORSE, BAD_INPUT, INCONCLUSIVE = 0, 1, 2, 3  # exit codes of `compare`
MAX_BROKEN = 0.1  # largest share of broken (error, timeout, invalid) trials on a side before "inconclusive"


def compare(base, cand, margin=None, alpha=0.05, variants=None, gate="success", max_broken=MAX_BROKEN):
    """Compare two results tables; one row per variant x cell plus an overall row per variant.

    `variants=(base_variant, cand_variant)` compares those two (one from each table). Otherwise a
    table pair holding one variant each is compared as is, and tables with several variants are
    compared variant by variant on the names they share.

    Success effect: difference in success rate (candidate - base) with a 95 % interval, Newcombe's
    method 10 for paired data (Statistics in Medicine 17:2635-2650, 1998) in paired cells, his
    hybrid score interval for independent proportions (Statistics in Medicine 17:873-890, 1998)
    in unpaired ones. Slip, drift (mm) and rotation (drift_deg) effect: the Hodges-Lehmann estimate
    with the interval that inverts the rank test beside it (`stats.hodges_lehmann`): the median of
    the Walsh averages of the paired differences, or of all differences between the sides.
    `<name>_base` and `<name>_cand` are the sides' medians.

    A row is "worse" when the Holm-adjusted success p-value is below `alpha` and the candidate's
    rate is lower, "better" when it is higher; slip, drift and rotation verdicts read the same way,
    a rise counting as worse. `beyond_margin` marks rows worse on the `gate` metric by more than
    `margin` (default: the gate's own, `GATES`). `detectable_drop` is the smallest drop in success
    rate a paired row flags with 80 % power at alpha over the Holm family (`power.detectable_drop`;
    NaN where it can never be flagged). `inconclusive` marks overall rows with more than
    `max_broken` broken trials on a side.
    """
    checked(base, COMPARE_COLUMNS, "base table")
    checked(cand, COMPARE_COLUMNS, "candidate table")
    if gate not in GATES:
        raise HarnessError(f"unknown gate '{gate}'; allowed: {', '.join(GATES)}")
    margin = GATES[gate][3] if margin is None else margin
    if not 0 <= margin < (1 if gate == "success" else np.inf) or not 0 < alpha < 1 or not 0 <= max_broken <= 1:
        raise HarnessError(f"margin must be in [0, 1) for success (>= 0 for slip, drift, rotation), alpha in "
                           f"(0, 1) and max_broken in [0, 1]; got margin {margin}, alpha {alpha}, "
                           f"max_broken {max_broken}")
    base, cand = _matched(base, cand, variants)
    key = "pair_key" if "pair_key" in base.columns and "pair_key" in cand.columns else "trial_key"
    merged = _side(base, key, "base").merge(_side(cand, key, "candidate"), how="outer",
                                            on=["variant", *PLACE, key], suffixes=("_b", "_c"),
                                            indicator=True)
    rows = [{**dict(zip(CELL, cell)), **_cell_stats(g)}
            for cell, g in merged.groupby(CELL, sort=True)]
    rows += [{"variant": v, **dict.fromkeys(PLACE, ALL), **_cell_stats(g)}
             for v, g in merged.groupby("variant", sort=True)]
    out = _verdicts(pd.DataFrame(rows), margin, alpha, gate)
    overall = out["object"] == ALL
    share = np.maximum(out["broken_base"] / out["trials_base"].clip(lower=1),
                       out["broken_cand"] / out["trials_cand"].clip(lower=1))
    out["inconclusive"] = overall & (share > max_broken)
    return out


def compare_variants(df, base_variant, cand_variant, margin=None, alpha=0.05, gate="success",
                     max_broken=MAX_BROKEN):
    """Compare two variants of one results table, paired by their shared perturbation draws."""
    return compare(df, df, margin, alpha, variants=(base_variant, cand_variant), gate=gate, max_broken=max_broken)


def gate_exit_code(result):
    """1 (WORSE) when any row is worse on the gate by more than the margin; else 3 (INCONCLUSIVE) when
    too many trials are broken on a side; else 0 (PASS). A CI gate: only 0 is a pass."""
    if result["beyond_margin"].any():
        return WORSE
    return INCONCLUSIVE if result["inconclusive"].any() else PASS


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
    out["broken"] = ~valid
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
    side = g["_merge"].to_numpy()
    on_b, on_c = side != "right_only", side != "left_only"
    counts = {"trials_base": int(on_b.sum()), "trials_cand": int(on_c.sum()),
              "broken_base": int(g["broken_b"].to_numpy()[on_b].astype(bool).sum()),
              "broken_cand": int(g["broken_c"].to_numpy()[on_c].astype(bool).sum())}
    both = side == "both"
    if both.any():
        return {**counts, **_paired(g[both])}
    return {**counts, **_unpaired(g[side == "left_only"], g[side == "right_only"])}


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
        xb, xc = p[f"{m}_b"].to_numpy(), p[f"{m}_c"].to_numpy()
        diff = xc - xb
        row.update(_metric_effect(m, xb, xc, stats.hodges_lehmann(diff), stats.wilcoxon_p(diff)))
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
        row.update(_metric_effect(m, xb, xc, stats.hodges_lehmann(xc, xb), stats.mann_whitney_p(xc, xb)))
    return row


def _rates(kb, nb, kc, nc, lo, hi):
    rb = kb / nb if nb else np.nan
    rc = kc / nc if nc else np.nan
    return {"base_rate": rb, "cand_rate": rc, "diff": rc - rb, "diff_lo": float(lo), "diff_hi": float(hi)}


def _metric_effect(metric, xb, xc, effect, p):
    name = METRICS[metric]
    est, lo, hi = effect
    with np.errstate(all="ignore"):
        mb, mc = (float(np.nanmedian(x)) if np.isfinite(x).any() else np.nan for x in (xb, xc))
    return {f"{name}_base": mb, f"{name}_cand": mc, f"{name}_diff": est, f"{name}_lo": lo, f"{name}_hi": hi,
            f"p_{name}": p}


def _verdict(adjusted, change, alpha, worse_sign):
    """'worse' / 'better' / no detectable change from Holm-adjusted p and the change's sign."""
    significant = adjusted < alpha
    worse = significant & (np.sign(change) == worse_sign)
    better = significant & (np.sign(change) == -worse_sign)
    return np.select([worse, better], ["worse", "better"], NO_CHANGE)


def _verdicts(out, margin, alpha, gate):
    for name, (column, change, worse_sign, _, _) in GATES.items():
        out[f"p_{name}_holm"] = stats.holm(out[f"p_{name}"])
        out[column] = _verdict(out[f"p_{name}_holm"].to_numpy(), out[change].to_numpy(), alpha, worse_sign)
    column, change, worse_sign, _, _ = GATES[gate]
    out["beyond_margin"] = (out[column] == "worse") & (worse_sign * out[change] > margin)
    family = int(np.isfinite(out["p_success"]).sum())
    level = alpha / max(family, 1)  # Holm's first step: a lone changed row is tested at alpha / m
    paired = (out["pairing"] == "paired").to_numpy()
    out["detectable_drop"] = [power.detectable_drop(n, level) if ok else np.nan
                              for n, ok in zip(out["n_base"], paired)]
    return out
