"""The feasibility solve's starting point: keyframes from inverse kinematics.

The start configuration puts every contact frame on its foothold; one more
keyframe per hand target pulls the hand there (both from
:func:`optimizer.problem.stance.solve_stance`). Configurations between
keyframes are interpolated on the configuration manifold; velocities and
accelerations follow from the integration rule; contact forces and torques
come from the static support LP at each knot. The result is not feasible
(the motion is not balanced dynamically), only close.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pinocchio as pin

from ..problem.schedule import contacts_at
from ..problem.stance import solve_stance, static_support_lp


def keyframes(task) -> list[tuple[float, np.ndarray]]:
    """(time [s], configuration (nq,)) pairs: the start, every hand target's window ends, and every
    lift-off, mid-swing and touchdown of the contact schedule.

    Each keyframe is the stance IK from the previous one with every contact on
    its foothold of that time (the one it lands on while swinging; at
    mid-swing, that foothold's midpoint with the one it left, raised by the
    swing height; at the knots after lift-off and before touchdown, off the
    surface by the approach clearance: :func:`approach_points`) and the hand
    on the target whose window holds the time.
    """
    robot, schedule = task.robot, task.schedule
    times = {0.0}
    for target in task.hand_targets:
        times |= {target.t_start, target.t_end}
    lifted = {}
    for c, intervals in enumerate(schedule.intervals):
        for before, after in zip(intervals[:-1], intervals[1:]):
            middle = 0.5 * (before.t_end + after.t_start)
            times |= {before.t_end, after.t_start, middle}
            point = 0.5 * (before.foothold + after.foothold)
            point[2] = max(before.foothold[2], after.foothold[2]) + schedule.swing_height
            lifted[(c, middle)] = point
    for (c, t), point in approach_points(task).items():
        times.add(t)
        lifted[(c, t)] = point
    q = task.initial_posture if task.initial_posture is not None else solve_stance(
        robot, task.contacts, clearance=task.clearance)
    frames = [(0.0, q)]
    for t in sorted(times - {0.0}):
        contacts = contacts_at(task, t)
        for c in range(len(contacts)):
            if (c, t) in lifted:
                contacts[c] = dataclasses.replace(contacts[c], foothold=lifted[(c, t)])
        target = next((h for h in task.hand_targets if h.t_start <= t <= h.t_end), None)
        q = solve_stance(robot, contacts, q_guess=q, hand_target=target, clearance=task.clearance)
        frames.append((t, q))
    return frames


def approach_points(task) -> dict:
    """``{(contact, knot time [s]): point (3,) m}``: the foot one knot after each lift-off and at the
    last knot before each final approach, off its stance foothold along the surface normal by the
    approach clearance and a centimetre (when that knot is not the swing's middle, which has its own
    keyframe); through the final approach the guess moves on to the touchdown keyframe."""
    schedule, times, out = task.schedule, task.times, {}
    step = 0.01  # m beyond the clearance, so the guess starts inside the approach rows
    for swing in schedule.swings(times):
        for knot, side in ((swing.lift + 1, "lift-off"), (swing.final - 1, "landing")):
            if knot == swing.mid or (side == "lift-off" and knot > swing.mid) or (side == "landing" and knot < swing.mid):
                continue
            stance = schedule.side_of(swing, side, task.contacts)
            out[(swing.contact, float(times[knot]))] = stance.foothold + (schedule.approach_clearance + step) * stance.normal
    return out


def interpolate(model, frames, times) -> np.ndarray:
    """Configurations at ``times`` (K,), piecewise geodesic between keyframes; shape (nq, K)."""
    out = []
    for t in times:
        later = [i for i, (tk, _) in enumerate(frames) if tk >= t]
        if not later:
            out.append(frames[-1][1])
            continue
        i = later[0]
        if i == 0 or frames[i][0] == t:
            out.append(frames[i][1])
            continue
        (t0, q0), (t1, q1) = frames[i - 1], frames[i]
        s = (t - t0) / (t1 - t0)
        out.append(pin.interpolate(model, q0, q1, s))
    return np.array(out).T


def integrated_rates(model, q, times) -> tuple[np.ndarray, np.ndarray]:
    """Velocities and accelerations (nv, K) that meet the integration rule exactly for the
    configurations ``q`` (nq, K) at the uniform knot ``times`` [s]: ``v[k+1]`` from ``q[k]`` to
    ``q[k+1]`` [m/s, rad/s], ``a[k] = (v[k+1] - v[k]) / h`` [m/s^2, rad/s^2]; at rest at both ends
    (``v`` zero at the first and last knot, ``a`` at the last)."""
    K, h = q.shape[1], times[1] - times[0]
    v = np.zeros((model.nv, K))
    for k in range(K - 1):
        v[:, k + 1] = pin.difference(model, q[:, k], q[:, k + 1]) / h
    v[:, -1] = 0.0
    a = np.zeros((model.nv, K))
    a[:, :-1] = (v[:, 1:] - v[:, :-1]) / h
    return v, a


# Below this slack of the static support LP (limits violated by more than their own scale: m g / nc for
# a contact row, half the torque range for a torque row) the posture cannot be held still and the LP's
# forces are arbitrary along the relaxed rows: on the stepping demos' three-foot knots they reached 1e4-3e6
# N of opposed tangential forces, and the feasibility solve spent most of its iterations undoing them.
# Such a knot takes the forces and torques of the nearest holdable knot instead (benchmarks/RESULTS.md,
# "Initial guess at knots that cannot be held still").
UNHOLDABLE_SLACK = -1.0


def initial_guess(task) -> dict[str, np.ndarray]:
    """Physical arrays ``q`` (nq, K), ``v``, ``a`` (nv, K), ``tau`` (nj, K), ``lam`` (3 nc, K).

    Forces [N] and torques [N m] come from the static support LP of the loaded contacts at each knot;
    a knot the LP cannot hold (slack below :data:`UNHOLDABLE_SLACK`) repeats the nearest holdable
    knot's, earlier on a tie, with zero on its contacts in the air.
    """
    robot, times = task.robot, task.times
    model, K = robot.model, task.knots
    q = interpolate(model, keyframes(task), times)
    v, a = integrated_rates(model, q, times)
    tau, lam = np.zeros((robot.nj, K)), np.zeros((3 * len(task.contacts), K))
    active = task.schedule.loaded(times)
    holdable = np.zeros(K, bool)
    for k in range(K):
        stance = [c for c, on in zip(contacts_at(task, times[k]), active[k]) if on]
        support = static_support_lp(robot, q[:, k], stance, task.facets)
        if support.slack >= UNHOLDABLE_SLACK:
            lam[np.repeat(active[k], 3), k], tau[:, k] = support.forces.reshape(-1), support.tau
            holdable[k] = True
    good = np.flatnonzero(holdable)
    if good.size:
        for k in np.flatnonzero(~holdable):
            near = good[np.argmin(np.abs(good - k))]            # the first minimum: earlier on a tie
            keep = np.repeat(active[k], 3)
            lam[keep, k], tau[:, k] = lam[keep, near], tau[:, near]
    tau = np.clip(tau, robot.torque_lower[:, None], robot.torque_upper[:, None])
    return {"q": q, "v": v, "a": a, "tau": tau, "lam": lam}
