"""The task's terrain as solid shapes a physics engine can collide with.

The shapes come from the one description of every terrain kind's geometry,
its ``geometry()`` (:mod:`optimizer.problem.terrain`,
:mod:`optimizer.problem.geometry`), the same planes and boxes the clearance
rows keep away from: a plane becomes a half-space (solid on the side
opposite its normal), a box a solid box whose bottom reaches
``BLOCK_FOOTING`` lower (so a block standing on the floor overlaps it and
no seam opens between the two).

A task with explicit contacts (no terrain) gets one pad per foothold (per
stance interval): a box 0.3 m square and 0.05 m thick whose top face holds
the foothold, normal to the interval's surface normal. No MuJoCo here: shapes are plain data, world frame, m.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import TaskError
from ..problem.friction import tangent_basis
from ..problem.terrain import build_terrain
from ..schema import Fields
from .stances import stance_intervals

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

    def distance(self, point) -> float:
        """Signed distance [m] of ``point`` (world) from the solid: positive outside, negative inside."""
        local = self.rotation.T @ (np.asarray(point, float) - self.position)
        if self.kind == "plane":
            return float(local[2])
        outside = np.abs(local) - self.half_size
        return float(np.linalg.norm(np.maximum(outside, 0.0)) + min(outside.max(), 0.0))


def frame_of_normal(normal) -> np.ndarray:
    """Rotation whose third column is the unit ``normal`` (first two: its tangents)."""
    n = np.asarray(normal, float) / np.linalg.norm(normal)
    t1, t2 = tangent_basis(n)
    return np.column_stack([t1, t2, n])


def plane(name: str, point, normal) -> Surface:
    return Surface(name, "plane", np.asarray(point, float), frame_of_normal(normal), np.zeros(3))


def solid(surface) -> Surface:
    """The solid of one terrain surface (:class:`optimizer.problem.geometry.Surface`, world frame, m)."""
    if surface.kind == "plane":
        return plane(surface.name, surface.offset * surface.normal, surface.normal)
    lower = np.array(surface.lower, float)
    lower[2] = min(lower[2], surface.upper[2]) - BLOCK_FOOTING
    return Surface(surface.name, "box", 0.5 * (lower + surface.upper), np.eye(3), 0.5 * (surface.upper - lower))


def terrain_surfaces(terrain_mapping: dict, file) -> list:
    """Shapes of a task's ``stance.terrain`` mapping (validated as in a task file)."""
    terrain = build_terrain(Fields(terrain_mapping, file, "stance.terrain", TaskError))
    return [solid(surface) for surface in terrain.geometry()]


def contact_pads(stances) -> list:
    """One box under the foothold of every stance interval (explicit contacts, no terrain).

    ``stances``: :class:`~optimizer.simulation.stances.Stance` (foothold and normal, world frame).
    """
    out = []
    half = 0.5 * np.array(PAD_SIZE)
    for i, s in enumerate(stances):
        rot = frame_of_normal(s.normal)
        out.append(Surface(f"pad{i}", "box", np.asarray(s.foothold, float) - half[2] * rot[:, 2], rot, half))
    return out


def surface_under(surfaces, foothold) -> int:
    """Index of the solid of ``surfaces`` whose boundary lies nearest ``foothold`` [m, world]."""
    return int(np.argmin([abs(s.distance(foothold)) for s in surfaces]))


def scene_surfaces(plan, task=None) -> tuple[list, str]:
    """Shapes for ``plan`` and where they came from.

    ``task`` (a loaded :class:`~optimizer.problem.task.Task`) takes precedence;
    otherwise the task mapping stored in the plan's ``meta.task``; with no
    terrain in either, one pad under every stance interval's foothold.
    """
    if task is not None:
        stance, file = task.raw.get("stance", {}), task.path
    else:
        stance, file = (plan.meta.get("task") or {}).get("stance", {}), "plan meta.task"
    if isinstance(stance, dict) and isinstance(stance.get("terrain"), dict):
        return terrain_surfaces(stance["terrain"], file), f"terrain '{stance['terrain'].get('kind')}' of {file}"
    return contact_pads(stance_intervals(plan)), "one pad per foothold (no terrain in the task)"
