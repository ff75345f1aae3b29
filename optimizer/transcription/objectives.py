"""Objectives: a registry from name to what the objective adds to the NLP.

All objectives share the constraint set; they differ in the cost, in whether
the robust variables (gains and margins) exist, and in extra variables
(``robust`` and ``robust-min`` add one floor under every knot's margin). A small regularizer on
accelerations and on the distance to the nominal posture keeps every
problem well posed; its weights are the same for all objectives.

Robust objectives see one margin per knot (:func:`knot_margins`): ``rho0``
for one disturbance point; for several, the points' margins combined as the
task says (:mod:`optimizer.problem.point_weights`): a weighted sum, or the
smallest weighted margin, an epigraph variable ``point_floor`` (one per
knot) under every ``rho_p / w_p``.
"""
from __future__ import annotations

from dataclasses import dataclass

import casadi as ca

from ..problem.point_weights import DEFAULT_COMBINATION

ACCELERATION_WEIGHT = 1e-3   # per (rad/s^2)^2, averaged over knots
POSTURE_WEIGHT = 1e-2        # per rad^2 of joint-posture deviation, averaged over knots
GAIN_WEIGHT = 1e-3           # per (G / m g)^2, robust objectives only: keeps the gains unique


@dataclass(frozen=True)
class Context:
    """Numbers an objective needs: the robot's weight [N], a torque scale [N m], the knots, and
    the disturbance points with how their margins combine (``points`` 0 without robust variables)."""

    weight: float
    torque_scale: float
    knots: int
    points: int = 1
    combine: str = DEFAULT_COMBINATION

    @property
    def point_floor(self) -> bool:
        """The smallest of several points' margins is an epigraph variable."""
        return self.points > 1 and self.combine == "smallest"


POINT_FLOOR = "point_floor"   # (1, K) [N]: under every rho_p / w_p of its knot ("smallest" of several points)


def regularizer(V, P, ctx: Context):
    """Smoothness and posture terms shared by every objective (dimensionless)."""
    accel = ca.sumsqr(V["a"]) / ctx.knots
    posture = ca.sumsqr(V["q"][7:, :] - ca.repmat(P["posture"][7:], 1, ctx.knots)) / ctx.knots
    return ACCELERATION_WEIGHT * accel + POSTURE_WEIGHT * posture


def knot_margins(V, P, ctx: Context):
    """The margin per knot that robust objectives maximize, (1, K) [N] (module docstring)."""
    if ctx.points == 1:
        return V["rho0"]
    if ctx.point_floor:
        return V[POINT_FLOOR]
    weights = P["point_weights"]
    return sum(weights[p] * V[f"rho{p}"] for p in range(ctx.points))


def _gain_term(V, count: int, ctx: Context):
    return GAIN_WEIGHT * sum(ca.sumsqr(V[f"G{p}"]) for p in range(count)) / (ctx.knots * ctx.weight ** 2)


class Feasible:
    """Any motion that meets every constraint (regularizer only)."""

    name, robust = "feasible", False

    def add_variables(self, layout, ctx):
        pass

    def add_constraints(self, V, P, stack, ctx):
        pass

    def cost(self, V, P, ctx):
        return regularizer(V, P, ctx)


class Torque(Feasible):
    """Minimize the mean over knots of the squared joint torques (the usual baseline)."""

    name = "torque"

    def cost(self, V, P, ctx):
        return ca.sumsqr(V["tau"]) / (ctx.knots * ctx.torque_scale ** 2) + regularizer(V, P, ctx)


class RobustSum(Feasible):
    """Maximize the plain sum over knots of the knot margin (:func:`knot_margins`).

    Kept for comparison: a sum lets a few knots sit at almost no margin when
    that buys more elsewhere (on the steep ramp, 0.0003 N at the first knots).
    """

    name, robust = "robust-sum", True

    def add_variables(self, layout, ctx):
        if ctx.point_floor:
            layout.add(POINT_FLOOR, 1, ctx.knots, scale=ctx.weight)

    def add_constraints(self, V, P, stack, ctx):
        if not ctx.point_floor:
            return
        weights, floor = P["point_weights"], V[POINT_FLOOR]
        rows = ca.vertcat(*[(V[f"rho{p}"] - weights[p] * floor) / ctx.weight for p in range(ctx.points)])
        stack.add("point floor", rows, range(ctx.knots), 0.0, float("inf"), unit="m g",
                  who=[f"disturbance {p}" for p in range(ctx.points)])

    def cost(self, V, P, ctx):
        total = ca.sum2(knot_margins(V, P, ctx))
        return -total / (ctx.knots * ctx.weight) + _gain_term(V, ctx.points, ctx) + regularizer(V, P, ctx)


class _FloorAndMean(RobustSum):
    """Maximize ``floor + MEAN_WEIGHT * mean(m)`` with ``m >= floor`` at every knot.

    ``m`` is the knot margin (:func:`knot_margins`). One variable ``floor``
    (N) lies under it at every knot; the cost rewards it and, with
    ``MEAN_WEIGHT``, the mean.
    """

    MEAN_WEIGHT: float

    def add_variables(self, layout, ctx):
        super().add_variables(layout, ctx)
        layout.add("floor", 1, 1, scale=ctx.weight)

    def add_constraints(self, V, P, stack, ctx):
        super().add_constraints(V, P, stack, ctx)
        margins = knot_margins(V, P, ctx)
        stack.add("margin floor", (margins - V["floor"]) / ctx.weight, range(ctx.knots), 0.0, float("inf"),
                  unit="m g")

    def cost(self, V, P, ctx):
        mean = ca.sum2(knot_margins(V, P, ctx)) / (ctx.knots * ctx.weight)
        return (-V["floor"] / ctx.weight - self.MEAN_WEIGHT * mean
                + _gain_term(V, ctx.points, ctx) + regularizer(V, P, ctx))


class Robust(_FloorAndMean):
    """The default robust objective: the smallest margin plus the mean margin, equal weights.

    Every knot keeps at least the floor while the mean still counts fully, so
    no knot is traded away for a larger sum (measured against ``robust-sum``
    and ``robust-min`` on the demo tasks, DEVELOPERS.md).
    """

    name = "robust"
    MEAN_WEIGHT = 1.0


class RobustMin(_FloorAndMean):
    """Maximize the smallest margin over knots, with a little of the mean."""

    name = "robust-min"
    MEAN_WEIGHT = 1e-2  # a little of the mean, so knots above the floor still improve


OBJECTIVES = {cls.name: cls for cls in (Feasible, Robust, RobustMin, RobustSum, Torque)}


def objective_named(name: str):
    """A fresh objective instance; ``KeyError`` names the known ones."""
    try:
        return OBJECTIVES[name]()
    except KeyError:
        raise KeyError(f"unknown objective '{name}'; known: {', '.join(OBJECTIVES)}") from None
