"""The pick-envelope chart: outcome of each sweep point over (part height, roller-part mu), one panel
per part shape, with the analytic bite boundary (sim/bite.py) drawn as a line and the measured
boundary as steps. Markers differ in shape as well as colour (grey print, colour-blind readers)."""

from __future__ import annotations

import numpy as np

from ..sim.bite import required_mu
from .plots import LINE_STYLES, agg_pyplot

__all__ = ["envelope_figure", "write_chart", "boundary_rows"]

# outcome class -> (label, marker, face colour, edge colour)
MARKERS = {
    "held": ("held", "o", "#1b3a6b", "#1b3a6b"),
    "drawn": ("drawn in, not held", "^", "#c05a00", "#c05a00"),
    "missed": ("not drawn in", "o", "none", "#5f5f5f"),
    "invalid": ("invalid / error", "x", "#9b1c1c", None),
}
TITLES = {"cylinder": "lying cylinder (height = diameter)", "disc": "standing disc (height = thickness)",
          "plate": "plate lying flat (height = thickness)"}


def _kind(row):
    if row["outcome"] in ("invalid", "error", "timeout"):
        return "invalid"
    return "held" if row["held"] else "drawn" if row["drawn_in"] else "missed"


def envelope_figure(df, boundary=None):
    """A matplotlib Figure of the sweep `df` (rows of campaigns.envelope.run_point); `boundary` (from
    campaigns.envelope.boundary) adds the measured boundary."""
    plt = agg_pyplot()
    shapes = [s for s in ("cylinder", "disc", "plate") if s in set(df["shape"])]
    fig, axes = plt.subplots(1, len(shapes), figsize=(5.2 * len(shapes), 4.4), squeeze=False, sharey=True)
    r = float(df["roller_radius_mm"].dropna().iloc[0]) * 1e-3
    top = float(df["mu"].max()) * 1.15
    for ax, shape in zip(axes[0], shapes):
        g = df[df["shape"] == shape]
        kinds = g.apply(_kind, axis=1)
        for kind, (label, marker, face, edge) in MARKERS.items():
            sel = g[kinds == kind]
            if len(sel):
                edges = {} if edge is None else {"edgecolors": edge}  # an unfilled marker takes its face colour
                ax.scatter(sel["height_mm"], sel["mu"], marker=marker, s=46, facecolors=face, linewidths=1.3,
                           label=label, zorder=3, **edges)
        h = np.linspace(float(g["height_mm"].min()) * 0.9, float(g["height_mm"].max()) * 1.05, 300)
        colour, style, _ = LINE_STYLES[0]
        need = np.array([required_mu(shape, r, x * 1e-3) for x in h])
        ax.plot(h, np.minimum(need, top * 2), color=colour, linestyle=style, linewidth=1.4,
                label="bite boundary, rigid: mu = tan(beta)")
        if boundary is not None:
            b = boundary[boundary["shape"] == shape]
            colour, style, _ = LINE_STYLES[1]
            ax.step(b["height_mm"], b["measured_mu"], where="mid", color=colour, linestyle=style, linewidth=1.2,
                    label="measured boundary")
        ax.set_xscale("log")
        ax.set_ylim(0, top)
        ax.set_xlabel("part height (mm)")
        ax.set_title(TITLES[shape], fontsize=10)
        ax.grid(alpha=0.3)
    axes[0][0].set_ylabel("roller-part friction coefficient mu")
    axes[0][0].legend(fontsize=7, loc="upper right")
    variant = str(df["variant"].dropna().iloc[0]) if "variant" in df else ""
    fig.suptitle(f"pick envelope, surface-draw-in: {variant}, roller radius {r * 1e3:g} mm", fontsize=11)
    fig.tight_layout()
    return fig


def write_chart(df, boundary, path):
    """Write the chart as a PNG file."""
    fig = envelope_figure(df, boundary)
    fig.savefig(path, dpi=110)
    agg_pyplot().close(fig)


def boundary_rows(edge):
    """The measured against the analytic boundary (campaigns.envelope.boundary) as table rows."""
    def fmt(v):
        return "-" if v != v else f"{v:.2f}"
    return [{"shape": b.shape, "height_mm": f"{b.height_mm:.2f}", "analytic_mu": fmt(b.required_mu),
             "drawn_in_from_mu": fmt(b.mu_from), "not_at_mu": fmt(b.mu_below), "measured_mu": fmt(b.measured_mu),
             "misses_above": b.misses_above}
            for b in edge.itertuples()]
