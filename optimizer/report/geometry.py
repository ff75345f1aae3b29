"""What a plan looks like in space: the robot's skeleton, its hand, the terrain.

Everything comes from the plan file: the URDF in ``meta`` (forward
kinematics by Pinocchio) and the task as loaded (``meta["task"]``), whose
terrain mapping is rebuilt by the problem layer's generators. Positions are
world frame, m.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pinocchio as pin

from ..errors import TaskError
from ..problem.friction import tangent_basis
from ..problem.terrain import (BlocksTerrain, CeilingTerrain, FlatTerrain, RampTerrain, TrenchTerrain,
                               build_terrain)
from ..schema import Fields


@dataclass
class Pose:
    """The robot at one knot, world frame [m].

    Attributes
    ----------
    links : ndarray, shape (S, 2, 3)
        Segments between joint origins (and from a joint to the feet and hand).
    body : ndarray, shape (B, 3)
        Closed outline through the hip joints (the trunk).
    feet : ndarray, shape (nc, 3)
        Contact points.
    hand : ndarray, shape (3,)
    """

    links: np.ndarray
    body: np.ndarray
    feet: np.ndarray
    hand: np.ndarray


def hand_frame(meta: dict) -> str:
    """The frame drawn as the hand: the first hand target's ``frame`` if the task names one,
    else the first disturbance point's frame (both default to the robot's hand frame)."""
    for target in (meta.get("task") or {}).get("hand_targets") or []:
        if isinstance(target, dict) and isinstance(target.get("frame"), str):
            return target["frame"]
    return meta["disturbances"][0]["frame"]


class Skeleton:
    """Forward kinematics of a plan's robot, as segments to draw."""

    def __init__(self, meta: dict):
        self.model = pin.buildModelFromXML(meta["urdf"], pin.JointModelFreeFlyer())
        self.data = self.model.createData()
        self.feet_ids = [self.model.getFrameId(name) for name in meta["contact_frames"]]
        self.hand_id = self.model.getFrameId(hand_frame(meta))
        model = self.model
        self.hips = [j for j in range(2, model.njoints) if model.parents[j] == 1]
        self.leg_hips = [j for j in self.hips if any(self._descends(model.frames[f].parentJoint, j)
                                                     for f in self.feet_ids)]

    def _descends(self, joint: int, ancestor: int) -> bool:
        while joint > 0:
            if joint == ancestor:
                return True
            joint = self.model.parents[joint]
        return False

    def pose(self, q) -> Pose:
        """Segments, trunk outline, feet and hand at configuration ``q`` (nq,)."""
        model, data = self.model, self.data
        pin.forwardKinematics(model, data, np.asarray(q, float))
        pin.updateFramePlacements(model, data)
        origin = [data.oMi[j].translation.copy() for j in range(model.njoints)]
        links = [(origin[model.parents[j]], origin[j]) for j in range(2, model.njoints) if model.parents[j] > 1]
        tips = self.feet_ids + [self.hand_id]
        links += [(origin[model.frames[f].parentJoint], data.oMf[f].translation.copy()) for f in tips]
        base = data.oMi[1]
        hips = sorted(self.leg_hips or self.hips, key=lambda j: _angle_in_base(base, origin[j]))
        body = np.array([origin[j] for j in hips] + [origin[hips[0]]]) if hips else origin[1][None]
        links += [(origin[1], origin[j]) for j in self.hips if j not in self.leg_hips]
        return Pose(np.array(links).reshape(-1, 2, 3), body,
                    np.array([data.oMf[f].translation.copy() for f in self.feet_ids]).reshape(-1, 3),
                    data.oMf[self.hand_id].translation.copy())

    def hand_path(self, q) -> np.ndarray:
        """Hand positions (K, 3) [m] along configurations ``q`` (K, nq)."""
        out = []
        for qk in np.asarray(q, float):
            pin.forwardKinematics(self.model, self.data, qk)
            out.append(pin.updateFramePlacement(self.model, self.data, self.hand_id).translation.copy())
        return np.array(out)


def _angle_in_base(base: pin.SE3, point) -> float:
    local = base.rotation.T @ (np.asarray(point) - base.translation)
    return float(np.arctan2(local[1], local[0]))


@dataclass
class Surface:
    """A flat piece of terrain: a polygon (n, 3) [m, world] and its name."""

    corners: np.ndarray
    name: str


@dataclass
class Target:
    """A hand target: position (3,) [m], time window [s], label."""

    position: np.ndarray
    t_start: float
    t_end: float
    label: str


