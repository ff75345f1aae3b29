"""A plane section of a knot's residual force polytope, for drawing.

The plane is spanned by the weakest direction ``e1`` (from certification) and
the weakest direction orthogonal to it, ``e2`` (found by support LPs over a
half circle of directions in the orthogonal plane). The section
``{(a, b) : a e1 + b e2 in P}`` is itself a polytope whose support LPs are
those of ``P`` with ``u`` replaced by ``[e1 e2] (a, b)``; it is projected
exactly by :func:`~optimizer.analysis.polytope.project`. Coordinates are
those of ``u`` in ``F = W u`` (newtons for a force with ``W = I``).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import ConvexHull, QhullError

from .certify import DEFAULT_CAP
from .knot_response import PlanRobot, knot_response
from .polytope import SupportLP, project


@dataclass
class PolytopeCut:
    """The section of a residual set through the origin.

    Attributes
    ----------
    knot : int
    e1, e2 : ndarray, shape (d,)
        Orthonormal directions in u-coordinates; e1 the weakest overall.
    polygon : ndarray, shape (n, 2)
        Vertices of the section in counter-clockwise order, (a, b) along
        (e1, e2) [N]; directions stopped only by the cap end at the cap.
    rho : float
        Smallest support value in the section [N] (equals the exact figure,
        since e1 lies in the plane).
    second : float
        Support value along e2 [N]: how far the robot can be pushed that way.
    """

    knot: int
    e1: np.ndarray
    e2: np.ndarray
    polygon: np.ndarray
    rho: float
    second: float


def orthonormal_to(e1: np.ndarray, count: int) -> np.ndarray:
    """``count`` unit directions (count, d) orthogonal to unit ``e1`` (d = 3), over a half circle."""
    helper = np.eye(e1.size)[int(np.argmin(np.abs(e1)))]
    b1 = helper - e1 * (e1 @ helper)
    b1 /= np.linalg.norm(b1)
    b2 = np.cross(e1, b1)
    angles = np.pi * np.arange(count) / count
    return np.cos(angles)[:, None] * b1 + np.sin(angles)[:, None] * b2


def section_lp(rows, basis: np.ndarray, cap: float) -> SupportLP:
    """Support LP of the residual set restricted to ``u = basis (a, b)``; basis (d, 2)."""
    d = rows.dim
    a_ub = np.hstack([rows.a_ub[:, :d] @ basis, rows.a_ub[:, d:]])
    a_eq = np.hstack([rows.a_eq[:, :d] @ basis, rows.a_eq[:, d:]])
    return SupportLP(a_ub, rows.b_ub, a_eq, 2, cap, names=rows.names)


def polytope_cut(plan, knot: int, weakest_u, disturbance: int = 0, cap: float = DEFAULT_CAP,
                 directions: int = 36) -> PolytopeCut:
    """The section of knot ``knot``'s residual set through its weakest direction ``weakest_u`` (d,).

    Only force disturbances (d = 3) are cut; a wrench raises ``ValueError``.
    """
    robot = PlanRobot(plan.meta, disturbance)
    rows = knot_response(plan, knot, robot).limit_rows()
    if rows.dim != 3:
        raise ValueError("a plane section is drawn for force disturbances (3 coordinates) only")
    e1 = np.asarray(weakest_u, float) / np.linalg.norm(weakest_u)
    full = SupportLP(rows.a_ub, rows.b_ub, rows.a_eq, rows.dim, cap, names=rows.names)
    values = []
    for d in orthonormal_to(e1, directions):
        values.append((full.support(d).value, tuple(d)))
        values.append((full.support(-d).value, tuple(-d)))
    second, e2 = min(values)
    e2 = np.array(e2)
    section = project(section_lp(rows, np.column_stack([e1, e2]), cap), tol=1e-6, full=True)
    return PolytopeCut(knot, e1, e2, _counter_clockwise(section.vertices), float(section.rho), float(second))


def _counter_clockwise(points: np.ndarray) -> np.ndarray:
    try:
        hull = ConvexHull(points)
    except QhullError:
        return points
    return points[hull.vertices]
