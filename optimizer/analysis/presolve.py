"""Pre-solve checks: find the common impossible tasks before the NLP is built.

Each check returns :class:`Finding` objects in plain words, each saying what
is short and by how much. A finding is ``impossible`` when the check proves
that no plan exists (then ``brace solve`` stops with exit code 2); otherwise
it is a warning from an estimate and the solve goes ahead.

Proofs (posture-free, so they hold for every motion):

- ``reach``: every link is rigid, so a frame is never farther from a foot
  than the sum of the link lengths on the kinematic chain between them
  (joint placements from the Pinocchio model, plus the travel of prismatic
  joints). A hand target farther than that from some foothold, or two
  footholds farther apart than the chain between them, cannot be reached.
- ``clearance``: a fixed start posture (``initial_posture``) must already
  keep every collision shape the required clearance from the terrain; and a
  hand target whose frame lies inside one of its link's collision shapes
  cannot be reached when the target itself is closer to a surface than the
  clearance (the shape contains the frame, so it is at least as close).
- ``self clearance``: a fixed start posture must keep every self-collision
  pair of the robot file at least its distance apart.
- ``standing``: the motion ends at rest (zero velocity and acceleration at
  the last knot), so gravity must be carried by the contact forces alone:
  ``sum_c f_c = -m g`` with each ``f_c`` in its Coulomb cone (checked with a
  16-facet pyramid circumscribing the cone, so "infeasible" is a proof), then
  in the planner's own inscribed pyramid above the minimum normal force.
  Moments are left to the estimates below (they depend on the posture).

Estimates (at postures from the stance IK, :mod:`optimizer.problem.stance`):

- ``statics``: the static support LP at the start posture (friction, minimum
  normal force, torque limits): which contact or joint is short, by how much.
- ``hand reach``: the stance IK with the base near its start pose cannot
  bring the hand to a target.
- ``self clearance`` (estimate): a stance-IK posture (start or hand
  target) that brings a self-collision pair closer than its distance.
- ``timing``: the joint travel between the postures of consecutive targets
  at the joints' velocity limits takes longer than the task allows.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pinocchio as pin
from scipy.optimize import linprog

from ..errors import InfeasibleTask, TaskError
from ..problem.clearance import self_shortfall, smallest_clearance
from ..problem.friction import pyramid_facets
from ..problem.limits import FRICTION, TORQUE
from ..problem.schedule import contacts_at, stance_at, terrain_top
from ..problem.stance import solve_stance, stance_checks, static_support_lp
from ..solver.registry import DEFAULT_BACKEND, backend_named

CONE_FACETS = 16          # facets of the pyramid circumscribing each Coulomb cone (proof of "cannot stand")
FRICTION_SCALE_MAX = 1e3  # beyond this scale of mu the surfaces "cannot carry the weight at any friction"
HAND_MISS_WARNING = 0.01  # m: the stance IK leaving the hand this far from a target is worth a warning


@dataclass
class Finding:
    """One result of a pre-solve check.

    Attributes
    ----------
    check : str
        Which check: ``reach``, ``standing``, ``clearance``, ``self clearance``, ``statics``, ``hand reach``,
        ``timing``.
    impossible : bool
        True when the check proves no plan exists; False for a warning.
    what : str
        Plain words: what is short and by how much (with units).
    hint : str
        What to change in the task.
    shortfall : float
        By how much (in ``unit``), for programs and tests.
    unit : str
    """

    check: str
    impossible: bool
    what: str
    hint: str = ""
    shortfall: float = math.nan
    unit: str = ""

    def text(self) -> str:
        return f"{self.check}: {self.what}" + (f"; hint: {self.hint}" if self.hint else "")


# ---------------------------------------------------------------- kinematic chains


def _joint_path(model, joint: int) -> list[int]:
    """Joints from ``joint`` up to (and including) the root joint 1."""
    path = []
    while joint > 0:
        path.append(joint)
        joint = model.parents[joint]
    return path


def _travel(model, joint: int, robot) -> float:
    """Largest displacement of a prismatic joint's child, m (0 for rotations)."""
    name = model.names[joint]
    if name not in robot.joint_names or robot.joint_kinds[robot.joint_names.index(name)] != "prismatic":
        return 0.0
    iq = model.joints[joint].idx_q - 7
    return float(max(abs(robot.joint_lower[iq]), abs(robot.joint_upper[iq])))


