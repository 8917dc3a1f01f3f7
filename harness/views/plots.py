"""Per-step records of one trial and its time plot (object pose in the hand, slip speed, contact force).

`TrialRecorder` is an `on_step` observer for `trial.run_trial`: it only reads state, so a trial
run with it gives the same row as one run without. `trial_plot(recorder, path)` writes a PNG of
the object's position in the hand frame, the largest slip speed and the total normal force over
time, with the phase boundaries marked. Matplotlib runs with the Agg backend (no display).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["TrialRecorder", "trial_plot", "mark_phases", "agg_pyplot", "LINE_STYLES"]

# line styles and markers as well as colours, so curves stay apart in grey print and for colour-blind readers
LINE_STYLES = (("#1b3a6b", "-", None), ("#c05a00", "--", None), ("#5f5f5f", ":", None))


def agg_pyplot():
    """matplotlib.pyplot on the Agg backend (no display needed), imported on first use."""
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    return plt


@dataclass
class TrialRecorder:
    """Collects one sample per physics step: time (s), object COM in the hand frame (m), the largest
    slip speed over the contacts (m/s), the total normal force (N), the contact count and the phase."""

    time: list = field(default_factory=list)
    position: list = field(default_factory=list)
    slip_speed: list = field(default_factory=list)
    normal_force: list = field(default_factory=list)
    contacts: list = field(default_factory=list)
    phase: list = field(default_factory=list)

    def __call__(self, ctx):
        sample = ctx.last
        self.time.append(ctx.world.time)
        self.position.append(ctx.object_in_hand()[0])
        self.slip_speed.append(float(sample.slip_speed().max()) if sample.count else 0.0)
        self.normal_force.append(float(sample.normal_force.sum()))
        self.contacts.append(int(sample.count))
        self.phase.append(ctx.phases[-1].label if ctx.phases else "")

    def __len__(self):
        return len(self.time)

    def phase_spans(self):
        """[(label, first step, last step)] in order; a phase run twice gets two spans."""
        spans = []
        for k, label in enumerate(self.phase):
            if spans and spans[-1][0] == label:
                spans[-1][2] = k
            else:
                spans.append([label, k, k])
        return [tuple(s) for s in spans]

    def last_contact_step(self):
        """The last step at which the object touched the hand (None if it never did)."""
        touching = np.flatnonzero(np.asarray(self.contacts) > 0)
        return int(touching[-1]) if len(touching) else None


def trial_plot(recorder: TrialRecorder, path, title=""):
    """Write a PNG of pose, slip speed and normal force over time with phase boundaries; returns path."""
    if not len(recorder):
        raise ValueError("the recorder holds no steps; pass it as on_step to run_trial first")
    plt = agg_pyplot()
    t = np.asarray(recorder.time)
    pos = np.asarray(recorder.position) * 1e3
    fig, axes = plt.subplots(3, 1, figsize=(8, 7.5), sharex=True, constrained_layout=True)
    for k, (axis, (colour, style, _)) in enumerate(zip("xyz", LINE_STYLES)):
        axes[0].plot(t, pos[:, k], color=colour, linestyle=style, linewidth=1.4, label=f"{axis} (hand frame)")
    axes[0].set_ylabel("object position\nin hand (mm)")
    axes[0].legend(loc="best", fontsize=8, ncol=3)
    axes[1].plot(t, np.asarray(recorder.slip_speed) * 1e3, color=LINE_STYLES[0][0], linewidth=1.2)
    axes[1].set_ylabel("largest slip\nspeed (mm/s)")
    axes[2].plot(t, recorder.normal_force, color=LINE_STYLES[1][0], linewidth=1.2)
    axes[2].set_ylabel("total normal\nforce (N)")
    axes[2].set_xlabel("trial time (s)")
    mark_phases(axes, t, recorder.phase_spans())
    for ax in axes:
        ax.grid(True, color="#d9d9d9", linewidth=0.6)
    if title:
        fig.suptitle(title, fontsize=10)
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


def mark_phases(axes, t, spans):
    """Dashed lines at phase starts on every axis, with the phase names along the top axis."""
    top = axes[0]
    for label, first, last in spans:
        for ax in axes:
            ax.axvline(t[first], color="#444444", linestyle=(0, (4, 3)), linewidth=0.8)
        middle = (t[first] + t[last]) / 2
        top.text(middle, 1.02, label or "(setup)", transform=top.get_xaxis_transform(), ha="center",
                 va="bottom", fontsize=7.5, rotation=30 if len(spans) > 5 else 0)
