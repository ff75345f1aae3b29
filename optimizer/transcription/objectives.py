"""Objectives: a registry from name to what the objective adds to the NLP.

All objectives share the constraint set; they differ in the cost, in whether
the robust variables (gains and margins) exist, and in extra variables
(``robust`` and ``robust-min`` add one floor under every margin). A small regularizer on
accelerations and on the distance to the nominal posture keeps every
problem well posed; its weights are the same for all objectives.
"""
from __future__ import annotations

from dataclasses import dataclass

import casadi as ca

ACCELERATION_WEIGHT = 1e-3   # per (rad/s^2)^2, averaged over knots
POSTURE_WEIGHT = 1e-2        # per rad^2 of joint-posture deviation, averaged over knots
GAIN_WEIGHT = 1e-3           # per (G / m g)^2, robust objectives only: keeps the gains unique


@dataclass(frozen=True)
class Context:
    """Numbers an objective needs: the robot's weight [N] and a torque scale [N m]."""

    weight: float
    torque_scale: float
    knots: int


def regularizer(V, P, ctx: Context):
    """Smoothness and posture terms shared by every objective (dimensionless)."""
    accel = ca.sumsqr(V["a"]) / ctx.knots
    posture = ca.sumsqr(V["q"][7:, :] - ca.repmat(P["posture"][7:], 1, ctx.knots)) / ctx.knots
    return ACCELERATION_WEIGHT * accel + POSTURE_WEIGHT * posture


def _margins(V, count: int):
    return ca.vertcat(*[V[f"rho{p}"] for p in range(count)])


def _gain_term(V, count: int, ctx: Context):
    return GAIN_WEIGHT * sum(ca.sumsqr(V[f"G{p}"]) for p in range(count)) / (ctx.knots * ctx.weight ** 2)


class Feasible:
    """Any motion that meets every constraint (regularizer only)."""

    name, robust = "feasible", False

    def add_variables(self, layout, ctx):
        pass

    def add_constraints(self, V, stack, ctx, disturbances):
        pass

    def cost(self, V, P, ctx, disturbances):
        return regularizer(V, P, ctx)


class Torque(Feasible):
    """Minimize the mean over knots of the squared joint torques (the usual baseline)."""

    name = "torque"

    def cost(self, V, P, ctx, disturbances):
        return ca.sumsqr(V["tau"]) / (ctx.knots * ctx.torque_scale ** 2) + regularizer(V, P, ctx)


class RobustSum(Feasible):
    """Maximize the plain sum over knots (and disturbance points) of the margin rho.

    Kept for comparison: a sum lets a few knots sit at almost no margin when
    that buys more elsewhere (on the steep ramp, 0.0003 N at the first knots).
    """

    name, robust = "robust-sum", True

    def cost(self, V, P, ctx, disturbances):
        total = ca.sum1(ca.sum2(_margins(V, disturbances)))
        return -total / (ctx.knots * ctx.weight) + _gain_term(V, disturbances, ctx) + regularizer(V, P, ctx)


class _FloorAndMean(RobustSum):
    """Maximize ``floor + MEAN_WEIGHT * mean(rho)`` with ``rho >= floor`` at every knot.

    One variable ``floor`` (N) lies under every margin; the cost rewards it
    and, with ``MEAN_WEIGHT``, the mean margin.
    """

    MEAN_WEIGHT: float

    def add_variables(self, layout, ctx):
        layout.add("floor", 1, 1, scale=ctx.weight)

    def add_constraints(self, V, stack, ctx, disturbances):
        margins = _margins(V, disturbances)
        knots = range(margins.shape[1])
        stack.add("margin floor", (margins - V["floor"]) / ctx.weight, knots, 0.0, float("inf"), unit="m g")

    def cost(self, V, P, ctx, disturbances):
        mean = ca.sum1(ca.sum2(_margins(V, disturbances))) / (ctx.knots * ctx.weight)
        return (-V["floor"] / ctx.weight - self.MEAN_WEIGHT * mean
                + _gain_term(V, disturbances, ctx) + regularizer(V, P, ctx))


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
