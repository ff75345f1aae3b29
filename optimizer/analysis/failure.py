"""What went wrong when the solver fails: violated constraint groups in plain words.

:func:`diagnose` evaluates every constraint row of the NLP at the point where
the failed stage stopped (``SolveOutcome.last``), groups the rows into
families (equations of motion, feet on their footholds, friction per contact,
torque room per joint, hand targets, robustness ...), ranks the families by
their largest violation, names the knots and the contacts or joints behind
it, and adds a hint. :func:`infeasible_point` packs that point into the plan
layout, marked so no reader mistakes it for a plan
(:func:`optimizer.planfile.save_infeasible_point`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..planfile import Plan

SHOWN = 1e-6          # violations below this (scaled NLP units) are not reported
TORQUE_AT_LIMIT = 1e-3  # fraction of a joint's torque range counted as "at the limit"

# family -> (plain words, hint)
FAMILIES = {
    "equations of motion": ("equations of motion: forces and torques do not balance the motion",
                            "slow the motion down (a longer horizon, targets further apart in time) or ease the load "
                            "(more friction, footholds nearer the body)"),
    "velocity integration": ("velocity integration between knots", "use more knots or a longer horizon"),
    "configuration integration": ("configuration integration between knots", "use more knots or a longer horizon"),
    "unit quaternion": ("unit base quaternion at the start", "fix the start with initial_posture: stance"),
    "stance contacts": ("feet on their footholds", "move the named footholds closer to the body, or fix the start "
                        "with initial_posture: stance"),
    "friction pyramid": ("friction per contact", "the named feet would slip: give them flatter or rougher footholds, "
                         "or move the other feet so they carry more of the load"),
    "minimum normal force": ("minimum normal force per contact", "the named feet would lift off: place them nearer "
                             "under the centre of mass, or lower min_normal_force"),
    "hand target": ("hand targets", "lower the hand target or bring it closer to the body, or move the feet "
                    "(e.g. the rear feet closer) toward it"),
    "robust balance": ("robustness: balance of the disturbance response", "shrink the disturbance shape, or solve "
                       "with --objective feasible to see whether the plain task is possible"),
    "robust limits": ("robustness: room at the torque, friction and normal-force limits", "a posture that loads "
                      "the limits less, a wider stance, or a smaller disturbance shape"),
    "limit rooms": ("room left at each limit", "a posture that loads the limits less, or a smaller disturbance shape"),
    "terrain clearance": ("clearance: collision shapes kept away from the terrain (link vs surface)",
                          "move the hand targets or footholds away from the named surface, or lower "
                          "clearance.distance"),
}


@dataclass
class Violation:
    """One family of constraint groups at the stopping point.

    ``largest`` is in the NLP's scaled unit ``unit``; ``size`` says it in
    physical words; ``knots`` are the knots within 10 % of the largest;
    ``worst`` the contacts, joints or targets behind it, worst first.
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

    def lines(self) -> list[str]:
        who = f"; worst {', '.join(self.worst[:4])}" if self.worst else ""
        return [f"{self.words}: {self.size} at knots {knot_ranges(self.knots)}{who}", f"  hint: {self.hint}"]

    def as_dict(self) -> dict:
        out = {k: getattr(self, k) for k in ("family", "words", "largest", "unit", "size", "knots", "worst", "hint")}
        out["largest"] = float(self.largest) if math.isfinite(self.largest) else None
        return out


def family_of(group: str) -> str:
    """``hand target grip_point@12`` -> ``hand target``; ``robust limits (disturbance 1)`` -> ``robust limits``."""
    name = group.split(" (disturbance")[0]
    return "hand target" if name.startswith("hand target") else name


def knot_ranges(knots) -> str:
    """``[1, 2, 3, 7]`` -> ``1-3, 7``."""
    knots, parts = sorted(int(k) for k in knots), []
    for k in knots:
        if parts and k == parts[-1][1] + 1:
            parts[-1][1] = k
        else:
            parts.append([k, k])
    return ", ".join(str(a) if a == b else f"{a}-{b}" for a, b in parts) or "-"


# ---------------------------------------------------------------- row names


def _velocity_row_names(robot) -> list[str]:
    return ["base (linear)"] * 3 + ["base (angular)"] * 3 + list(robot.joint_names)


def _configuration_row_names(robot) -> list[str]:
    names = ["base position"] * 3 + ["base orientation"] * 4
    for j in range(2, robot.model.njoints):
        names += [robot.model.names[j]] * robot.model.nqs[j]
    return names


def room_row_names(robot, frames, facets: int) -> list[str]:
    """Names of the limit rooms in the transcription's order: torques up, torques down,
    every contact's facets, every contact's normal force."""
    return ([f"{j} torque (upper)" for j in robot.joint_names] + [f"{j} torque (lower)" for j in robot.joint_names]
            + [f"{f} friction facet {k}" for f in frames for k in range(facets)]
            + [f"{f} normal force" for f in frames])


