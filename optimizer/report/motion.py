"""Motion preview: the robot drawn from forward kinematics, knot by knot.

Each panel shows one plan at one knot: the terrain's surfaces, the links
(thick segments between joint origins, in the plan's colour), the trunk
outline, the feet with their friction pyramids (edges shaded by how much
friction the foot uses), the hand, the hand targets, and the weakest
direction as an arrow from the hand whose length is proportional to the certified
margin at that knot. :func:`keyframe_strip` writes a PNG of chosen knots (one
row per plan); :func:`animation` writes a GIF with every plan side by side.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from ..files import atomic_output
from ..planfile import knot_surfaces
from . import palette
from .geometry import Skeleton, hand_targets, scene_extent, terrain_surfaces

PANEL_INCHES = 2.6          # keyframe panel side [in]
MOVIE_PANEL_INCHES = 3.4    # animation panel side [in]
MOVIE_DPI = 80              # pixels per inch of the animation
ARROW_LENGTH = 0.30         # m drawn for the largest margin of the comparison
CONE_HEIGHT = 0.09          # m, drawn friction pyramid height
VIEWS = {"ceiling": (7.0, -68.0), "trench": (24.0, -28.0)}
DEFAULT_VIEW = (20.0, -58.0)  # (elevation, azimuth) [deg] of the 3-D view


class Scene:
    """Everything that stays the same across the knots of one task's plans."""

    def __init__(self, entries):
        self.entries = entries
        meta = entries[0].plan.meta
        self.skeletons = [Skeleton(e.plan.meta) for e in entries]
        self.targets = hand_targets(meta)
        poses = [s.pose(q) for s, e in zip(self.skeletons, entries) for q in e.plan.q[:: max(1, e.plan.knots // 8)]]
        points = np.vstack([p.links.reshape(-1, 3) for p in poses] + [t.position[None] for t in self.targets])
        self.extent = scene_extent(points, margin=0.15)
        self.surfaces = terrain_surfaces(meta, self.extent)
        corners = [s.corners for s in self.surfaces]
        self.box = np.vstack([points] + corners) if corners else points
        kind = ((meta.get("task") or {}).get("stance") or {}).get("terrain", {})
        self.view = VIEWS.get(kind.get("kind") if isinstance(kind, dict) else None, DEFAULT_VIEW)
        largest = max((x for e in entries for x in e.exact if math.isfinite(x) and x < 0.1 * e.certificate.settings.cap),
                      default=1.0)
        self.arrow_scale = ARROW_LENGTH / max(largest, 1e-6)   # m per N
        self.surfaces_at = [knot_surfaces(e.plan.meta, e.plan.q.shape[0]) for e in entries]  # per plan, per knot
        self.facets = int(meta["friction_pyramid"]["facets"])

    def draw(self, ax, index: int, k: int, title: str) -> None:
        """Draw plan ``index`` of the scene at knot ``k`` into the 3-D axes ``ax``."""
        from mpl_toolkits.mplot3d.art3d import Poly3DCollection

        entry, skeleton = self.entries[index], self.skeletons[index]
        colour = palette.colour(entry.name)
        ax.cla()
        for surface in self.surfaces:
            alpha = 0.16 if surface.name == "ceiling" else 0.42
            ax.add_collection3d(Poly3DCollection([surface.corners], facecolor=palette.TERRAIN, alpha=alpha,
                                                 edgecolor=palette.MUTED, linewidth=0.5))
        pose = skeleton.pose(entry.plan.q[k])
        for a, b in pose.links:
            ax.plot(*np.transpose([a, b]), color=colour, linewidth=3.2, solid_capstyle="round")
        ax.plot(*pose.body.T, color=palette.INK, linewidth=2.4)
        self._draw_cones(ax, entry, k, pose.feet)
        ax.scatter(*pose.feet.T, s=22, color=palette.INK, depthshade=False)
        ax.scatter(*pose.hand, s=30, color=colour, edgecolor=palette.INK, depthshade=False)
        for target in self.targets:
            ax.scatter(*target.position, marker="X", s=60, color=palette.TARGET, depthshade=False)
        cert = entry.certificate.knots[k]
        if math.isfinite(cert.rho) and cert.rho > 0.0 and not cert.capped:
            d = cert.direction[:3] * cert.rho * self.arrow_scale
            ax.quiver(*pose.hand, *d, color=palette.DANGER, linewidth=2.6, arrow_length_ratio=0.3)
        ax.set_title(f"{title}\nt = {entry.plan.t[k]:.2f} s, margin {cert.rho:.1f} N", fontsize=8, color=colour)
        self._frame(ax)

    def _draw_cones(self, ax, entry, k: int, feet) -> None:
        cmap = palette.use_map()
        use = entry.use.friction[k]
        surfaces = self.surfaces_at[self.entries.index(entry)]
        for c, foot in enumerate(feet):
            if not entry.plan.contact_active[k, c]:
                continue
            n, (t1, t2), mu = surfaces.normals[k, c], surfaces.tangents[k, c], surfaces.friction[k, c]
            angles = 2.0 * np.pi * (np.arange(self.facets) + 0.5) / self.facets
            edges = n[None] + mu * (np.cos(angles)[:, None] * t1 + np.sin(angles)[:, None] * t2)
            tips = foot + CONE_HEIGHT * edges / np.linalg.norm(edges, axis=1, keepdims=True)
            shade = cmap(float(np.clip(use[c], 0.0, 1.0)) if math.isfinite(use[c]) else 0.0)
            for tip in tips:
                ax.plot(*np.transpose([foot, tip]), color=shade, linewidth=1.3)
            ring = np.vstack([tips, tips[:1]])
            ax.plot(*ring.T, color=shade, linewidth=1.0)

    def _frame(self, ax) -> None:
        lo, hi = self.box.min(axis=0), self.box.max(axis=0)
        centre, half = 0.5 * (lo + hi), 0.5 * float(np.max(hi - lo))
        ax.set_xlim(centre[0] - half, centre[0] + half)
        ax.set_ylim(centre[1] - half, centre[1] + half)
        ax.set_zlim(centre[2] - half, centre[2] + half)
        ax.set_box_aspect((1.0, 1.0, 1.0), zoom=1.3)
        ax.view_init(*self.view)
        ax.set_axis_off()


def key_knots(entry) -> list[tuple[int, str]]:
    """(knot, label) of the key frames: start, the middle of each hand target, the end."""
    t = entry.plan.t
    chosen = [(0, "start")]
    for target in hand_targets(entry.plan.meta):
        k = int(np.argmin(np.abs(t - 0.5 * (target.t_start + target.t_end))))
        chosen.append((k, target.label))
    chosen.append((len(t) - 1, "end"))
    seen, out = set(), []
    for k, label in sorted(chosen, key=lambda x: x[0]):
        if k not in seen:
            seen.add(k)
            out.append((k, label))
    return out


def strip_size(entries) -> tuple[int, int]:
    """(columns, rows) of the key-frame strip: key frames plus the weakest moment, one row per plan."""
    return len(key_knots(entries[0])) + 1, len(entries)


def keyframe_strip(entries, path) -> Path:
    """PNG with one row per plan: its key frames and, last, its smallest-margin knot."""
    columns, rows = strip_size(entries)
    scene = Scene(entries)
    with palette.figure_style():
        fig = Figure(figsize=(PANEL_INCHES * columns, PANEL_INCHES * rows), dpi=palette.FIGURE_DPI)
        for r, entry in enumerate(entries):
            frames = key_knots(entry) + [(entry.smallest.knot, "weakest moment")]
            for c, (k, label) in enumerate(frames):
                ax = fig.add_subplot(rows, columns, r * columns + c + 1, projection="3d")
                scene.draw(ax, r, k, f"{entry.name}: {label}")
        fig.subplots_adjust(left=0.0, right=1.0, bottom=0.0, top=0.94, wspace=0.0, hspace=0.12)
        with atomic_output(path, suffix=".png") as tmp:
            fig.savefig(tmp, format="png", dpi=palette.FIGURE_DPI)
    return Path(path)


def movie_size(entries) -> tuple[int, int]:
    """(width, height) in pixels of the animation."""
    side = round(MOVIE_PANEL_INCHES * MOVIE_DPI)
    return side * len(entries), side


def animation(entries, path, progress=None, frames: int | None = None) -> Path:
    """GIF of every plan side by side, one frame per knot (or ``frames`` evenly spread knots).

    Frame durations follow the knot times (real time). ``progress(done, total)``
    is called after every frame.
    """
    import imageio.v3 as iio

    scene = Scene(entries)
    count = min(e.plan.knots for e in entries)
    chosen = np.unique(np.linspace(0, count - 1, frames or count).round().astype(int))
    t = entries[0].plan.t
    step = float(t[1] - t[0]) if t.size > 1 else 0.5
    images = []
    with palette.figure_style():
        fig = Figure(figsize=(MOVIE_PANEL_INCHES * len(entries), MOVIE_PANEL_INCHES), dpi=MOVIE_DPI)
        canvas = FigureCanvasAgg(fig)
        axes = [fig.add_subplot(1, len(entries), i + 1, projection="3d") for i in range(len(entries))]
        fig.subplots_adjust(left=0.0, right=1.0, bottom=0.0, top=0.9, wspace=0.0)
        for done, k in enumerate(chosen, start=1):
            for i, ax in enumerate(axes):
                scene.draw(ax, i, int(k), entries[i].name)
            canvas.draw()
            images.append(np.asarray(canvas.buffer_rgba())[..., :3].copy())
            if progress is not None:
                progress(done, len(chosen))
    per_frame_ms = max(20, round(1000.0 * step * (count - 1) / max(len(chosen) - 1, 1)))
    with atomic_output(path, suffix=".gif") as tmp:
        iio.imwrite(tmp, np.stack(images), extension=".gif", duration=per_frame_ms, loop=0)
    return Path(path)
