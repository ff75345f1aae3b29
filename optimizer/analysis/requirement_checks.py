"""Can a required margin be met? A proof at rest, and estimates at the task's postures.

For a push ``w = t W d`` (``d`` a unit direction, ``W`` the disturbance's
shape matrix) to be rejectable, some contact forces within the limits must
balance it. Two linear programs (SciPy HiGHS) bound how large ``t`` can be:

- **at rest, any posture** (a proof): at the last knot the robot is at rest
  (zero velocity and acceleration), so its contact forces balance gravity
  and the push alone, ``sum_c lambda_c = -m g - t W d``, each force in its
  friction pyramid above the minimum normal force. Moments and torque limits
  only shrink the set, so the largest ``t`` of this LP bounds the margin at
  the last knot of every plan. A requirement above it is unreachable.
- **holding still at a posture** (an estimate): at the stance-IK posture of
  the start and of each hand target, full statics with the push at the
  disturbance frame, ``g(q) = S^T tau + J_C^T lambda + J_e^T t W d``, and
  every limit row (torques, pyramids, normal forces). The plan's posture and
  accelerations differ, so a requirement above this figure is only a warning.

Either figure is the smallest, over 26 sampled directions, of the largest
rejectable push: an upper bound of the margin (the margin must reject every
direction with one motion).
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass, field

import numpy as np
import pinocchio as pin
from scipy.optimize import linprog

from ..problem.limits import KnotLimits, LimitValues
from ..problem.friction import pyramid_facets
from ..problem.requirement import required_margins
from ..problem.stance import frame_position_jacobian, stance_checks
from ..problem.timing import window_knots
from .presolve import Finding


def sampled_directions() -> np.ndarray:
    """The 26 unit directions toward the faces, edges and corners of a cube, shape (26, 3)."""
    cells = np.array([v for v in itertools.product((-1.0, 0.0, 1.0), repeat=3) if any(v)])
    return cells / np.linalg.norm(cells, axis=1, keepdims=True)


@dataclass
class PushBound:
    """The largest push rejectable along the weakest sampled direction.

    ``newtons`` N (``inf`` when no sampled push is limited); ``direction`` the
    unit push direction before the shape matrix, world frame; ``limits`` the
    limit rows that are tight there.
    """

    newtons: float
    direction: np.ndarray
    limits: list = field(default_factory=list)

    def limited_by(self) -> str:
        return ", ".join(self.limits[:3]) + (f" (+{len(self.limits) - 3} more)" if len(self.limits) > 3 else "")


def _limit_rows(task, joints: tuple):
    """Rows ``room = b + A_tau tau + A_lam lam >= 0`` of the task's limits, and their names."""
    limits = KnotLimits(joints, tuple(c.frame for c in task.contacts), task.facets)
    robot = task.robot
    keep = [robot.joint_names.index(j) for j in joints]
    values = LimitValues(robot.torque_lower[keep], robot.torque_upper[keep],
                         [pyramid_facets(c.normal, c.tangents, c.friction, task.facets) for c in task.contacts],
                         [np.asarray(c.normal, float) for c in task.contacts], task.min_normal_forces(), task.weight)
    a_tau, a_lam, b = limits.linear(values)
    return a_tau, a_lam, b, [str(n) for n in limits.names]


def _largest_push(a_ub, b_ub, a_eq, b_eq, names) -> tuple[float, list]:
    """max t over x = (lam, t) with ``a_ub x <= b_ub``, ``a_eq x = b_eq``; the tight rows' names."""
    n = a_ub.shape[1]
    cost = np.zeros(n)
    cost[-1] = -1.0
    finite = np.isfinite(b_ub)
    lp = linprog(cost, A_ub=a_ub[finite], b_ub=b_ub[finite], A_eq=a_eq, b_eq=b_eq,
                 bounds=[(None, None)] * (n - 1) + [(0.0, None)], method="highs")
    if lp.status == 3:
        return float("inf"), []
    if lp.status != 0:
        return 0.0, []
    gap = b_ub[finite] - a_ub[finite] @ lp.x
    tight = [name for name, g in zip(np.array(names)[finite], gap) if g < 1e-7 * max(1.0, abs(lp.x[-1]))]
    return float(lp.x[-1]), tight


def _weakest(pushes) -> PushBound:
    best = PushBound(float("inf"), np.zeros(3))
    for direction, (t, tight) in pushes:
        if t < best.newtons:
            best = PushBound(t, direction, tight)
    return best


