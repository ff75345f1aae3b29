"""What went wrong when the solver fails: violated constraint groups in plain words.

:func:`diagnose` evaluates every constraint row of the NLP at the point where
the failed stage stopped (``SolveOutcome.last``), groups the rows into
families (equations of motion, feet on their footholds, friction per contact,
torque room per joint, hand targets, robustness ...), ranks the families by
their largest violation, names the knots and the contacts or joints behind
it, and adds a hint. Rows are named by the labels the transcription gave
them when it added them (:mod:`optimizer.transcription.constraints`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import casadi as ca
import numpy as np

from ..transcription.constraints import family_named
from ..transcription.parameters import parameter_values

SHOWN = 1e-6          # violations below this (scaled NLP units) are not reported
TORQUE_AT_LIMIT = 1e-3  # fraction of a joint's torque range counted as "at the limit"


@dataclass
class Violation:
    """One family of constraint groups at the stopping point.

    ``largest`` is in the NLP's scaled unit ``unit``; ``size`` says it in
    physical words; ``knots`` are the knots within 10 % of the largest;
    ``worst`` the contacts, joints or targets behind it, worst first;
    ``multiplier`` the largest magnitude of the solver's multipliers on the
    family's rows where it stopped (NaN when unknown): how hard that family
    pushed back against the objective.
    """

    family: str
    words: str
    largest: float
    unit: str
    size: str
    knots: list
    worst: list
    hint: str
    groups: list = field(default_factory=list)
    multiplier: float = math.nan

    def lines(self) -> list[str]:
        who = f"; worst {', '.join(self.worst[:4])}" if self.worst else ""
        return [f"{self.words}: {self.size} at knots {knot_ranges(self.knots)}{who}", f"  hint: {self.hint}"]

    def as_dict(self) -> dict:
        out = {k: getattr(self, k) for k in ("family", "words", "largest", "unit", "size", "knots", "worst", "hint")}
        out["largest"] = float(self.largest) if math.isfinite(self.largest) else None
        out["multiplier"] = float(self.multiplier) if math.isfinite(self.multiplier) else None
        return out


def knot_ranges(knots) -> str:
    """``[1, 2, 3, 7]`` -> ``1-3, 7``."""
    knots, parts = sorted(int(k) for k in knots), []
    for k in knots:
        if parts and k == parts[-1][1] + 1:
            parts[-1][1] = k
        else:
            parts.append([k, k])
    return ", ".join(str(a) if a == b else f"{a}-{b}" for a, b in parts) or "-"


# ---------------------------------------------------------------- diagnosis


def constraint_values(transcription, task, arrays: dict) -> np.ndarray:
    """The NLP's constraint vector g at the physical ``arrays`` (names of the variable layout)."""
    x = transcription.variables.pack(arrays)
    p = parameter_values(task, transcription.structure, transcription.parameters)
    g = ca.Function("brace_constraints", [transcription.nlp["x"], transcription.nlp["p"]], [transcription.nlp["g"]])
    return np.array(g(x, p)).ravel()


def diagnose(outcome, transcription=None) -> list[Violation]:
    """Violated constraint families at the point where ``outcome``'s last stage stopped, largest first.

    ``transcription`` is the failed stage's NLP (default: the one the outcome
    recorded). Every row is named by the label it was added with (family,
    knot, joint or contact).
    """
    transcription = transcription if transcription is not None else outcome.transcription
    task = outcome.task
    g = constraint_values(transcription, task, outcome.last)
    excess = np.maximum(np.maximum(transcription.lbg - g, g - transcription.ubg), 0.0)
    weight = task.robot.mass * float(np.linalg.norm(task.robot.gravity))
    families: dict[str, list] = {}
    for group in transcription.constraints.groups:
        families.setdefault(group.family, []).append(group)
    multipliers = getattr(outcome, "multipliers", None)
    if multipliers is not None and len(multipliers) != g.size:   # from another NLP than this one
        multipliers = None
    found = [_family_violation(name, groups, excess, weight) for name, groups in families.items()]
    found = [v for v in found if v is not None]
    for violation in found:
        violation.multiplier = _largest_multiplier(families[violation.family], multipliers)
    found.sort(key=lambda v: v.largest, reverse=True)
    torque = torque_limit_violation(outcome)
    return found + ([torque] if torque is not None else [])