def chain_length(robot, ancestor: int, frame: str) -> float:
    """Longest possible distance from joint ``ancestor``'s origin to ``frame``'s origin, m.

    Sum over the joints strictly below ``ancestor`` on the way to the frame of
    their placement offsets (plus prismatic travel), plus the frame's offset in
    its parent joint. ``ancestor`` itself (and everything above it) moves the
    chain rigidly and adds nothing.
    """
    model = robot.model
    frame_obj = model.frames[robot.frame_id(frame)]
    length = float(np.linalg.norm(frame_obj.placement.translation))
    for joint in _joint_path(model, frame_obj.parentJoint):
        if joint == ancestor:
            return length
        length += float(np.linalg.norm(model.jointPlacements[joint].translation)) + _travel(model, joint, robot)
    raise ValueError(f"joint {ancestor} is not an ancestor of frame {frame}")


def frames_chain_length(robot, frame_a: str, frame_b: str) -> float:
    """Longest possible distance between two frames' origins along the kinematic chain, m."""
    model = robot.model
    path_a = _joint_path(model, model.frames[robot.frame_id(frame_a)].parentJoint)
    path_b = set(_joint_path(model, model.frames[robot.frame_id(frame_b)].parentJoint))
    common = next(j for j in path_a if j in path_b)
    return chain_length(robot, common, frame_a) + chain_length(robot, common, frame_b)


def _target_name(task, i: int) -> str:
    label = task.hand_targets[i].label
    return f"hand target '{label}' (hand_targets[{i}])" if label else f"hand_targets[{i}]"


def _fmt(vec) -> str:
    return "[" + ", ".join(f"{x:.2f}" for x in vec) + "]"


def reach_findings(task) -> list[Finding]:
    """Footholds too far apart (at the start), and hand targets beyond the chain reach from some foothold in
    stance at the target's time (proofs)."""
    robot, contacts, out = task.robot, task.contacts, []
    for i, a in enumerate(contacts):
        for b in contacts[i + 1:]:
            gap = float(np.linalg.norm(a.foothold - b.foothold))
            chain = frames_chain_length(robot, a.frame, b.frame)
            if gap > chain:
                out.append(Finding("reach", True, f"footholds of {a.frame} and {b.frame} are {gap:.2f} m apart, "
                                   f"the chain between them spans at most {chain:.2f} m: {gap - chain:.2f} m missing",
                                   "move those footholds closer together", gap - chain, "m"))
    for i, target in enumerate(task.hand_targets):
        excess = [(float(np.linalg.norm(target.position - c.foothold)) - frames_chain_length(robot, c.frame, target.frame),
                   c) for c in stance_at(task, target.t_start)]
        missing, worst = max(excess, key=lambda e: e[0])
        if missing > 0.0:
            distance = float(np.linalg.norm(target.position - worst.foothold))
            out.append(Finding(
                "reach", True,
                f"{_target_name(task, i)} at {_fmt(target.position)} m is out of reach: {target.frame} can be at most "
                f"{distance - missing:.2f} m from {worst.frame} along the kinematic chain, the target is {distance:.2f} m "
                f"from its foothold: {missing:.2f} m missing",
                f"move the target at least {missing:.2f} m toward {worst.frame}, or that foot toward the target",
                missing, "m"))
    return out


# ---------------------------------------------------------------- standing still


