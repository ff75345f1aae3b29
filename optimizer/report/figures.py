"""The comparison figures: margin, torque use, friction use, weakest direction,
a residual polytope section and the hand path.

Each function takes the plans of one task (:class:`~optimizer.report.table.Entry`
objects that hold a plan and its certification) and returns a matplotlib
``Figure`` of the fixed size in :data:`SIZES`; :func:`save` writes it as PNG
(for the page) and SVG (for print) atomically. Colours, markers and dashes
come from :mod:`.palette`, so an objective looks the same in every figure.
"""
from __future__ import annotations

import math
import textwrap
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Circle, Polygon, Rectangle
from matplotlib.ticker import MaxNLocator

from ..analysis.polytope_cut import polytope_cut
from ..files import atomic_output
from ..planfile import min_normal_forces
from . import palette
from .geometry import Skeleton, hand_targets

SIZES = {
    "margin": (9.0, 4.6),
    "torque_use": (10.0, 10.0),
    "friction_use": (10.0, 8.0),
    "weakest_direction": (9.0, 6.4),
    "polytope_cut": (11.0, 4.0),
    "hand_path": (7.5, 6.0),
}
"""Figure name -> size in inches; pixels are these times ``palette.FIGURE_DPI``."""

CAPTIONS = {
    "margin": "Smallest unrejectable force over time. Lines: the plan's own certified linear-gain margin; "
              "markers: the certified figure (exact, or its proven lower bound where only bounds were "
              "computed); rings mark each plan's smallest.",
    "torque_use": "Torque use |tau| / limit per joint over time, one heat map per plan; the box marks the peak.",
    "friction_use": "Left: friction use per contact (1 = the force lies on its friction pyramid). "
                    "Right: normal force per contact; the dotted line is the required minimum.",
    "weakest_direction": "Direction in which each plan is weakest (world frame): azimuth about z from +x, "
                         "elevation above the horizontal (near +-90 deg the azimuth hardly matters). Rings mark "
                         "the smallest-margin knot; the limits that decide it are listed below.",
    "polytope_cut": "At each plan's smallest-margin knot: the set of disturbance forces the robot can "
                    "reject (shaded), cut by the plane of its weakest direction and the weakest direction "
                    "orthogonal to it. The dashed circle has the certified margin as radius.",
    "hand_path": "Hand path of each plan with the task's hand targets.",
}


def pixel_size(name: str) -> tuple[int, int]:
    """(width, height) in pixels of figure ``name``'s PNG."""
    w, h = SIZES[name]
    return round(w * palette.FIGURE_DPI), round(h * palette.FIGURE_DPI)


def save(fig: Figure, folder, name: str) -> list[Path]:
    """Write ``fig`` as ``folder/name.png`` and ``folder/name.svg``; returns both paths."""
    paths = []
    for suffix in (".png", ".svg"):
        path = Path(folder) / f"{name}{suffix}"
        with atomic_output(path, suffix=suffix) as tmp:
            fig.savefig(tmp, format=suffix[1:], dpi=palette.FIGURE_DPI)
        paths.append(path)
    return paths


def _figure(name: str) -> Figure:
    return Figure(figsize=SIZES[name], dpi=palette.FIGURE_DPI, layout="constrained")


def _legend_handle(name: str) -> Line2D:
    return Line2D([], [], **palette.line_style(name))


def _plot_top(entries) -> float:
    """Upper y limit of the margin plot [N]: every planned value, certified values below a tenth of the cap."""
    values = [0.0]
    for e in entries:
        values += list(e.plan.margin)
        cap = e.certificate.settings.cap
        values += [x for x in e.exact if math.isfinite(x) and x < 0.1 * cap]
    return 1.12 * max(values) if max(values) > 0 else 1.0


def newtons(x: float) -> str:
    """A force for a label: three decimals below 1 N, one above."""
    return f"{x:.3f} N" if abs(x) < 1.0 else f"{x:.1f} N"


