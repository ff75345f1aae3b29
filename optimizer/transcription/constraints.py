"""Labelled constraint groups: ``lb <= g <= ub`` stacked in one vector.

Every row carries a :class:`RowLabel` (its family, its knot, and the joint,
contact, target or limit it is about), recorded where the row is added. Any
point (a solved plan, or where a failed solve stopped) can then report its
violation per group, per knot and per row by name, with no arithmetic on row
positions.

A *family* is one kind of constraint row (equations of motion, friction,
robust limits ...) with its plain words and a hint for when it is violated.
A new kind of row registers its family with :func:`register_family` (in the
module that adds the rows) and passes ``family`` and ``who`` to
:meth:`ConstraintStack.add`.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import casadi as ca
import numpy as np


@dataclass(frozen=True)
class Family:
    """One kind of constraint row: ``name``, ``words`` (what it asks, in plain words), ``hint`` (what to change)."""

    name: str
    words: str
    hint: str


FAMILIES: dict[str, Family] = {}


def register_family(name: str, words: str, hint: str) -> Family:
    """Register (or replace) a row family; returns it."""
    FAMILIES[name] = Family(name, words, hint)
    return FAMILIES[name]


def family_named(name: str) -> Family:
    """The registered family, or a plain one named after the group."""
    return FAMILIES.get(name) or Family(name, name, "see the solver log")


for _name, _words, _hint in (
    ("equations of motion", "equations of motion: forces and torques do not balance the motion",
     "slow the motion down (a longer horizon, targets further apart in time) or ease the load "
     "(more friction, footholds nearer the body)"),
    ("velocity integration", "velocity integration between knots", "use more knots or a longer horizon"),
    ("configuration integration", "configuration integration between knots", "use more knots or a longer horizon"),
    ("unit quaternion", "unit base quaternion at the start", "fix the start with initial_posture: stance"),
    ("stance contacts", "feet on their footholds", "move the named footholds closer to the body, or fix the start "
     "with initial_posture: stance"),
    ("friction pyramid", "friction per contact", "the named feet would slip: give them flatter or rougher footholds, "
     "or move the other feet so they carry more of the load"),
    ("minimum normal force", "minimum normal force per contact", "the named feet would lift off: place them nearer "
     "under the centre of mass, or lower min_normal_force"),
    ("preload", "preload per contact (the planned normal force)", "the named feet cannot press that hard along "
     "the motion: lower their preload, or place them where the other feet can push back"),
    ("load ramp", "load ramp of stepping feet (the planned normal force near a swing)", "shorten "
     "stance.schedule.load_ramp, or give the stances on both sides of the swing more time"),
    ("hand target", "hand targets", "lower the hand target or bring it closer to the body, or move the feet "
     "(e.g. the rear feet closer) toward it"),
    ("robust balance", "robustness: balance of the disturbance response", "shrink the disturbance shape, or solve "
     "with --objective feasible to see whether the plain task is possible"),
    ("robust limits", "robustness: room at the torque, friction and normal-force limits", "a posture that loads "
     "the limits less, a wider stance, or a smaller disturbance shape"),
    ("limit rooms", "room left at each limit", "a posture that loads the limits less, or a smaller disturbance shape"),
    ("margin floor", "robustness: the floor under every margin", "solve with --objective robust to see the margins "
     "knot by knot"),
    ("point floor", "robustness: the smallest weighted margin of several disturbance points", "lower the "
     "objective_weight of the named point, or combine_points: weighted-sum"),
):
    register_family(_name, _words, _hint)


@dataclass(frozen=True)
class RowLabel:
    """What one constraint row is: its family, knot, and the joint, contact, target or limit it is about."""

    family: str
    knot: int
    who: str


@dataclass
class ConstraintGroup:
    """Rows ``offset .. offset + size``, knot-major, each with its :class:`RowLabel`.

    ``unit`` names what one unit of residual means (for reports).
    """

    name: str
    offset: int
    family: str
    knots: tuple
    unit: str
    labels: tuple = field(repr=False, default=())

    @property
    def size(self) -> int:
        return len(self.labels)

    def slice(self) -> slice:
        return slice(self.offset, self.offset + self.size)


class ConstraintStack:
    """Collects groups; ``expression()`` and ``bounds()`` give the NLP's g, lbg, ubg."""

    def __init__(self):
        self.groups: list[ConstraintGroup] = []
        self._expr, self._lb, self._ub = [], [], []
        self.size = 0

    def add(self, name: str, expr, knots, lower=0.0, upper=0.0, unit: str = "", family: str | None = None,
            who=None) -> ConstraintGroup:
        """Add ``lower <= expr <= upper``.

        ``expr`` has shape (rows, len(knots)), one column per knot; bounds
        are scalars or arrays broadcast to that shape. ``family`` defaults to
        ``name``; ``who`` names every row of one knot's column (a joint,
        contact, target or limit; default: the group's name).
        """
        knots = tuple(int(k) for k in knots)
        rows = expr.shape[0] if expr.shape[1] == len(knots) else expr.numel() // max(len(knots), 1)
        family = family or name
        who = [name] * rows if who is None else [str(w) for w in who]
        if len(who) != rows:
            raise ValueError(f"constraint group '{name}': {len(who)} row names for {rows} rows")
        labels = tuple(RowLabel(family, k, w) for k in knots for w in who)
        group = ConstraintGroup(name, self.size, family, knots, unit, labels)
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

    @property
    def labels(self) -> list[RowLabel]:
        """The label of every row of g, in order."""
        return [label for group in self.groups for label in group.labels]

    def violations(self, g, lbg, ubg) -> dict[str, np.ndarray]:
        """Largest bound violation per group and knot: {name: (len(knots),)}."""
        rows = self.row_violations(g, lbg, ubg)
        out = {}
        for group in self.groups:
            column = {knot: j for j, knot in enumerate(group.knots)}
            largest = np.zeros(len(group.knots))
            np.maximum.at(largest, [column[label.knot] for label in group.labels], rows[group.name])
            out[group.name] = largest
        return out

    def row_violations(self, g, lbg, ubg) -> dict[str, np.ndarray]:
        """Bound violation of every row: {name: (size,)}, row ``i`` labelled ``group.labels[i]``."""
        g = np.asarray(g, float).reshape(-1)
        excess = np.maximum(np.maximum(np.asarray(lbg) - g, g - np.asarray(ubg)), 0.0)
        return {grp.name: excess[grp.slice()] for grp in self.groups}
