"""Required margins: the smallest unrejectable force a plan must keep.

A task's optional ``require`` list states, in the way safety engineers do,
how much margin the plan must keep and when: "at least 30 N while the part
is held", "at least 15 % of body weight everywhere". Each entry is a
:class:`MarginRequirement`; :func:`required_margins` turns them into one
number per knot and disturbance point (N), the largest that applies.

Robust objectives meet the requirement as a lower bound on their margin
variables; every objective is checked against it after the solve (the
torque baseline is checked, not constrained, so comparisons stay fair).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import TaskError
from ..schema import Fields
from .timing import window_knots

ENTRY_FIELDS = {"at_least", "at_least_weight", "window", "during", "point"}


@dataclass(frozen=True)
class MarginRequirement:
    """One required margin.

    Attributes
    ----------
    newtons : float
        The margin every covered knot must keep, N (> 0).
    t_start, t_end : float
        Time window it covers, s (the whole horizon by default).
    point : int or None
        Index of the disturbance point it applies to; None for every point.
    source : str
        Where it was stated, for messages (``require[0]``, ``--require-margin``).
    """

    newtons: float
    t_start: float
    t_end: float
    point: int | None
    source: str

    def describe(self) -> str:
        """Plain words, e.g. ``at least 30.0 N from 0.80 s to 1.00 s``."""
        return f"at least {self.newtons:.1f} N from {self.t_start:.2f} s to {self.t_end:.2f} s"


def read_requirements(top: Fields, *, weight: float, duration: float, hand_targets, disturbances) -> list:
    """The ``require`` list of a task file, validated.

    ``weight`` is the robot's m g [N] (for ``at_least_weight``); ``hand_targets``
    and ``disturbances`` are the task's, already read (``during`` names a
    target's label, ``point`` a disturbance's frame or index).
    """
    items = top.raw("require", [])
    if not isinstance(items, list):
        top.fail("require", "a list of required margins", items)
    return [_read_entry(Fields(item, top.file, top.at(f"require[{i}]"), TaskError), f"require[{i}]",
                        weight=weight, duration=duration, hand_targets=hand_targets, disturbances=disturbances)
            for i, item in enumerate(items)]


def _read_entry(spec: Fields, source: str, *, weight, duration, hand_targets, disturbances) -> MarginRequirement:
    spec.allow_only(ENTRY_FIELDS)
    if spec.has("at_least") == spec.has("at_least_weight"):
        spec.fail("at_least", "exactly one of 'at_least' (N) or 'at_least_weight' (fraction of m g)",
                  sorted(spec.data))
    if spec.has("at_least"):
        newtons = spec.number("at_least", lo=0.0, lo_open=True)
    else:
        newtons = spec.number("at_least_weight", lo=0.0, lo_open=True, hi=10.0) * weight
    t_start, t_end = _window(spec, duration, hand_targets)
    return MarginRequirement(newtons, t_start, t_end, _point(spec, disturbances), source)


def _window(spec: Fields, duration: float, hand_targets) -> tuple[float, float]:
    if spec.has("window") and spec.has("during"):
        spec.fail("window", "at most one of 'window' ([start, end] s) or 'during' (a hand target's label)",
                  sorted(spec.data))
    if spec.has("during"):
        label = spec.string("during")
        held = [t for t in hand_targets if t.label == label]
        if not held:
            labels = sorted({t.label for t in hand_targets if t.label})
            spec.fail("during", "the label of a hand target", label,
                      "labels in this task: " + (", ".join(labels) if labels else "none"))
        return min(t.t_start for t in held), max(t.t_end for t in held)
    if not spec.has("window"):
        return 0.0, duration
    t_start, t_end = spec.vector("window", 2)
    if not 0.0 <= t_start <= t_end <= duration:
        spec.fail("window", f"times within the horizon [0, {duration}] s, start <= end", [t_start, t_end])
    return float(t_start), float(t_end)


def _point(spec: Fields, disturbances) -> int | None:
    if not spec.has("point"):
        return None
    value = spec.raw("point")
    frames = [d.frame for d in disturbances]
    if isinstance(value, int) and not isinstance(value, bool):
        if not 0 <= value < len(disturbances):
            spec.fail("point", f"a disturbance index from 0 to {len(disturbances) - 1}", value)
        return int(value)
    if isinstance(value, str) and frames.count(value) == 1:
        return frames.index(value)
    if isinstance(value, str) and frames.count(value) > 1:
        spec.fail("point", "a disturbance frame named once, or an index (this frame has several)", value)
    spec.fail("point", "a disturbance point: its frame or its index", value,
              "disturbance frames: " + ", ".join(frames))


def horizon_requirement(newtons: float, duration: float, source: str = "--require-margin") -> MarginRequirement:
    """A requirement over the whole horizon at every disturbance point (the command line's)."""
    return MarginRequirement(float(newtons), 0.0, float(duration), None, source)


def required_margins(requirements, times: np.ndarray, points: int) -> np.ndarray:
    """The largest required margin per knot and point, N, shape (K, P); 0 where none applies.

    Windows bind knots by the same rule as hand targets
    (:func:`optimizer.problem.timing.window_knots`).
    """
    need = np.zeros((len(times), points))
    for r in requirements:
        columns = range(points) if r.point is None else [r.point]
        for k in window_knots(r.t_start, r.t_end, times):
            for p in columns:
                need[k, p] = max(need[k, p], r.newtons)
    return need


def as_json(requirements) -> list:
    """The requirements as plain data, for a plan's meta."""
    return [{"newtons": r.newtons, "window": [r.t_start, r.t_end], "point": r.point, "source": r.source}
            for r in requirements]


def from_json(items) -> list:
    """Requirements back from :func:`as_json` data (a plan's meta)."""
    return [MarginRequirement(float(i["newtons"]), float(i["window"][0]), float(i["window"][1]),
                              None if i.get("point") is None else int(i["point"]), str(i.get("source", "plan")))
            for i in items]