def margin_figure(entries) -> Figure:
    """Planned (lines) and certified (markers) margin over time, every plan on one axis."""
    fig = _figure("margin")
    ax = fig.add_subplot()
    top = _plot_top(entries)
    handles = []
    for i, e in enumerate(entries):
        style = palette.line_style(e.name)
        ax.plot(e.plan.t, e.plan.margin, color=style["color"], linestyle=style["linestyle"])
        ax.plot(e.plan.t, e.exact, linestyle="none", marker=style["marker"], color=style["color"],
                markerfacecolor="white", markeredgewidth=1.4)
        low = e.smallest
        ax.plot([low.time], [low.rho], marker="o", markersize=15, markerfacecolor="none",
                markeredgecolor=style["color"], markeredgewidth=1.6, linestyle="none")
        late = low.time > e.plan.t[0] + 0.8 * (e.plan.t[-1] - e.plan.t[0])
        low_on_plot = low.rho < 0.1 * top
        ax.annotate(newtons(low.rho), (low.time, low.rho),
                    xytext=(-12 if late else 12, (10 if low_on_plot else -14) + (11 if low_on_plot else -11) * (i % 2)),
                    textcoords="offset points", color=style["color"], fontweight="bold",
                    ha="right" if late else "left")
        handle = _legend_handle(e.name)
        handle.set_label(f"{e.name}: smallest {newtons(low.rho)} at {low.time:.2f} s")
        handles.append(handle)
    lows = [x for e in entries for x in (*e.exact, *e.plan.margin) if math.isfinite(x)]
    ax.set_ylim(1.1 * min(0.0, *lows), top)
    ax.set_xlabel("time [s]")
    ax.set_ylabel("smallest unrejectable force [N]")
    ax.set_title("Which plan is more robust, and when")
    ax.legend(handles=handles, loc="best")
    return fig


def torque_use_figure(entries) -> Figure:
    """Heat maps of torque use per joint over time, one row per plan, one shared colour bar."""
    fig = _figure("torque_use")
    axes = fig.subplots(len(entries), 1, sharex=True, squeeze=False)[:, 0]
    cmap = palette.use_map()
    image = None
    for ax, e in zip(axes, entries):
        use, t = e.use, e.plan.t
        half = 0.5 * (t[1] - t[0]) if t.size > 1 else 0.5
        nj = use.torque.shape[1]
        image = ax.imshow(100.0 * use.torque.T, aspect="auto", cmap=cmap, vmin=0.0, vmax=100.0,
                          extent=(t[0] - half, t[-1] + half, nj - 0.5, -0.5), interpolation="nearest")
        peak, k, j = use.peak_torque()
        for colour, width in (("#ffffff", 3.4), (palette.INK, 1.4)):
            ax.add_patch(Rectangle((t[k] - half, j - 0.5), 2 * half, 1.0, fill=False, edgecolor=colour, lw=width))
        ax.set_yticks(range(nj), use.joint_names, fontsize=6.5)
        ax.grid(False)
        ax.set_title(f"{e.name}: peak {100 * peak:.0f} % at {use.joint_names[j]}, t = {t[k]:.2f} s",
                     color=palette.colour(e.name), loc="left", fontweight="bold")
    axes[-1].set_xlabel("time [s]")
    fig.colorbar(image, ax=list(axes), label="torque use |τ| / limit [%]", extend="max", shrink=0.6)
    return fig


def friction_figure(entries) -> Figure:
    """Friction use and normal force per contact over time, one line per plan."""
    fig = _figure("friction_use")
    names = entries[0].use.contact_names
    axes = fig.subplots(len(names), 2, sharex=True, squeeze=False)
    minimum = min_normal_forces(entries[0].plan.meta)
    for c, name in enumerate(names):
        left, right = axes[c]
        for e in entries:
            style = palette.line_style(e.name)
            left.plot(e.plan.t, 100.0 * e.use.friction[:, c], **style)
            right.plot(e.plan.t, e.use.normal_force[:, c], **style)
        left.axhline(100.0, color=palette.DANGER, linewidth=1.0, linestyle=":")
        right.axhline(minimum[c], color=palette.DANGER, linewidth=1.0, linestyle=":")
        left.set_ylabel(f"{name}\nfriction use [%]")
        right.set_ylabel("normal force [N]")
        left.set_ylim(0.0, 110.0)
    axes[0, 0].set_title("How close each foot force is to slipping")
    axes[0, 1].set_title("How hard each foot presses")
    axes[-1, 0].set_xlabel("time [s]")
    axes[-1, 1].set_xlabel("time [s]")
    axes[0, 1].legend(handles=[_legend_handle(e.name) for e in entries], loc="best")
    return fig


