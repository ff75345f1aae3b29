"""Stance postures and their statics, for designing tasks and diagnosing them.

:func:`solve_stance` finds a configuration that puts every contact frame on
its foothold (numeric inverse kinematics with Pinocchio: constrained
Gauss-Newton steps, base pose free, joints kept within limits, the remaining
freedom pulled toward the robot's standing posture, optionally the hand drawn
to a target).

:func:`static_support_lp` asks whether that configuration can be held still:
contact forces inside their friction pyramids above the minimum normal force
and joint torques within limits, balancing gravity (a linear program solved
with SciPy's HiGHS). It reports the largest uniform slack by which every
limit can be kept, so a task designer sees how much room a stance leaves.

Contacts are read by duck typing: anything with ``frame``, ``foothold`` (3,),
``normal`` (3,), ``tangents`` (2, 3) and ``friction`` (like
``optimizer.problem.task.ContactSpec``).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pinocchio as pin
from scipy.optimize import linprog

from ..errors import InfeasibleTask
from .clearance import clearance_rows
from .friction import pyramid_facets
from .limits import FRICTION, TORQUE, KnotLimits, LimitName, LimitValues
from .schedule import stance_at

WORLD_ALIGNED = pin.ReferenceFrame.LOCAL_WORLD_ALIGNED


# ---------------------------------------------------------------- kinematics

def frame_position_jacobian(model, data, frame_id: int) -> np.ndarray:
    """Translational Jacobian of a frame origin, world-aligned, shape (3, nv).

    Needs ``computeJointJacobians`` and ``updateFramePlacements`` at the
    current configuration.
    """
    return pin.getFrameJacobian(model, data, frame_id, WORLD_ALIGNED)[:3]


def single_dof_joints(model):
    """Pairs ``(idx_q, idx_v)`` of the one-coordinate joints (all but the free-flyer)."""
    return [(j.idx_q, j.idx_v) for j in model.joints[1:] if j.nq == 1 and j.nv == 1]


def default_guess(robot, contacts) -> np.ndarray:
    """The standing posture moved over the footholds' centroid, shape (nq,)."""
    model, data = robot.model, robot.model.createData()
    q = np.array(robot.standing_posture, dtype=float)
    pin.framesForwardKinematics(model, data, q)
    feet = np.array([data.oMf[robot.frame_id(c.frame)].translation for c in contacts])
    holds = np.array([c.foothold for c in contacts])
    q[:3] += holds.mean(axis=0) - feet.mean(axis=0)
    return q


@dataclass
class _Residuals:
    """Errors and Jacobians at one configuration.

    The soft rows (the hand's error, then the clearance rows that fall short)
    are scaled by the square root of their weight.
    """

    contact_error: np.ndarray      # (3 nc,) m
    contact_jacobian: np.ndarray   # (3 nc, nv)
    hand_error: np.ndarray         # (3,) or (6,) m / rad; empty without a target
    hand_jacobian: np.ndarray      # (3 or 6, nv)
    soft_error: np.ndarray = None  # (n,) weighted
    soft_jacobian: np.ndarray = None


def _residuals(model, data, q, contact_ids, holds, hand, soft=None) -> _Residuals:
    pin.computeJointJacobians(model, data, q)
    pin.updateFramePlacements(model, data)
    err = np.concatenate([data.oMf[f].translation - h for f, h in zip(contact_ids, holds)])
    jac = np.vstack([frame_position_jacobian(model, data, f) for f in contact_ids])
    h_err, h_jac = np.zeros(0), np.zeros((0, model.nv))
    if hand is not None:
        fid, target = hand.frame_id, hand.position
        placement = data.oMf[fid]
        j6 = pin.getFrameJacobian(model, data, fid, WORLD_ALIGNED)
        h_err, h_jac = placement.translation - target, j6[:3]
        if hand.orientation is not None:
            rot_err = pin.log3(placement.rotation @ np.asarray(hand.orientation).T)
            h_err = np.concatenate([h_err, rot_err])
            h_jac = np.vstack([h_jac, j6[3:]])
    res = _Residuals(err, jac, h_err, h_jac)
    weight = 0.0 if hand is None else hand.weight
    soft_err, soft_jac = [np.sqrt(weight) * h_err], [np.sqrt(weight) * h_jac]
    if soft is not None:
        values, rows = soft.rows(q, data)
        short = values < 0
        soft_err.append(np.sqrt(soft.weight) * values[short])
        soft_jac.append(np.sqrt(soft.weight) * rows[short])
    res.soft_error, res.soft_jacobian = np.concatenate(soft_err), np.vstack(soft_jac)
    return res


