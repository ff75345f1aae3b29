"""The simulation figure: largest survived push against the certified margin.

Works from ``brace-simulation/1`` documents (what ``brace simulate --json``
writes), one per plan, each with ``task`` and ``objective`` names: no
simulation runs here. Two panels, ``informed`` (the plan's response plus
joint PD) and ``blind`` (joint PD only); each pushed knot of each plan is a
point at (certified margin, largest survived push), both in newtons along the
certified weakest direction. Colour is the plan's objective (:mod:`.palette`),
the marker its task. The solid line is "survived = certified", the dotted one
half of it. A push survived up to the largest size tried carries an arrow up;
a run that already fails without a push sits on zero, ringed in the danger
colour.
"""
from __future__ import annotations

from pathlib import Path

from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from ..files import atomic_output
from . import palette

SIZE = (10.0, 4.8)   # inches
MODES = ("informed", "blind")
TITLES = {"informed": "informed: plan torques + response to the push + PD",
          "blind": "blind: plan torques + PD only"}


def _points(documents, mode: str):
    """(task, objective, certified, survived, capped, fails_unpushed) per pushed knot in ``mode``."""
    for doc in documents:
        for p in doc["pushes"]:
            if p["mode"] != mode or p["certified_margin_N"] is None:
                continue
            survived = p["largest_survived_N"] or 0.0
            yield (doc.get("task", ""), doc.get("objective", ""), p["certified_margin_N"], survived,
                   p["smallest_failed_N"] is None, p["failure"].startswith("fails without a push"))


def push_figure(documents) -> Figure:
    """Survived push against certified margin, one panel per mode, every document's pushes."""
    tasks = sorted({doc.get("task", "") for doc in documents})
    objectives = sorted({doc.get("objective", "") for doc in documents})
    markers = {t: palette.TASK_MARKERS[i % len(palette.TASK_MARKERS)] for i, t in enumerate(tasks)}
    fig = Figure(figsize=SIZE, dpi=palette.FIGURE_DPI, layout="constrained")
    axes = fig.subplots(1, 2, sharex=True, sharey=True)
    top = 1.0
    for ax, mode in zip(axes, MODES):
        for task, objective, certified, survived, capped, unpushed in _points(documents, mode):
            colour = palette.colour(objective)
            ax.plot([certified], [survived], marker=markers[task], color=colour, markersize=7,
                    markeredgecolor=palette.INK, markeredgewidth=0.5, linestyle="none")
            if capped:
                ax.annotate("", (certified, survived * 1.12 + 2.0), (certified, survived),
                            arrowprops={"arrowstyle": "->", "color": colour, "lw": 1.2})
            if unpushed:
                ax.plot([certified], [0.0], marker="o", markersize=13, markerfacecolor="none",
                        markeredgecolor=palette.DANGER, markeredgewidth=1.4, linestyle="none")
            top = max(top, certified, survived * 1.12 + 2.0)
        ax.set_title(TITLES[mode])
        ax.set_xlabel("certified margin at the knot [N]")
    top *= 1.05
    for ax in axes:
        ax.plot([0, top], [0, top], color=palette.MUTED, linewidth=1.2, zorder=0)
        ax.plot([0, top], [0, 0.5 * top], color=palette.MUTED, linewidth=1.2, linestyle=":", zorder=0)
        ax.set_xlim(-0.02 * top, top)
        ax.set_ylim(-0.04 * top, top)
    axes[0].set_ylabel("largest survived push [N]")
    handles = [Line2D([], [], marker="s", color=palette.colour(o), linestyle="none", markersize=8, label=o)
               for o in objectives]
    handles += [Line2D([], [], marker=markers[t], color=palette.MUTED, markeredgecolor=palette.INK,
                       linestyle="none", markersize=7, label=t) for t in tasks if t]
    handles += [Line2D([], [], color=palette.MUTED, label="survived = certified"),
                Line2D([], [], color=palette.MUTED, linestyle=":", label="half the certified margin"),
                Line2D([], [], marker="o", markersize=11, markerfacecolor="none", markeredgecolor=palette.DANGER,
                       markeredgewidth=1.4, linestyle="none", label="fails without a push")]
    axes[1].legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return fig


def write_push_figure(documents, path) -> None:
    """Draw :func:`push_figure` in the brace style and write it to ``path`` (PNG or SVG) atomically."""
    path = Path(path)
    with palette.figure_style():
        fig = push_figure(documents)
        with atomic_output(path, suffix=path.suffix) as tmp:
            fig.savefig(tmp, format=path.suffix[1:].lower() or "png", dpi=palette.FIGURE_DPI)
