"""Independent clearance check for tests: Pinocchio forward kinematics and Coal (hpp-fcl) distances.

The terrain primitives are written here from the task file's own numbers
(floor and ceiling heights, block centres and sizes, slopes), not taken from
brace's terrain module; the distances come from Coal's GJK/EPA and its
half-space routines, not from brace's geometry. Only the collision shapes
(points on a link and a radius, from the plan's ``meta.clearance``) and which
points of a foot are exempt near its own foothold are read from the plan.
"""
from __future__ import annotations

import math

import coal
import numpy as np
import pinocchio as pin


def _halfspace(normal, point):
    n = np.asarray(normal, float) / np.linalg.norm(normal)
    return coal.Halfspace(n, float(n @ np.asarray(point, float))), coal.Transform3s()


def _slope(angle_deg, uphill):
    a = math.radians(angle_deg)
    dx, dy = np.asarray(uphill, float) / np.linalg.norm(uphill)
    return [-math.sin(a) * dx, -math.sin(a) * dy, math.cos(a)]


def terrain_primitives(task_raw: dict) -> dict:
    """{surface name: (coal geometry, transform)} from a task mapping's ``stance.terrain``."""
    terrain = task_raw["stance"]["terrain"]
    kind = terrain["kind"]
    if kind == "flat":
        return {"ground": _halfspace([0, 0, 1], [0, 0, terrain.get("height", 0.0)])}
    if kind == "ceiling":
        return {"floor": _halfspace([0, 0, 1], [0, 0, terrain.get("floor_height", 0.0)]),
                "ceiling": _halfspace([0, 0, -1], [0, 0, terrain["ceiling_height"]])}
    if kind == "ramp":
        return {"ramp": _halfspace(_slope(terrain["slope_deg"], terrain.get("uphill", [1, 0])),
                                   terrain.get("origin", [0, 0, 0]))}
    if kind == "trench":
        c, w, b = terrain.get("center_y", 0.0), terrain.get("bottom_width", 0.0) / 2, terrain.get("bottom_height", 0.0)
        out = {"left": _halfspace(_slope(terrain["slope_deg"], [0, 1]), [0, c + w, b]),
               "right": _halfspace(_slope(terrain["slope_deg"], [0, -1]), [0, c - w, b])}
        if w > 0:
            out["bottom"] = _halfspace([0, 0, 1], [0, c, b])
        return out
    if kind == "blocks":
        floor = terrain.get("floor_height", 0.0)
        out = {"floor": _halfspace([0, 0, 1], [0, 0, floor])}
        for i, block in enumerate(terrain["blocks"]):
            (cx, cy), (lx, ly), top = block["center"], block["size"], block["height"]
            box = coal.Box(lx, ly, top - floor)
            out[f"block{i}"] = (box, coal.Transform3s(np.eye(3), np.array([cx, cy, (top + floor) / 2])))
        return out
    raise ValueError(f"no test primitive for terrain kind {kind}")


def shape_geometry(points: np.ndarray, radius: float, placement: pin.SE3):
    """Coal geometry and transform of the swollen hull of ``points`` (link frame) placed at ``placement``."""
    world = points @ placement.rotation.T + placement.translation
    if len(world) == 1:
        return coal.Sphere(max(radius, 1e-9)), coal.Transform3s(np.eye(3), world[0])
    if len(world) == 2:
        a, b = world
        axis = b - a
        length = float(np.linalg.norm(axis))
        z = axis / length
        x = np.cross(z, [1.0, 0, 0]) if abs(z[0]) < 0.9 else np.cross(z, [0, 1.0, 0])
        x /= np.linalg.norm(x)
        rot = np.column_stack([x, np.cross(z, x), z])
        return coal.Capsule(max(radius, 1e-9), length), coal.Transform3s(rot, (a + b) / 2)
    local = np.asarray(points, float)
    lo, hi = local.min(axis=0), local.max(axis=0)
    if len(local) != 8 or radius > 0:
        raise ValueError("the test knows spheres, capsules and boxes (8 corners, no radius)")
    centre = placement.act((lo + hi) / 2)
    return coal.Box(*(hi - lo)), coal.Transform3s(placement.rotation, centre)


def smallest_clearances(plan, task_raw: dict) -> list[tuple[float, str, str]]:
    """Per knot (smallest distance m, link, surface) by Pinocchio FK and Coal distances."""
    section = plan.meta["clearance"]
    model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
    data = model.createData()
    terrain = terrain_primitives(task_raw)
    shapes = {s["name"]: s for s in section["shapes"]}
    request = coal.DistanceRequest()
    out = []
    for q in plan.q:
        pin.framesForwardKinematics(model, data, q)
        best = (math.inf, "", "")
        for pair in section["pairs"]:
            shape = shapes[pair["shape"]]
            placement = data.oMf[model.getFrameId(shape["link"], pin.FrameType.BODY)]
            points = np.asarray(shape["points"], float)[pair["points"]]
            geom, tf = shape_geometry(points, shape["radius"], placement)
            surface, surface_tf = terrain[pair["surface"]]
            result = coal.DistanceResult()
            distance = coal.distance(surface, surface_tf, geom, tf, request, result)
            if distance < best[0]:
                best = (float(distance), shape["link"], pair["surface"])
        out.append(best)
    return out