def _kkt_step(res: _Residuals, weights, toward, free) -> np.ndarray:
    """Step ``dx`` (nv,) minimizing the regularizer and the soft rows with contacts linearized exactly.

    min 1/2 (dx - toward)' W (dx - toward) + 1/2 |J_s dx + e_s|^2
    s.t. J_c dx = -e_c, dx = 0 on blocked joints (``free`` is False).
    """
    idx = np.flatnonzero(free)
    js = res.soft_jacobian[:, idx]
    hess = np.diag(weights[idx]) + js.T @ js
    grad = weights[idx] * toward[idx] - js.T @ res.soft_error
    a = res.contact_jacobian[:, idx]
    m = a.shape[0]
    kkt = np.block([[hess, a.T], [a, np.zeros((m, m))]])
    rhs = np.concatenate([grad, -res.contact_error])
    sol = np.linalg.lstsq(kkt, rhs, rcond=None)[0]
    dx = np.zeros(len(free))
    dx[idx] = sol[:len(idx)]
    return dx


def _bounded_step(res, weights, toward, q, joints, lower, upper) -> np.ndarray:
    """KKT step with joints at a limit and pushed outward held fixed (small active set)."""
    free = np.ones(len(weights), dtype=bool)
    for _ in range(len(joints) + 1):
        dx = _kkt_step(res, weights, toward, free)
        pushing = [iv for (iq, iv), lo, hi in zip(joints, lower, upper)
                   if free[iv] and ((q[iq] <= lo + 1e-12 and dx[iv] < 0) or (q[iq] >= hi - 1e-12 and dx[iv] > 0))]
        if not pushing:
            return dx
        free[pushing] = False
    return dx


def _clamp(q, joints, lower, upper) -> np.ndarray:
    q = q.copy()
    for (iq, _), lo, hi in zip(joints, lower, upper):
        q[iq] = min(max(q[iq], lo), hi)
    return q


def _project(model, data, q, ids, holds, joints, lower, upper, tol, steps: int = 10) -> np.ndarray:
    """Gauss-Newton steps on the foot errors alone (min-norm, joints at a limit held)."""
    for _ in range(steps):
        res = _residuals(model, data, q, ids, holds, None)
        if np.max(np.abs(res.contact_error)) < 0.1 * tol:
            break
        free = np.ones(model.nv, dtype=bool)
        for (iq, iv), lo, hi in zip(joints, lower, upper):
            free[iv] = lo + 1e-12 < q[iq] < hi - 1e-12
        dx = np.zeros(model.nv)
        dx[free] = -np.linalg.lstsq(res.contact_jacobian[:, free], res.contact_error, rcond=None)[0]
        q = _clamp(pin.integrate(model, q, dx), joints, lower, upper)
    return q


@dataclass
class _HandGoal:
    frame_id: int
    position: np.ndarray
    orientation: np.ndarray | None
    weight: float


@dataclass
class _ClearanceGoal:
    """Clearance rows kept ``margin`` m beyond the task's clearance, as a penalty of ``weight``."""

    spec: object
    robot: object
    weight: float
    margin: float

    def rows(self, q, data):
        return clearance_rows(self.spec, self.robot, q, data, self.margin)


