"""Sweep figures, drawn from the stored records alone.

- ``margin_<axis>.png``: the smallest exact margin [N] against each swept
  parameter, one line per objective (with several axes: the median over the
  other axes, the band from their smallest to their largest value);
- ``margin_map.png`` (two or more axes; the first two): per objective, the
  smallest exact margin over the plane of the first two axes, unsolved
  variants crossed out and the boundary where variants stop solving;
- ``solved_share.png``: the share of variants solved per objective.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

MARGIN = "margin_min_exact_N"
# one colour per objective, the same in every figure
COLOURS = {"robust": "#1b6ca8", "robust-min": "#6a3d9a", "torque": "#d95f02", "feasible": "#5f6b6d"}


def colour(objective: str) -> str:
    return COLOURS.get(objective, "#333333")


def _number(value) -> float:
    if isinstance(value, list):
        value = value[0] if value else None
    return float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else float("nan")


def draw_figures(out, manifest: dict, rows: list[dict]) -> list[Path]:
    """Write the figures of ``rows`` into ``out/figures``; returns their paths (none without results)."""
    if not rows:
        return []
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    folder = Path(out) / "figures"
    folder.mkdir(parents=True, exist_ok=True)
    axes = [a["name"] for a in manifest["axes"]]
    labels = {a["name"]: a["sets"] for a in manifest["axes"]}
    objectives = [o for o in manifest["objectives"] if any(r["objective"] == o for r in rows)]
    written = []
    for axis in axes:
        fig, ax = plt.subplots(figsize=(6.4, 4.0))
        margin_against(ax, rows, axis, axes, objectives, labels[axis])
        written.append(_save(fig, folder / f"margin_{axis}.png", plt))
    if len(axes) >= 2:
        fig, panels = plt.subplots(1, len(objectives), figsize=(5.2 * len(objectives), 4.4), squeeze=False)
        for ax, objective in zip(panels[0], objectives):
            margin_map(fig, ax, rows, axes[0], axes[1], objective, labels)
        written.append(_save(fig, folder / "margin_map.png", plt))
    fig, ax = plt.subplots(figsize=(1.6 + 1.3 * len(objectives), 3.4))
    solved_share(ax, rows, objectives)
    written.append(_save(fig, folder / "solved_share.png", plt))
    return written


def _save(fig, path: Path, plt) -> Path:
    from ..files import atomic_output

    fig.tight_layout()
    with atomic_output(path, suffix=".png") as tmp:
        fig.savefig(tmp, dpi=110, format="png")
    plt.close(fig)
    return path


def margin_against(ax, rows, axis, axes, objectives, label) -> None:
    """Smallest exact margin against one parameter, one line per objective."""
    for objective in objectives:
        mine = [r for r in rows if r["objective"] == objective and r["status"] == "solved"]
        xs = sorted({_number(r[axis]) for r in mine})
        if not xs:
            continue
        groups = [[_number(r.get(MARGIN)) for r in mine if _number(r[axis]) == x] for x in xs]
        mid = [np.nanmedian(g) for g in groups]
        ax.plot(xs, mid, "o-", color=colour(objective), label=objective, lw=1.8, ms=4)
        if len(axes) > 1:
            ax.fill_between(xs, [np.nanmin(g) for g in groups], [np.nanmax(g) for g in groups],
                            color=colour(objective), alpha=0.15, lw=0)
    ax.axhline(0.0, color="#999999", lw=0.8)
    ax.set_xlabel(label)
    ax.set_ylabel("smallest exact margin [N]")
    note = " (median; band: range over the other axes)" if len(axes) > 1 else ""
    ax.set_title(f"Margin against {label}{note}", fontsize=9)
    ax.grid(alpha=0.3)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=8, title="objective", title_fontsize=8)


def margin_map(fig, ax, rows, x_axis, y_axis, objective, labels) -> None:
    """Smallest exact margin over two parameters; crosses where the variant did not solve."""
    mine = [r for r in rows if r["objective"] == objective]
    x = np.array([_number(r[x_axis]) for r in mine])
    y = np.array([_number(r[y_axis]) for r in mine])
    ok = np.array([r["status"] == "solved" for r in mine])
    value = np.array([_number(r.get(MARGIN)) if r["status"] == "solved" else np.nan for r in mine])
    finite = ok & np.isfinite(value)
    if finite.any():
        points = ax.scatter(x[finite], y[finite], c=value[finite], cmap="viridis", s=260, marker="s",
                            edgecolors="none", vmin=0.0)
        fig.colorbar(points, ax=ax, label="smallest exact margin [N]")
        for xi, yi, vi in zip(x[finite], y[finite], value[finite]):
            ax.annotate(f"{vi:.0f}", (xi, yi), ha="center", va="center", fontsize=6.5,
                        color="white" if vi < 0.6 * np.nanmax(value[finite]) else "black")
    if (~ok).any():
        ax.scatter(x[~ok], y[~ok], marker="x", color="#c0392b", s=60, label="not solved")
        ax.legend(fontsize=7, loc="upper right")
    if ok.any() and (~ok).any() and len(set(x)) > 1 and len(set(y)) > 1:
        try:
            ax.tricontour(x, y, ok.astype(float), levels=[0.5], colors="#c0392b", linewidths=1.4)
        except (ValueError, RuntimeError):  # points on a line: no triangulation, no boundary
            pass
    ax.set_xlabel(labels[x_axis])
    ax.set_ylabel(labels[y_axis])
    ax.set_title(f"{objective}: smallest exact margin", fontsize=9, color=colour(objective))


def solved_share(ax, rows, objectives) -> None:
    shares = []
    for objective in objectives:
        mine = [r for r in rows if r["objective"] == objective]
        shares.append(100.0 * sum(r["status"] == "solved" for r in mine) / max(len(mine), 1))
    ax.bar(objectives, shares, color=[colour(o) for o in objectives])
    for i, share in enumerate(shares):
        ax.text(i, share + 1.5, f"{share:.0f} %", ha="center", fontsize=8)
    ax.set_ylim(0, 110)
    ax.set_ylabel("variants solved [%]")
    ax.set_title("Solved per objective", fontsize=9)
