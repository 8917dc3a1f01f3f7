"""A run as one self-contained HTML page: metadata, outcomes, success heat map, slip and drift,
object difficulty, optionally the regression against a baseline run, the worst trials (each with a
rendered frame of its replay and the command that replays it) and the safety note.

Every figure is a PNG drawn with matplotlib (Agg) and embedded as base64; the page needs no network
and no JavaScript. Colours are never the only carrier of meaning: rates use the perceptually uniform
cividis map and print their numbers in the cells, outcome bars carry hatching, distributions use
marker shapes, verdicts are words with an arrow sign.
"""

from __future__ import annotations

import base64
import html
import io
import math
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .plots import agg_pyplot

__all__ = ["build_report", "SECTIONS", "Report", "OUTCOME_STYLE", "worst_trials"]

SECTIONS = {"run": "Run", "errors": "Trials that failed to run", "outcomes": "Outcomes", "success": "Success rate by variant and object",
            "metrics": "Slip and drift per variant", "difficulty": "Object difficulty",
            "envelope": "Pick envelope: surface draw-in",
            "regression": "Regression against the baseline", "worst": "Worst trials", "safety": "Safety"}
# outcome -> (fill colour, hatch); the fills differ in lightness as well as hue, hatching tells them apart in print
OUTCOME_STYLE = {"held": ("#23395d", ""), "dropped": ("#f2b134", "//"), "missed": ("#d4d4d4", ".."),
                 "ejected": ("#8c2d04", "xx"), "stalled": ("#7fa7c9", "\\\\"), "invalid": ("#ffffff", "xxx"),
                 "error": ("#555555", "++"), "timeout": ("#a0a0a0", "--")}
RATE_MAP = "cividis"
VARIANT_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
LOG_FLOOR = {"slip_mm": 1e-2, "drift_mm": 1e-3}  # values below are drawn at the floor of the log axis
THUMB = (400, 300)
CSS = """
body { font-family: "DejaVu Sans", Helvetica, Arial, sans-serif; color: #1a1a1a; max-width: 1150px;
       margin: 1.5em auto; padding: 0 1em; line-height: 1.4; }
h1 { border-bottom: 3px solid #23395d; padding-bottom: .2em; }
h2 { border-bottom: 1px solid #999; margin-top: 2em; }
table { border-collapse: collapse; margin: .6em 0; font-size: 0.85em; }
th, td { border: 1px solid #b3b3b3; padding: .2em .5em; text-align: left; vertical-align: top; }
th { background: #eceff3; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
tr.worse td { font-weight: bold; background: #fff3d6; }
figure { margin: 1em 0; break-inside: avoid; page-break-inside: avoid; }
figure img { max-width: 100%; border: 1px solid #ccc; }
figcaption, .note { font-size: 0.85em; color: #333; }
.trials { display: grid; grid-template-columns: repeat(auto-fill, minmax(400px, 1fr)); gap: 1em; }
.trial { border: 1px solid #b3b3b3; padding: .5em; break-inside: avoid; page-break-inside: avoid; }
code { font-size: 0.85em; background: #f2f2f2; padding: .1em .3em; word-break: break-all; }
.safety { border: 2px solid #1a1a1a; padding: .6em 1em; font-weight: bold; }
@media print { body { max-width: none; } h2 { break-after: avoid; } }
"""


@dataclass
class Report:
    path: Path
    seconds: float
    images: int
    replays: list  # [(trial_key, matches journal, rendering changed nothing)]


