"""Clearance of a plan: how far every collision shape stays from the terrain, knot by knot.

Works from the plan file alone: ``meta.clearance`` carries the required
distance, the terrain's surfaces (planes and boxes), the collision shapes
(points on a link, link frame, with a radius) and the checked (shape, surface)
pairs with their points (a foot's own points are left out against the
surface it stands on). Positions come from Pinocchio's forward kinematics of
the plan's own URDF; distances are computed here from the plan file's
numbers (exact for planes, the best separating face for boxes: a lower
bound), apart from the code that builds the NLP's rows. The plan check
``clearance`` (:mod:`optimizer.analysis.plan_check`) reports them.

A plan without ``meta.clearance`` (written before collision shapes existed)
has nothing to check: :func:`plan_clearance` returns None.

``meta.clearance.self_pairs`` (optional) names pairs of shapes of the robot
that keep a distance from each other; :func:`plan_self_clearance` measures
every pair at every knot: the distance of the two swollen hulls from the
separating direction of their shortest vector
(:mod:`optimizer.robot.separation`, a lower bound that is exact up to
round-off), not from the NLP's separating-plane variables.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pinocchio as pin

from ..robot.separation import shape_distance

TOLERANCE = 1e-9   # m: rounding allowed below the required clearance before a knot fails


def _faces(surface: dict) -> list:
    """Half-spaces ``(n, d)`` (free side ``n . x >= d``) of a plan-file surface: one plane, or a box's top and sides."""
    if surface["kind"] == "plane":
        return [(np.asarray(surface["normal"], float), float(surface["offset"]))]
    lo, hi = np.asarray(surface["lower"], float), np.asarray(surface["upper"], float)
    x, y, z = np.eye(3)
    return [(z, hi[2]), (x, hi[0]), (-x, -lo[0]), (y, hi[1]), (-y, -lo[1])]


def surface_distance(surface: dict, points: np.ndarray, radius: float) -> float:
    """Signed distance (m) of the swollen hull of ``points`` (n, 3) from a plan-file surface."""
    return max(float(np.min(points @ n - d)) for n, d in _faces(surface)) - float(radius)


@dataclass
class KnotClearance:
    """Smallest clearance at one knot: distance (m, negative inside), link and surface."""

    knot: int
    distance: float
    link: str
    surface: str


@dataclass
class PlanClearance:
    """Per-knot smallest clearance of a plan and the distance it must keep (m)."""

    required: float
    knots: list

    @property
    def smallest(self) -> KnotClearance:
        return min(self.knots, key=lambda k: k.distance)

    @property
    def penetrating(self) -> list:
        """Knots where some shape is inside a surface (distance < 0)."""
        return [k for k in self.knots if k.distance < 0.0]

    @property
    def short(self) -> list:
        """Knots closer to the terrain than required."""
        return [k for k in self.knots if k.distance < self.required - TOLERANCE]

    @property
    def passed(self) -> bool:
        return not self.short

    def lines(self) -> list[str]:
        """Plain-text report: the smallest clearance and every knot that falls short."""
        low = self.smallest
        head = (f"clearance: smallest {low.distance * 100:.1f} cm ({low.link} vs {low.surface}, knot {low.knot}); "
                f"required {self.required * 100:.1f} cm")
        out = [head + (" - ok" if self.passed else " - FAILED")]
        for k in self.short:
            what = "inside" if k.distance < 0 else "closer than required to"
            out.append(f"  knot {k.knot}: {k.link} {what} {k.surface} ({k.distance * 100:.1f} cm)")
        return out


