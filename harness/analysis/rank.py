"""Object difficulty: a Rasch model fitted to trial outcomes, or a metric's median, with bootstrap intervals.

Rasch (one-parameter logistic) model: logit P(success of variant v on object o) = ability[v] -
difficulty[o], fitted by penalised maximum likelihood (L2 penalty on every parameter) with the
difficulties constrained to sum to zero, so a difficulty reads "harder than the average object by
so many logits". Intervals are percentile bootstraps that resample trials within each
variant x object cell. Routines are pooled.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import minimize
from scipy.special import expit

from ..errors import HarnessError
from ..seeds import rng_for
from .summary import checked, valid_mask

__all__ = ["Ranking", "rank", "fit_rasch", "RANK_BY"]

RANK_BY = {"success": "success", "slip": "slip_mm", "drift": "drift_mm"}  # --by choice -> column
RANK_COLUMNS = ["variant", "object_set", "object", "outcome", "success"]


@dataclass(frozen=True)
class Ranking:
    """Objects ranked hardest first; object sets likewise (None for a single set); variant abilities.

    `variants` is None when ranking by a metric (a median has no per-variant ability).
    """
    objects: pd.DataFrame
    sets: pd.DataFrame | None
    variants: pd.DataFrame | None


def fit_rasch(successes, trials, variant_index, object_index, n_variants, n_objects, penalty=0.1,
              start=None):
    """(ability, difficulty, x) maximising the penalised Rasch log-likelihood of per-cell counts.

    Objective: -sum(k eta - n log(1 + e^eta)) + penalty / 2 (|ability|^2 + |difficulty|^2), with
    eta = ability[v] - difficulty[o]. Difficulties are identified by sum-to-zero: the optimiser
    sees the first n_objects - 1 and the last is minus their sum. With penalty 0 the estimates
    diverge for objects or variants that always or never succeed. `start` (a previous `x`) warm-starts a refit.
    """
    k = np.asarray(successes, dtype=float)
    n = np.asarray(trials, dtype=float)
    v, o = np.asarray(variant_index), np.asarray(object_index)

    def unpack(x):
        u = x[n_variants:]
        return x[:n_variants], np.append(u, -u.sum())

    def objective(x):
        ability, difficulty = unpack(x)
        eta = ability[v] - difficulty[o]
        g = n * expit(eta) - k  # d(-loglik)/d(eta) per cell
        value = np.sum(n * np.logaddexp(0, eta) - k * eta) + penalty / 2 * (ability @ ability
                                                                              + difficulty @ difficulty)
        grad_a = np.bincount(v, g, n_variants) + penalty * ability
        grad_d = -np.bincount(o, g, n_objects) + penalty * difficulty
        return value, np.concatenate([grad_a, grad_d[:-1] - grad_d[-1]])

    x0 = np.zeros(n_variants + n_objects - 1) if start is None else start
    res = minimize(objective, x0, jac=True, method="L-BFGS-B",
                   options={"gtol": 1e-9, "ftol": 1e-14, "maxiter": 2000})
    ability, difficulty = unpack(res.x)
    return ability, difficulty, res.x


def rank(df, by="success", reps=200, penalty=0.1, seed=0, confidence=0.95):
    """Rank objects (and object sets) by difficulty; see the module text for the model.

    by: "success" (Rasch difficulty), "slip" or "drift" (median slip_mm / drift_mm over valid
    trials, higher is harder). Bootstrap: `reps` resamples, drawn from `seed`.
    """
    if by not in RANK_BY:
        raise HarnessError(f"unknown ranking '{by}'; allowed: {', '.join(RANK_BY)}")
    if reps < 1 or penalty < 0:
        raise HarnessError(f"reps must be at least 1 and penalty at least 0; got reps {reps}, penalty {penalty}")
    column = RANK_BY[by]
    checked(df, [*RANK_COLUMNS, column])
    df = df[valid_mask(df)]
    if df.empty:
        raise HarnessError("the results table holds no valid trials (all are invalid, error or timeout)")
    rng = rng_for(seed, "rank", by)
    objects = _object_facts(df)
    if by == "success":
        point, boot, variants = _rasch_bootstrap(df, objects.index, reps, penalty, rng, confidence)
    else:
        point, boot = _median_bootstrap(df, column, objects.index, reps, rng)
        variants = None
    score = "difficulty" if by == "success" else f"{column}_median"
    table = _scored(objects, score, point, boot, confidence)
    return Ranking(table, _set_table(objects, score, point, boot, confidence), variants)


def _object_facts(df):
    """Per object: its set, valid trials, plain success rate, and whether it separates anything."""
    g = df.assign(success=df["success"].astype(bool)).groupby("object", sort=True)
    facts = g.agg(object_set=("object_set", "first"), trials=("success", "size"),
                  success_rate=("success", "mean"))
    facts["flag"] = np.select([facts["success_rate"] == 1, facts["success_rate"] == 0],
                              ["always succeeds", "never succeeds"], "")
    return facts


def _interval(boot, confidence, axis=0):
    tail = (1 - confidence) / 2 * 100
    return np.percentile(boot, [tail, 100 - tail], axis=axis)


def _scored(facts, score, point, boot, confidence):
    """Facts with the score and its bootstrap interval, hardest first, ranked from 1."""
    lo, hi = _interval(boot, confidence)
    out = facts.assign(**{score: point, "lo": lo, "hi": hi})
    out = out[[score, "lo", "hi", *facts.columns]].sort_values(score, ascending=False, kind="stable")
    out = out.reset_index()
    out.insert(0, "rank", np.arange(1, len(out) + 1))
    return out


def _set_table(objects, score, point, boot, confidence):
    """Each object set's score (mean over its objects) with its interval; None for a single set."""
    sets = objects["object_set"].to_numpy()
    names = np.unique(sets)
    if len(names) < 2:
        return None
    member = (sets[None, :] == names[:, None]).astype(float)
    weights = member / member.sum(axis=1, keepdims=True)  # (sets, objects): mean over members
    successes = objects["success_rate"] * objects["trials"]
    facts = objects.assign(successes=successes).groupby("object_set").agg(
        objects=("trials", "size"), trials=("trials", "sum"), successes=("successes", "sum"))
    facts["success_rate"] = facts.pop("successes") / facts["trials"]
    return _scored(facts, score, weights @ point, boot @ weights.T, confidence)