def _force_balance_lp(task, facet_rows, scale: float, min_force: float | None, maximize_min_force: bool = False,
                      contacts=None):
    """Contact forces (nc, 3) carrying the weight, N, world frame, or None.

    ``contacts`` defaults to the task's (all of them, as at the final rest).
    ``facet_rows(contact, mu)`` gives rows ``g`` with ``g . f <= 0``; friction
    is scaled by ``scale``; every normal force is at least ``min_force`` N
    (None: each contact's least planned force, ``ContactSpec.least_normal_force``: its own minimum, or
    its preload when larger).
    With ``maximize_min_force`` the common lower bound on the normal forces is
    a variable and maximized; returns (forces, bound) then.
    """
    contacts, robot = task.contacts if contacts is None else contacts, task.robot
    nc = len(contacts)
    nx = 3 * nc + (1 if maximize_min_force else 0)
    rows, rhs = [], []
    for c, contact in enumerate(contacts):
        for g in facet_rows(contact, scale * contact.friction):
            row = np.zeros(nx)
            row[3 * c:3 * c + 3] = g
            rows.append(row), rhs.append(0.0)
        row = np.zeros(nx)
        row[3 * c:3 * c + 3] = -np.asarray(contact.normal)
        if maximize_min_force:
            row[-1] = 1.0
        least = contact.least_normal_force if min_force is None else min_force
        rows.append(row), rhs.append(0.0 if maximize_min_force else -least)
    a_eq = np.hstack([np.tile(np.eye(3), nc), np.zeros((3, nx - 3 * nc))])
    b_eq = -robot.mass * np.asarray(robot.gravity, float)
    cost = np.zeros(nx)
    bounds = [(None, None)] * nx
    if maximize_min_force:
        cost[-1] = -1.0
        bounds[-1] = (None, robot.mass * float(np.linalg.norm(robot.gravity)))
    lp = linprog(cost, A_ub=np.array(rows), b_ub=np.array(rhs), A_eq=a_eq, b_eq=b_eq, bounds=bounds, method="highs")
    if lp.status != 0:
        return (None, math.nan) if maximize_min_force else None
    forces = lp.x[:3 * nc].reshape(nc, 3)
    return (forces, float(lp.x[-1])) if maximize_min_force else forces


def _cone_rows(contact, mu):
    """Facets of a pyramid circumscribing the Coulomb cone of friction ``mu`` (contains the cone)."""
    angles = 2.0 * np.pi * np.arange(CONE_FACETS) / CONE_FACETS
    t1, t2 = contact.tangents
    return np.cos(angles)[:, None] * t1 + np.sin(angles)[:, None] * t2 - mu * np.asarray(contact.normal)


def _smallest_friction_scale(task, facet_rows, min_force: float) -> float:
    """Factor on every contact's mu that lets the contacts carry the weight: 1 when the given mu do,
    else the smallest such factor (bisection to 1e-4 relative), inf when none up to FRICTION_SCALE_MAX."""
    if _force_balance_lp(task, facet_rows, 1.0, min_force) is not None:
        return 1.0
    if _force_balance_lp(task, facet_rows, FRICTION_SCALE_MAX, min_force) is None:
        return math.inf
    lo, hi = 1.0, FRICTION_SCALE_MAX
    while hi - lo > 1e-4 * hi:
        mid = 0.5 * (lo + hi)
        lo, hi = (lo, mid) if _force_balance_lp(task, facet_rows, mid, min_force) is not None else (mid, hi)
    return hi


def _friction_words(task, scale: float) -> str:
    mus = sorted({round(float(c.friction), 6) for c in task.contacts})
    if len(mus) == 1:
        need = scale * mus[0]
        given = (f"the task plans on {mus[0]:.2f} (its friction_reserve {task.friction_reserve:g} kept)"
                 if task.friction_reserve > 0 else f"the task gives {mus[0]:.2f}")
        return f"friction mu >= {need:.2f} on the contacts, {given} ({need - mus[0]:.2f} short)"
    parts = ", ".join(f"{c.frame} {c.friction:.2f} -> {scale * c.friction:.2f}" for c in task.contacts)
    return f"{scale:.2f} times the given friction ({parts})"


def _minimum_words(task) -> str:
    """The task's minimum normal forces in words: the task-wide one and each contact's own, N."""
    own = [f"{c.frame} {c.least_normal_force:.1f} N" for c in task.contacts
           if c.least_normal_force != task.min_normal_force]
    return f"min_normal_force {task.min_normal_force:.1f} N" + (f" ({', '.join(own)}: own minimum or preload)"
                                                                  if own else "")