def plan_clearance(plan) -> PlanClearance | None:
    """Smallest clearance at every knot of ``plan`` (None when its meta has no clearance section)."""
    section = plan.meta.get("clearance")
    if not section:
        return None
    model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
    data = model.createData()
    shapes = {s["name"]: s for s in section["shapes"]}
    ids = {name: model.getFrameId(s["link"], pin.FrameType.BODY) for name, s in shapes.items()}
    by_surface = {s["name"]: s for s in section["surfaces"]}
    knots = []
    for k, q in enumerate(plan.q):
        pin.framesForwardKinematics(model, data, q)
        best = KnotClearance(k, float("inf"), "", "")
        for pair in section["pairs"]:
            shape = shapes[pair["shape"]]
            placement = data.oMf[ids[pair["shape"]]]
            local = np.asarray(shape["points"], float)[pair["points"]]
            world = local @ np.array(placement.rotation).T + np.array(placement.translation)
            distance = surface_distance(by_surface[pair["surface"]], world, shape["radius"])
            if distance < best.distance:
                best = KnotClearance(k, distance, shape["link"], pair["surface"])
        knots.append(best)
    return PlanClearance(float(section["distance"]), knots)


@dataclass
class KnotSelfClearance:
    """The self pair with the least room at one knot: its distance and the one required (m), its shapes."""

    knot: int
    distance: float
    required: float
    pair: str

    @property
    def room(self) -> float:
        return self.distance - self.required


@dataclass
class PlanSelfClearance:
    """Per knot the self pair with the least room."""

    knots: list

    @property
    def smallest(self) -> KnotSelfClearance:
        return min(self.knots, key=lambda k: k.room)

    @property
    def short(self) -> list:
        """Knots where some pair is closer than its distance."""
        return [k for k in self.knots if k.room < -TOLERANCE]

    @property
    def passed(self) -> bool:
        return not self.short

    def lines(self) -> list[str]:
        """Plain-text report: the pair with the least room and every knot that falls short."""
        low = self.smallest
        head = (f"self clearance: least room {low.room * 100:.1f} cm ({low.pair} {low.distance * 100:.1f} cm apart "
                f"at knot {low.knot}, {low.required * 100:.1f} cm required)")
        out = [head + (" - ok" if self.passed else " - FAILED")]
        for k in self.short:
            what = "overlap" if k.distance < 0 else "closer than required"
            out.append(f"  knot {k.knot}: {k.pair} {what} ({k.distance * 100:.1f} cm)")
        return out


def _world(model, data, shape: dict) -> np.ndarray:
    """World positions (n, 3) of a plan-file shape's points; needs ``framesForwardKinematics`` done, m."""
    placement = data.oMf[model.getFrameId(shape["link"], pin.FrameType.BODY)]
    return np.asarray(shape["points"], float) @ np.array(placement.rotation).T + np.array(placement.translation)


def plan_self_clearance(plan) -> PlanSelfClearance | None:
    """The self pair with the least room at every knot of ``plan`` (None when the plan names no self pair)."""
    section = plan.meta.get("clearance") or {}
    pairs = section.get("self_pairs") or []
    if not pairs:
        return None
    model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
    data = model.createData()
    shapes = {s["name"]: s for s in section["shapes"]}
    knots = []
    for k, q in enumerate(plan.q):
        pin.framesForwardKinematics(model, data, q)
        found = []
        for pair in pairs:
            a, b = shapes[pair["first"]], shapes[pair["second"]]
            distance = shape_distance(_world(model, data, a), a["radius"], _world(model, data, b), b["radius"])
            found.append(KnotSelfClearance(k, distance, float(pair["distance"]), f"{a['name']} vs {b['name']}"))
        knots.append(min(found, key=lambda x: x.room))
    return PlanSelfClearance(knots)


def clearance_meta(spec) -> dict:
    """The ``meta.clearance`` mapping of a task's :class:`~optimizer.problem.clearance.ClearanceSpec`."""
    return {
        "distance": float(spec.distance),
        "surfaces": [s.as_dict() for s in spec.surfaces],
        "shapes": [s.as_dict() for s in spec.shapes],
        "pairs": [{"shape": spec.shapes[p.shape].name, "surface": spec.surfaces[p.surface].name,
                   "points": list(p.points)} for p in spec.pairs],
        "self_pairs": [{"first": spec.shapes[p.first].name, "second": spec.shapes[p.second].name,
                        "distance": float(p.distance)} for p in spec.self_pairs],
    }