def build_report(run, out, against=None, worst=2, campaign_file=None) -> Report:
    """Write the HTML report of `run` (optionally against the baseline run `against`) to `out`."""
    from ..safety import SAFETY
    from ..campaigns.runs import load_run, read_campaign
    started = time.perf_counter()
    run = Path(run).resolve()
    record = read_campaign(run)
    df = load_run(run)
    page = Page()
    page.section("run", _metadata(run, record, df))
    errors = _errors(df)
    if errors:  # failures first: they limit what every later section can say
        page.section("errors", errors)
    page.section("outcomes", _outcomes(page, df))
    from ..analysis.numerics import sensitive_flags
    page.section("success", _heat_maps(page, df, sensitive_flags(run)))
    page.section("metrics", _distributions(page, df))
    page.section("difficulty", _difficulty(page, df))
    from ..campaigns.envelope import POINTS_CSV
    if (run / POINTS_CSV).exists():  # `grasp-harness envelope SPEC --out RUN` wrote one into the run
        page.section("envelope", _envelope(page, run / POINTS_CSV))
    if against is not None:
        page.section("regression", _regression(page, load_run(Path(against)), df, against))
    replays = []
    page.section("worst", _worst(page, run, df, worst, campaign_file, replays))
    page.section("safety", f'<p class="safety">{_e(SAFETY)}</p>')
    title = f"grasp-harness report: {record.get('name', run.name)}"
    out = Path(out)
    out.write_text(page.html(title, f"Run folder {run}"), encoding="utf-8")
    return Report(out, time.perf_counter() - started, page.images, replays)


class Page:
    """Sections of HTML and a counter of embedded images."""

    def __init__(self):
        self.parts, self.images = [], 0

    def section(self, key, body):
        self.parts.append(f'<section id="{key}"><h2>{_e(SECTIONS[key])}</h2>\n{body}\n</section>')

    def figure(self, fig, caption, dpi=100):
        buffer = io.BytesIO()
        fig.savefig(buffer, format="png", dpi=dpi)
        agg_pyplot().close(fig)
        return self.image(buffer.getvalue(), caption)

    def image(self, png: bytes, caption, alt=None):
        self.images += 1
        data = base64.b64encode(png).decode("ascii")
        return (f'<figure><img alt="{_e(alt or caption)}" src="data:image/png;base64,{data}">'
                f"<figcaption>{_e(caption)}</figcaption></figure>")

    def html(self, title, subtitle):
        return (f'<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8"><title>{_e(title)}</title>'
                f"<style>{CSS}</style></head><body>\n<h1>{_e(title)}</h1><p class=\"note\">{_e(subtitle)}</p>\n"
                + "\n".join(self.parts) + "\n</body></html>\n")


def _e(text):
    return html.escape(str(text), quote=True)