def solve_stance(robot, contacts, q_guess=None, hand_target=None, *, nominal=None, base_pose=None,
                 base_weight: float = 10.0, tol: float = 1e-9, max_iter: int = 300,
                 hand_weight: float = 1e3, clearance=None, clearance_weight: float = 1e3,
                 clearance_margin: float = 0.01) -> np.ndarray:
    """A configuration with every contact frame on its foothold.

    Parameters
    ----------
    robot : RobotModel
        Robot with a free-flyer root (``model``, ``standing_posture``,
        ``joint_lower``/``joint_upper``, ``frame_id``).
    contacts : sequence of ContactSpec
        Frames and footholds (m, world frame).
    q_guess : array-like, shape (nq,), optional
        Start of the iteration; default: the standing posture moved over the
        footholds.
    hand_target : HandTarget, optional
        Pull ``hand_target.frame`` toward its position (and orientation when
        given) with weight ``hand_weight``; a soft goal, the feet come first.
    nominal : array-like, shape (nq,), optional
        Posture whose joint angles the remaining freedom is pulled toward
        (weight 0.01); default the robot's standing posture.
    base_pose : array-like, shape (7,), optional
        ``[x y z qx qy qz qw]``, world frame: pull the base toward this pose
        with ``base_weight`` (the joints are pulled toward their nominal
        angles with weight 0.01) and start there. Without it the base pose is
        left almost free.
    tol : float
        Largest accepted distance of a contact frame from its foothold, m.
    clearance : ClearanceSpec, optional
        Keep every collision shape ``clearance_margin`` m beyond the required
        clearance from the terrain (a penalty of weight ``clearance_weight``
        on the rows that fall short, m; boxes' faces re-chosen every step).
        The result is not guaranteed to clear: callers check it
        (:func:`optimizer.problem.clearance.smallest_clearance`).

    Returns
    -------
    ndarray, shape (nq,)
        Configuration in Pinocchio's layout, joints within their limits.

    Raises
    ------
    InfeasibleTask
        When some foot cannot reach its foothold within the joint limits;
        the message names each foot and how far it stays, m.
    """
    model, data = robot.model, robot.model.createData()
    joints = single_dof_joints(model)
    lower, upper = np.asarray(robot.joint_lower, float), np.asarray(robot.joint_upper, float)
    lower = [lower[iq - 7] for iq, _ in joints]
    upper = [upper[iq - 7] for iq, _ in joints]
    ids = [robot.frame_id(c.frame) for c in contacts]
    holds = [np.asarray(c.foothold, float) for c in contacts]
    hand = None if hand_target is None else _HandGoal(
        robot.frame_id(hand_target.frame), np.asarray(hand_target.position, float), hand_target.orientation,
        hand_weight)
    soft = None if clearance is None or not clearance.pairs else _ClearanceGoal(
        clearance, robot, clearance_weight, clearance_margin)
    reference = np.array(robot.standing_posture if nominal is None else nominal, dtype=float)
    weights = np.full(model.nv, 1e-2)
    if base_pose is None:
        weights[:6] = 1e-6          # base pose: almost free, just enough to keep the step unique
        start = default_guess(robot, contacts)
    else:
        weights[:6] = base_weight
        reference[:7] = np.asarray(base_pose, float)
        reference[3:7] /= np.linalg.norm(reference[3:7])
        start = reference
    q = _clamp(start if q_guess is None else np.array(q_guess, float), joints, lower, upper)

    def merit(q):
        """Regularizer + soft rows + exact l1 penalty on the foot errors; and the residuals."""
        res = _residuals(model, data, q, ids, holds, hand, soft)
        toward = pin.difference(model, q, reference)
        value = 0.5 * toward @ (weights * toward) + 0.5 * res.soft_error @ res.soft_error
        return value + 1e3 * np.abs(res.contact_error).sum(), res, toward

    value, res, toward = merit(q)
    for _ in range(max_iter):
        dx = _bounded_step(res, weights, toward, q, joints, lower, upper)
        dx *= min(1.0, 0.5 / max(np.linalg.norm(dx), 1e-12))
        alpha = 1.0
        while True:         # backtracking on the merit function
            trial = _clamp(pin.integrate(model, q, alpha * dx), joints, lower, upper)
            trial = _project(model, data, trial, ids, holds, joints, lower, upper, tol)
            trial_value, trial_res, trial_toward = merit(trial)
            if trial_value < value or alpha < 1e-4:
                break
            alpha *= 0.5
        moved = alpha * np.linalg.norm(dx)
        q, value, res, toward = trial, trial_value, trial_res, trial_toward
        if np.max(np.abs(res.contact_error)) < tol and moved < 1e-6:
            return q
    if np.max(np.abs(res.contact_error)) < tol:
        return q
    raise _reach_error(contacts, res.contact_error, tol)


def _reach_error(contacts, error, tol) -> InfeasibleTask:
    gaps = np.linalg.norm(error.reshape(-1, 3), axis=1)
    short = ", ".join(f"{c.frame} stays {g:.4f} m from its foothold {np.round(c.foothold, 3).tolist()}"
                      for c, g in zip(contacts, gaps) if g >= tol)
    return InfeasibleTask(f"stance: no posture within the joint limits puts every foot on its foothold: {short}")


def foot_residuals(robot, q, contacts) -> np.ndarray:
    """Distance of each contact frame from its foothold at ``q``, shape (nc,), m."""
    data = robot.model.createData()
    pin.framesForwardKinematics(robot.model, data, np.asarray(q, float))
    return np.array([np.linalg.norm(data.oMf[robot.frame_id(c.frame)].translation - c.foothold) for c in contacts])