def standing_findings(task) -> list[Finding]:
    """Can the contacts carry the weight at rest at all? (Coulomb cones, then the planner's pyramids.)"""
    weight = task.robot.mass * float(np.linalg.norm(task.robot.gravity))
    cone = _smallest_friction_scale(task, _cone_rows, 0.0)
    if math.isinf(cone):
        return [Finding("standing", True, f"the contact surfaces cannot carry the robot's weight ({weight:.1f} N) at "
                        "any friction: their normals leave no upward push", "add contacts on surfaces facing up",
                        math.inf, "")]
    if cone > 1.0:
        short = _friction_words(task, cone)
        return [Finding("standing", True, f"the robot cannot stand still on these contacts: with Coulomb friction "
                        f"it needs {short}", "choose flatter footholds or surfaces with more friction",
                        (cone - 1.0) * min(c.friction for c in task.contacts), "mu")]

    def inscribed(contact, mu):
        return pyramid_facets(contact.normal, contact.tangents, mu, task.facets)

    if _force_balance_lp(task, inscribed, 1.0, None) is not None:
        return []
    if _force_balance_lp(task, inscribed, 1.0, 0.0) is not None:
        _, best = _force_balance_lp(task, inscribed, 1.0, 0.0, maximize_min_force=True)
        largest = max(c.least_normal_force for c in task.contacts)
        return [Finding("standing", True, f"{_minimum_words(task)} cannot hold on every contact while standing "
                        f"still: at most {best:.1f} N is possible on all of them at once",
                        f"lower min_normal_force to {best:.1f} N or less (and any contact's own or preload above it)",
                        largest - best, "N")]
    scale = _smallest_friction_scale(task, inscribed, 0.0)
    keep = math.cos(math.pi / task.facets)
    return [Finding("standing", True, f"with the planner's {task.facets}-facet friction pyramids (inscribed: they "
                    f"keep {keep:.2f} of mu along each facet) the robot cannot stand still: it needs "
                    f"{_friction_words(task, scale)}",
                    f"raise pyramid_facets (8 keeps {math.cos(math.pi / 8):.2f} of mu) or give the surfaces more "
                    "friction", (scale - 1.0) * min(c.friction for c in task.contacts), "mu")]


# ---------------------------------------------------------------- contact schedules


def _window_words(t0: float, t1: float, stance) -> str:
    names = ", ".join(c.frame for c in stance) or "no contact"
    return f"from {t0:.2f} s to {t1:.2f} s only {names} {'is' if len(stance) == 1 else 'are'} in stance"


def support_findings(task) -> list[Finding]:
    """Every window of the contact schedule must leave contacts that can hold the robot still.

    A design rule of schedules (a swing is never a jump or a fall): in each
    window with one set of contacts in stance, (1) the weight must fit in the
    sum of their Coulomb cones with the minimum normal force (posture-free
    force balance, proof), and (2) the static support LP
    (:func:`~optimizer.problem.stance.static_support_lp`: forces, moments,
    friction, torque limits) at the stance-IK posture of the window's middle
    must hold (an estimate at that posture, a warning), the body pulled over the
    stance feet's centroid.
    """
    schedule = task.schedule
    if not schedule.steps:
        return []
    out = []
    for t0, t1, stance_ids in schedule.phases():
        middle = 0.5 * (t0 + t1)
        contacts = [c for i, c in enumerate(contacts_at(task, middle)) if i in stance_ids]
        where = _window_words(t0, t1, contacts)
        if not contacts or _force_balance_lp(task, _cone_rows, 1.0, None, contacts=contacts) is None:
            out.append(Finding("support", True, f"{where} ({task.schedule.field_name}): those contacts cannot carry "
                               "the robot's weight at any posture", "keep more feet in stance in that window (move "
                               "a lift-off later or a touchdown earlier)", t1 - t0, "s"))
            continue
        if len(stance_ids) == len(task.contacts):
            continue
        try:   # the base pulled over the stance feet's centroid: a posture that leans onto them
            start = solve_stance(task.robot, contacts_at(task, middle), clearance=task.clearance)
            base = start[:7].copy()
            base[:2] = np.mean([c.foothold[:2] for c in contacts], axis=0)
            q = solve_stance(task.robot, contacts, start, base_pose=base, clearance=task.clearance)
        except InfeasibleTask:
            continue
        support = static_support_lp(task.robot, q, contacts, task.facets)
        if not support.feasible:
            out.append(Finding("support", False, f"{where} ({task.schedule.field_name}): at the stance-IK posture "
                               "those contacts cannot hold the robot still (" + (", ".join(map(str, support.tight[:3]))
                               or "no balance at all") + "; an estimate, the body may still shift over them)",
                               "keep more feet in stance in that window, or place them around the centre of mass"))
    return out


