"""Task numbers entering the NLP as parameters (never baked into the graph)."""
from __future__ import annotations

import numpy as np

from ..problem.clearance import CLEARANCE_BACKOFF, world_points
from ..problem.friction import pyramid_facets
from ..problem.point_weights import normalized_weights
from ..problem.schedule import terrain_top
from .layout import VectorLayout
from .structure import Structure

# The touchdown speed limit is lowered by this much [m/s], more than the solver's feasibility tolerance,
# so a solved plan keeps the task's limit exactly.
TOUCHDOWN_SPEED_BACKOFF = 1e-6


def parameter_layout(structure: Structure, robot) -> VectorLayout:
    """Layout of the parameter vector for ``structure`` on ``robot``.

    Blocks (physical units): ``step`` [s]; ``footholds`` (3, nc K) [m], knot
    k's footholds in columns ``k nc .. k nc + nc - 1`` (a swinging contact's
    is the one it lands on; no row uses it); ``swing_heights`` (swings,) [m],
    the height above z = 0 each swing's foot must reach at mid-swing;
    ``swing_planes`` (4, swing rows): per approach row the plane ``(n, offset)``
    with ``n . p >= offset`` [m] (``n`` the surface's unit normal into the
    robot, ``offset`` its foothold's ``n . f`` plus the approach clearance,
    or without it on the final approach's rows);
    ``touchdown_tangents`` (6, swings): the landing surface's ``t1, t2``
    stacked (unit, world), along which the foot has no velocity at touchdown;
    ``touchdown_normals`` (3, swings): its unit normal into the robot;
    ``touchdown_speed`` [m/s], the largest speed along it at touchdown (less
    a back-off, so a solved plan keeps the full limit);
    ``normals`` (3, nc K) and ``facets`` (3 m, nc K), knot k's in columns
    ``k nc .. k nc + nc - 1`` as the footholds: the unit normal and the
    pyramid rows (stacked) of the surface each contact presses on at that
    knot (numbers, so a foot may move from the floor onto a wall); ``min_normal_force`` (nc,) [N], each contact's; ``preload`` (nc,) [N], each contact's (rows only for
    ``structure.preloaded``); ``tau_lower``/``tau_upper`` (nj,) [N m];
    ``target_position`` (3, n_slots) [m]; ``target_rotation`` (9, n_slots),
    column-major rotation matrices; ``shape<p>`` (d*d,) per disturbance;
    ``point_weights`` (P,), the points' normalized objective weights;
    ``posture`` (nq,), the nominal configuration of the regularizer;
    ``clearance_planes`` (4 rows, K): per clearance row and knot the plane
    ``(n, offset)`` with ``n . p >= offset`` (offset includes the shape's
    radius and the required clearance) [m]; ``self_distances`` (pairs,), the
    distance each self-collision pair keeps, raised by the back-off [m].
    """
    layout = VectorLayout()
    layout.add("step")
    layout.add("footholds", 3, structure.nc * structure.knots)
    layout.add("swing_heights", len(structure.swings))
    layout.add("swing_planes", 4, len(structure.swing_rows))
    layout.add("touchdown_tangents", 6, len(structure.swings))
    layout.add("touchdown_normals", 3, len(structure.swings))
    layout.add("touchdown_speed", 1 if structure.swings else 0)
    layout.add("normals", 3, structure.nc * structure.knots)
    layout.add("facets", 3 * structure.facets, structure.nc * structure.knots)
    layout.add("min_normal_force", structure.nc)
    layout.add("preload", structure.nc)
    layout.add("tau_lower", robot.nj)
    layout.add("tau_upper", robot.nj)
    layout.add("target_position", 3, len(structure.targets))
    layout.add("target_rotation", 9, len(structure.targets))
    for p, slot in enumerate(structure.disturbances):
        layout.add(f"shape{p}", slot.dim * slot.dim)
    layout.add("point_weights", len(structure.disturbances))
    layout.add("posture", robot.nq)
    layout.add("clearance_planes", 4 * len(structure.clearance_rows), structure.knots)
    layout.add("self_distances", len(structure.self_pairs))
    return layout