def row_names(family: str, group, task, facets: int) -> list[str]:
    """Who each row of a group is about (contact, joint, target), length ``group.rows``."""
    robot, frames = task.robot, [c.frame for c in task.contacts]
    rows = group.rows
    if family in ("equations of motion", "velocity integration"):
        return _velocity_row_names(robot)[:rows]
    if family == "configuration integration":
        return _configuration_row_names(robot)[:rows]
    if family == "stance contacts":
        return [frames[i // 3] for i in range(rows)]
    if family == "friction pyramid":
        return [frames[i // facets] for i in range(rows)]
    if family == "minimum normal force":
        return frames[:rows]
    if family in ("robust limits", "limit rooms"):
        return room_row_names(robot, frames, facets)[:rows]
    if family == "robust balance":
        per = _velocity_row_names(robot)
        block = 6 if rows % (6 + robot.nj) else 6 + robot.nj
        return [per[i % block] for i in range(rows)]
    if family == "terrain clearance":
        return [f"{link} vs {surface}" for link, surface in map(task.clearance.row_label, range(rows))]
    if family == "hand target":
        where = group.name[len("hand target "):]
        return [f"{where} {'position' if i < 3 else 'orientation'}" for i in range(rows)]
    return [group.name] * rows


# ---------------------------------------------------------------- diagnosis


def constraint_values(transcription, task, arrays: dict, p=None) -> np.ndarray:
    """The NLP's constraint vector g at the physical ``arrays`` (names of the variable layout).

    ``p`` is the parameter vector the solve used (default: the task's, box faces chosen at ``arrays``).
    """
    import casadi as ca

    from ..transcription.parameters import parameter_values

    x = transcription.variables.pack(arrays)
    if p is None:
        p = parameter_values(task, transcription.structure, transcription.parameters, motion=arrays.get("q"))
    g = ca.Function("brace_constraints", [transcription.nlp["x"], transcription.nlp["p"]], [transcription.nlp["g"]])
    return np.array(g(x, p)).ravel()


def diagnose(outcome, transcription=None) -> list[Violation]:
    """Violated constraint families at the point where ``outcome``'s last stage stopped, largest first.

    ``transcription`` is the failed stage's NLP (default: the planner's
    cached one for the task's shape and that stage's objective).
    """
    if transcription is None:
        from ..planner import built_solver

        transcription = built_solver(outcome.task, outcome.stages[-1].objective)[0]
    task = outcome.task
    g = constraint_values(transcription, task, outcome.last, getattr(outcome, "parameters", None))
    rows = transcription.constraints.row_violations(g, transcription.lbg, transcription.ubg)
    weight = task.robot.mass * float(np.linalg.norm(task.robot.gravity))
    families: dict[str, list] = {}
    for group in transcription.constraints.groups:
        families.setdefault(family_of(group.name), []).append(group)
    found = [_family_violation(name, groups, rows, task, weight) for name, groups in families.items()]
    found = [v for v in found if v is not None]
    found.sort(key=lambda v: v.largest, reverse=True)
    torque = torque_limit_violation(outcome)
    return found + ([torque] if torque is not None else [])


def _family_violation(family, groups, rows, task, weight) -> Violation | None:
    per_who: dict[str, float] = {}
    per_knot: dict[int, float] = {}
    for group in groups:
        excess = rows[group.name]
        names = row_names(family, group, task, task.facets)
        for r, who in enumerate(names):
            per_who[who] = max(per_who.get(who, 0.0), float(excess[r].max(initial=0.0)))
        for j, knot in enumerate(group.knots):
            per_knot[knot] = max(per_knot.get(knot, 0.0), float(excess[:, j].max(initial=0.0)))
    largest = max(per_knot.values(), default=0.0)
    if not largest > SHOWN:   # also skips NaN
        return None if largest == largest else _nan_violation(family, groups)
    words, hint = FAMILIES.get(family, (family, "see the Ipopt log"))
    unit = groups[0].unit
    return Violation(family, words, largest, unit, physical_size(largest, unit, weight),
                     sorted(k for k, v in per_knot.items() if v >= 0.1 * largest),
                     [w for w, v in sorted(per_who.items(), key=lambda e: -e[1]) if v >= 0.1 * largest],
                     hint, [g.name for g in groups])


def _nan_violation(family, groups) -> Violation:
    return Violation(family, FAMILIES.get(family, (family, ""))[0], math.nan, groups[0].unit, "not a number",
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


# ---------------------------------------------------------------- the stopping point as arrays


def infeasible_point(outcome, violations: list[Violation]) -> Plan:
    """The stopping point in the plan layout (meta marked infeasible by the saver), with the diagnosis."""
    from ..planner import plan_meta

    task, last = outcome.task, outcome.last
    K, nc = task.knots, len(task.contacts)
    footholds = np.array([c.foothold for c in task.contacts])
    margin = last["rho0"][0].copy() if "rho0" in last else np.full(K, np.nan)
    solver = {"stages": [s.as_dict() for s in outcome.stages], "status": outcome.stages[-1].status}
    meta = plan_meta(task, outcome.objective, solver)
    meta["diagnosis"] = [v.as_dict() for v in violations]
    return Plan(t=task.times.copy(), q=last["q"].T.copy(), v=last["v"].T.copy(), a=last["a"].T.copy(),
                tau=last["tau"].T.copy(), contact_forces=last["lam"].T.reshape(K, nc, 3).copy(),
                contact_active=np.ones((K, nc), dtype=bool), contact_targets=np.repeat(footholds[None], K, axis=0),
                margin=margin, meta=meta)


def infeasible_path(out) -> Path:
    """``plans/x.npz`` -> ``plans/x.infeasible.npz``."""
    out = Path(out)
    stem = out.name[:-4] if out.name.endswith(".npz") else out.name
    return out.with_name(stem + ".infeasible.npz")
