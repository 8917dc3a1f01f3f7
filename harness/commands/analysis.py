"""The `summary`, `compare` and `rank` subcommands: argument parsing, loading, rendering.

`register(subparsers)` adds the three parsers; each `cmd_*` handler returns the exit code. The
`*_text` functions take DataFrames, so they work (and are tested) without a run folder. Bad input
(unknown file, column or variant, empty table) prints one error line and gives exit code 2.
"""

from __future__ import annotations

import sys
from pathlib import Path

__all__ = ["register", "cmd_summary", "cmd_compare", "cmd_rank", "load_table", "summary_text",
           "compare_text", "rank_text", "FORMATS"]

FORMATS = ("text", "csv", "markdown", "json")
STRING_COLUMNS = ("trial_key", "pair_key", "gripper", "variant", "object", "object_set", "routine", "outcome")
EXCLUDED_NOTE = "Invalid, error and timeout trials are counted but excluded from success rates and metrics."


def register(subparsers):
    """Add the summary, compare and rank subcommands to an argparse subparsers object."""
    source = "a run folder, or a results table saved as .csv or .parquet"
    s = subparsers.add_parser("summary", help="success rates with intervals, outcome counts and metrics per cell",
                              description="Per variant x object x routine: trials, success rate with a 95 % "
                                          "Wilson score interval, outcome counts, slip and drift (median, 90th "
                                          "percentile) and epsilon. " + EXCLUDED_NOTE)
    s.add_argument("run", metavar="RUN", help=source)
    _add_format(s)
    c = subparsers.add_parser(
        "compare", help="regression verdicts of a candidate against a baseline",
        description="Compare success, slip and drift cell by cell (object x routine) and overall, paired on "
                    "shared perturbation draws where the tables share them. Give BASE and CANDIDATE (two "
                    "single-variant runs are compared directly, others variant by variant on shared names), "
                    "or BASE alone with --variants to compare two of its variants. The gate reads one metric "
                    "(--gate). Exit codes: 0 pass; 1 a row is significantly worse on the gate by more than "
                    "--margin; 2 bad input; 3 inconclusive: more than --max-broken of a side's trials ended in "
                    "error, timeout or invalid (never a pass).")
    c.add_argument("base", metavar="BASE", help=f"the baseline: {source}")
    c.add_argument("candidate", metavar="CANDIDATE", nargs="?", help="the candidate (omit to compare two "
                                                                      "variants of BASE with --variants)")
    c.add_argument("--variants", nargs=2, metavar=("BASE_VARIANT", "CANDIDATE_VARIANT"),
                   help="compare these two variants (the first from BASE, the second from CANDIDATE or BASE)")
    c.add_argument("--gate", choices=("success", "slip", "drift", "rotation"), default="success",
                   help="what the exit code reads: success rate (default), slip (mm), drift (mm) or rotation "
                        "error (drift_deg)")
    c.add_argument("--margin", type=float, metavar="X",
                   help="largest tolerated worsening on the gate: a drop in success rate as a fraction "
                        "(default 0.05), or a rise in median slip or drift in mm (default 0.5) or rotation "
                        "in deg (default 1)")
    c.add_argument("--alpha", type=float, default=0.05, metavar="LEVEL",
                   help="significance level after Holm correction (default 0.05)")
    c.add_argument("--max-broken", type=float, default=0.1, metavar="SHARE",
                   help="largest share of a side's trials that may end in error, timeout or invalid before the "
                        "comparison is inconclusive, exit code 3 (default 0.1)")
    c.add_argument("--sequential", type=float, metavar="DROP",
                   help="also replay each cell's pairs in trial order through the sequential gate with this "
                        "detect_drop and show where it would have settled")
    _add_format(c)
    r = subparsers.add_parser("rank", help="object and object-set difficulty with bootstrap intervals",
                              description="Rank objects (and object sets) hardest first: by Rasch difficulty "
                                          "from success, or by median slip or drift. " + EXCLUDED_NOTE)
    r.add_argument("run", metavar="RUN", help=source)
    r.add_argument("--by", choices=("success", "slip", "drift"), default="success",
                   help="success: Rasch difficulty (default); slip, drift: median slip_mm or drift_mm")
    r.add_argument("--reps", type=int, default=200, metavar="N", help="bootstrap resamples (default 200)")
    r.add_argument("--penalty", type=float, default=0.1, metavar="L2",
                   help="L2 penalty of the Rasch fit; keeps always/never-succeeding objects finite (default 0.1)")
    r.add_argument("--seed", type=int, default=0, metavar="N", help="seed of the bootstrap (default 0)")
    _add_format(r)


