"""Do results survive finer numerics? Paired comparison of the same trials run at two physics settings.

Both tables hold the same trials (same keys, seeds and perturbation draws) run at a coarse and a
fine setting. A trial near a decision boundary may flip between outcomes at any setting: that is
chaos, and it is reported as the flip share. What must not happen is a shift of the ensemble: a
setting counts as settled against the fine one when all of the TOLERANCES hold:

- overall paired success difference at most OVERALL_SHIFT and not significant (exact McNemar, ALPHA);
- no cell's paired difference significant after Holm over the cells (ALPHA);
- median slip and median drift of the trials held at both settings within METRIC_SHIFT of the fine
  setting's median, or within the metric's floor (a relative tolerance on a median of a few
  micrometres measures round-off);
- the static hold slip (median slip over the hold phase of held trials) below HOLD_SLIP_MM.

A cell is flagged numerics-sensitive when its paired success rate moved significantly (Holm), or
by at least CELL_SHIFT with every discordant pair on one side (at least two of them), or when the
median slip of its trials held at both settings moved by more than CELL_METRIC_SHIFT (and its floor)
over at least MIN_PAIRS such trials.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import HarnessError
from .stats import holm, mcnemar_exact_p, wilson_interval
from .summary import CELL, NOT_VALID

CROSSCHECK_NAME = "crosscheck.json"  # a run folder's crosscheck result and its flagged cells
ENGINE_CROSSCHECK_NAME = "engine-crosscheck.json"  # the same against the other engine (crosscheck --engine)
SENSITIVE = {"numerics": CROSSCHECK_NAME, "engine": ENGINE_CROSSCHECK_NAME}  # kind of flag -> its file

__all__ = ["TOLERANCES", "agreement", "cell_agreement", "settled", "numerics_flags", "sensitive_flags",
           "CROSSCHECK_NAME", "ENGINE_CROSSCHECK_NAME", "SENSITIVE"]

ALPHA = 0.05
OVERALL_SHIFT = 0.02  # paired success difference, share of trials
METRIC_SHIFT = 0.10  # relative change of the median slip / drift of trials held at both settings
SLIP_FLOOR_MM = 0.05  # below this a slip median's change is round-off (mm)
DRIFT_FLOOR_MM = 0.01  # the same for drift (mm)
HOLD_SLIP_MM = 0.05  # a static hold may slip at most this much (median over held trials, mm)
CELL_SHIFT = 0.25  # a cell's paired success difference this large, all one way, flags it
CELL_METRIC_SHIFT = 0.25  # relative change of a cell's median slip that flags it
MIN_PAIRS = 3  # fewest trials held at both settings for a cell's slip shift to count
TOLERANCES = {"alpha": ALPHA, "overall_shift": OVERALL_SHIFT, "metric_shift": METRIC_SHIFT,
              "slip_floor_mm": SLIP_FLOOR_MM, "drift_floor_mm": DRIFT_FLOOR_MM, "hold_slip_mm": HOLD_SLIP_MM,
              "cell_shift": CELL_SHIFT, "cell_metric_shift": CELL_METRIC_SHIFT, "min_pairs": MIN_PAIRS}


def _paired(coarse, fine):
    """The trials valid in both tables, joined on trial_key (suffixes _c and _f)."""
    for name, df in (("coarse", coarse), ("fine", fine)):
        missing = [c for c in ("trial_key", "outcome", "success", "slip_mm", "drift_mm", *CELL) if c not in df]
        if missing:
            raise HarnessError(f"the {name} results lack column(s) {', '.join(missing)}")
    measured = ["outcome", "success", "slip_mm", "drift_mm", "wall_s",
                *[c for c in ("hold_slip_mm",) if c in coarse and c in fine]]
    pairs = coarse[["trial_key", *CELL, *measured]].merge(fine[["trial_key", *measured]], on="trial_key",
                                                           suffixes=("_c", "_f"))
    valid = ~pairs["outcome_c"].isin(NOT_VALID) & ~pairs["outcome_f"].isin(NOT_VALID)
    if not valid.any():
        raise HarnessError("the two result tables share no trial that is valid in both")
    pairs = pairs[valid].copy()
    for side in ("_c", "_f"):
        pairs["success" + side] = pairs["success" + side].astype(bool)
    pairs["both_held"] = pairs["success_c"] & pairs["success_f"]
    return pairs, int((~valid).sum())


def _median(x):
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    return float(np.median(x)) if x.size else math.nan


def _moved(a, b, rel, floor):
    """Whether median a (coarse) differs from median b (fine) beyond rel x b and beyond the floor."""
    if not (math.isfinite(a) and math.isfinite(b)):
        return False
    return abs(a - b) > max(rel * abs(b), floor)


def cell_agreement(coarse, fine):
    """One row per cell: paired trials, success rates, discordant counts, McNemar p (Holm), the
    share of trials whose outcome agrees with its Wilson interval, median slip of trials held at
    both settings, and `flagged` with the reason (see module doc)."""
    pairs, _ = _paired(coarse, fine)
    rows = []
    for cell, g in pairs.groupby(CELL, sort=True):
        only_c = int((g["success_c"] & ~g["success_f"]).sum())
        only_f = int((~g["success_c"] & g["success_f"]).sum())
        same = int((g["outcome_c"] == g["outcome_f"]).sum())
        lo, hi = wilson_interval(same, len(g))
        held = g[g["both_held"]]
        rows.append({**dict(zip(CELL, cell)), "pairs": len(g), "success_coarse": g["success_c"].mean(),
                     "success_fine": g["success_f"].mean(), "only_coarse": only_c, "only_fine": only_f,
                     "p": float(mcnemar_exact_p(only_c, only_f)), "outcome_agreement": same / len(g),
                     "agreement_lo": float(lo), "agreement_hi": float(hi), "held_both": len(held),
                     "slip_coarse_mm": _median(held["slip_mm_c"]), "slip_fine_mm": _median(held["slip_mm_f"]),
                     "drift_coarse_mm": _median(held["drift_mm_c"]), "drift_fine_mm": _median(held["drift_mm_f"])})
    out = pd.DataFrame(rows)
    out["p_holm"] = holm(out["p"].to_numpy())
    reasons = []
    for r in out.itertuples():
        why = []
        if r.p_holm < ALPHA:
            why.append(f"success {r.success_coarse:.2f} vs {r.success_fine:.2f} (Holm p {r.p_holm:.2g})")
        elif abs(r.success_coarse - r.success_fine) >= CELL_SHIFT and min(r.only_coarse, r.only_fine) == 0 \
                and max(r.only_coarse, r.only_fine) >= 2:
            why.append(f"success {r.success_coarse:.2f} vs {r.success_fine:.2f}, all {r.only_coarse + r.only_fine} "
                       f"flips one way")
        if r.held_both >= MIN_PAIRS and _moved(r.slip_coarse_mm, r.slip_fine_mm, CELL_METRIC_SHIFT, SLIP_FLOOR_MM):
            why.append(f"median slip {r.slip_coarse_mm:.3g} vs {r.slip_fine_mm:.3g} mm")
        reasons.append("; ".join(why))
    out["flagged"] = [bool(w) for w in reasons]
    out["why"] = reasons
    return out


def agreement(coarse, fine):
    """The overall comparison as a flat dict (see module doc); `cells` holds cell_agreement."""
    pairs, dropped = _paired(coarse, fine)
    cells = cell_agreement(coarse, fine)
    only_c = int((pairs["success_c"] & ~pairs["success_f"]).sum())
    only_f = int((~pairs["success_c"] & pairs["success_f"]).sum())
    held = pairs[pairs["both_held"]]
    out = {
        "pairs": len(pairs), "dropped_invalid": dropped,
        "success_coarse": float(pairs["success_c"].mean()), "success_fine": float(pairs["success_f"].mean()),
        "only_coarse": only_c, "only_fine": only_f, "p": float(mcnemar_exact_p(only_c, only_f)),
        "flip_share": (only_c + only_f) / len(pairs),
        "outcome_flip_share": float((pairs["outcome_c"] != pairs["outcome_f"]).mean()),
        "cells": cells, "cells_significant": int((cells["p_holm"] < ALPHA).sum()),
        "cells_flagged": int(cells["flagged"].sum()),
        "held_both": len(held),
        "slip_coarse_mm": _median(held["slip_mm_c"]), "slip_fine_mm": _median(held["slip_mm_f"]),
        "drift_coarse_mm": _median(held["drift_mm_c"]), "drift_fine_mm": _median(held["drift_mm_f"]),
        "wall_coarse_s": float(pairs["wall_s_c"].mean()), "wall_fine_s": float(pairs["wall_s_f"].mean()),
    }
    out["difference"] = out["success_coarse"] - out["success_fine"]
    if "hold_slip_mm_c" in pairs:
        out["hold_slip_coarse_mm"] = _median(held["hold_slip_mm_c"])
        out["hold_slip_fine_mm"] = _median(held["hold_slip_mm_f"])
    out["failures"] = settled(out)
    return out


def settled(a):
    """The tolerances an `agreement` dict breaks, in words (empty: settled)."""
    why = []
    if abs(a["difference"]) > OVERALL_SHIFT:
        why.append(f"success differs by {a['difference']:+.3f} (> {OVERALL_SHIFT})")
    if a["p"] < ALPHA:
        why.append(f"McNemar p {a['p']:.2g} < {ALPHA}")
    if a["cells_significant"]:
        why.append(f"{a['cells_significant']} cell(s) significant after Holm")
    if _moved(a["slip_coarse_mm"], a["slip_fine_mm"], METRIC_SHIFT, SLIP_FLOOR_MM):
        why.append(f"median slip {a['slip_coarse_mm']:.3g} vs {a['slip_fine_mm']:.3g} mm")
    if _moved(a["drift_coarse_mm"], a["drift_fine_mm"], METRIC_SHIFT, DRIFT_FLOOR_MM):
        why.append(f"median drift {a['drift_coarse_mm']:.3g} vs {a['drift_fine_mm']:.3g} mm")
    hold = a.get("hold_slip_coarse_mm", math.nan)
    if math.isfinite(hold) and hold >= HOLD_SLIP_MM:
        why.append(f"static hold slip {hold:.3g} mm (>= {HOLD_SLIP_MM})")
    return why


def numerics_flags(run, kind="numerics"):
    """{(variant, object_set, object, routine): why} of a run's crosscheck of `kind` (SENSITIVE; empty
    without one)."""
    path = Path(run) / SENSITIVE[kind]
    if not path.is_file():
        return {}
    data = json.loads(path.read_text(encoding="utf-8"))
    return {(f["variant"], f["object_set"], f["object"], f["routine"]): f["why"] for f in data.get("flagged", [])}


def sensitive_flags(run):
    """{(variant, object_set, object, routine): why} of both kinds of crosscheck of a run, each reason
    led by its kind ("numerics-sensitive: ...", "engine-sensitive: ...")."""
    out = {}
    for kind in SENSITIVE:
        for cell, why in numerics_flags(run, kind).items():
            out[cell] = "; ".join(filter(None, [out.get(cell), f"{kind}-sensitive: {why}"]))
    return out