def _table(rows, numeric=(), row_class=None):
    """An HTML table of dicts; `numeric` columns right-aligned; `row_class(row)` may give a class."""
    if not rows:
        return '<p class="note">(none)</p>'
    cols = list(dict.fromkeys(k for r in rows for k in r))
    head = "".join(f"<th>{_e(c)}</th>" for c in cols)
    body = []
    for r in rows:
        cls = row_class(r) if row_class else ""
        cells = "".join(f'<td class="num">{_e(_fmt(r.get(c, "")))}</td>' if c in numeric
                        else f"<td>{_e(_fmt(r.get(c, '')))}</td>" for c in cols)
        body.append(f'<tr class="{cls}">{cells}</tr>' if cls else f"<tr>{cells}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _fmt(value):
    if hasattr(value, "item"):
        value = value.item()
    if isinstance(value, float):
        return "-" if not math.isfinite(value) else f"{value:.4g}"
    return value


# --- run metadata ---------------------------------------------------------------------------------

def _metadata(run, record, df):
    from ..campaigns.journal import EVENTS_NAME, read_events
    env = record.get("environment", {})
    events = read_events(run / EVENTS_NAME) if (run / EVENTS_NAME).is_file() else []
    libs = ", ".join(f"{k} {v}" for k, v in env.get("libraries", {}).items() if v)
    machine = env.get("machine", {})
    counts = df["outcome"].value_counts()
    rows = [("campaign", f"{record.get('name')} ({record.get('file')}, hash {record.get('campaign_hash')})"),
            ("description", record.get("description", "")),
            ("created (UTC)", record.get("created_utc", "-")),
            ("campaign seed, trials per cell", f"{record.get('seed')}, {record.get('trials')}"),
            ("trials", f"{len(df)} recorded of {record.get('planned_trials', '?')} planned; "
                       f"{record.get('skipped_trials', 0)} skipped (routine does not suit the pair)"),
            ("by outcome", ", ".join(f"{o} {int(counts[o])}" for o in OUTCOME_STYLE if o in counts)),
            ("run time", _run_time(events)),
            ("tool", f"{env.get('tool', {}).get('name', 'grasp-harness')} {env.get('tool', {}).get('version', '?')}, "
                     f"Python {env.get('python', '?')}"),
            ("engine and libraries", libs or "-"),
            ("machine", f"{machine.get('platform', '?')}, {machine.get('cpus', '?')} CPU(s), "
                        f"host {machine.get('node', '?')}")]
    body = "".join(f"<tr><th>{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in rows)
    return f"<table><tbody>{body}</tbody></table>"


def _run_time(events):
    """Wall time summed over the run's sessions (a resumed run has several), from its event log."""
    total, start, last, sessions = 0.0, None, None, 0
    for ev in events:
        if ev.get("event") == "run_start":
            if start is not None:
                total += last - start
            start, sessions = ev["t"], sessions + 1
        last = ev.get("t", last)
        if ev.get("event") == "run_end" and start is not None:
            total += ev["t"] - start
            start = None
    if start is not None:
        total += last - start
    if not sessions:
        return "- (no event log)"
    return f"{total:.0f} s in {sessions} session(s)" if total < 120 else f"{total / 60:.1f} min in {sessions} session(s)"


# --- trials that failed to run -------------------------------------------------------------------

def _errors(df):
    """A table of error and timeout trials by reason, or "" when there are none."""
    from ..analysis.summary import error_reasons
    table = error_reasons(df)
    if table.empty:
        return ""
    rows = [{"trials": int(r["trials"]), "outcome": r["outcome"], "reason": r["reason"], "example trial": r["example"]}
            for r in table.to_dict("records")]
    return (f'<p class="note">{int(table["trials"].sum())} of {len(df)} trial(s) ended in error (the harness\'s '
            "code failed) or timeout; they are left out of every rate and metric below. By reason, most frequent "
            "first; <code>grasp-harness replay RUN KEY</code> reruns an example.</p>" + _table(rows, numeric=["trials"]))


# --- outcomes -------------------------------------------------------------------------------------

def _outcomes(page, df):
    plt = agg_pyplot()
    table = df.groupby(["variant", "outcome"]).size().unstack("outcome", fill_value=0)
    shown = [o for o in OUTCOME_STYLE if o in table.columns]
    table = table[shown]
    fig, ax = plt.subplots(figsize=(9, 0.7 + 0.55 * len(table)), constrained_layout=True)
    left = np.zeros(len(table))
    for outcome in shown:
        colour, hatch = OUTCOME_STYLE[outcome]
        values = table[outcome].to_numpy()
        ax.barh(range(len(table)), values, left=left, color=colour, hatch=hatch, edgecolor="#222222",
                linewidth=0.6, label=outcome)
        left += values
    ax.set_yticks(range(len(table)), [_wrapped(v) for v in table.index], fontsize=8)
    ax.invert_yaxis()
    ax.set_xlabel("trials")
    ax.legend(ncol=len(shown), loc="upper center", bbox_to_anchor=(0.5, -0.35 if len(table) < 4 else -0.15),
              fontsize=8, frameon=False)
    rows = [{"variant": v, **{o: int(table.loc[v, o]) for o in shown}, "total": int(table.loc[v].sum())}
            for v in table.index]
    return (page.figure(fig, "Trials per outcome and variant (all routines and objects).")
            + _table(rows, numeric=[*shown, "total"])
            + '<p class="note">Invalid (the simulation blew up), error and timeout trials say nothing about the '
              "gripper; they are counted here and left out of rates and metrics below.</p>")


# --- success heat map -----------------------------------------------------------------------------

def _heat_maps(page, df, flags=None):
    """`flags`: {(variant, object_set, object, routine): why} of cells a crosscheck found
    numerics- or engine-sensitive; they get a dashed red frame and are listed under the map."""
    from ..analysis import summary
    flags = flags or {}
    flagged_at = {(v, o, r) for v, _, o, r in flags}
    plt = agg_pyplot()
    table = summary(df)
    # an object name used by two object sets is two objects: label those rows with their set
    sets_of = table.groupby("object")["object_set"].nunique()
    table["object"] = [f"{s}/{o}" if sets_of[o] > 1 else o for s, o in zip(table["object_set"], table["object"])]
    routines = sorted(table["routine"].unique())
    variants = sorted(table["variant"].unique())
    objects = sorted(table["object"].unique())
    fig, axes = plt.subplots(1, len(routines), figsize=(1.2 + len(routines) * (1.6 + 1.25 * len(variants)),
                                                        1.6 + 0.42 * len(objects)),
                             squeeze=False, constrained_layout=True, sharey=True)
    cmap = plt.get_cmap(RATE_MAP)
    for ax, routine in zip(axes[0], routines):
        part = table[table["routine"] == routine].set_index(["object", "variant"])
        rate = np.full((len(objects), len(variants)), np.nan)
        for (i, o) in enumerate(objects):
            for (j, v) in enumerate(variants):
                if (o, v) in part.index:
                    rate[i, j] = part.loc[(o, v), "success_rate"]
                    _cell_label(ax, j, i, part.loc[(o, v)], cmap)
                    if (v, o, routine) in flagged_at:
                        ax.add_patch(plt.Rectangle((j - 0.46, i - 0.46), 0.92, 0.92, fill=False, edgecolor="#d62728",
                                                   linestyle="--", linewidth=2))
                else:
                    ax.add_patch(plt.Rectangle((j - 0.5, i - 0.5), 1, 1, facecolor="#f4f4f4", hatch="///",
                                               edgecolor="#bbbbbb", linewidth=0))
                    ax.text(j, i, "not run", ha="center", va="center", fontsize=7, color="#555555")
        image = ax.imshow(np.ma.masked_invalid(rate), cmap=cmap, vmin=0, vmax=1, aspect="auto")
        ax.set_xticks(range(len(variants)), [_wrapped(v) for v in variants], fontsize=7)
        ax.set_yticks(range(len(objects)), objects, fontsize=8)
        ax.set_title(routine, fontsize=10)
        ax.set_xticks(np.arange(-0.5, len(variants)), minor=True)
        ax.set_yticks(np.arange(-0.5, len(objects)), minor=True)
        ax.grid(which="minor", color="white", linewidth=1.5)
        ax.tick_params(which="minor", length=0)
    fig.colorbar(image, ax=axes[0].tolist(), shrink=0.6, label="success rate")
    caption = ("Success rate per variant, object and routine: the large number is the rate over valid trials, "
               "the bracket its 95 % Wilson score interval and n the valid trials. Wide brackets mean few trials.")
    if flags:
        caption += (f" Dashed red frames: {len(flags)} cell(s) whose results moved under finer numerics or on the "
                    "other physics engine in the run's crosschecks (numerics- or engine-sensitive; read their "
                    "rates with care).")
    html = page.figure(fig, caption)
    if flags:
        items = "".join(f"<li>{_e(v)} / {_e(o)} / {_e(r)}: {_e(why)}</li>" for (v, _, o, r), why in sorted(flags.items()))
        html += f'<p class="note">Numerics- and engine-sensitive cells (crosschecks):</p><ul>{items}</ul>'
    return html


def _wrapped(name):
    """A variant name on two lines: the spec's name, then its sweep values in brackets."""
    return name.replace("[", "\n[", 1)


def _cell_label(ax, x, y, cell, cmap):
    rate, lo, hi, n = cell["success_rate"], cell["success_lo"], cell["success_hi"], int(cell["valid"])
    if not n:
        ax.text(x, y, "no valid\ntrials", ha="center", va="center", fontsize=7)
        return
    r, g, b, _ = cmap(rate)
    ink = "black" if 0.299 * r + 0.587 * g + 0.114 * b > 0.5 else "white"
    ax.text(x, y - 0.12, f"{rate:.0%}", ha="center", va="center", fontsize=9, fontweight="bold", color=ink)
    ax.text(x, y + 0.25, f"[{lo:.0%}, {hi:.0%}] n={n}", ha="center", va="center", fontsize=6.5, color=ink)


# --- slip and drift -------------------------------------------------------------------------------

def _horizontal():
    """boxplot's keyword for horizontal boxes: `orientation` from matplotlib 3.10, `vert` before."""
    import matplotlib
    major, minor = (int(v) for v in matplotlib.__version__.split(".")[:2])
    return {"orientation": "horizontal"} if (major, minor) >= (3, 10) else {"vert": False}


_HORIZONTAL = _horizontal()

def _distributions(page, df):
    from ..analysis.summary import valid_mask
    plt = agg_pyplot()
    valid = df[valid_mask(df)]
    if valid.empty:
        return '<p class="note">No valid trials: every trial was invalid, an error or a timeout.</p>'
    variants = sorted(valid["variant"].unique())
    rng = np.random.default_rng(0)  # jitter only; fixed so a report is reproducible
    fig, axes = plt.subplots(1, 2, figsize=(11, 1.2 + 0.75 * max(len(variants), 2)), constrained_layout=True)
    for ax, (column, label) in zip(axes, (("slip_mm", "slip distance over the trial (mm)"),
                                          ("drift_mm", "largest drift in the hand (mm)"))):
        floor = LOG_FLOOR[column]
        data = [np.maximum(valid.loc[valid["variant"] == v, column].dropna().to_numpy(), floor) for v in variants]
        boxes = ax.boxplot([d if len(d) else [np.nan] for d in data], widths=0.55, patch_artist=True,
                           showfliers=False, medianprops={"color": "black", "linewidth": 2}, **_HORIZONTAL)
        for k, box in enumerate(boxes["boxes"]):
            box.set(facecolor="#dfe6ef", edgecolor="#23395d", hatch=("", "..", "//", "\\\\")[k % 4])
        for k, v in enumerate(variants):
            part = valid[valid["variant"] == v].dropna(subset=[column])
            y = k + 1 + rng.uniform(-0.2, 0.2, len(part))
            held = part["success"].to_numpy(bool)
            x = np.maximum(part[column].to_numpy(), floor)
            ax.scatter(x[held], y[held], marker="o", s=12, facecolor="none", edgecolor="#23395d", linewidth=0.8,
                       label="held" if k == 0 else None)
            ax.scatter(x[~held], y[~held], marker="x", s=16, color="#8c2d04", linewidth=0.9,
                       label="not held" if k == 0 else None)
        if any(len(d) for d in data):  # a log axis needs positive data: none when no valid trial has the metric
            ax.set_xscale("log")
        ax.set_yticks(range(1, len(variants) + 1), [_wrapped(v) for v in variants], fontsize=7)
        ax.invert_yaxis()
        ax.set_xlabel(f"{label}, log axis", fontsize=8)
        ax.grid(True, axis="x", which="both", color="#e0e0e0", linewidth=0.5)
        ax.legend(fontsize=7, loc="lower right")
    rows = []
    for v in variants:
        part = valid[valid["variant"] == v]
        rows.append({"variant": v, "valid trials": len(part),
                     **{f"{c} {q}": part[c].quantile(p) for c in ("slip_mm", "drift_mm", "drift_deg")
                        for q, p in (("median", 0.5), ("p90", 0.9))},
                     "slip peak median (mm/s)": part["slip_peak_mm_s"].median()})
    caption = ("Valid trials per variant: box = quartiles, thick line = median, whiskers to 1.5 IQR; each trial a "
               "marker (circle: held, cross: not held). Drift exists only for trials that reached a hold. Values "
               f"below {LOG_FLOOR['slip_mm']:g} mm of slip or {LOG_FLOOR['drift_mm']:g} mm of drift are drawn at "
               "that floor of the log axis.")
    return page.figure(fig, caption) + _table(rows, numeric=[k for k in rows[0] if k != "variant"] if rows else ())


# --- difficulty -----------------------------------------------------------------------------------

def _difficulty(page, df):
    from ..analysis import rank
    from ..errors import HarnessError
    plt = agg_pyplot()
    try:
        ranking = rank(df, by="success", reps=200, seed=0)
    except HarnessError as exc:
        return f'<p class="note">No ranking: {_e(exc)}</p>'
    objects = ranking.objects
    fig, ax = plt.subplots(figsize=(8, 1.0 + 0.32 * len(objects)), constrained_layout=True)
    y = np.arange(len(objects))
    ax.hlines(y, objects["lo"], objects["hi"], color="#23395d", linewidth=2)
    flagged = objects["flag"].to_numpy() != ""
    ax.scatter(objects["difficulty"][~flagged], y[~flagged], marker="o", s=30, color="#23395d", zorder=3,
               label="difficulty")
    ax.scatter(objects["difficulty"][flagged], y[flagged], marker="D", s=30, facecolor="white", edgecolor="#23395d",
               zorder=3, label="always or never succeeds")
    ax.axvline(0, color="#777777", linestyle="--", linewidth=0.8)
    ax.set_yticks(y, objects["object"], fontsize=8)
    ax.invert_yaxis()
    ax.set_xlabel("Rasch difficulty (logits; 0 = average object, higher = harder)")
    ax.legend(fontsize=7, loc="lower right")
    ax.grid(True, axis="x", color="#e0e0e0", linewidth=0.5)
    caption = ("Objects hardest first, with 95 % percentile bootstrap intervals (200 resamples of trials within "
               "each variant x object cell); routines pooled.")
    keep = ["rank", "object", "object_set", "difficulty", "lo", "hi", "trials", "success_rate", "flag"]
    parts = [page.figure(fig, caption), _table(objects[keep].to_dict("records"),
                                               numeric=["rank", "difficulty", "lo", "hi", "trials", "success_rate"])]
    if ranking.sets is not None:
        parts += ["<p>Object sets:</p>", _table(ranking.sets.to_dict("records"))]
    if ranking.variants is not None:
        parts += ["<p>Variant ability (logits; higher succeeds more):</p>",
                  _table(ranking.variants.to_dict("records"), numeric=["ability", "lo", "hi", "trials", "success_rate"])]
    return "\n".join(parts)


# --- regression -----------------------------------------------------------------------------------

VERDICT_SIGN = {"worse": "▼ worse", "better": "▲ better"}


def _envelope(page, path):
    import pandas as pd

    from ..campaigns.envelope import boundary
    from .envelope import boundary_rows, envelope_figure
    df = pd.read_csv(path)
    edge = boundary(df)
    variant = df["variant"].dropna().iloc[0] if "variant" in df and df["variant"].notna().any() else "?"
    caption = (f"{path.name}: {len(df)} surface-draw-in trials of {variant} "
               f"({df['solver_iterations'].iloc[0]} it @ {df['step_hz'].iloc[0]} Hz); line: the rigid bite "
               "boundary mu = tan(beta) (rolling-mill angle of bite), steps: the measured boundary")
    return page.figure(envelope_figure(df, edge), caption) + _table(boundary_rows(edge))


def _regression(page, base, cand, against, margin=0.05, alpha=0.05):
    from ..analysis import compare, gate_exit_code
    from ..analysis.compare import ALL
    from ..errors import HarnessError
    plt = agg_pyplot()
    try:
        result = compare(base, cand, margin, alpha)
    except HarnessError as exc:
        return f'<p class="note">No comparison with {_e(against)}: {_e(exc)}</p>'
    code = gate_exit_code(result)
    result = result.assign(_overall=result["object"] != ALL).sort_values(
        ["_overall", "variant", "object", "routine"], kind="stable").reset_index(drop=True)
    rows = []
    for r in result.to_dict("records"):
        rows.append({"variant": r["variant"], "object": r["object"], "routine": r["routine"], "pairing": r["pairing"],
                     "n base/cand": f"{r['n_base']}/{r['n_cand']}",
                     "base rate": r["base_rate"], "cand rate": r["cand_rate"],
                     "change [95% CI]": _interval(r["diff"], r["diff_lo"], r["diff_hi"]),
                     "p (Holm)": r["p_success_holm"], "verdict": VERDICT_SIGN.get(r["verdict"], r["verdict"]),
                     "slip change (mm)": _interval(r["slip_diff"], r["slip_lo"], r["slip_hi"]),
                     "slip": VERDICT_SIGN.get(r["slip_verdict"], r["slip_verdict"]),
                     "drift change (mm)": _interval(r["drift_diff"], r["drift_lo"], r["drift_hi"]),
                     "drift": VERDICT_SIGN.get(r["drift_verdict"], r["drift_verdict"]),
                     "beyond margin": "yes" if r["beyond_margin"] else ""})
    gate = (f"Gate: {int(result['beyond_margin'].sum())} row(s) significantly worse by more than {margin:g}: "
            "`grasp-harness compare` exits 1." if code else
            f"Gate: no row significantly worse by more than {margin:g}: `grasp-harness compare` exits 0.")
    fig, ax = plt.subplots(figsize=(8, 1.0 + 0.3 * len(result)), constrained_layout=True)
    one = result["variant"].nunique() == 1
    places = ["all objects and routines" if r["object"] == ALL else f"{r['object']} | {r['routine']}"
              for r in result.to_dict("records")]
    labels = places if one else [f"{_wrapped(v)} | {p}" for v, p in zip(result["variant"], places)]
    if one:
        ax.set_title(result["variant"].iloc[0], fontsize=9)
    y = np.arange(len(result))
    ax.hlines(y, result["diff_lo"], result["diff_hi"], color="#23395d", linewidth=2)
    for verdict, marker in (("worse", "v"), ("better", "^"), ("no detectable change", "o")):
        pick = result["verdict"].to_numpy() == verdict
        ax.scatter(result["diff"][pick], y[pick], marker=marker, s=36, zorder=3, label=verdict,
                   facecolor="white" if verdict != "worse" else "#8c2d04", edgecolor="#1a1a1a")
    ax.axvline(0, color="#777777", linewidth=0.8)
    ax.axvline(-margin, color="#8c2d04", linestyle=":", linewidth=1, label=f"margin -{margin:g}")
    ax.set_yticks(y, labels, fontsize=7)
    ax.invert_yaxis()
    ax.set_xlabel("change in success rate (candidate - base) with 95 % interval")
    ax.legend(fontsize=7, loc="lower right")
    caption = (f"This run (candidate) against {against} (base). Success: exact McNemar on paired trials (Fisher "
               "where none are shared), Newcombe intervals; slip and drift: median change, Wilcoxon or Mann-Whitney; "
               f"p-values Holm-adjusted per metric; verdicts at alpha {alpha:g}.")
    return (f"<p><b>{_e(gate)}</b></p>" + page.figure(fig, caption)
            + _table(rows, numeric=["base rate", "cand rate", "p (Holm)"],
                     row_class=lambda r: "worse" if r["verdict"].endswith("worse") else ""))


def _interval(est, lo, hi):
    return "-" if est != est else f"{est:+.3f} [{lo:+.3f}, {hi:+.3f}]"


# --- worst trials ---------------------------------------------------------------------------------

def worst_trials(df, n=2):
    """[(kind, moment, row)]: dropped trials, then ejected ones (each largest slip first, each under its
    own heading), then the largest slip and the largest drift among the rest of the valid trials; drift
    only among trials still held at the end."""
    from ..analysis.summary import valid_mask
    valid = df[valid_mask(df)]
    picked, out = set(), []
    def lost(outcome):
        return valid[valid["outcome"] == outcome].sort_values("slip_mm", ascending=False)

    kept = valid[valid["outcome"].isin(("held", "stalled"))]
    for kind, moment, table, column in (("dropped", "drop", lost("dropped"), None),
                                        ("ejected", "drop", lost("ejected"), None),
                                        ("largest slip", "slip", valid, "slip_mm"),
                                        ("largest drift", "drift", kept, "drift_mm")):
        if column is not None:
            table = table.dropna(subset=[column]).sort_values(column, ascending=False)
        rows, cells = [], set()  # one trial per cell, so the examples differ
        for r in table.to_dict("records"):
            cell = (r["variant"], r["object"], r["routine"])
            if len(rows) < n and r["trial_key"] not in picked and cell not in cells:
                rows.append(r)
                cells.add(cell)
        picked.update(r["trial_key"] for r in rows)
        out += [(kind, moment, r) for r in rows]
    return out


def _worst(page, run, df, n, campaign_file, replays):
    from ..errors import HarnessError
    from .replay import open_trial, render, replay_command, row_differences, survey
    from ..campaigns.runs import read_campaign
    chosen = worst_trials(df, n)
    if not chosen:
        return '<p class="note">No dropped, ejected, slipping or drifting valid trials.</p>'
    # a campaign path recorded relative to where the run was started goes into the command resolved
    recorded = Path(campaign_file or read_campaign(run).get("file", ""))
    extra = ("--campaign", str(recorded.resolve())) if campaign_file or not recorded.is_absolute() else ()
    cards, problem = [], None
    for kind, moment, row in chosen:
        key = row["trial_key"]
        thumb, status = "", ""
        if problem is None:
            try:
                source = open_trial(run, key, campaign_file)
                first, surveyed = survey(source)
                step = surveyed.moment(moment, source.logged)
                again, renderer = render(source, surveyed, steps={step}, width=THUMB[0], height=THUMB[1],
                                         follow=True)
                frame = renderer.frames[0]
                same = not row_differences(source.logged, again) if source.logged else False
                steady = not row_differences(first, again)
                replays.append((key, same, steady))
                status = (f"Replay: {'matches the journal bit for bit' if same else 'DIFFERS from the journal'}"
                          f"{'' if steady else '; rendering changed the numbers'}; frame at t = {frame.time:.2f} s "
                          f"({frame.phase or '-'}).")
                thumb = page.image(_png(frame.image), status, alt=f"{kind}: {source.title()}")
            except HarnessError as exc:
                problem = str(exc)
        cards.append(_card(kind, row, thumb, replay_command(run, key, "--gif", f"{key}.gif", *extra)))
    note = (f'<p class="note">Thumbnails left out: {_e(problem)}</p>' if problem else
            '<p class="note">Each thumbnail is one frame of a fresh replay of the trial: discs mark contacts '
            "(size: normal force; colour: slip speed, scale in the corner), arrows the slip direction.</p>")
    return note + '<div class="trials">' + "".join(cards) + "</div>"


def _card(kind, row, thumb, command):
    facts = (f"{_e(row['variant'])} / {_e(row['object'])} / {_e(row['routine'])}<br>outcome <b>{_e(row['outcome'])}</b>"
             f"{' in ' + _e(row['failed_phase']) if row.get('failed_phase') else ''}; slip {_fmt(row['slip_mm'])} mm "
             f"(peak {_fmt(row['slip_peak_mm_s'])} mm/s); drift {_fmt(row['drift_mm'])} mm, "
             f"{_fmt(row['drift_deg'])} deg; seed {row['seed']}")
    return (f'<div class="trial"><h3>{_e(kind)}</h3><p>{facts}</p>{thumb}'
            f"<p>Replay: <code>{_e(command)}</code></p></div>")


def _png(image):
    from PIL import Image
    buffer = io.BytesIO()
    Image.fromarray(image).save(buffer, format="PNG")
    return buffer.getvalue()