def _add_format(parser):
    parser.add_argument("--to", choices=FORMATS, default="text",
                        help="output: aligned text (default), csv, markdown or json")


def cmd_summary(args):
    return _run(lambda: (summary_text(load_table(args.run), args.to), 0))


def cmd_compare(args):
    def work():
        if args.candidate is None and args.variants is None:
            raise _error("compare needs CANDIDATE, or --variants BASE_VARIANT CANDIDATE_VARIANT to compare "
                         "two variants of BASE")
        base = load_table(args.base)
        cand = base if args.candidate is None else load_table(args.candidate)
        text, code = compare_text(base, cand, args.to, args.margin, args.alpha, args.variants, args.gate,
                                  args.max_broken, args.sequential)
        if args.to == "text":
            text += numerics_note(base, cand, args, [args.base] + ([args.candidate] if args.candidate else []))
        return text, code
    return _run(work)


def numerics_note(base, cand, args, runs):
    """Lines naming the verdicts that rest on cells a crosscheck of either run flagged numerics- or
    engine-sensitive (empty when neither run has flags)."""
    from ..analysis.numerics import sensitive_flags
    from ..analysis import compare
    flags = {}
    for run in runs:
        for (variant, _, obj, routine), why in sensitive_flags(run).items():
            flags.setdefault((obj, routine), []).append(f"{variant}: {why}")
    if not flags:
        return ""
    from ..analysis.compare import GATES, NO_CHANGE
    result = compare(base, cand, args.margin, args.alpha, args.variants, args.gate, args.max_broken)
    lines = []
    for r in result.to_dict("records"):
        hits = flags.get((r["object"], r["routine"]), [])
        verdict = r[GATES[args.gate][0]]
        if hits and verdict != NO_CHANGE:
            kinds = " and ".join(k for k in ("numerics", "engine") if any(f"{k}-sensitive" in h for h in hits))
            lines.append(f"  {r['variant']} / {r['object']} / {r['routine']}: {args.gate} verdict '{verdict}' rests "
                         f"on a {kinds}-sensitive cell ({'; '.join(hits)})")
    head = (f"\nCrosscheck: {sum(map(len, flags.values()))} cell(s) flagged numerics- or engine-sensitive in "
            "these runs")
    return head + (":\n" + "\n".join(lines) if lines else "; no verdict rests on them.")


def cmd_rank(args):
    return _run(lambda: (rank_text(load_table(args.run), args.to, args.by, args.reps, args.penalty, args.seed), 0))


def _run(work):
    """Print the text `work` returns and give its exit code; a HarnessError prints one line and gives 2."""
    from ..errors import HarnessError
    try:
        text, code = work()
    except HarnessError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    print(text)
    return code


def _error(message):
    from ..errors import HarnessError
    return HarnessError(message)


def load_table(path):
    """The results table of a run folder (harness.campaigns.runs.load_run), or of a .csv / .parquet file."""
    import pandas as pd
    p = Path(path)
    if p.is_dir():
        from harness.campaigns.runs import load_run
        return load_run(p)
    if not p.is_file():
        raise _error(f"no run folder or results file at {path}")
    from harness.campaigns.journal import RENAMED_COLUMNS
    if p.suffix == ".csv":
        return pd.read_csv(p, dtype=dict.fromkeys(STRING_COLUMNS, str)).rename(columns=RENAMED_COLUMNS)
    if p.suffix == ".parquet":
        try:
            return pd.read_parquet(p).rename(columns=RENAMED_COLUMNS)
        except ImportError as exc:
            raise _error(f"reading {path} needs a Parquet engine (pip install pyarrow): {exc}") from None
    raise _error(f"{path} is neither a run folder nor a .csv or .parquet results table")


def _render(df, fmt, notes=()):
    """A DataFrame as text (aligned, with notes), markdown (with notes), csv or json."""
    if fmt == "csv":
        return df.to_csv(index=False).rstrip("\n")
    if fmt == "json":
        return df.to_json(orient="records", indent=1)
    rows = [{k: _plain(v) for k, v in row.items()} for row in df.to_dict("records")]
    if fmt == "markdown":
        table = _markdown(rows)
    else:
        from ..table import format_table
        table = format_table(rows)
    return "\n".join([table, "", *notes]) if notes else table


def _plain(value):
    """numpy scalars as Python numbers (format_table aligns int and float), NaN as '-'."""
    if hasattr(value, "item"):
        value = value.item()
    if isinstance(value, float) and value != value:
        return "-"
    return value


