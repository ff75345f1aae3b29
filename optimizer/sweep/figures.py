"""Sweep figures, drawn from the stored records alone.

- ``margin_<axis>.png``: the smallest and the mean certified margin over the
  knots [N] against each swept parameter, one line per objective (with
  several axes: the median over the other axes, the band from their smallest
  to their largest value);
- ``margin_map.png`` (two or more axes; the first two): per objective, the
  smallest certified margin over the plane of the first two axes, unsolved
  variants crossed out and the boundary where variants stop solving;
- ``solved_share.png``: the share of variants solved per objective.

Labels name what the margins are (:func:`figure_word`): exact, or the
proven lower bound where certification computed only bounds.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np

from ..analysis.certify import common_figure
from ..files import atomic_output
from ..report import palette
from ..report.palette import colour

MARGIN = "margin_min_exact_N"
MEAN_MARGIN = "margin_mean_exact_N"
UNSOLVED = "#ececec"   # background of the margin map: cells without a plan


def figure_word(rows) -> str:
    """What the certified margins of the solved ``rows`` are ("exact", "lower bound", ...).

    Records written before ``margin_figure`` was stored say "certified".
    """
    return common_figure(r.get("margin_figure") or "certified" for r in rows if r.get("status") == "solved")


def _number(value) -> float:
    if isinstance(value, list):
        value = value[0] if value else None
    return float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else float("nan")


def draw_figures(out, manifest: dict, rows: list[dict]) -> list[Path]:
    """Write the figures of ``rows`` into ``out/figures``; returns their paths (none without results)."""
    if not rows:
        return []
    with palette.figure_style():
        return _draw(out, manifest, rows)


def _figure(width: float, height: float):
    from matplotlib.figure import Figure   # no pyplot: no GUI backend, no global figure list

    return Figure(figsize=(width, height))


def _draw(out, manifest: dict, rows: list[dict]) -> list[Path]:
    folder = Path(out) / "figures"
    folder.mkdir(parents=True, exist_ok=True)
    axes = [a["name"] for a in manifest["axes"]]
    labels = {a["name"]: a.get("label", a["name"]) for a in manifest["axes"]}
    objectives = [o for o in manifest["objectives"] if any(r["objective"] == o for r in rows)]
    written = []
    for axis in axes:
        fig = _figure(10.0, 3.8)
        for ax, column in zip(fig.subplots(1, 2), (MARGIN, MEAN_MARGIN)):
            margin_against(ax, rows, axis, axes, objectives, labels[axis], column)
        written.append(_save(fig, folder / f"margin_{axis}.png"))
    if len(axes) >= 2:
        fig = _figure(5.2 * len(objectives), 4.4)
        panels = fig.subplots(1, len(objectives), squeeze=False)
        for ax, objective in zip(panels[0], objectives):
            margin_map(fig, ax, rows, axes[0], axes[1], objective, labels)
        written.append(_save(fig, folder / "margin_map.png"))
    fig = _figure(1.6 + 1.3 * len(objectives), 3.4)
    ax = fig.subplots()
    solved_share(ax, rows, objectives)
    written.append(_save(fig, folder / "solved_share.png"))
    return written


def _save(fig, path: Path) -> Path:
    fig.tight_layout()
    with atomic_output(path, suffix=".png") as tmp:
        fig.savefig(tmp, format="png")
    return path


def margin_against(ax, rows, axis, axes, objectives, label, column=MARGIN) -> None:
    """An exact margin (``column``: smallest or mean over the knots) against one parameter, one line per objective."""
    for objective in objectives:
        mine = [r for r in rows if r["objective"] == objective and r["status"] == "solved"]
        xs = sorted({_number(r[axis]) for r in mine})
        if not xs:
            continue
        groups = [[_number(r.get(column)) for r in mine if _number(r[axis]) == x] for x in xs]
        mid = [np.nanmedian(g) for g in groups]
        ax.plot(xs, mid, **palette.line_style(objective))
        if len(axes) > 1:
            ax.fill_between(xs, [np.nanmin(g) for g in groups], [np.nanmax(g) for g in groups],
                            color=colour(objective), alpha=0.15, lw=0)
    ax.axhline(0.0, color=palette.MUTED, lw=0.8)
    ax.set_xlabel(label)
    what, word = "smallest" if column == MARGIN else "mean", figure_word(rows)
    ax.set_ylabel(f"{what} {word} margin over the knots [N]")
    note = "\nmedian over the other axes; band: their range" if len(axes) > 1 else ""
    ax.set_title(f"{what.capitalize()} {word} margin against {label}{note}")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=8, title="objective", title_fontsize=8)


def margin_map(fig, ax, rows, x_axis, y_axis, objective, labels) -> None:
    """Smallest certified margin over two parameters; crosses where the variant did not solve.

    On a full grid each variant is a cell and the boundary where variants
    stop solving is drawn along the cell edges; scattered samples are drawn
    as points (that boundary is then left to the eye).
    """
    mine = [r for r in rows if r["objective"] == objective]
    x = np.array([_number(r[x_axis]) for r in mine])
    y = np.array([_number(r[y_axis]) for r in mine])
    ok = np.array([r["status"] == "solved" for r in mine])
    value = np.array([_number(r.get(MARGIN)) if r["status"] == "solved" else np.nan for r in mine])
    xs, ys = np.unique(x), np.unique(y)
    top = np.nanmax(value) if np.isfinite(value).any() else 1.0
    label = f"smallest {figure_word(mine)} margin [N]"
    if len(xs) * len(ys) == len(mine) and len(xs) > 1 and len(ys) > 1:
        _grid_map(fig, ax, x, y, ok, value, xs, ys, top, label)
    else:
        finite = ok & np.isfinite(value)
        if finite.any():
            points = ax.scatter(x[finite], y[finite], c=value[finite], cmap="viridis", s=40, vmin=0.0, vmax=top)
            fig.colorbar(points, ax=ax, label=label)
        ax.margins(0.08)
    if (~ok).any():
        ax.scatter(x[~ok], y[~ok], marker="x", color=palette.DANGER, s=50, zorder=3)
    ax.set_facecolor(UNSOLVED)
    ax.set_xlabel(labels[x_axis])
    ax.set_ylabel(labels[y_axis])
    ax.set_title(f"{objective}: {label}" + ("  (x: not solved)" if (~ok).any() else ""),
                 color=colour(objective))
    ax.grid(False)


def _edges(centres: np.ndarray) -> np.ndarray:
    """Cell edges around sorted cell centres (midpoints, the outer cells mirrored)."""
    mid = 0.5 * (centres[1:] + centres[:-1])
    return np.concatenate([[2 * centres[0] - mid[0]], mid, [2 * centres[-1] - mid[-1]]])


def _grid_map(fig, ax, x, y, ok, value, xs, ys, top, label: str) -> None:
    grid = np.full((len(ys), len(xs)), np.nan)
    solved = np.zeros((len(ys), len(xs)), dtype=bool)
    for xi, yi, oi, vi in zip(x, y, ok, value):
        i, j = int(np.searchsorted(ys, yi)), int(np.searchsorted(xs, xi))
        grid[i, j], solved[i, j] = vi, oi
    ex, ey = _edges(xs), _edges(ys)
    mesh = ax.pcolormesh(ex, ey, np.ma.masked_invalid(grid), cmap="viridis", vmin=0.0, vmax=top,
                         edgecolors="white", linewidth=0.5)
    fig.colorbar(mesh, ax=ax, label=label)
    for i, yi in enumerate(ys):
        for j, xi in enumerate(xs):
            if solved[i, j] and np.isfinite(grid[i, j]):
                ax.text(xi, yi, f"{grid[i, j]:.0f}", ha="center", va="center", fontsize=7,
                        color="white" if grid[i, j] < 0.55 * top else palette.INK)
    for i in range(len(ys)):            # the boundary: cell edges between solved and unsolved neighbours
        for j in range(len(xs)):
            if j + 1 < len(xs) and solved[i, j] != solved[i, j + 1]:
                ax.plot([ex[j + 1]] * 2, [ey[i], ey[i + 1]], color=palette.DANGER, lw=2.0)
            if i + 1 < len(ys) and solved[i, j] != solved[i + 1, j]:
                ax.plot([ex[j], ex[j + 1]], [ey[i + 1]] * 2, color=palette.DANGER, lw=2.0)
    ax.set_xlim(ex[0], ex[-1])
    ax.set_ylim(ey[0], ey[-1])


def solved_share(ax, rows, objectives) -> None:
    shares, counts = [], []
    for objective in objectives:
        mine = [r for r in rows if r["objective"] == objective]
        solved = sum(r["status"] == "solved" for r in mine)
        shares.append(100.0 * solved / max(len(mine), 1))
        counts.append(f"{shares[-1]:.0f} % ({solved} of {len(mine)})")
    ax.set_axisbelow(True)
    ax.grid(axis="x", visible=False)
    ax.bar(objectives, shares, color=[colour(o) for o in objectives], width=0.6)
    for i, text in enumerate(counts):
        ax.text(i, shares[i] + 1.5, text, ha="center", fontsize=8)
    ax.set_ylim(0, 110)
    ax.set_ylabel("variants solved [%]")
    ax.set_title("Solved per objective", fontsize=9)
