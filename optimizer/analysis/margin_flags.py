"""Knots whose margin is too small: unmet requirements and low-margin warnings.

Every summary (``brace solve``, ``brace certify``) runs the plan's margins
through :func:`find_shortfalls`. A knot is flagged when its margin is below
its threshold: the stated requirement where the task gives one
(:mod:`optimizer.problem.requirement`), otherwise ``DEFAULT_WARN_FRACTION``
of the robot's weight. Neighbouring flagged knots are reported together as
one time range with the smallest margin in it and what limits it there.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import pinocchio as pin

from ..planfile import response_gains
from ..problem.requirement import from_json, required_margins
from .knot_response import PlanRobot, knot_responses
from .linear_margin import best_linear_margin, plan_margin

# Below 5 % of body weight a plan rejects hardly any push: a warning level of
# our own choosing (no standard states one), overridable per command.
DEFAULT_WARN_FRACTION = 0.05
# Margins within this fraction of the weight below a threshold count as meeting it
# (the certified figures are exact up to round-off).
ROUND_OFF = 1e-9


@dataclass(frozen=True)
class Shortfall:
    """Neighbouring knots of one disturbance point whose margin is below its threshold.

    Attributes
    ----------
    point : int
        Disturbance point index.
    first, last : int
        First and last knot of the range.
    t_first, t_last : float
        Their times, s.
    smallest : float
        Smallest margin in the range, N (negative: a limit is already broken).
    at_knot, t_at : int, float
        Where the smallest margin is: knot and time, s.
    threshold : float
        The threshold at that knot, N.
    required : bool
        True when the threshold is a stated requirement (then it is unmet),
        False for the default low-margin warning.
    bottleneck : str
        What limits the margin at ``at_knot`` (a limit's name), or empty.
    """

    point: int
    first: int
    last: int
    t_first: float
    t_last: float
    smallest: float
    at_knot: int
    t_at: float
    threshold: float
    required: bool
    bottleneck: str = ""

    def text(self) -> str:
        """One line, e.g. ``t = 0.00-0.13 s (knots 0-3): 0.00 N, required 20.0 N; limited by ...``."""
        span = (f"t = {self.t_first:.2f} s (knot {self.first})" if self.first == self.last else
                f"t = {self.t_first:.2f}-{self.t_last:.2f} s (knots {self.first}-{self.last})")
        what = "required" if self.required else "warning level"
        limited = f"; limited by {self.bottleneck}" if self.bottleneck else ""
        return (f"{span}, point {self.point}: margin down to {self.smallest:.2f} N at t = "
                f"{self.t_at:.2f} s, {what} {self.threshold:.1f} N{limited}")

    def to_json(self) -> dict:
        return {"point": self.point, "knots": [self.first, self.last], "times_s": [self.t_first, self.t_last],
                "smallest_n": self.smallest, "at_knot": self.at_knot, "at_time_s": self.t_at,
                "threshold_n": self.threshold, "kind": "requirement unmet" if self.required else "low margin",
                "bottleneck": self.bottleneck}


def thresholds(need: np.ndarray, weight: float, warn_below: float | None = None) -> np.ndarray:
    """Threshold per knot and point, N, shape of ``need``.

    ``need`` holds the required margins (0 where none applies); elsewhere the
    warning level ``warn_below`` [N] or, by default, ``DEFAULT_WARN_FRACTION * weight``.
    """
    level = DEFAULT_WARN_FRACTION * weight if warn_below is None else float(warn_below)
    return np.where(need > 0, need, level)


def find_shortfalls(times, margins, need, weight: float, bottleneck=None, warn_below: float | None = None) -> list:
    """Time ranges whose margin is below its threshold.

    Parameters
    ----------
    times : array, shape (K,)
        Knot times, s.
    margins : array, shape (K, P)
        Margin per knot and disturbance point, N (NaN: not computed, never flagged).
    need : array, shape (K, P)
        Required margins, N (0 where none applies).
    weight : float
        The robot's weight m g, N.
    bottleneck : callable(knot, point) -> str, optional
        Names what limits the margin at a knot; asked once per range.
    warn_below : float, optional
        Warning level where nothing is required, N (default 5 % of m g).
    """
    margins = np.asarray(margins, float).reshape(len(times), -1)
    need = np.asarray(need, float).reshape(margins.shape)
    level = thresholds(need, weight, warn_below)
    low = margins < level - ROUND_OFF * weight
    found = []
    for p in range(margins.shape[1]):
        for first, last in _runs(low[:, p], need[:, p] > 0):
            ks = np.arange(first, last + 1)
            k = int(ks[np.argmin(margins[ks, p])])
            found.append(Shortfall(p, first, last, float(times[first]), float(times[last]), float(margins[k, p]),
                                   k, float(times[k]), float(level[k, p]), bool(need[k, p] > 0),
                                   bottleneck(k, p) if bottleneck else ""))
    return found


def _runs(flagged, required):
    """(first, last) of each run of flagged knots with the same kind of threshold."""
    runs, start = [], None
    for k, on in enumerate(flagged):
        if start is not None and (not on or required[k] != required[start]):
            runs.append((start, k - 1))
            start = None
        if on and start is None:
            start = k
    if start is not None:
        runs.append((start, len(flagged) - 1))
    return runs


def unmet(shortfalls) -> list:
    """The shortfalls that break a stated requirement."""
    return [s for s in shortfalls if s.required]


# ---------------------------------------------------------------- from plans and certificates


def plan_weight(meta: dict) -> float:
    """The robot's weight m g of a plan, N, from its own URDF and gravity (Pinocchio's total mass)."""
    model = PlanRobot(meta).model
    return float(pin.computeTotalMass(model) * np.linalg.norm(meta["gravity"]))


def plan_requirements(meta: dict) -> list:
    """The required margins a plan was made under (its ``meta.requirements``), or none."""
    return from_json((meta.get("requirements") or {}).get("items", []))


def linear_bottleneck(plan, knot: int, point: int) -> str:
    """The limit that sets ``plan``'s certified margin at ``knot``: with its own gains when it carries them."""
    _, response = next(knot_responses(plan, [knot], point))
    stored = response_gains(plan, point)
    return plan_margin(response.limit_rows(), None if stored is None else response.active_gains(stored[knot])).limiting