def azimuth_elevation(directions: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Azimuth about +z from +x in (-180, 180] and elevation above the x-y plane, degrees, of unit vectors (K, 3)."""
    d = np.asarray(directions, float)[:, :3]
    azimuth = np.degrees(np.arctan2(d[:, 1], d[:, 0]))
    elevation = np.degrees(np.arcsin(np.clip(d[:, 2] / np.linalg.norm(d, axis=1), -1.0, 1.0)))
    return azimuth, elevation


def _broken_at_wraps(t, azimuth):
    """Times and azimuths [deg] with a gap (NaN) wherever the angle wraps past +-180."""
    t_out, a_out = [t[0]], [azimuth[0]]
    for k in range(1, len(t)):
        if abs(azimuth[k] - azimuth[k - 1]) > 180.0:
            t_out.append(0.5 * (t[k] + t[k - 1]))
            a_out.append(np.nan)
        t_out.append(t[k])
        a_out.append(azimuth[k])
    return np.array(t_out), np.array(a_out)


def _vector(v) -> str:
    """A direction for a label, (+0.34, +0.00, -0.94), without negative zeros."""
    return "(" + ", ".join(f"{0.0 if abs(x) < 5e-3 else x:+.2f}" for x in v) + ")"


def _short_list(names, shown: int = 3) -> str:
    return ", ".join(names[:shown]) + (f" (+{len(names) - shown} more)" if len(names) > shown else "") or "-"


def weakest_direction_figure(entries) -> Figure:
    """Azimuth and elevation of the weakest direction over time; bottleneck at the smallest knot."""
    fig = _figure("weakest_direction")
    grid = fig.add_gridspec(3, 1, height_ratios=[1.0, 1.0, 0.1 + 0.16 * len(entries)])
    top = fig.add_subplot(grid[0])
    middle = fig.add_subplot(grid[1], sharex=top)
    lines = []
    for e in entries:
        style = palette.line_style(e.name)
        directions = np.array([c.direction for c in e.certificate.knots])
        azimuth, elevation = azimuth_elevation(directions)
        top.plot(*_broken_at_wraps(e.plan.t, azimuth), **style)
        middle.plot(e.plan.t, elevation, **style)
        low = e.smallest
        k = e.certificate.knots.index(low)
        for ax, values in ((top, azimuth), (middle, elevation)):
            ax.plot([low.time], [values[k]], marker="o", markersize=14, markerfacecolor="none",
                    markeredgecolor=style["color"], markeredgewidth=1.6)
        lines.append((e.name, f"{e.name}: weakest at t = {low.time:.2f} s ({newtons(low.rho)}) along "
                      f"{_vector(low.direction[:3])}; limited by "
                      f"{_short_list(low.bottleneck, 2)}"))
    top.set_ylabel("azimuth [deg]")
    top.set_ylim(-190.0, 190.0)
    top.set_yticks([-180, -90, 0, 90, 180])
    middle.set_ylabel("elevation [deg]")
    middle.set_ylim(-95.0, 95.0)
    middle.set_xlabel("time [s]")
    top.set_title("Where each plan is weakest")
    top.legend(handles=[_legend_handle(e.name) for e in entries], loc="best", ncols=2)
    text = fig.add_subplot(grid[2])
    text.axis("off")
    for i, (name, line) in enumerate(lines):
        text.text(0.0, 1.0 - i / len(lines), textwrap.shorten(line, 150, placeholder=" ..."),
                  color=palette.colour(name), fontsize=8, va="top", transform=text.transAxes)
    return fig


def polytope_cut_figure(entries) -> Figure:
    """The rejectable-force set cut through the weakest directions, at each plan's smallest knot."""
    fig = _figure("polytope_cut")
    axes = fig.subplots(1, len(entries), squeeze=False)[0]
    for ax, e in zip(axes, entries):
        low = e.smallest
        colour = palette.colour(e.name)
        ax.set_aspect("equal")
        if low.weakest_u is None or low.weakest_u.size != 3 or not math.isfinite(low.rho):
            ax.axis("off")
            ax.text(0.5, 0.5, "no plane section\n(wrench disturbance\nor no response)", ha="center",
                    va="center", transform=ax.transAxes)
            continue
        cut = polytope_cut(e.plan, low.knot, low.weakest_u, e.certificate.disturbance["index"],
                           e.certificate.settings.cap)
        view = 2.6 * max(abs(low.rho), 1e-6)
        ax.add_patch(Polygon(cut.polygon, closed=True, facecolor=colour, alpha=0.28, edgecolor=colour, lw=1.6))
        ax.add_patch(Circle((0.0, 0.0), abs(low.rho), fill=False, edgecolor=palette.DANGER, linestyle="--", lw=1.4))
        ax.annotate("", xy=(low.rho, 0.0), xytext=(0.0, 0.0),
                    arrowprops={"arrowstyle": "-|>", "color": palette.DANGER, "lw": 1.6})
        ax.plot([0.0], [0.0], marker="+", color=palette.INK, markersize=9)
        ax.set_xlim(-view, view)
        ax.set_ylim(-view, view)
        ax.xaxis.set_major_locator(MaxNLocator(4, symmetric=True))
        ax.yaxis.set_major_locator(MaxNLocator(4, symmetric=True))
        ax.set_title(f"{e.name}, t = {low.time:.2f} s\nmargin {newtons(low.rho)}", color=colour, fontweight="bold")
        ax.set_xlabel("along weakest direction e1 [N]")
        ax.text(0.02, 0.02, f"e1 = {_vector(cut.e1)}\ne2 = {_vector(cut.e2)}", transform=ax.transAxes, fontsize=7, color=palette.INK)
    axes[0].set_ylabel("along e2, weakest orthogonal to e1 [N]")
    return fig


def hand_path_figure(entries) -> Figure:
    """Hand path of every plan in 3-D with the task's targets."""
    fig = _figure("hand_path")
    ax = fig.add_subplot(projection="3d")
    points = []
    for e in entries:
        path = Skeleton(e.plan.meta).hand_path(e.plan.q)
        style = palette.line_style(e.name)
        ax.plot(path[:, 0], path[:, 1], path[:, 2], **style)
        points.append(path)
    for target in hand_targets(entries[0].plan.meta):
        p = target.position
        ax.scatter([p[0]], [p[1]], [p[2]], marker="X", s=140, color=palette.TARGET, depthshade=False)
        ax.text(p[0], p[1], p[2] + 0.03, f"{target.label} ({target.t_start:.1f}-{target.t_end:.1f} s)",
                color=palette.TARGET, fontsize=8)
        points.append(p[None])
    start = points[0][0]
    ax.scatter([start[0]], [start[1]], [start[2]], marker="o", s=50, color=palette.INK, depthshade=False)
    ax.text(start[0], start[1], start[2] - 0.05, "start", color=palette.INK, fontsize=8)
    _equal_box(ax, np.vstack(points))
    ax.set_xlabel("x [m]")
    ax.set_ylabel("y [m]")
    ax.set_zlabel("z [m]")
    ax.set_title("Hand path and targets")
    ax.legend(loc="upper left")
    return fig


def _equal_box(ax, points, pad: float = 0.05) -> None:
    """Axis limits with one scale on x, y and z around ``points`` (n, 3) [m]."""
    lo, hi = points.min(axis=0) - pad, points.max(axis=0) + pad
    centre, half = 0.5 * (lo + hi), 0.5 * float(np.max(hi - lo))
    ax.set_xlim(centre[0] - half, centre[0] + half)
    ax.set_ylim(centre[1] - half, centre[1] + half)
    ax.set_zlim(centre[2] - half, centre[2] + half)
    ax.set_box_aspect((1.0, 1.0, 1.0))


FIGURES = {
    "margin": margin_figure,
    "torque_use": torque_use_figure,
    "friction_use": friction_figure,
    "weakest_direction": weakest_direction_figure,
    "polytope_cut": polytope_cut_figure,
    "hand_path": hand_path_figure,
}
"""Figure name -> function drawing it; the order of the page."""


def write_figures(entries, folder) -> list[Path]:
    """Draw and save every figure of :data:`FIGURES` for ``entries`` (plans with certificates)."""
    written = []
    with palette.figure_style():
        for name, draw in FIGURES.items():
            written += save(draw(entries), folder, name)
    return written