def _markdown(rows):
    cols = list(dict.fromkeys(k for r in rows for k in r))
    fmt = lambda v: f"{v:.4g}" if isinstance(v, float) else str(v)  # noqa: E731 (same numbers as the text table)
    lines = ["| " + " | ".join(cols) + " |", "|" + "---|" * len(cols)]
    lines += ["| " + " | ".join(fmt(r.get(c, "")) for c in cols) + " |" for r in rows]
    return "\n".join(lines)


def _interval(est, lo, hi, digits=3):
    """'est [lo, hi]' with a fixed number of decimals; '-' when there is no estimate."""
    if est != est:
        return "-"
    return f"{est:.{digits}f} [{lo:.{digits}f}, {hi:.{digits}f}]"


# --- summary ---------------------------------------------------------------------------------------

def summary_text(df, fmt="text"):
    """The `summary` output for a results table."""
    from ..analysis import summary
    from ..analysis.summary import NOT_VALID, OUTCOMES, error_reasons
    table = summary(df)
    if fmt in ("csv", "json"):
        return _render(table, fmt)
    errors = error_reasons(df)
    shown = [o for o in OUTCOMES if table[o].any()]
    display = table[["variant", "object_set", "object", "routine", "trials", "valid"]].copy()
    if display["object_set"].nunique() == 1:
        display = display.drop(columns="object_set")
    display["success [95% CI]"] = [_interval(*v) for v in
                                   table[["success_rate", "success_lo", "success_hi"]].to_numpy()]
    display[shown] = table[shown]
    for metric in ("slip_mm", "drift_mm", "drift_deg"):
        display[f"{metric} p50/p90"] = [f"{a:.3g}/{b:.3g}" if a == a else "-"
                                        for a, b in table[[f"{metric}_p50", f"{metric}_p90"]].to_numpy()]
    display["epsilon p50"] = table["epsilon_p50"]
    excluded = ", ".join(f"{int(table[o].sum())} {o}" for o in NOT_VALID)
    notes = [f"Success rates count valid trials only: {excluded} trial(s) are counted above but excluded "
             "from success rates and metrics.",
             "Interval: 95 % Wilson score. p50 median, p90 90th percentile; slip over held trials, drift over "
             "trials that kept the object in the hand (held or stalled), epsilon over valid trials."]
    text = _render(display, fmt, notes)
    if errors.empty:
        return text
    # failures first: a run whose trials did not run says little, and the reasons say why
    head = (f"{int(errors['trials'].sum())} of {len(df)} trial(s) ended in error or timeout; by reason "
            "(replay the example trial to see it fail):")
    errors = errors.assign(reason=[r if len(r) <= 160 else r[:157] + "..." for r in errors["reason"]])
    return "\n".join([head, _render(errors, fmt), "", text])


# --- compare ---------------------------------------------------------------------------------------

def compare_text(base, cand, fmt="text", margin=None, alpha=0.05, variants=None, gate="success",
                 max_broken=None, sequential=None):
    """(output, exit code) of `compare`: 0 pass, 1 worse on the gate, 3 inconclusive (see compare.GATES).

    `sequential` (a detect_drop) adds where each cell's sequential gate (`sequential.settle`) would
    have settled had the pairs run in trial order.
    """
    from ..analysis import compare, gate_exit_code
    from ..analysis.compare import GATES, MAX_BROKEN
    max_broken = MAX_BROKEN if max_broken is None else max_broken
    margin = GATES.get(gate, (None,) * 4)[3] if margin is None else margin
    result = compare(base, cand, margin, alpha, variants, gate=gate, max_broken=max_broken)
    code = gate_exit_code(result)
    if sequential is not None:
        result = _with_sequential(result, base, cand, variants, sequential, alpha, margin if gate == "success" else 0)
    if fmt in ("csv", "json"):
        return _render(result, fmt), code
    display = result[["variant", "object", "routine", "pairing", "n_base", "n_cand",
                      "base_rate", "cand_rate"]].copy()
    if display["variant"].nunique() == 1:
        display = display.drop(columns="variant")
    display["broken b/c"] = [f"{b}/{c}" for b, c in result[["broken_base", "broken_cand"]].to_numpy()]
    display["change [95% CI]"] = [_interval(*v) for v in result[["diff", "diff_lo", "diff_hi"]].to_numpy()]
    display["p_holm"] = result["p_success_holm"]
    display["verdict"] = result["verdict"]
    display["detectable drop"] = [f"{d:.2f}" if d == d else ("never" if p == "paired" else "-")
                                  for d, p in result[["detectable_drop", "pairing"]].to_numpy()]
    for name in ("slip", "drift", "rotation"):
        unit = GATES[name][4]
        display[f"{name}_{unit} change"] = [_interval(*v, digits=2) for v in
                                           result[[f"{name}_diff", f"{name}_lo", f"{name}_hi"]].to_numpy()]
        display[f"{name}_verdict"] = result[f"{name}_verdict"]
    if sequential is not None:
        display["sequential"] = [f"{v} at {n}" for v, n in result[["seq_verdict", "seq_pairs"]].to_numpy()]
    notes = [f"Change = candidate - base. Success: exact McNemar test on paired trials, Fisher exact test where "
             f"the tables share no keys; interval: Newcombe (1998) method 10, paired (Statistics in Medicine "
             f"17:2635-2650, with that paper's continuity-corrected phi) or unpaired (17:873-890). Slip, drift "
             f"(mm) and rotation (drift_deg): Hodges-Lehmann estimate with the interval that inverts its test, "
             f"Wilcoxon signed-rank (paired) or Mann-Whitney U (Hollander and Wolfe 1999, sections 3.3 and "
             f"4.3). p-values Holm-adjusted across the {len(result)} rows per metric; verdicts at alpha "
             f"{alpha:g}. broken b/c: error, timeout and invalid trials per side, left out of the tests.",
             *_power_lines(result, alpha), *_gate_lines(result, gate, margin, max_broken, code)]
    if sequential is not None:
        notes.append(_sequential_note(result, sequential, alpha))
    return _render(display, fmt, notes), code


