"""Named constraint groups: ``lb <= g <= ub`` stacked in one vector.

Each group remembers which rows belong to which knot, so any point (a solved
plan, or where a failed solve stopped) can report its violation per group
and per knot.
"""
from __future__ import annotations

from dataclasses import dataclass

import casadi as ca
import numpy as np


@dataclass
class ConstraintGroup:
    """Rows ``offset .. offset + rows * len(knots)``, knot-major: ``rows`` per knot.

    ``unit`` names what one unit of residual means (for reports).
    """

    name: str
    offset: int
    rows: int
    knots: tuple
    unit: str

    @property
    def size(self) -> int:
        return self.rows * len(self.knots)

    def slice(self) -> slice:
        return slice(self.offset, self.offset + self.size)


class ConstraintStack:
    """Collects groups; ``expression()`` and ``bounds()`` give the NLP's g, lbg, ubg."""

    def __init__(self):
        self.groups: list[ConstraintGroup] = []
        self._expr, self._lb, self._ub = [], [], []
        self.size = 0

    def add(self, name: str, expr, knots, lower=0.0, upper=0.0, unit: str = "") -> ConstraintGroup:
        """Add ``lower <= expr <= upper``.

        ``expr`` has shape (rows, len(knots)), one column per knot;
        bounds are scalars or arrays broadcast to that shape.
        """
        knots = tuple(int(k) for k in knots)
        rows = expr.shape[0] if expr.shape[1] == len(knots) else expr.numel() // max(len(knots), 1)
        group = ConstraintGroup(name, self.size, rows, knots, unit)
        shape = (rows, len(knots))
        self._expr.append(ca.vec(ca.reshape(expr, rows, len(knots))))
        self._lb.append(np.broadcast_to(np.asarray(lower, float), shape).reshape(-1, order="F"))
        self._ub.append(np.broadcast_to(np.asarray(upper, float), shape).reshape(-1, order="F"))
        self.groups.append(group)
        self.size += group.size
        return group

    def expression(self):
        return ca.vertcat(*self._expr)

    def bounds(self) -> tuple[np.ndarray, np.ndarray]:
        return np.concatenate(self._lb), np.concatenate(self._ub)

    def group(self, name: str) -> ConstraintGroup:
        for group in self.groups:
            if group.name == name:
                return group
        raise KeyError(name)

    def violations(self, g, lbg, ubg) -> dict[str, np.ndarray]:
        """Largest bound violation per group and knot: {name: (len(knots),)}."""
        g = np.asarray(g, float).reshape(-1)
        excess = np.maximum(np.maximum(lbg - g, g - ubg), 0.0)
        return {grp.name: excess[grp.slice()].reshape((grp.rows, len(grp.knots)), order="F").max(axis=0, initial=0.0)
                for grp in self.groups}

    def row_violations(self, g, lbg, ubg) -> dict[str, np.ndarray]:
        """Bound violation of every row: {name: (rows, len(knots))}, column j is knot ``group.knots[j]``.

        Row ``i`` of a group is row ``i`` of its per-knot expression (e.g. the
        ``i``-th facet row of the friction group), so callers can name it.
        """
        g = np.asarray(g, float).reshape(-1)
        excess = np.maximum(np.maximum(np.asarray(lbg) - g, g - np.asarray(ubg)), 0.0)
        return {grp.name: excess[grp.slice()].reshape((grp.rows, len(grp.knots)), order="F")
                for grp in self.groups}
