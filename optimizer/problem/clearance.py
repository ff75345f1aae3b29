"""Clearance between the robot's collision shapes and the terrain's surfaces.

Which (shape, surface) pairs are checked, and the rows that keep them apart:
for a plane every checked point ``p`` of the shape gives one row
``n . p - d - radius >= clearance`` (exact for the swollen hull of the
points); for a box the same rows against one face, chosen per pair and knot
before the solve as the face that separates the shape best at the starting
point (:meth:`ClearanceSpec.planes_at`); the chosen face is re-chosen from each
stage's own start, and every plan is re-checked against the best face
afterwards (:mod:`optimizer.analysis.clearance`).

Points of a shape near a contact frame on the same link are exempt from the
surface that contact stands on (the foot sphere touches its foothold).

Self-collision pairs (named in the robot file,
:mod:`optimizer.robot.self_pairs`) keep two shapes of the robot apart. The
NLP's rows for one pair use a separating plane ``(n, d)`` of its own
(variables per knot): ``n . a_i - d >= r_a + distance`` for the first shape's
points, ``n . b_j - d <= -r_b`` for the second's, and ``|n| <= 1``. Any such
plane proves the two swollen hulls at least ``distance`` apart (for points
``x``, ``y`` of the hulls, ``|x - y| >= n . (x - y) >= r_a + r_b +
distance``), and the plane along the shortest vector between the hulls
exists whenever they are, so the rows are exact. :meth:`ClearanceSpec.separating_planes`
gives a starting plane per pair.
This module is numeric (NumPy and Pinocchio); the NLP builds the same rows
symbolically from :attr:`ClearanceSpec.rows`.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pinocchio as pin

from ..robot.collision import shape_points_world
from ..robot.separation import hull_separation, shape_distance

DEFAULT_CLEARANCE = 0.03   # m: the task default, "a few centimetres"
# The NLP's rows keep this much more than the required clearance (m): more than the
# solver's feasibility tolerance, so a solved plan clears by the full distance exactly.
CLEARANCE_BACKOFF = 1e-6


@dataclass(frozen=True)
class ClearancePair:
    """Shape ``shape`` (index into the robot's shapes) against surface ``surface``; ``points`` checked."""

    shape: int
    surface: int
    points: tuple


@dataclass
class ClearanceSpec:
    """Everything needed to keep a task's robot clear of its terrain.

    Attributes
    ----------
    distance : float
        Required clearance, m.
    shapes : tuple of CollisionShape
    surfaces : list of Surface
    pairs : list of ClearancePair
    self_pairs : tuple of SelfPair
        Shapes of the robot kept apart (:mod:`optimizer.robot.self_pairs`).
    """

    distance: float
    shapes: tuple
    surfaces: list
    pairs: list
    self_pairs: tuple = ()

    @property
    def rows(self) -> list[tuple[int, int, int]]:
        """One row per (pair, checked point): ``(pair index, shape index, point index)``."""
        return [(i, pair.shape, p) for i, pair in enumerate(self.pairs) for p in pair.points]

    def row_label(self, row: int) -> tuple[str, str]:
        """(link, surface) of row ``row``."""
        pair, shape, _ = self.rows[row]
        return self.shapes[shape].link, self.surfaces[self.pairs[pair].surface].name

    def pair_points(self, pair: ClearancePair, world: list) -> np.ndarray:
        """World positions (n, 3) of a pair's checked points, from :func:`shape_points_world` output."""
        return world[pair.shape][list(pair.points)]

    def selected_faces(self, world: list) -> list[int]:
        """Per pair, the face of its surface that separates its checked points best."""
        return [self.surfaces[pair.surface].best_face(self.pair_points(pair, world)) for pair in self.pairs]

    def planes_at(self, world: list, backoff: float = 0.0) -> np.ndarray:
        """Per row, the plane ``(n, d + radius + clearance + backoff)`` of its pair's selected face; shape (4, rows).

        The row is then ``n . p - offset >= 0``.
        """
        faces = self.selected_faces(world)
        out = np.zeros((4, len(self.rows)))
        for r, (i, shape, _) in enumerate(self.rows):
            n, d = self.surfaces[self.pairs[i].surface].faces()[faces[i]]
            out[:3, r], out[3, r] = n, d + self.shapes[shape].radius + self.distance + backoff
        return out

    def pair_distances(self, world: list) -> np.ndarray:
        """Signed distance of every pair (m), checked points only; shape (pairs,)."""
        return np.array([self.surfaces[pair.surface].distance(self.pair_points(pair, world), self.shapes[pair.shape].radius)
                         for pair in self.pairs])

    def self_label(self, i: int) -> str:
        """``"<shape> vs <shape>"`` of self pair ``i``, e.g. ``gripper/capsule0 vs body/box0``."""
        pair = self.self_pairs[i]
        return f"{self.shapes[pair.first].name} vs {self.shapes[pair.second].name}"

    def self_distances(self, world: list) -> np.ndarray:
        """Distance of every self pair's swollen hulls (m, a lower bound; negative when they overlap); (pairs,)."""
        return np.array([shape_distance(world[p.first], self.shapes[p.first].radius,
                                        world[p.second], self.shapes[p.second].radius) for p in self.self_pairs])

    def separating_planes(self, world: list, backoff: float = 0.0) -> np.ndarray:
        """Per self pair a plane ``(n, d)`` (unit ``n`` from the second shape to the first, m), shape (4, pairs).

        ``n`` lies along the shortest vector between the hulls; ``d`` halves
        the room the pair's rows leave (see the module doc), so the plane
        meets every row when the pair is ``distance + backoff`` apart.
        """
        out = np.zeros((4, len(self.self_pairs)))
        for i, pair in enumerate(self.self_pairs):
            a, b = world[pair.first], world[pair.second]
            n = hull_separation(a, b).normal
            low = float(np.max(b @ n)) + self.shapes[pair.second].radius
            high = float(np.min(a @ n)) - self.shapes[pair.first].radius - pair.distance - backoff
            out[:3, i], out[3, i] = n, 0.5 * (low + high)
        return out


def clearance_spec(robot, contacts, surfaces, distance: float) -> ClearanceSpec:
    """Pairs of every shape with every surface, the feet's own points exempt from their own surface.

    ``contacts`` need ``frame`` and ``surface`` (the name of the surface the
    contact stands on).
    """
    model, collision = robot.model, robot.collision
    by_name = {s.name: i for i, s in enumerate(surfaces)}
    near: dict[tuple[int, int], set] = {}
    for c in contacts:
        if c.surface not in by_name:
            continue
        frame = model.frames[robot.frame_id(c.frame)]
        at = np.array(frame.placement.translation)
        for s, shape in enumerate(collision.shapes):
            if shape.joint != frame.parentJoint:
                continue
            close = np.linalg.norm(shape.joint_points - at, axis=1) <= collision.exempt_radius
            near.setdefault((s, by_name[c.surface]), set()).update(np.flatnonzero(close).tolist())
    pairs = []
    for s, shape in enumerate(collision.shapes):
        for j in range(len(surfaces)):
            points = tuple(p for p in range(len(shape.points)) if p not in near.get((s, j), set()))
            if points:
                pairs.append(ClearancePair(s, j, points))
    return ClearanceSpec(float(distance), collision.shapes, list(surfaces), pairs, collision.self_pairs)


def world_points(robot, q, data=None) -> list[np.ndarray]:
    """World positions of every shape's points at ``q`` (Pinocchio forward kinematics)."""
    data = robot.model.createData() if data is None else data
    pin.forwardKinematics(robot.model, data, np.asarray(q, float))
    return shape_points_world(robot.model, data, robot.collision.shapes)


def smallest_clearance(spec: ClearanceSpec, robot, q) -> tuple[float, str, str]:
    """Smallest pair distance at ``q`` (m) with its link and surface; ``(inf, "", "")`` without pairs."""
    if not spec.pairs:
        return float("inf"), "", ""
    distances = spec.pair_distances(world_points(robot, q))
    i = int(np.argmin(distances))
    pair = spec.pairs[i]
    return float(distances[i]), spec.shapes[pair.shape].link, spec.surfaces[pair.surface].name


def self_shortfall(spec: ClearanceSpec, robot, q) -> tuple[float, float, str]:
    """The self pair furthest below its distance at ``q``: (distance m, required m, label); ``(inf, 0, "")``
    without pairs. Without a shortfall, the pair with the least room."""
    if not spec.self_pairs:
        return float("inf"), 0.0, ""
    distances = spec.self_distances(world_points(robot, q))
    room = distances - np.array([p.distance for p in spec.self_pairs])
    i = int(np.argmin(room))
    return float(distances[i]), spec.self_pairs[i].distance, spec.self_label(i)


def clearance_rows(spec: ClearanceSpec, robot, q, data, margin: float = 0.0):
    """Rows ``n . p - d - radius - clearance - margin`` (m) and their Jacobians (rows, nv) at ``q``.

    Faces of boxes are re-chosen at ``q``. Needs nothing computed on ``data``.
    """
    model = robot.model
    pin.computeJointJacobians(model, data, q)
    world = shape_points_world(model, data, spec.shapes)
    planes = spec.planes_at(world)
    values, jacobians = [], []
    for r, (_, s, p) in enumerate(spec.rows):
        shape = spec.shapes[s]
        point = world[s][p]
        jac = pin.getJointJacobian(model, data, shape.joint, pin.ReferenceFrame.LOCAL_WORLD_ALIGNED)
        offset = point - np.array(data.oMi[shape.joint].translation)
        linear = jac[:3] - pin.skew(offset) @ jac[3:]
        n = planes[:3, r]
        values.append(n @ point - planes[3, r] - margin)
        jacobians.append(n @ linear)
    return np.array(values), np.array(jacobians).reshape(len(values), model.nv)