def _rows_named(result):
    return ["overall" if o == "(all)" else f"{o} / {r}" for o, r in result[["object", "routine"]].to_numpy()]


def _power_lines(result, alpha):
    """What the success gate can see: the smallest drop a cell can flag, and cells that never can."""
    import numpy as np

    from ..analysis.power import POWER, fewest_flaggable
    family = int(np.isfinite(result["p_success"]).sum())
    level = alpha / max(family, 1)
    cells = result[(result["object"] != "(all)") & (result["pairing"] == "paired")]
    if cells.empty:
        return []
    need = fewest_flaggable(level)
    blind = cells[cells["n_base"] < need]
    fewest = int(cells["n_base"].min())
    line = (f"Power ({POWER:.0%}, exact McNemar at alpha {alpha:g} / {family} rows, a candidate losing only "
            f"trials the base won): a cell needs at least {need} pairs to be flagged at all")
    if len(blind):
        line += (f"; {len(blind)} of {len(cells)} cells have fewer and can never be flagged, whatever the "
                 f"change (e.g. {', '.join(_rows_named(blind)[:3])})")
    else:
        line += (f"; cells with {fewest} pairs (the fewest here) cannot show a change smaller than "
                 f"{cells['detectable_drop'].max():.2f}")
    overall = result[result["object"] == "(all)"]
    if len(overall) and overall["detectable_drop"].notna().all():
        line += f"; the overall row can show {overall['detectable_drop'].max():.2f}."
    else:
        line += "."
    return [line]


def _basis(r, gate):
    """'worse: success 0.40 -> 0.27 over 240 pairs (p = 0.02 after Holm)' for one row."""
    from ..analysis.compare import GATES
    column, change, _, _, unit = GATES[gate]
    over = f"over {r['n_base']} pairs" if r["pairing"] == "paired" else f"over {r['n_base']} and {r['n_cand']} trials"
    if gate == "success":
        what = f"success {r['base_rate']:.2f} -> {r['cand_rate']:.2f}"
    else:
        what = (f"{gate} median {r[f'{gate}_base']:.2f} -> {r[f'{gate}_cand']:.2f} {unit} (change "
                f"{r[change]:+.2f} {unit})")
    return f"{r[column]}: {what} {over} (p = {r[f'p_{gate}_holm']:.2g} after Holm)"


