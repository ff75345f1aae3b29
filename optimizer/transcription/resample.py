"""A solved point moved onto another knot grid: the start of a finer solve.

The coarse-to-fine continuation (:meth:`optimizer.planner.Planner.solve`
with ``continuation``) solves the objective on fewer knots and starts the
full solve from that plan placed on the full grid. Configurations follow
the geodesic between the neighbouring coarse knots (the base orientation
stays a unit quaternion); every other per-knot block (velocities,
accelerations, torques, contact forces, gains, margins, margin floors) is
linear in time; one-column blocks (a horizon-wide floor) are kept. Blocks
that the planner recomputes for any start (limit rooms, separating planes)
are left out. With a warm start, velocities and accelerations follow from
the moved configurations by the integration rule instead, and the coarse
solve's multipliers move too (:func:`resampled_multipliers`).
"""
from __future__ import annotations

import re

import numpy as np

from .guess import integrated_rates, interpolate

RECOMPUTED = ("rooms", "separation")


def resampled(model, arrays: dict, times, new_times, integrated: bool = False) -> dict:
    """Physical arrays of a point on knot ``times`` (K,) [s] moved onto ``new_times`` (K',) [s].

    ``arrays`` maps block names to (rows, K) arrays (``q`` of ``model``'s
    configuration space, (nq, K)); the result has (rows, K') arrays for the
    same names, less :data:`RECOMPUTED`. Both grids span the same horizon.
    With ``integrated``, velocities and accelerations are not moved but
    recomputed from the moved configurations by the integration rule
    (:func:`~optimizer.transcription.guess.integrated_rates`).
    """
    times, new_times = np.asarray(times, float), np.asarray(new_times, float)
    out = {}
    for name, value in arrays.items():
        value = np.asarray(value, float)
        if name in RECOMPUTED:
            continue
        if name == "q":
            out[name] = interpolate(model, list(zip(times, value.T)), new_times)
        elif value.shape[1] == times.size:
            out[name] = np.array([np.interp(new_times, times, row) for row in value])
        elif value.shape[1] == 1:
            out[name] = value.copy()
        else:
            raise ValueError(f"block '{name}' has {value.shape[1]} columns, neither one nor one per knot "
                             f"({times.size})")
    if integrated and "q" in out:
        out["v"], out["a"] = integrated_rates(model, out["q"], new_times)
    return out


# Constraint families whose multipliers are carried at their value: the integration rows' multipliers
# are the motion's costates, which do not thin out with more knots. Every other per-knot multiplier is
# a density (the cost is a mean over knots), so it is scaled by the knot-count ratio of its group.
AS_IS_FAMILIES = ("velocity integration", "configuration integration")


def resampled_multipliers(before, lam_x, lam_g, after, times, new_times) -> tuple[np.ndarray, np.ndarray]:
    """Multipliers ``(lam_x, lam_g)`` of transcription ``before`` (knots ``times`` [s]) moved onto
    transcription ``after`` (knots ``new_times`` [s]), in the solver's scaled units.

    Variable blocks of one name and row count and constraint groups of one
    name (less its ``@knot`` tag, so the rows of a hand target or swing at
    another knot match) and row count per knot are linear in time between
    the knots where ``before`` has them. Their values are scaled by the ratio
    of the two grids' knot counts of that block or name, so a multiplier's
    sum over the horizon stays (a one-knot row keeps its value), except the
    integration rows (:data:`AS_IS_FAMILIES`), kept at their values. One-column
    blocks are kept; everything else starts at zero.
    """
    times, new_times = np.asarray(times, float), np.asarray(new_times, float)
    new_x = np.zeros(after.variables.size)
    for block in after.variables.blocks:
        if block.name not in before.variables:
            continue
        old = before.variables[block.name]
        old_knots, new_knots = _block_knots(before, old), _block_knots(after, block)
        if old.rows != block.rows or old_knots is None or new_knots is None:
            continue
        values = np.asarray(lam_x, float)[old.offset:old.stop].reshape((old.rows, old.cols), order="F")
        if old.cols == 1 and block.cols == 1:
            new_x[block.offset:block.stop] = values[:, 0]
            continue
        moved = _in_time(values, times[old_knots], new_times[new_knots]) * (len(old_knots) / len(new_knots))
        new_x[block.offset:block.stop] = moved.reshape(-1, order="F")
    return new_x, _resampled_rows(before, lam_g, after, times, new_times)


def _block_knots(transcription, block):
    """The knot of every column of ``block`` (a list), [] for a one-column block, None when neither."""
    structure = transcription.structure
    if block.cols == structure.knots:
        return list(range(structure.knots))
    if block.cols == len(structure.clearance_knots) and block.name == "separation":
        return list(structure.clearance_knots)
    return [0] if block.cols == 1 else None


def _in_time(values, times, new_times) -> np.ndarray:
    """Each row of ``values`` (rows, len(times)) linear in time at ``new_times`` (held beyond the ends)."""
    order = np.argsort(times, kind="stable")
    return np.array([np.interp(new_times, times[order], row[order]) for row in values]).reshape(len(values), -1)


def _group_key(group) -> tuple:
    return re.sub(r"@\d+", "", group.name), group.size // max(len(group.knots), 1)


def _resampled_rows(before, lam_g, after, times, new_times) -> np.ndarray:
    """The constraint multipliers of :func:`resampled_multipliers`."""
    lam_g = np.asarray(lam_g, float)
    columns: dict = {}
    for group in before.constraints.groups:
        rows = _group_key(group)[1]
        values = lam_g[group.slice()].reshape((rows, len(group.knots)), order="F")
        knots, cols = columns.setdefault(_group_key(group), ([], []))
        knots += list(group.knots)
        cols += list(values.T)
    new_counts: dict = {}
    for group in after.constraints.groups:
        new_counts[_group_key(group)] = new_counts.get(_group_key(group), 0) + len(group.knots)
    out = np.zeros(after.constraints.size)
    for group in after.constraints.groups:
        key = _group_key(group)
        if key not in columns or not group.knots:
            continue
        knots, cols = columns[key]
        scale = 1.0 if group.family in AS_IS_FAMILIES else len(knots) / new_counts[key]
        moved = _in_time(np.array(cols).T, times[knots], new_times[list(group.knots)]) * scale
        out[group.slice()] = moved.reshape(-1, order="F")
    return out
