"""A solved point moved onto another knot grid: the start of a finer solve.

The coarse-to-fine continuation (:meth:`optimizer.planner.Planner.solve`
with ``continuation``) solves the objective on fewer knots and starts the
full solve from that plan placed on the full grid. Configurations follow
the geodesic between the neighbouring coarse knots (the base orientation
stays a unit quaternion); every other per-knot block (velocities,
accelerations, torques, contact forces, gains, margins, margin floors) is
linear in time; one-column blocks (a horizon-wide floor) are kept. Blocks
that the planner recomputes for any start (limit rooms, separating planes)
are left out.
"""
from __future__ import annotations

import numpy as np

from .guess import interpolate

RECOMPUTED = ("rooms", "separation")


def resampled(model, arrays: dict, times, new_times) -> dict:
    """Physical arrays of a point on knot ``times`` (K,) [s] moved onto ``new_times`` (K',) [s].

    ``arrays`` maps block names to (rows, K) arrays (``q`` of ``model``'s
    configuration space, (nq, K)); the result has (rows, K') arrays for the
    same names, less :data:`RECOMPUTED`. Both grids span the same horizon.
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
    return out