def parameter_values(task, structure: Structure, layout: VectorLayout, posture=None, motion=None) -> np.ndarray:
    """The parameter vector of ``task`` (which must have ``structure``).

    ``posture`` (nq,) is the regularizer's nominal configuration; by default
    the robot's standing posture. ``motion`` (nq, K), the stage's starting
    configurations, picks the face of each box the clearance rows keep to
    (default: the standing posture at every knot).
    """
    robot = task.robot
    values = layout.zeros()
    layout.set(values, "step", task.duration / (task.knots - 1))
    layout.set(values, "footholds", knot_footholds(task).reshape(-1, 3).T)
    schedule, surfaces = task.schedule, task.clearance.surfaces if task.clearance else []
    heights = [terrain_top(surfaces, *(iv.foothold for iv in schedule.ends(s))) + schedule.swing_height
               for s in structure.swings]
    layout.set(values, "swing_heights", np.array(heights))
    if structure.swings:
        layout.set(values, "swing_planes", swing_planes(task, structure))
        landings = [schedule.side_of(s, "landing", task.contacts) for s in structure.swings]
        layout.set(values, "touchdown_tangents", np.array([c.tangents.reshape(-1) for c in landings]).T)
        layout.set(values, "touchdown_normals", np.array([np.asarray(c.normal, float) for c in landings]).T)
        layout.set(values, "touchdown_speed", schedule.touchdown_speed - TOUCHDOWN_SPEED_BACKOFF)
    normals, tangents, friction = task.schedule.surfaces(task.contacts, task.times)
    layout.set(values, "normals", normals.reshape(-1, 3).T)
    rows = [pyramid_facets(n, t, mu, structure.facets).reshape(-1)
            for n, t, mu in zip(normals.reshape(-1, 3), tangents.reshape(-1, 2, 3), friction.reshape(-1))]
    layout.set(values, "facets", np.array(rows).T)
    layout.set(values, "min_normal_force", task.min_normal_forces())
    layout.set(values, "preload", [float(c.preload) for c in task.contacts])
    layout.set(values, "tau_lower", robot.torque_lower)
    layout.set(values, "tau_upper", robot.torque_upper)
    if structure.targets:
        targets = [task.hand_targets[s.target] for s in structure.targets]
        layout.set(values, "target_position", np.array([t.position for t in targets]).T)
        rotations = [np.eye(3) if t.orientation is None else np.asarray(t.orientation) for t in targets]
        layout.set(values, "target_rotation", np.array([r.reshape(-1, order="F") for r in rotations]).T)
    for p, spec in enumerate(task.disturbances):
        layout.set(values, f"shape{p}", np.asarray(spec.shape, dtype=float).reshape(-1, order="F"))
    layout.set(values, "point_weights", point_weights(task, structure))
    layout.set(values, "posture", robot.standing_posture if posture is None else posture)
    if structure.clearance_rows:
        layout.set(values, "clearance_planes", clearance_planes(task, structure, motion))
    if structure.self_pairs:
        layout.set(values, "self_distances", [p.distance + CLEARANCE_BACKOFF for p in task.clearance.self_pairs])
    return values


def point_weights(task, structure: Structure) -> np.ndarray:
    """The disturbance points' objective weights, normalized for ``structure.combine_points``, shape (P,)."""
    return normalized_weights([d.objective_weight for d in task.disturbances], structure.combine_points)


def swing_planes(task, structure: Structure) -> np.ndarray:
    """(4, swing rows): per approach row the unit normal and ``n . foothold + approach_clearance`` [m]
    (``n . foothold`` on the final approach's rows), raised by the clearance rows' back-off, so a solved
    plan keeps the full clearance."""
    schedule, columns = task.schedule, []
    for row in structure.swing_rows:
        side = "lift-off" if row.side == "lift-off" else "landing"
        stance = schedule.side_of(structure.swings[row.swing], side, task.contacts)
        normal = np.asarray(stance.normal, float)
        kept = 0.0 if row.side == "final" else schedule.approach_clearance
        columns.append(np.append(normal, normal @ stance.foothold + kept + CLEARANCE_BACKOFF))
    return np.array(columns).T.reshape(4, len(structure.swing_rows))


def knot_footholds(task) -> np.ndarray:
    """(K, nc, 3) footholds [m] per knot: the stance's, or while swinging the one the contact lands on."""
    schedule = task.schedule
    return np.array([[schedule.interval_at(c, t).foothold for c in range(len(task.contacts))] for t in task.times])


def clearance_planes(task, structure: Structure, motion=None) -> np.ndarray:
    """Per knot the planes of every clearance row, shape (4 rows, K), faces chosen at ``motion``."""
    robot, K = task.robot, structure.knots
    motion = np.repeat(robot.standing_posture[:, None], K, axis=1) if motion is None else motion
    data = robot.model.createData()
    columns = [task.clearance.planes_at(world_points(robot, motion[:, k], data), CLEARANCE_BACKOFF).reshape(-1, order="F")
               for k in range(K)]
    return np.array(columns).T


def separating_planes(task, structure: Structure, motion) -> np.ndarray:
    """Starting separating planes of every self pair at ``structure.clearance_knots`` of ``motion`` (nq, K).

    Shape (4 pairs, knots): per knot the columns of
    :meth:`~optimizer.problem.clearance.ClearanceSpec.separating_planes`, stacked.
    """
    robot, data = task.robot, task.robot.model.createData()
    columns = [task.clearance.separating_planes(world_points(robot, motion[:, k], data), CLEARANCE_BACKOFF)
               .reshape(-1, order="F") for k in structure.clearance_knots]
    return np.array(columns).T.reshape(4 * len(structure.self_pairs), len(structure.clearance_knots))