def frame_position(robot, q, frame: str) -> np.ndarray:
    """World position of ``frame`` at ``q``, shape (3,), m."""
    data = robot.model.createData()
    pin.framesForwardKinematics(robot.model, data, np.asarray(q, float))
    return data.oMf[robot.frame_id(frame)].translation.copy()


# ---------------------------------------------------------------- statics

@dataclass
class StaticSupport:
    """Answer of :func:`static_support_lp`.

    Attributes
    ----------
    feasible : bool
        The posture can be held still with every limit respected.
    slack : float
        Largest uniform slack ``s`` (dimensionless, at most 1): every contact
        force stays ``s * m g / nc`` newtons inside each pyramid facet and
        above the minimum normal force, every torque ``s`` half-ranges inside
        its limits. Negative: the amount by which limits must be violated;
        ``-inf`` when the contacts cannot balance gravity at all.
    forces : ndarray, shape (nc, 3)
        Contact forces at the optimum, N, world frame (NaN if none).
    tau : ndarray, shape (nj,)
        Joint torques at the optimum, N m (NaN if none).
    tight : list of LimitName
        The limits that decide ``slack`` (``str()`` spells them, e.g.
        ``foot_fl friction facet 2``, ``fl_knee torque (upper)``).
    message : str
        Status text of the LP solver.
    """

    feasible: bool
    slack: float
    forces: np.ndarray
    tau: np.ndarray
    tight: list = field(default_factory=list)
    message: str = ""


def _static_terms(robot, q, contacts):
    """Generalized gravity (nv,) and stacked contact Jacobian (3 nc, nv) at rest."""
    model, data = robot.model, robot.model.createData()
    gravity = pin.computeGeneralizedGravity(model, data, q).copy()
    pin.computeJointJacobians(model, data, q)
    pin.updateFramePlacements(model, data)
    jac = np.vstack([frame_position_jacobian(model, data, robot.frame_id(c.frame)) for c in contacts])
    return gravity, jac


def _inequalities(robot, contacts, jac, gravity, facets, min_normal_force, limits):
    """Rows ``A [lambda; s] <= b`` with their :class:`LimitName` (see :class:`StaticSupport`).

    The limits are :mod:`.limits`' rows with ``tau = g_j - Jc_j^T lambda``;
    each gets the slack column ``s`` times its scale: ``m g / nc`` for a
    contact row (a facet row normalized to a unit normal first), half the
    torque range for a torque row. Joints without two finite limits are left
    out. Order: every contact's facets and normal force, then every joint's
    upper and lower torque.
    """
    nc, force_scale = len(contacts), robot.mass * np.linalg.norm(robot.gravity) / len(contacts)
    lower, upper = (np.asarray(x, float) for x in limits)
    knot = KnotLimits(tuple(robot.joint_names), tuple(c.frame for c in contacts), facets)
    values = LimitValues(lower, upper, [pyramid_facets(c.normal, c.tangents, c.friction, facets) for c in contacts],
                         [np.asarray(c.normal, float) for c in contacts], min_normal_force,
                         robot.mass * np.linalg.norm(robot.gravity))
    a_tau, a_lam, b = knot.linear(values)
    jc_j, g_j = jac[:, 6:], gravity[6:]      # tau = g_j - Jc_j^T lambda
    # room = b + a_tau (g_j - Jc_j^T lambda) + a_lam lambda >= slack * scale
    a_force = a_tau @ jc_j.T - a_lam
    offset = b + a_tau @ g_j
    half = (upper - lower) / 2
    names = knot.names
    order = [i for i, n in enumerate(names) if n.kind != TORQUE]
    joint = {name: i for i, name in enumerate(robot.joint_names)}
    for i in range(len(robot.joint_names)):
        if np.isfinite(lower[i]) and np.isfinite(upper[i]):
            order += [knot.index(LimitName(TORQUE, robot.joint_names[i], side)) for side in ("upper", "lower")]
    rows, rhs = [], []
    for i in order:
        name = names[i]
        if name.kind == TORQUE:
            scale, norm = half[joint[name.owner]], 1.0
        else:
            norm = np.linalg.norm(a_lam[i]) if name.kind == FRICTION else 1.0
            scale = force_scale
        rows.append(np.append(a_force[i] / norm, scale)), rhs.append(offset[i] / norm)
    return np.array(rows), np.array(rhs), [names[i] for i in order]