def leg_speed(robot, frame: str) -> float:
    """Upper bound of a contact frame's speed relative to the body, m/s.

    ``sum_i w_i r_i`` over the actuated joints between the root and the
    frame, with ``w_i`` the joint's velocity limit and ``r_i`` the chain
    length from its origin to the frame (:func:`chain_length`): the frame's
    velocity relative to the root is ``sum_i w_i (axis_i x (p - o_i))``.
    """
    model = robot.model
    total = 0.0
    for joint in _joint_path(model, model.frames[robot.frame_id(frame)].parentJoint):
        name = model.names[joint]
        if name in robot.joint_names:
            i = robot.joint_names.index(name)
            total += float(robot.velocity_limit[i]) * chain_length(robot, joint, frame)
    return total


def swing_time_findings(task) -> list[Finding]:
    """Swings too short for the leg's joint velocity limits (proof under the stated bound).

    The foot rises from its lift-off foothold to at least the mid-swing
    height and comes down to its touchdown foothold: its path is at least
    ``max(|goal - start|, (h - z_start) + (h - z_goal))`` long, ``h`` the
    mid-swing height. Relative to the body it moves at most
    :func:`leg_speed`; the bound takes the body as still while the foot
    swings (the other feet hold it on their footholds).
    """
    schedule, out = task.schedule, []
    surfaces = task.clearance.surfaces if task.clearance else []
    for c, intervals in enumerate(schedule.intervals):
        speed = leg_speed(task.robot, task.contacts[c].frame)
        for i in range(1, len(intervals)):
            before, after = intervals[i - 1], intervals[i]
            height = terrain_top(surfaces, before.foothold, after.foothold) + schedule.swing_height
            path = max(float(np.linalg.norm(after.foothold - before.foothold)),
                       (height - before.foothold[2]) + (height - after.foothold[2]))
            needed, given = path / speed, after.t_start - before.t_end
            if needed > given:
                frame = task.contacts[c].frame
                out.append(Finding("swing time", True, f"{schedule.field_name}.{frame}[{i}]: the swing of {frame} "
                                   f"from {before.t_end:.3f} s to {after.t_start:.3f} s lasts {given:.3f} s; its path "
                                   f"is at least {path:.2f} m and the leg moves the foot at most {speed:.1f} m/s "
                                   f"(joint velocity limits), so it needs {needed:.3f} s", "start that stance later",
                                   needed - given, "s"))
    return out


# ---------------------------------------------------------------- estimates at stance postures


def statics_findings(task, q) -> list[Finding]:
    """The static support LP at posture ``q``: which contact or joint is short, by how much (warnings)."""
    robot = task.robot
    support = static_support_lp(robot, q, task.contacts, task.facets)
    if support.feasible:
        return []
    if not math.isfinite(support.slack):
        return [Finding("statics", False, "at the start posture the contacts cannot balance the weight and its "
                        "moments with any forces", "move the feet so they surround the centre of mass")]
    per_contact = robot.mass * float(np.linalg.norm(robot.gravity)) / len(task.contacts)
    out, contacts = [], {}
    for limit in support.tight:
        if limit.kind == TORQUE:
            joint, side = limit.owner, limit.side
            i = robot.joint_names.index(joint)
            short = -support.slack * (robot.torque_upper[i] - robot.torque_lower[i]) / 2
            value = robot.torque_upper[i] if side == "upper" else robot.torque_lower[i]
            out.append(Finding("statics", False, f"holding the start posture still needs joint {joint} beyond its "
                               f"{side} torque limit {value:+.1f} {_unit(robot, i, 'torque')} by about {short:.1f} "
                               f"{_unit(robot, i, 'torque')} ({limit})", "choose a posture or footholds that load "
                               "this joint less", short, _unit(robot, i, "torque")))
        else:
            contacts.setdefault(limit.owner, set()).add("friction" if limit.kind == FRICTION else "minimum normal force")
    if contacts:
        short = -support.slack * per_contact
        names = ", ".join(f"{frame} ({' and '.join(sorted(kinds))})" for frame, kinds in contacts.items())
        out.insert(0, Finding("statics", False, f"holding the start posture still needs more than the contacts "
                              f"allow: {names} short by about {short:.1f} N each (an estimate at the stance-IK posture)",
                              "move the feet so the load spreads over them, or add friction", short, "N"))
    return out


