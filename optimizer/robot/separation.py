"""How far apart two collision shapes are: convex hulls of points, swollen by radii.

A collision shape is the convex hull of a few points plus a ball
(:mod:`optimizer.robot.collision`), so the distance of two shapes is the
distance of the two hulls less both radii. The hull distance is the length
of the shortest vector of the Minkowski difference ``conv{a_i - b_j}``,
found here as a non-negative least-squares problem (the weights' sum pinned
to one by a heavy extra row). Its direction ``n`` then gives the figure that
is reported: ``min_i n . a_i - max_j n . b_j``, the gap of the planes
``n . x = const`` that separate the hulls. That is a lower bound of the true
distance for any unit ``n`` (every point of one hull lies on one side of
those planes, every point of the other on the other side), and equal to it
at the shortest vector, so the figure never overstates a clearance even
when the least-squares solution is not exact. For overlapping hulls it is
negative (how far they overlap along ``n``, not the penetration depth).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import nnls

SUM_WEIGHT = 1e4   # weight of the "weights sum to one" row, relative to the points' extent


@dataclass(frozen=True)
class Separation:
    """Two hulls' separation: ``gap`` (m, see the module doc) along the unit ``normal`` pointing from b to a."""

    gap: float
    normal: np.ndarray


def hull_separation(a, b) -> Separation:
    """Separation of the convex hulls of ``a`` (n, 3) and ``b`` (m, 3), world frame, m."""
    a, b = np.atleast_2d(np.asarray(a, float)), np.atleast_2d(np.asarray(b, float))
    diffs = (a[:, None, :] - b[None, :, :]).reshape(-1, 3)
    extent = max(float(np.abs(diffs).max()), 1e-3)
    weight = SUM_WEIGHT * extent
    system = np.vstack([diffs.T, np.full((1, len(diffs)), weight)])
    w, _ = nnls(system, np.array([0.0, 0.0, 0.0, weight]))
    shortest = diffs.T @ (w / max(w.sum(), 1e-300))
    length = float(np.linalg.norm(shortest))
    if length < 1e-12 * extent:
        shortest = a.mean(axis=0) - b.mean(axis=0)
        length = float(np.linalg.norm(shortest))
        if length < 1e-12:
            shortest, length = np.array([0.0, 0.0, 1.0]), 1.0
    normal = shortest / length
    return Separation(float(np.min(a @ normal) - np.max(b @ normal)), normal)


def shape_distance(a, radius_a: float, b, radius_b: float) -> float:
    """Distance of two swollen hulls (m): :func:`hull_separation`'s gap less both radii (see the module doc)."""
    return hull_separation(a, b).gap - float(radius_a) - float(radius_b)
