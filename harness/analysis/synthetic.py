"""Synthetic results tables with planted effects, for the analysis tests and benchmark.

Success follows a Rasch model, P = logistic(ability[variant] - difficulty[object] + shift[cell]).
Every variant sees the same perturbation draws (same pair_key), and a draw's latent value is
shared across variants with correlation `pairing` (Gaussian copula), so paired trials are
correlated as they are in real runs. A share of trials is invalid, error or timeout with a random,
meaningless success flag, which the analysis must ignore.

`python -m harness.analysis.synthetic --bench [--rows N]` times summary, compare and rank.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd
from scipy.special import expit, ndtr

from ..errors import HarnessError
from ..seeds import rng_for

__all__ = ["synthetic_results"]

ROUTINES = ("draw-in", "pinch-lift", "roll", "shift", "hold-under-shake")
FAILURES = (("dropped", "missed", "ejected", "stalled"), (0.5, 0.2, 0.15, 0.15))
BROKEN = ("invalid", "error", "timeout")


def synthetic_results(*, variants=("base", "candidate"), objects=10, routines=ROUTINES[:1], trials=40,
                      object_sets=1, ability=None, difficulty=None, object_slip=None, success_shift=None,
                      slip_factor=None, pairing=0.6, broken_share=0.02, seed=0):
    """A results table with one row per variant x object x routine x trial.

    ability (per variant, default 0) and difficulty (per object, default N(0, 1) draws) are in
    logits; object_slip is each object's median slip in mm (default 2 e^(0.3 difficulty)).
    success_shift maps (variant, object, routine) to a logit shift and slip_factor maps it to a
    slip multiplier: the planted effects. Objects are named obj-000, ...; sets set-0, ... hold
    contiguous blocks of objects.
    """
    rng = rng_for(seed, "synthetic")
    variants, routines = list(variants), list(routines)
    nv, no, nr = len(variants), objects, len(routines)
    draws = no * nr * trials  # one perturbation draw per object x routine x trial, shared by variants
    ability = np.zeros(nv) if ability is None else np.asarray(ability, dtype=float)
    difficulty = rng.normal(0, 1, no) if difficulty is None else np.asarray(difficulty, dtype=float)
    object_slip = 2 * np.exp(0.3 * difficulty) if object_slip is None else np.asarray(object_slip, dtype=float)
    names = [f"obj-{i:03d}" for i in range(no)]
    shift = _cell_array(success_shift, 0.0, variants, names, routines)
    factor = _cell_array(slip_factor, 1.0, variants, names, routines)

    n = nv * draws
    v = np.repeat(np.arange(nv), draws)
    d = np.tile(np.arange(draws), nv)
    o, r = d // (nr * trials), d // trials % nr

    def shared_normal():
        """Standard normal values correlated `pairing` between the variants of one draw."""
        return np.sqrt(pairing) * rng.standard_normal(draws)[d] + np.sqrt(1 - pairing) * rng.standard_normal(n)

    success = ndtr(shared_normal()) < expit(ability[v] - difficulty[o] + shift[v, o, r])
    outcome = np.where(success, "held", rng.choice(FAILURES[0], size=n, p=FAILURES[1])).astype(object)
    broken = rng.random(n) < broken_share
    outcome[broken] = rng.choice(BROKEN, size=int(broken.sum()))
    success = np.where(broken, rng.random(n) < 0.5, success)
    slip = object_slip[o] * factor[v, o, r] * np.exp(0.5 * shared_normal())
    drift = 0.8 * slip * np.exp(0.3 * shared_normal())
    no_contact = broken | (outcome == "missed")
    variant_names = np.array(variants, dtype=object)
    return pd.DataFrame({
        "trial_key": _hex_keys(seed, v * draws + d, 1), "pair_key": _hex_keys(seed, d, 2),
        "gripper": pd.Series(variant_names[v]).str.split("[").str[0],
        "variant": variant_names[v], "object": np.array(names, dtype=object)[o],
        "object_set": np.array([f"set-{i * object_sets // no}" for i in range(no)], dtype=object)[o],
        "routine": np.array(routines, dtype=object)[r], "seed": _hash(seed, d, 3) % 2**31,
        "outcome": outcome, "success": success,
        "slip_mm": np.where(no_contact, np.nan, slip),
        "slip_peak_mm_s": np.where(no_contact, np.nan, 40 * slip),
        "drift_mm": np.where(no_contact, np.nan, drift),
        "drift_deg": np.where(no_contact, np.nan, 2 * drift),
        "epsilon": np.where(no_contact, np.nan, rng.gamma(4, 0.01, n)),
        "wall_s": rng.uniform(0.5, 3.0, n),
    })


def _cell_array(mapping, default, variants, objects, routines):
    """A (variant, object, routine) array from {(variant, object, routine): value}."""
    out = np.full((len(variants), len(objects), len(routines)), default, dtype=float)
    for (v, o, r), value in (mapping or {}).items():
        try:
            out[variants.index(v), objects.index(o), routines.index(r)] = value
        except ValueError:
            raise HarnessError(f"planted effect names an unknown cell ({v}, {o}, {r}); variants: "
                               f"{', '.join(variants)}; routines: {', '.join(routines)}") from None
    return out


def _hash(seed, ids, salt):
    """Stable 64-bit hashes of integer ids, different for each seed and salt (pandas' vectorised hash)."""
    mixed = np.asarray(ids, dtype=np.uint64) + np.uint64((seed % 2**24) << 40 | salt << 32)
    return pd.util.hash_array(mixed)


def _hex_keys(seed, ids, salt):
    return pd.Series(_hash(seed, ids, salt)).map("{:016x}".format).to_numpy(dtype=object)


def bench_table(rows=1_000_000, seed=0):
    """A two-variant table of about `rows` rows (50 objects x 5 routines) with one planted drop."""
    trials = max(1, rows // (2 * 50 * len(ROUTINES)))
    return synthetic_results(variants=("duo-roller[finger.roller.radius_mm=10]",
                                       "duo-roller[finger.roller.radius_mm=12]"),
                             objects=50, routines=ROUTINES, trials=trials, object_sets=2, seed=seed,
                             success_shift={("duo-roller[finger.roller.radius_mm=12]", "obj-007", "roll"): -1.0})


def bench(rows=1_000_000, seed=0):
    """Wall times (s) of building the table, summary, compare_variants and rank on it."""
    from . import compare_variants, rank, summary
    times = {}
    start = time.perf_counter()
    df = bench_table(rows, seed)
    times["build table"] = time.perf_counter() - start
    base, cand = sorted(df["variant"].unique())
    for name, run in (("summary", lambda: summary(df)),
                      ("compare", lambda: compare_variants(df, base, cand)),
                      ("rank", lambda: rank(df, reps=200))):
        start = time.perf_counter()
        run()
        times[name] = time.perf_counter() - start
    return len(df), times


def main(argv=None):
    p = argparse.ArgumentParser(prog="python -m harness.analysis.synthetic",
                                description="Time the analysis on a synthetic results table.")
    p.add_argument("--bench", action="store_true", help="run the timing benchmark")
    p.add_argument("--rows", type=int, default=1_000_000, help="table size (default 1,000,000)")
    args = p.parse_args(argv)
    if not args.bench:
        p.print_help()
        return 0
    n, times = bench(args.rows)
    print(f"{n:,} rows")
    for name, seconds in times.items():
        print(f"{name:12s} {seconds:7.2f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