def _cells(df, object_names):
    """Per variant x object cell: variant index, object index, successes and trials."""
    variants = np.unique(df["variant"])
    cells = df.groupby(["variant", "object"], sort=True)["success"].agg(["sum", "size"]).reset_index()
    v = np.searchsorted(variants, cells["variant"].to_numpy())
    o = np.searchsorted(object_names.to_numpy(), cells["object"].to_numpy())
    return variants, v, o, cells["sum"].to_numpy(float), cells["size"].to_numpy(float)


def _rasch_bootstrap(df, object_names, reps, penalty, rng, confidence):
    """Rasch point estimates, bootstrap difficulties (reps, objects) and the variant table.

    Resampling n trials with replacement from a cell with k successes draws Binomial(n, k / n)
    successes, so each replicate is drawn from the cell counts directly.
    """
    variants, v, o, k, n = _cells(df.assign(success=df["success"].astype(bool)), object_names)
    nv, no = len(variants), len(object_names)
    ability, difficulty, x = fit_rasch(k, n, v, o, nv, no, penalty)
    boot_d, boot_a = np.empty((reps, no)), np.empty((reps, nv))
    for r, k_star in enumerate(rng.binomial(n.astype(int), k / n, size=(reps, len(k)))):
        boot_a[r], boot_d[r], _ = fit_rasch(k_star, n, v, o, nv, no, penalty, start=x)
    lo, hi = _interval(boot_a, confidence)
    table = pd.DataFrame({"variant": variants, "ability": ability, "lo": lo, "hi": hi,
                          "trials": np.bincount(v, n, nv).astype(int),
                          "success_rate": np.bincount(v, k, nv) / np.bincount(v, n, nv)})
    return difficulty, boot_d, table.sort_values("ability", ascending=False).reset_index(drop=True)


def _median_bootstrap(df, column, object_names, reps, rng):
    """Per-object median of `column` and its bootstrap (reps, objects), resampling within cells."""
    data = df[["object", "variant", column]].dropna().sort_values(["object", "variant"], kind="stable")
    point, boot = np.full(len(object_names), np.nan), np.full((reps, len(object_names)), np.nan)
    for name, g in data.groupby("object", sort=True):
        j = object_names.get_loc(name)
        values = g[column].to_numpy()
        sizes = g.groupby("variant", sort=True).size().to_numpy()
        starts = np.repeat(np.cumsum(sizes) - sizes, sizes)  # each trial's cell start and size
        picks = starts + (rng.random((reps, len(values))) * np.repeat(sizes, sizes)).astype(int)
        point[j] = np.median(values)
        boot[:, j] = np.median(values[picks], axis=1)
    return point, boot