def _gate_lines(result, gate, margin, max_broken, code):
    from ..analysis.compare import GATES
    unit = GATES[gate][4]
    head = f"Gate on {gate} (margin {margin:g}{' ' + unit if unit else ''}): "
    lines = []
    worse = result[result["beyond_margin"]]
    names = _rows_named(result)
    if len(worse):
        lines.append(head + f"{len(worse)} row(s) worse by more than the margin; exit code 1.")
        lines += [f"  {names[i]}: {_basis(r, gate)}" for i, (_, r) in zip(
            [result.index.get_loc(j) for j in worse.index], worse.iterrows())]
    else:
        overall = result[result["object"] == "(all)"]
        lines.append(head + f"no row is worse by more than the margin" +
                     ("; exit code 0." if code == 0 else "."))
        lines += [f"  overall: {_basis(r, gate)}" for _, r in overall.iterrows()]
    for _, r in result[result["inconclusive"]].iterrows():
        share_b = r["broken_base"] / max(r["trials_base"], 1)
        share_c = r["broken_cand"] / max(r["trials_cand"], 1)
        lines.append(f"Inconclusive ({r['variant']}): {share_b:.0%} of the base's and {share_c:.0%} of the "
                     f"candidate's trials ended in error, timeout or invalid, more than the {max_broken:.0%} "
                     f"allowed (--max-broken); what they would have shown is unknown"
                     + ("; exit code 3." if code == 3 else "."))
    return lines


def _with_sequential(result, base, cand, variants, detect_drop, alpha, margin):
    """Add seq_verdict and seq_pairs: the sequential gate replayed on each paired cell's pairs."""
    import pandas as pd
    from ..analysis.compare import PLACE, _matched
    from ..analysis.sequential import settle
    b, c = _matched(base, cand, variants)
    pairs = b.merge(c, on=["variant", *PLACE, "pair_key"], suffixes=("_b", "_c"))
    ok = ~(pairs["outcome_b"].isin(("invalid", "error", "timeout")) | pairs["outcome_c"].isin(
        ("invalid", "error", "timeout")))
    pairs = pairs[ok]
    order = "trial_b" if "trial_b" in pairs.columns else "pair_key"
    groups = {k: g.sort_values(order) for k, g in pairs.groupby(["variant", *PLACE])}
    family = sum(1 for k in groups)
    verdicts, used = [], []
    for row in result[[*["variant"], *PLACE]].itertuples(index=False):
        g = groups.get(tuple(row))
        if g is None:
            verdicts.append("-")
            used.append(0)
            continue
        d = g["success_b"].to_numpy(int) - g["success_c"].to_numpy(int)
        v, n = settle(d, cells=family, detect_drop=detect_drop, alpha=alpha, margin=margin)
        verdicts.append(str(v))
        used.append(int(n))
    return result.assign(seq_verdict=pd.Series(verdicts, index=result.index, dtype=object),
                         seq_pairs=used)


def _sequential_note(result, detect_drop, alpha):
    cells = result[(result["object"] != "(all)") & (result["seq_verdict"] != "-")]
    settled = cells[cells["seq_verdict"].isin(("worse", "no drop of detect_drop"))]
    return (f"Sequential gate (detect_drop {detect_drop:g}, alpha {alpha:g} over {len(cells)} cells, power 80 %; "
            f"harness.analysis.sequential), pairs in trial order: {len(settled)} of {len(cells)} cells settle, "
            f"using {int(cells['seq_pairs'].sum())} of {int(cells['n_base'].sum())} pairs; "
            f"{int((cells['seq_verdict'] == 'worse').sum())} worse. 'open': not settled by the pairs there are.")


# --- rank ------------------------------------------------------------------------------------------

def rank_text(df, fmt="text", by="success", reps=200, penalty=0.1, seed=0):
    """The `rank` output: objects, then object sets and variant abilities when there are any."""
    import pandas as pd
    from ..analysis import rank
    from ..analysis.rank import RANK_BY
    ranking = rank(df, by=by, reps=reps, penalty=penalty, seed=seed)
    parts = {"objects": ranking.objects, "object sets": ranking.sets, "variants": ranking.variants}
    parts = {name: table for name, table in parts.items() if table is not None}
    if fmt == "csv":
        return _render(pd.concat([t.assign(table=name) for name, t in parts.items()], ignore_index=True), fmt)
    if fmt == "json":
        return "{\n" + ",\n".join(f'"{name}": {_render(t, fmt)}' for name, t in parts.items()) + "\n}"
    score = "Rasch difficulty in logits (ability - difficulty = log-odds of success)" if by == "success" \
        else f"median {RANK_BY[by]}"
    sections = [f"{name.capitalize()}:\n{_render(t, fmt)}" for name, t in parts.items()]
    notes = [f"Ranked hardest first by {score}; lo, hi: 95 % percentile bootstrap interval over {reps} "
             "resamples of trials within each variant x object cell.",
             "flag: an object every variant always or never succeeds on separates nothing.", EXCLUDED_NOTE]
    return "\n\n".join(sections) + "\n\n" + "\n".join(notes)