def static_support_lp(robot, q, contacts, facets: int = 4, min_normal_force=None,
                      torque_limits=None) -> StaticSupport:
    """Can the robot hold still at ``q`` on ``contacts``? (LP, SciPy HiGHS.)

    Statics at rest (docs/formulation.md section 1 with v = a = 0):
    ``g(q) = S^T tau + sum_c J_c^T lambda_c``, i.e. the 6 base rows
    ``J_C,b^T lambda = g_b`` and ``tau = g_j - J_C,j^T lambda``. Maximizes the
    uniform slack ``s <= 1`` of the pyramid facets, minimum normal forces and
    torque limits (see :class:`StaticSupport`).

    Parameters
    ----------
    robot : RobotModel
    q : array-like, shape (nq,)
    contacts : sequence of ContactSpec
    facets : int
        Facets of each inscribed friction pyramid.
    min_normal_force : float, array-like (len(contacts),) or None
        Smallest normal force of every contact, or one per contact, N; None
        (default): each contact's own (``ContactSpec.min_normal_force``).
    torque_limits : tuple of two arrays (nj,), optional
        ``(lower, upper)`` in N m; default the robot's; infinite entries drop
        the joint's torque rows.
    """
    q = np.asarray(q, float)
    gravity, jac = _static_terms(robot, q, contacts)
    limits = (robot.torque_lower, robot.torque_upper) if torque_limits is None else torque_limits
    limits = tuple(np.broadcast_to(np.asarray(x, float), (robot.nj,)) for x in limits)
    if min_normal_force is None:
        min_normal_force = np.array([float(c.min_normal_force) for c in contacts])
    a_ub, b_ub, names = _inequalities(robot, contacts, jac, gravity, facets, min_normal_force, limits)
    a_eq = np.hstack([jac[:, :6].T, np.zeros((6, 1))])
    n = a_eq.shape[1]
    cost = np.zeros(n)
    cost[-1] = -1.0
    bounds = [(None, None)] * (n - 1) + [(None, 1.0)]
    lp = linprog(cost, A_ub=a_ub, b_ub=b_ub, A_eq=a_eq, b_eq=gravity[:6], bounds=bounds, method="highs")
    if lp.status != 0:
        nan = np.full((len(contacts), 3), np.nan)
        return StaticSupport(False, -np.inf, nan, np.full(robot.nj, np.nan), [], lp.message)
    lam, s = lp.x[:-1], float(lp.x[-1])
    tight = [name for name, gap in zip(names, b_ub - a_ub @ lp.x) if gap < 1e-7 * max(1.0, abs(s))]
    tau = gravity[6:] - jac[:, 6:].T @ lam
    return StaticSupport(s >= -1e-9, s, lam.reshape(-1, 3), tau, tight, lp.message)


# ---------------------------------------------------------------- task design checks

@dataclass
class StanceCheck:
    """Statics of one posture of a task (see :func:`stance_checks`).

    ``foot_gap`` m (largest contact-frame distance from its foothold),
    ``hand_error`` m (NaN for the start), ``joint_room`` rad (smallest
    distance of a joint from its limits), ``support`` the static LP answer.
    """

    label: str
    q: np.ndarray
    foot_gap: float
    hand_error: float
    joint_room: float
    support: StaticSupport


def stance_checks(task, base_weight: float = 0.1) -> list[StanceCheck]:
    """The start posture and one posture per hand target, each checked for static support.

    The start is ``task.initial_posture`` (or the stance IK); each hand
    target's posture is the stance IK from the start with the hand pulled to
    the target and the base pulled mildly (``base_weight``) toward its start
    pose. A design aid and a pre-solve diagnosis, not a plan.
    """
    robot = task.robot
    start = task.initial_posture if task.initial_posture is not None else solve_stance(
        robot, task.contacts, clearance=task.clearance)
    postures = [("start", start, None)]
    for i, target in enumerate(task.hand_targets):
        q = solve_stance(robot, stance_at(task, target.t_start), start, target, nominal=start, base_pose=start[:7],
                         base_weight=base_weight, clearance=task.clearance)
        postures.append((target.label or f"target {i}", q, target))
    return [_check(task, label, q, target) for label, q, target in postures]


def _check(task, label, q, target) -> StanceCheck:
    robot = task.robot
    hand = np.nan if target is None else float(np.linalg.norm(frame_position(robot, q, target.frame) - target.position))
    room = float(np.min(np.minimum(q[7:] - robot.joint_lower, robot.joint_upper - q[7:])))
    contacts = stance_at(task, 0.0 if target is None else target.t_start)
    support = static_support_lp(robot, q, contacts, task.facets)
    return StanceCheck(label, q, float(foot_residuals(robot, q, contacts).max()), hand, room, support)