def hand_targets(meta: dict) -> list[Target]:
    """The task's hand targets as written in the plan's ``meta["task"]``."""
    out = []
    for i, item in enumerate((meta.get("task") or {}).get("hand_targets") or []):
        window = item.get("window") or [item.get("time", 0.0)] * 2
        out.append(Target(np.array(item["position"], float), float(window[0]), float(window[1]),
                          str(item.get("label") or f"target {i + 1}")))
    return out


def terrain_surfaces(meta: dict, extent) -> list[Surface]:
    """Terrain pieces to draw over ``extent`` = (xmin, xmax, ymin, ymax) [m].

    A task with a terrain generator draws its surfaces; a task with explicit
    contacts draws a small square under each foothold, normal to its surface.
    """
    stance = (meta.get("task") or {}).get("stance") or {}
    if isinstance(stance.get("terrain"), dict):
        terrain = build_terrain(Fields(stance["terrain"], Path("plan meta"), "task.stance.terrain", TaskError))
        return _DRAWERS[type(terrain)](terrain, extent)
    normals = np.array(meta["contact_normals"], float).reshape(-1, 3)
    footholds = [np.array(c["position"], float) for c in stance.get("contacts") or [] if "position" in c]
    return [Surface(_square(p, n, 0.08), f"contact {i}") for i, (p, n) in enumerate(zip(footholds, normals))]


def _square(centre, normal, half: float) -> np.ndarray:
    t1, t2 = tangent_basis(normal)
    return np.array([centre + half * (a * t1 + b * t2) for a, b in ((-1, -1), (1, -1), (1, 1), (-1, 1))])


def _rectangle(x0, x1, y0, y1, z) -> np.ndarray:
    return np.array([[x0, y0, z], [x1, y0, z], [x1, y1, z], [x0, y1, z]], float)


def _flat(terrain: FlatTerrain, extent) -> list[Surface]:
    return [Surface(_rectangle(*extent, terrain.height), "ground")]


def _blocks(terrain: BlocksTerrain, extent) -> list[Surface]:
    out = [Surface(_rectangle(*extent, terrain.floor_height), "floor")]
    for i, block in enumerate(terrain.blocks):
        (cx, cy), (hx, hy), top = block["center"], block["half"], block["height"]
        x0, x1, y0, y1 = cx - hx, cx + hx, cy - hy, cy + hy
        out.append(Surface(_rectangle(x0, x1, y0, y1, top), f"block{i}"))
        base = terrain.floor_height
        for a, b in (((x0, y0), (x1, y0)), ((x1, y0), (x1, y1)), ((x1, y1), (x0, y1)), ((x0, y1), (x0, y0))):
            out.append(Surface(np.array([[*a, base], [*b, base], [*b, top], [*a, top]], float), f"block{i} side"))
    return out


def _ramp(terrain: RampTerrain, extent) -> list[Surface]:
    x0, x1, y0, y1 = extent
    corners = [(x0, y0), (x1, y0), (x1, y1), (x0, y1)]
    return [Surface(np.array([[x, y, terrain.height((x, y))] for x, y in corners]), "ramp")]


def _trench(terrain: TrenchTerrain, extent) -> list[Surface]:
    x0, x1, y0, y1 = extent
    c, h, z = terrain.center_y, terrain.half_width, terrain.bottom
    rise = np.tan(terrain.angle)
    top_left, top_right = max(y1, c + h + 0.05), min(y0, c - h - 0.05)
    out = [Surface(np.array([[x0, c + h, z], [x1, c + h, z], [x1, top_left, z + rise * (top_left - c - h)],
                             [x0, top_left, z + rise * (top_left - c - h)]]), "left"),
           Surface(np.array([[x0, c - h, z], [x1, c - h, z], [x1, top_right, z + rise * (c - h - top_right)],
                             [x0, top_right, z + rise * (c - h - top_right)]]), "right")]
    if h > 0.0:
        out.append(Surface(_rectangle(x0, x1, c - h, c + h, z), "bottom"))
    return out


def _ceiling(terrain: CeilingTerrain, extent) -> list[Surface]:
    return [Surface(_rectangle(*extent, terrain.floor), "floor"), Surface(_rectangle(*extent, terrain.ceiling), "ceiling")]


_DRAWERS = {FlatTerrain: _flat, BlocksTerrain: _blocks, RampTerrain: _ramp, TrenchTerrain: _trench,
            CeilingTerrain: _ceiling}


def scene_extent(points, margin: float = 0.25) -> tuple[float, float, float, float]:
    """(xmin, xmax, ymin, ymax) [m] around ``points`` (n, 3) with ``margin`` on every side."""
    p = np.asarray(points, float).reshape(-1, 3)
    return (p[:, 0].min() - margin, p[:, 0].max() + margin, p[:, 1].min() - margin, p[:, 1].max() + margin)