def _family_violation(family, groups, excess, weight) -> Violation | None:
    per_who: dict[str, float] = {}
    per_knot: dict[int, float] = {}
    for group in groups:
        for label, value in zip(group.labels, excess[group.slice()]):
            value = float(value)
            per_who[label.who] = _larger(per_who.get(label.who, 0.0), value)
            per_knot[label.knot] = _larger(per_knot.get(label.knot, 0.0), value)
    largest = max(per_knot.values(), default=0.0)
    if any(math.isnan(v) for v in per_knot.values()):
        return _nan_violation(family, groups)
    if not largest > SHOWN:
        return None
    described = family_named(family)
    unit = groups[0].unit
    return Violation(family, described.words, largest, unit, physical_size(largest, unit, weight),
                     sorted(k for k, v in per_knot.items() if v >= 0.1 * largest),
                     [w for w, v in sorted(per_who.items(), key=lambda e: -e[1]) if v >= 0.1 * largest],
                     described.hint, [g.name for g in groups])


def _largest_multiplier(groups, multipliers) -> float:
    """Largest |multiplier| on the rows of ``groups`` (NaN when the solver gave none)."""
    if multipliers is None or len(multipliers) == 0:
        return math.nan
    values = [np.abs(np.asarray(multipliers)[group.slice()]) for group in groups]
    return float(max((v.max(initial=0.0) for v in values), default=0.0))


def _larger(a: float, b: float) -> float:
    """The larger of two violations; NaN wins (an invalid number is reported as such)."""
    return b if (math.isnan(b) or b > a) else a


def _nan_violation(family, groups) -> Violation:
    return Violation(family, family_named(family).words, math.nan, groups[0].unit, "not a number",
                     [], [], "the solver met an invalid number; try initial_posture: stance or fewer knots",
                     [g.name for g in groups])


def physical_size(value: float, unit: str, weight: float) -> str:
    """``value`` in a group's scaled ``unit`` said in physical units."""
    if unit == "m g":
        return f"{value * weight:.3g} N (or N m; {value:.2e} m g)"
    if unit == "m":
        return f"{1000 * value:.3g} mm"
    if unit == "m or rad":
        return f"{1000 * value:.3g} mm (or mrad)"
    return f"{value:.3g} {unit}".strip()


def torque_limit_violation(outcome) -> Violation | None:
    """Joints whose torque sits at a limit at the stopping point (bounds the solver keeps)."""
    tau = outcome.last.get("tau")
    if tau is None:
        return None
    robot = outcome.task.robot
    span = (robot.torque_upper - robot.torque_lower)[:, None]
    at_limit = (tau >= robot.torque_upper[:, None] - TORQUE_AT_LIMIT * span) | \
               (tau <= robot.torque_lower[:, None] + TORQUE_AT_LIMIT * span)
    if not at_limit.any():
        return None
    joints = [robot.joint_names[j] for j in np.flatnonzero(at_limit.any(axis=1))]
    return Violation("torque limits", "torque per joint: joints at their torque limit", 0.0, "",
                     "at the limit", sorted(set(np.flatnonzero(at_limit.any(axis=0)).tolist())), joints,
                     "these joints carry the load: choose footholds or targets that load them less")


def report_lines(violations: list[Violation], shown: int = 5) -> list[str]:
    """Plain-text diagnosis, largest violation first."""
    if not violations:
        return ["no constraint is violated at the stopping point: the solver stopped early "
                "(iteration or time limit); raise solver.max_iter or start from initial_posture: stance"]
    lines = []
    for i, v in enumerate(violations[:shown], start=1):
        first, *rest = v.lines()
        lines += [f"{i}. {first}"] + [f"   {line}" for line in rest]
    return lines
