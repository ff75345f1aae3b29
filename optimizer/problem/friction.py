"""Friction pyramids inscribed in Coulomb cones.

A contact force ``f`` (world frame, N, force of the surface on the robot) lies
in the Coulomb cone of a surface with unit normal ``n`` and friction
coefficient ``mu`` when ``|f - (n.f) n| <= mu (n.f)``. The planner uses a
pyramid with ``m`` facets whose edges lie on that cone, so any force inside the
pyramid is inside the cone (common practice for linearized friction).
"""
from __future__ import annotations

import numpy as np


def tangent_basis(normal) -> np.ndarray:
    """Two unit tangents ``(t1, t2)`` of a surface with unit ``normal``.

    ``t1`` is the world x axis projected onto the surface (the world y axis when
    the normal is nearly parallel to x); ``t2 = n x t1``. Returns shape (2, 3).
    """
    n = np.asarray(normal, dtype=float)
    n = n / np.linalg.norm(n)
    seed = np.array([1.0, 0.0, 0.0]) if abs(n[0]) < 0.9 else np.array([0.0, 1.0, 0.0])
    t1 = seed - n * (n @ seed)
    t1 /= np.linalg.norm(t1)
    return np.array([t1, np.cross(n, t1)])


def pyramid_facets(normal, tangents, mu: float, facets: int = 4) -> np.ndarray:
    """Rows ``g_j`` of the inscribed pyramid ``{f : g_j . f <= 0 for all j}``.

    Facet ``j`` faces the tangent direction at angle ``2 pi j / m`` from ``t1``;
    its edges lie on the Coulomb cone, at ``pi / m`` to either side. For
    ``m = 4`` this is ``|f.t1|, |f.t2| <= (mu / sqrt 2) f.n``.

    Parameters
    ----------
    normal : array-like, shape (3,)
        Unit surface normal, world frame, pointing into the robot.
    tangents : array-like, shape (2, 3)
        Unit tangents ``t1, t2`` spanning the surface.
    mu : float
        Coulomb friction coefficient (> 0).
    facets : int
        Number of facets ``m >= 3``.

    Returns
    -------
    ndarray, shape (m, 3)
    """
    n = np.asarray(normal, dtype=float)
    t1, t2 = np.asarray(tangents, dtype=float)
    angles = 2.0 * np.pi * np.arange(facets) / facets
    inscribed_mu = mu * np.cos(np.pi / facets)
    return (np.cos(angles)[:, None] * t1 + np.sin(angles)[:, None] * t2) - inscribed_mu * n