def _unit(robot, i: int, what: str) -> str:
    """Unit of joint ``i``'s position, velocity or torque."""
    prismatic = robot.joint_kinds[i] == "prismatic"
    return {"position": ("rad", "m"), "velocity": ("rad/s", "m/s"), "torque": ("N m", "N")}[what][prismatic]


def hand_findings(task, checks) -> list[Finding]:
    """Targets the stance IK (base near its start pose) leaves the hand far from (warnings)."""
    out = []
    for i, check in enumerate(checks[1:]):
        if check.hand_error > HAND_MISS_WARNING:
            out.append(Finding("hand reach", False, f"with the base near its start pose the stance IK keeps the hand "
                               f"{check.hand_error:.2f} m from {_target_name(task, i)} (an estimate: the solver may "
                               "still reach it by moving the body)", "bring the target closer to the body",
                               check.hand_error, "m"))
    return out


def timing_findings(task, checks) -> list[Finding]:
    """Joint travel between consecutive stance-IK postures at the velocity limits (warnings)."""
    robot, model = task.robot, task.robot.model
    order = sorted(range(len(task.hand_targets)), key=lambda i: task.hand_targets[i].t_start)
    previous, previous_end, previous_name, out = checks[0].q, 0.0, "the start posture", []
    for i in order:
        target = task.hand_targets[i]
        q = checks[i + 1].q
        available = target.t_start - previous_end
        travel = np.abs(pin.difference(model, previous, q)[6:])
        needed = travel / robot.velocity_limit
        j = int(np.argmax(needed))
        if needed[j] > available:
            out.append(Finding("timing", False, f"from {previous_name} to the posture for {_target_name(task, i)} "
                               f"joint {robot.joint_names[j]} moves {travel[j]:.2f} {_unit(robot, j, 'position')}; at its velocity "
                               f"limit {robot.velocity_limit[j]:.1f} {_unit(robot, j, 'velocity')} that takes {needed[j]:.2f} s, the task allows "
                               f"{available:.2f} s ({needed[j] - available:.2f} s short; an estimate from the stance IK)",
                               "give the hand more time before this target", needed[j] - available, "s"))
        previous, previous_end, previous_name = q, target.t_end, f"the posture for {_target_name(task, i)}"
    return out


# ---------------------------------------------------------------- all checks


def _holding_pairs(task, frame: str) -> list:
    """Clearance pairs whose checked shape (all its points) contains ``frame``'s origin."""
    robot, spec = task.robot, task.clearance
    f = robot.model.frames[robot.frame_id(frame)]
    at = np.array(f.placement.translation)
    out = []
    for pair in spec.pairs:
        shape = spec.shapes[pair.shape]
        if shape.joint != f.parentJoint or len(pair.points) != len(shape.points):
            continue
        if _inside_swollen_hull(at, shape.joint_points, shape.radius):
            out.append(pair)
    return out


def _inside_swollen_hull(point, points, radius) -> bool:
    """``point`` within ``radius`` of the segment or point ``points`` (1 or 2 points), or inside a box's corners."""
    if len(points) == 1:
        return bool(np.linalg.norm(point - points[0]) <= radius)
    if len(points) == 2:
        a, b = points
        s = float(np.clip((point - a) @ (b - a) / max((b - a) @ (b - a), 1e-18), 0.0, 1.0))
        return bool(np.linalg.norm(point - (a + s * (b - a))) <= radius)
    return bool(np.all(point >= points.min(axis=0) - radius) and np.all(point <= points.max(axis=0) + radius))


SELF_HINT = "change the posture (initial_posture hints, footholds or hand targets), or the pair's distance " \
            "in the robot file (collision.self_pairs)"