def plan_shortfalls(plan, requirements, warn_below: float | None = None) -> list:
    """Shortfalls of a plan's certified margins (``plan.margins``, one column per point)."""
    margins = plan.margin[:, None] if plan.margins is None else plan.margins
    need = required_margins(requirements, plan.t, margins.shape[1])
    return find_shortfalls(plan.t, margins, need, plan_weight(plan.meta),
                           lambda k, p: linear_bottleneck(plan, k, p), warn_below)


def certificate_shortfalls(cert, plan, requirements, warn_below: float | None = None) -> list:
    """Shortfalls of the exact figures of a certificate (its disturbance point, its knots)."""
    point = cert.disturbance["index"]
    exact = np.full(len(plan.t), np.nan)
    names = {}
    for c in cert.knots:
        exact[c.knot] = c.rho
        names[c.knot] = ", ".join(c.bottleneck[:2])
    need = required_margins(requirements, plan.t, point + 1)[:, point]
    found = find_shortfalls(plan.t, exact[:, None], need[:, None], plan_weight(plan.meta),
                            lambda k, p: names.get(k, ""), warn_below)
    return [dataclasses.replace(s, point=point) for s in found]


def best_linear_margins(plan, points: int) -> np.ndarray:
    """The best linear-response margin at every knot of ``plan`` (any point, solved or not), N, (K, P)."""
    return np.array([[best_linear_margin(r.limit_rows()).rho for _, r in knot_responses(plan, None, p)]
                     for p in range(points)]).T


def stopping_point_shortfalls(point_plan, requirements) -> list:
    """Unmet requirements at a solver's stopping point (a plan-shaped point, not a plan).

    The margin reached is what the best linear response certifies there
    (negative where the point breaks a limit), not the optimizer's own figure.
    """
    points = len(point_plan.meta["disturbances"])
    need = required_margins(requirements, point_plan.t, points)
    if not need.any():
        return []
    reached = best_linear_margins(point_plan, points)
    found = find_shortfalls(point_plan.t, reached, need, plan_weight(point_plan.meta),
                            lambda k, p: linear_bottleneck(point_plan, k, p))
    return unmet(found)
