"""The look of every brace figure: one colour per objective, one use map, one style.

Every figure (comparison, sweep, motion preview) takes its colours from here,
so an objective reads the same everywhere. The colours are our own choice:
they differ in lightness as well as in hue, so they stay apart for readers
with red-green or blue-yellow colour blindness and in grey-scale print
(``tests/test_report_palette.py`` checks the distances under simulated colour
vision deficiencies). Lines also differ in marker and dash, so no figure
relies on colour alone.

API (stable; other report modules and ``brace sweep`` use it)::

    from optimizer.report import palette
    palette.colour("robust")            # '#1d4e89'
    plt.plot(t, m, **palette.line_style("torque"))
    palette.series_colours(5)           # colours for series that are not objectives
    palette.use_map()                   # sequential colour map for 0..1 limit use
    with palette.figure_style():        # fonts, grid, spines for one figure
        fig, ax = plt.subplots()
"""
from __future__ import annotations

import contextlib

OBJECTIVE_COLOURS = {
    "robust": "#1d4e89",        # deep blue
    "robust-min": "#5fb4e0",    # light sky blue
    "robust-sum": "#9ad0a0",    # pale green (lightest: the plain sum of margins)
    "torque": "#d2691e",        # burnt orange
    "feasible": "#6e6e6e",      # neutral grey: the plain baseline
}
"""Hex sRGB colour of each objective."""

OBJECTIVE_MARKERS = {"robust": "o", "robust-min": "s", "robust-sum": "v", "torque": "^", "feasible": "D"}
OBJECTIVE_DASHES = {"robust": "-", "robust-min": "--", "robust-sum": (0, (5, 1, 1, 1)), "torque": "-.",
                    "feasible": ":"}

EXTRA_COLOURS = ("#8e3b8f", "#3f8f4f", "#c9a227", "#9c2f2f", "#2f6f6f")
"""Further colours, in order, for series that are not the four objectives."""

EXTRA_MARKERS = ("v", "P", "X", "<", ">")
EXTRA_DASHES = ("-", "--", "-.", ":", (0, (5, 1, 1, 1)))
TASK_MARKERS = ("v", "P", "X", "<", ">", "D", "*", "h", "p", "8")
"""Markers, in order, for tasks in a figure whose colours are objectives (ten tell apart)."""

INK = "#222222"          # text, axes, robot links
MUTED = "#9a9a9a"        # grids, terrain outlines, secondary text
TERRAIN = "#c8bfa8"      # terrain surfaces in the motion preview
TARGET = "#b0126b"       # hand targets (magenta: no objective uses it)
DANGER = "#b3261e"       # the weakest-direction arrow, limit lines

USE_STOPS = ("#f7f5ee", "#f0d59a", "#e19a3c", "#b84a2a", "#5a1f3d")
"""Sequential stops of :func:`use_map`, light to dark (lightness falls monotonically)."""

FIGURE_DPI = 100          # pixels per inch of every PNG
FONT_SIZE = 9.0           # points


def colour(objective: str) -> str:
    """Hex colour of ``objective``; names that are not objectives get a fixed extra colour."""
    if objective in OBJECTIVE_COLOURS:
        return OBJECTIVE_COLOURS[objective]
    return EXTRA_COLOURS[_stable_index(objective, len(EXTRA_COLOURS))]


def line_style(objective: str) -> dict:
    """Keyword arguments for ``Axes.plot``: colour, marker, dash and label of ``objective``."""
    if objective in OBJECTIVE_COLOURS:
        marker, dash = OBJECTIVE_MARKERS[objective], OBJECTIVE_DASHES[objective]
    else:
        i = _stable_index(objective, len(EXTRA_MARKERS))
        marker, dash = EXTRA_MARKERS[i], EXTRA_DASHES[i]
    return {"color": colour(objective), "marker": marker, "linestyle": dash, "label": objective}


def series_colours(count: int) -> list[str]:
    """``count`` distinct colours for series that are not objectives (cycling past the list)."""
    base = list(EXTRA_COLOURS) + [OBJECTIVE_COLOURS[o] for o in ("robust", "torque", "robust-min")]
    return [base[i % len(base)] for i in range(count)]


def series_style(index: int) -> dict:
    """Colour, marker and dash of the ``index``-th non-objective series."""
    return {"color": series_colours(index + 1)[index], "marker": EXTRA_MARKERS[index % len(EXTRA_MARKERS)],
            "linestyle": EXTRA_DASHES[index % len(EXTRA_DASHES)]}


def _stable_index(name: str, size: int) -> int:
    """An index that depends on the name alone (not on Python's hash seed)."""
    return sum(name.encode()) % size


def use_map():
    """Sequential colour map for a limit's use, 0 (light) to 1 (dark); above 1 black."""
    from matplotlib.colors import LinearSegmentedColormap

    return LinearSegmentedColormap.from_list("brace-use", USE_STOPS, N=256).with_extremes(over="#000000")


STYLE = {
    "figure.dpi": FIGURE_DPI,
    "savefig.dpi": FIGURE_DPI,
    "font.size": FONT_SIZE,
    "axes.titlesize": FONT_SIZE + 1,
    "axes.labelsize": FONT_SIZE,
    "axes.edgecolor": INK,
    "axes.labelcolor": INK,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#e4e4e4",
    "grid.linewidth": 0.6,
    "xtick.color": INK,
    "ytick.color": INK,
    "legend.frameon": False,
    "legend.fontsize": FONT_SIZE - 0.5,
    "lines.linewidth": 1.8,
    "lines.markersize": 5.0,
    "svg.fonttype": "none",
}
"""Matplotlib settings shared by every figure."""


@contextlib.contextmanager
def figure_style():
    """Matplotlib's rc settings of :data:`STYLE` for the figures drawn inside the block."""
    import matplotlib

    with matplotlib.rc_context(STYLE):
        yield