def _self_finding(task, q, impossible: bool, posture: str) -> list[Finding]:
    """A finding when ``q`` brings some self-collision pair of the task's robot closer than its distance."""
    distance, required, pair = self_shortfall(task.clearance, task.robot, q)
    if distance >= required:
        return []
    apart = f"{distance * 100:.1f} cm apart" if distance >= 0 else f"overlapping by {-distance * 100:.1f} cm"
    estimate = "" if impossible else " (an estimate from the stance IK; the solver may still find a posture)"
    return [Finding("self clearance", impossible, f"{posture} brings {pair} {apart}; the robot file asks for "
                    f"{required * 100:.1f} cm{estimate}", SELF_HINT, required - distance, "m")]


def self_clearance_findings(task, checks) -> list[Finding]:
    """Warnings: stance-IK postures (start unless fixed, and each hand target's) that break a self pair."""
    out = []
    for i, check in enumerate(checks):
        if i == 0 and task.initial_posture is not None:
            continue
        name = "the start posture" if i == 0 else f"the posture for {check.label}"
        out += _self_finding(task, check.q, False, name)
    return out


def clearance_findings(task) -> list[Finding]:
    """Proofs: a fixed start that does not clear the terrain or keep a self pair apart; a hand target too close
    to a surface."""
    spec = task.clearance
    out = [] if task.initial_posture is None else _self_finding(task, task.initial_posture, True, "the start posture")
    if not spec.pairs:
        return out
    need = spec.distance
    if task.initial_posture is not None:
        distance, link, surface = smallest_clearance(spec, task.robot, task.initial_posture)
        if distance < need:
            out.append(Finding("clearance", True, f"the start posture keeps link {link} {distance * 100:.1f} cm from "
                               f"surface {surface}; the task asks for {need * 100:.1f} cm",
                               "change the initial_posture hints or the footholds, or lower clearance.distance",
                               need - distance, "m"))
    for i, target in enumerate(task.hand_targets):
        for pair in _holding_pairs(task, target.frame):
            surface = spec.surfaces[pair.surface]
            gap = surface.point_distance(target.position)
            if gap < need:
                link = spec.shapes[pair.shape].link
                where = "inside" if gap < 0 else f"{gap * 100:.1f} cm from"
                out.append(Finding("clearance", True, f"{_target_name(task, i)} at {_fmt(target.position)} m lies {where} "
                                   f"surface {surface.name}; link {link} holds the {target.frame} frame and must stay "
                                   f"{need * 100:.1f} cm clear of it", "move the target away from the surface",
                                   need - gap, "m"))
    return out


def run_checks(task) -> list[Finding]:
    """Every pre-solve finding of ``task``: proofs first; estimates only when nothing is proven."""
    proofs = reach_findings(task) + standing_findings(task) + clearance_findings(task) + swing_time_findings(task)
    support = support_findings(task)
    proofs += [f for f in support if f.impossible]
    if proofs:
        return proofs
    try:
        checks = stance_checks(task)
    except InfeasibleTask as exc:
        return [Finding("stance", False, f"the stance IK found no start posture ({exc}); the solver may still find one",
                        "move the footholds closer to the standing posture or set initial_posture hints")]
    return (support + statics_findings(task, checks[0].q) + hand_findings(task, checks)
            + self_clearance_findings(task, checks)
            + timing_findings(task, checks))


def require_possible(task) -> list[Finding]:
    """The warnings of :func:`run_checks`; raises :class:`InfeasibleTask` when a check proves the task impossible."""
    findings = run_checks(task)
    proven = [f for f in findings if f.impossible]
    if proven:
        raise InfeasibleTask(f"{task.path}: the task cannot be solved (pre-solve checks; --skip-checks to try anyway):",
                             proven)
    return findings


# ---------------------------------------------------------------- solver options


def check_solver_options(task, backend: str = DEFAULT_BACKEND) -> None:
    """Try the task's ``solver`` options on the backend's option check; a rejected option is a TaskError."""
    if not task.solver_options:
        return
    solver = backend_named(backend)
    if solver.check_options(task.solver_options) is None:
        return
    for name, value in task.solver_options.items():
        reason = solver.check_options({name: value})
        if reason is not None:
            raise TaskError(task.path, f"solver.{name}", f"an {solver.title} option name with a value of the right "
                            "type and range", value, reason)
    raise TaskError(task.path, "solver", f"{solver.title} options that work together", task.solver_options,
                    solver.check_options(task.solver_options))