def rest_push(task, point: int, direction) -> tuple[float, list]:
    """Largest push ``t W d`` [N] rejectable at rest in any posture, and the limits tight there.

    Force balance of the whole robot only: ``sum_c lambda_c = -m g - t W d``
    with every force in its pyramid above the minimum normal force.
    """
    shape = np.asarray(task.disturbances[point].shape, float)
    _, a_lam, b, names = _limit_rows(task, ())
    a_ub = np.hstack([-a_lam, np.zeros((a_lam.shape[0], 1))])
    a_eq = np.hstack([np.tile(np.eye(3), len(task.contacts)), (shape @ np.asarray(direction, float))[:, None]])
    weight_vector = -task.robot.mass * np.asarray(task.robot.gravity, float)
    return _largest_push(a_ub, b, a_eq, weight_vector, names)


def rest_bound(task, point: int) -> PushBound:
    """Upper bound of the margin at any knot at rest, N (force disturbances; posture-free)."""
    return _weakest((d, rest_push(task, point, d)) for d in sampled_directions())


def posture_bound(task, q, point: int) -> PushBound:
    """Upper bound of the margin when holding still at ``q``, N (force disturbances)."""
    robot = task.robot
    model, data = robot.model, robot.model.createData()
    gravity = pin.computeGeneralizedGravity(model, data, q).copy()
    pin.computeJointJacobians(model, data, q)
    pin.updateFramePlacements(model, data)
    jc = np.vstack([frame_position_jacobian(model, data, robot.frame_id(c.frame)) for c in task.contacts])
    je = frame_position_jacobian(model, data, robot.frame_id(task.disturbances[point].frame))
    shape = np.asarray(task.disturbances[point].shape, float)
    a_tau, a_lam, b, names = _limit_rows(task, tuple(robot.joint_names))
    pushes = []
    for d in sampled_directions():
        push = je.T @ (shape @ d)                       # generalized force of a unit push, (nv,)
        # tau = g_j - Jc_j^T lam - t push_j; room = b + A_tau tau + A_lam lam >= 0
        lam_part = a_lam - a_tau @ jc[:, 6:].T
        t_part = -a_tau @ push[6:]
        a_ub = -np.hstack([lam_part, t_part[:, None]])
        b_ub = b + a_tau @ gravity[6:]
        a_eq = np.hstack([jc[:, :6].T, push[:6, None]])
        pushes.append((d, _largest_push(a_ub, b_ub, a_eq, gravity[:6], names)))
    return _weakest(pushes)


def requirement_findings(task, checks=None) -> list[Finding]:
    """Findings about the task's required margins: proofs at rest, estimates at its postures.

    ``checks`` are the task's :func:`optimizer.problem.stance.stance_checks`
    when already computed. Wrench disturbances are skipped (no bound here).
    """
    points = len(task.disturbances)
    need = required_margins(task.requirements, task.times, points)
    forces = [p for p in range(points) if task.disturbances[p].kind == "force" and need[:, p].any()]
    if not forces:
        return []
    proofs = [f for p in forces for f in _rest_findings(task, need, p)]
    if proofs:
        return proofs
    checks = stance_checks(task) if checks is None else checks
    return [f for p in forces for f in _posture_findings(task, need, p, checks)]


def _rest_findings(task, need, p) -> list[Finding]:
    last = task.knots - 1
    if need[last, p] <= 0:
        return []
    bound = rest_bound(task, p)
    if need[last, p] <= bound.newtons:
        return []
    return [Finding(
        "required margin", True,
        f"point {p} ({task.disturbances[p].frame}) must keep {need[last, p]:.1f} N at the last knot "
        f"(t = {task.duration:.2f} s, at rest), but at rest no posture rejects more than {bound.newtons:.1f} N "
        f"along {_fmt(bound.direction)}, limited by {bound.limited_by()}",
        "lower the requirement, end the window before the last knot, or change footholds or friction",
        need[last, p] - bound.newtons, "N")]


def _posture_findings(task, need, p, checks) -> list[Finding]:
    found = []
    targets = [None] + list(task.hand_targets)
    for check, target in zip(checks, targets):
        knots = [0] if target is None else window_knots(target.t_start, target.t_end, task.times)
        wanted = float(need[knots, p].max())
        if wanted <= 0:
            continue
        bound = posture_bound(task, check.q, p)
        if wanted > bound.newtons:
            found.append(Finding(
                "required margin", False,
                f"point {p} ({task.disturbances[p].frame}) must keep {wanted:.1f} N at the '{check.label}' posture, "
                f"but holding still there rejects at most about {bound.newtons:.1f} N along "
                f"{_fmt(bound.direction)}, limited by {bound.limited_by()}",
                "the solver may still find a stronger posture; if it fails, lower the requirement there",
                wanted - bound.newtons, "N"))
    return found


def _fmt(vec) -> str:
    return "(" + ", ".join(f"{x:+.2f}" for x in vec) + ")"
