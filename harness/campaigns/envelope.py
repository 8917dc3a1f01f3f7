"""Pick envelope: which low parts a roller-finger variant draws off the work surface, swept over the
part's height and the roller-part friction coefficient, beside the analytic bite boundary (sim/bite.py).

Each point of the sweep is one nominal `surface-draw-in` trial on a generated part:
- `cylinder`: a lying cylinder (a capsule, its straight part longer than the rollers are wide) of
  diameter `height`, its axis along the roller axes;
- `disc`: a standing disc of radius DISC_RADIUS and thickness `height`;
- `plate`: a plate PLATE_SIZE lying flat, `height` thick.
The part's own friction coefficient is set so the roller-part pair acts with `mu` (world.pair_friction).
A point is `drawn_in` when the climb phase brought the part to the rollers' nip, `held` when the
whole routine (lift and hold too) succeeded.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..sim.bite import SHAPES, bite_angle, required_mu, roller_friction

__all__ = ["SHAPES", "EnvelopePoint", "default_heights", "DEFAULT_MU", "part", "run_point", "sweep", "boundary",
           "POINTS_CSV", "BOUNDARY_CSV", "CHART_PNG"]

# the files `grasp-harness envelope` writes; `report` shows the chart of a run folder holding POINTS_CSV
POINTS_CSV = "envelope.csv"
BOUNDARY_CSV = "envelope-boundary.csv"
CHART_PNG = "envelope.png"

DEFAULT_MU = (0.1, 0.2, 0.3, 0.45, 0.6, 0.8, 1.0, 1.3, 1.7)
DENSITY = 1200.0  # kg/m^3; a lab plastic (acrylic is about 1190 kg/m^3, recalled from memory)
CYLINDER_LENGTH = 0.03  # m; straight part of the lying cylinder, wider than any demo roller
DISC_RADIUS = 0.012  # m
PLATE_SIZE = (0.024, 0.016)  # m


@dataclass(frozen=True)
class EnvelopePoint:
    shape: str
    height: float  # m
    mu: float  # roller-part pair friction coefficient


def default_heights(roller_radius, count=8):
    """Part heights (m) from a tenth of the roller radius to 1.6 radii, evenly spaced on a log scale
    (the bite boundary changes fastest for the thinnest parts)."""
    return tuple(float(h) for h in np.geomspace(0.1 * roller_radius, 1.6 * roller_radius, count))


def part(point: EnvelopePoint, roller_friction):
    """The ObjectInstance of one sweep point (its name says shape, height and mu)."""
    from ..models.objects import generate, load_object_set
    h_mm = point.height * 1e3
    shape = {"cylinder": {"kind": "capsule", "radius_mm": h_mm / 2, "length_mm": CYLINDER_LENGTH * 1e3},
             "disc": {"kind": "disc", "radius_mm": DISC_RADIUS * 1e3, "thickness_mm": h_mm},
             "plate": {"kind": "plate", "size_x_mm": PLATE_SIZE[0] * 1e3, "size_y_mm": PLATE_SIZE[1] * 1e3,
                       "thickness_mm": h_mm}}[point.shape]
    name = f"{point.shape}-{h_mm:.2f}mm-mu{point.mu:.3f}"
    entry = {"name": name, **shape, "density_kg_m3": DENSITY, "restitution": 0.0,
             "friction": point.mu ** 2 / roller_friction}  # pair: sqrt(roller mu x part mu) = mu
    raw = {"name": "envelope", "seed": 1, "object": [entry]}
    return generate(load_object_set("<envelope>", raw))[0]


def run_point(payload: dict) -> dict:
    """One sweep point (a worker function: payload holds plain data): its CSV row."""
    from ..campaigns.campaign import _variant
    from ..sim.routines import make_routine
    from ..sim.trial import Perturbation, run_trial
    from ..sim.world import PhysicsSettings
    model = _variant(payload["spec"], payload["variant"])
    point = EnvelopePoint(payload["shape"], payload["height"], payload["mu"])
    instance = part(point, roller_friction(model))
    # a lying cylinder is laid with its axis along the hand's x (trial.TrialContext): turn it onto
    # the roller axes (y) so the rollers meet its round side
    pert = Perturbation(object_yaw=math.pi / 2 if point.shape == "cylinder" else 0.0)
    row = run_trial(model, instance, make_routine("surface-draw-in", payload["routine"]), pert, seed=0,
                    settings=PhysicsSettings(**payload["physics"]))
    r = model.roller_radius
    return {"variant": model.name, "roller_radius_mm": r * 1e3, "shape": point.shape,
            "height_mm": point.height * 1e3, "mu": point.mu,
            "required_mu": required_mu(point.shape, r, point.height),
            "bite_angle_deg": math.degrees(bite_angle(point.shape, r, point.height)),
            "mass_g": instance.mass * 1e3, "outcome": row["outcome"], "drawn_in": bool(row.get("climb_ok")),
            "held": row["outcome"] == "held", "reason": row["reason"],
            "solver_iterations": row["solver_iterations"], "step_hz": row["step_hz"]}


def sweep(spec, variant, shapes, heights, mus, settings, routine=None, workers=1, progress=None):
    """Run every (shape, height, mu) point; a DataFrame of their rows in grid order. `workers` > 1
    runs them in that many worker processes (campaigns/executors.py); `progress(n)` is called as
    points finish."""
    import pandas as pd

    from .executors import iter_results
    base = {"spec": str(spec), "variant": variant, "physics": settings.record(), "routine": dict(routine or {})}
    grid = [EnvelopePoint(s, float(h), float(m)) for s in shapes for h in heights for m in mus]
    tasks = [(str(i), {**base, "shape": p.shape, "height": p.height, "mu": p.mu}) for i, p in enumerate(grid)]
    rows = {}
    if workers <= 1:
        for key, payload in tasks:
            rows[key] = run_point(payload)
            if progress:
                progress(1)
    else:
        for key, row in iter_results(tasks, run_point, workers=workers):
            if "shape" not in row:  # a crashed or failed point: keep its inputs with the failure
                payload = tasks[int(key)][1]
                row = {"shape": payload["shape"], "height_mm": payload["height"] * 1e3, "mu": payload["mu"],
                       "outcome": row.get("outcome", "error"), "drawn_in": False, "held": False,
                       "reason": row.get("reason", "")}
            rows[key] = row
            if progress:
                progress(1)
    return pd.DataFrame([rows[key] for key, _ in tasks])


def boundary(df):
    """Measured bite boundary per (shape, height): `mu_from` the lowest mu of the grid that drew the
    part in with the next higher mu drawing it in too (or the highest mu), so one odd point does not
    move it; `mu_below` the highest mu under it that did not (NaN where the grid has none);
    `measured_mu` their midpoint; `misses_above` the points from `mu_from` up that did not draw the
    part in; against the analytic `required_mu`."""
    import pandas as pd
    out = []
    for (shape, height), g in df.sort_values("mu").groupby(["shape", "height_mm"], sort=False):
        drawn = g["drawn_in"].to_numpy(bool)
        mus = g["mu"].to_numpy(float)
        last = len(drawn) - 1
        start = next((i for i in range(len(drawn)) if drawn[i] and (i == last or drawn[i + 1])), None)
        if start is None:
            mu_from = measured = math.nan
            below = [i for i in range(len(drawn))]
        else:
            mu_from = mus[start]
            below = [i for i in range(start) if not drawn[i]]
        mu_below = mus[below[-1]] if below else math.nan
        if start is not None:
            measured = (mu_from + mu_below) / 2 if below else mu_from
        out.append({"shape": shape, "height_mm": height, "required_mu": float(g["required_mu"].iloc[0]),
                    "mu_below": mu_below, "mu_from": mu_from, "measured_mu": measured,
                    "misses_above": 0 if start is None else int((~drawn[start:]).sum())})
    return pd.DataFrame(out).sort_values(["shape", "height_mm"]).reset_index(drop=True)
