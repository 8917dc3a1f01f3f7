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
                    "or BASE alone with --variants to compare two of its variants. "
                    "Exit code 1 when any cell is significantly worse by more than --margin, else 0.")
    c.add_argument("base", metavar="BASE", help=f"the baseline: {source}")
    c.add_argument("candidate", metavar="CANDIDATE", nargs="?", help="the candidate (omit to compare two "
                                                                      "variants of BASE with --variants)")
    c.add_argument("--variants", nargs=2, metavar=("BASE_VARIANT", "CANDIDATE_VARIANT"),
                   help="compare these two variants (the first from BASE, the second from CANDIDATE or BASE)")
    c.add_argument("--margin", type=float, default=0.05, metavar="FRACTION",
                   help="largest tolerated drop in success rate, e.g. 0.05 for 5 points (default 0.05)")
    c.add_argument("--alpha", type=float, default=0.05, metavar="LEVEL",
                   help="significance level after Holm correction (default 0.05)")
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
        return compare_text(base, cand, args.to, args.margin, args.alpha, args.variants)
    return _run(work)


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
    """The results table of a run folder (harness.runs.load_run), or of a .csv / .parquet file."""
    import pandas as pd
    p = Path(path)
    if p.is_dir():
        from harness.runs import load_run
        return load_run(p)
    if not p.is_file():
        raise _error(f"no run folder or results file at {path}")
    if p.suffix == ".csv":
        return pd.read_csv(p, dtype=dict.fromkeys(STRING_COLUMNS, str))
    if p.suffix == ".parquet":
        try:
            return pd.read_parquet(p)
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
    from . import summary
    from .summary import NOT_VALID, OUTCOMES, error_reasons
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

def compare_text(base, cand, fmt="text", margin=0.05, alpha=0.05, variants=None):
    """(output, exit code) of `compare`; exit code 1 when a cell is worse by more than the margin."""
    from . import compare, gate_exit_code
    result = compare(base, cand, margin, alpha, variants)
    code = gate_exit_code(result)
    if fmt in ("csv", "json"):
        return _render(result, fmt), code
    display = result[["variant", "object", "routine", "pairing", "n_base", "n_cand",
                      "base_rate", "cand_rate"]].copy()
    if display["variant"].nunique() == 1:
        display = display.drop(columns="variant")
    display["change [95% CI]"] = [_interval(*v) for v in result[["diff", "diff_lo", "diff_hi"]].to_numpy()]
    display["p_holm"] = result["p_success_holm"]
    display["verdict"] = result["verdict"]
    for name in ("slip", "drift"):
        display[f"{name}_mm change"] = [_interval(*v, digits=2) for v in
                                        result[[f"{name}_diff", f"{name}_lo", f"{name}_hi"]].to_numpy()]
        display[f"{name}_verdict"] = result[f"{name}_verdict"]
    worse = int(result["beyond_margin"].sum())
    gate = (f"Gate: {worse} row(s) significantly worse by more than the margin {margin:g}; exit code 1."
            if code else f"Gate: no row is significantly worse by more than the margin {margin:g}; exit code 0.")
    notes = [f"Change = candidate - base. Success: exact McNemar test on paired trials, Fisher exact test where "
             f"the tables share no keys; interval after Newcombe (1998). Slip and drift: median change, Wilcoxon "
             f"signed-rank (paired) or Mann-Whitney U tests. p-values Holm-adjusted across the {len(result)} rows "
             f"per metric; verdicts at alpha {alpha:g}. {EXCLUDED_NOTE}", gate]
    return _render(display, fmt, notes), code


# --- rank ------------------------------------------------------------------------------------------

def rank_text(df, fmt="text", by="success", reps=200, penalty=0.1, seed=0):
    """The `rank` output: objects, then object sets and variant abilities when there are any."""
    import pandas as pd
    from . import rank
    from .rank import RANK_BY
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
