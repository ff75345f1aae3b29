"""The task's terrain as solid shapes a physics engine can collide with.

Every terrain kind of :mod:`optimizer.problem.terrain` is a union of
half-spaces (a plane, with solid below it) and boxes:

``flat``     one plane;
``blocks``   the floor plane plus one box per block, its top face at the
             block's height and its bottom 0.1 m under the floor;
``ramp``     one inclined plane through ``origin``;
``trench``   the bottom plane and the two wall planes (each wall plane lies
             under the other wall and under the bottom, so the union is the V);
``ceiling``  the floor plane and the ceiling plane, facing down.

A task with explicit contacts (no terrain) gets one pad per contact: a box
0.3 m square and 0.05 m thick whose top face holds the foothold, normal to
the contact's normal. No MuJoCo here: shapes are plain data, world frame, m.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import TaskError
from ..problem.friction import tangent_basis
from ..problem.terrain import UP, build_terrain, slope_normal
from ..schema import Fields

BLOCK_FOOTING = 0.1  # m a block reaches below the floor, so block and floor overlap
PAD_SIZE = (0.3, 0.3, 0.05)  # m, length, width and thickness of a pad under an explicit contact


@dataclass
class Surface:
    """A solid shape of the scene.

    Attributes
    ----------
    name : str
    kind : str
        ``"plane"`` (solid on the side opposite the normal) or ``"box"``.
    position : ndarray, shape (3,)
        A point of the plane, or the box centre, world frame [m].
    rotation : ndarray, shape (3, 3)
        Columns are the shape's axes in the world; for a plane the third
        column is its unit normal (out of the solid).
    half_size : ndarray, shape (3,)
        Box half lengths along its axes [m]; unused for a plane.
    """

    name: str
    kind: str
    position: np.ndarray
    rotation: np.ndarray
    half_size: np.ndarray


def frame_of_normal(normal) -> np.ndarray:
    """Rotation whose third column is the unit ``normal`` (first two: its tangents)."""
    n = np.asarray(normal, float) / np.linalg.norm(normal)
    t1, t2 = tangent_basis(n)
    return np.column_stack([t1, t2, n])


def plane(name: str, point, normal) -> Surface:
    return Surface(name, "plane", np.asarray(point, float), frame_of_normal(normal), np.zeros(3))


def _flat(t) -> list:
    return [plane("ground", [0.0, 0.0, t.height], UP)]


def _blocks(t) -> list:
    out = [plane("floor", [0.0, 0.0, t.floor_height], UP)]
    bottom = t.floor_height - BLOCK_FOOTING
    for i, b in enumerate(t.blocks):
        low = min(bottom, b["height"] - BLOCK_FOOTING)
        centre = np.array([b["center"][0], b["center"][1], 0.5 * (b["height"] + low)])
        half = np.array([b["half"][0], b["half"][1], 0.5 * (b["height"] - low)])
        out.append(Surface(f"block{i}", "box", centre, np.eye(3), half))
    return out


def _ramp(t) -> list:
    return [plane("ramp", t.origin, slope_normal(t.angle, t.uphill))]


def _trench(t) -> list:
    edge = t.half_width
    return [plane("bottom", [0.0, t.center_y, t.bottom], UP),
            plane("left", [0.0, t.center_y + edge, t.bottom], slope_normal(t.angle, (0.0, 1.0))),
            plane("right", [0.0, t.center_y - edge, t.bottom], slope_normal(t.angle, (0.0, -1.0)))]


def _ceiling(t) -> list:
    return [plane("floor", [0.0, 0.0, t.floor], UP), plane("ceiling", [0.0, 0.0, t.ceiling], -UP)]


SURFACES = {"flat": _flat, "blocks": _blocks, "ramp": _ramp, "trench": _trench, "ceiling": _ceiling}


def terrain_surfaces(terrain_mapping: dict, file) -> list:
    """Shapes of a task's ``stance.terrain`` mapping (validated as in a task file)."""
    fields = Fields(terrain_mapping, file, "stance.terrain", TaskError)
    terrain = build_terrain(fields)
    kind = terrain_mapping["kind"]
    if kind not in SURFACES:  # pragma: no cover - a terrain kind added without its shapes
        raise TaskError(file, "stance.terrain.kind", "a terrain kind the simulation can build: "
                        + ", ".join(SURFACES), kind)
    return SURFACES[kind](terrain)


def contact_pads(footholds, normals) -> list:
    """One box per contact under its foothold (explicit contacts, no terrain)."""
    out = []
    half = 0.5 * np.array(PAD_SIZE)
    for c, (p, n) in enumerate(zip(footholds, normals)):
        rot = frame_of_normal(n)
        out.append(Surface(f"pad{c}", "box", np.asarray(p, float) - half[2] * rot[:, 2], rot, half))
    return out


def scene_surfaces(plan, task=None) -> tuple[list, str]:
    """Shapes for ``plan`` and where they came from.

    ``task`` (a loaded :class:`~optimizer.problem.task.Task`) takes precedence;
    otherwise the task mapping stored in the plan's ``meta.task``; with no
    terrain in either, one pad per contact at the plan's first footholds.
    """
    if task is not None:
        stance, file = task.raw.get("stance", {}), task.path
    else:
        stance, file = (plan.meta.get("task") or {}).get("stance", {}), "plan meta.task"
    if isinstance(stance, dict) and isinstance(stance.get("terrain"), dict):
        return terrain_surfaces(stance["terrain"], file), f"terrain '{stance['terrain'].get('kind')}' of {file}"
    normals = np.array(plan.meta["contact_normals"], float).reshape(-1, 3)
    return contact_pads(plan.contact_targets[0], normals), "one pad per contact (no terrain in the task)"
