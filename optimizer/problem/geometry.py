"""Terrain surfaces as geometry: half-spaces and boxes, with signed distances.

A :class:`Surface` is either a ``plane`` (the free space is the half-space
``n . x >= d``, ``n`` the unit normal pointing into the free space, ``d`` in
m) or a ``box`` (an axis-aligned solid block, corners ``lower`` and ``upper``
in m, world frame, that the robot must stay out of). The distances here work
on shapes given as points swollen by a radius (the convex hull of the points
plus a ball, :mod:`optimizer.robot.collision`):

- to a plane: ``min_i (n . p_i - d) - radius``, exact;
- to a box: ``max over its faces f of min_i (n_f . p_i - d_f) - radius``: the
  best separating face plane (top and four sides; the bottom stands on the
  floor). A sound lower bound of the true distance (exact when one face
  separates, smaller near edges and corners), negative inside.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class Surface:
    """A terrain surface: ``plane`` (normal, offset) or ``box`` (lower, upper). Units m, world frame."""

    name: str
    kind: str
    normal: np.ndarray = field(default_factory=lambda: np.zeros(3))
    offset: float = 0.0
    lower: np.ndarray = field(default_factory=lambda: np.zeros(3))
    upper: np.ndarray = field(default_factory=lambda: np.zeros(3))

    @staticmethod
    def plane(name: str, normal, point) -> "Surface":
        """The plane through ``point`` (3,) with free side along ``normal`` (3,), normalized here."""
        n = np.asarray(normal, float) / np.linalg.norm(normal)
        return Surface(name, "plane", normal=n, offset=float(n @ np.asarray(point, float)))

    @staticmethod
    def box(name: str, lower, upper) -> "Surface":
        return Surface(name, "box", lower=np.asarray(lower, float), upper=np.asarray(upper, float))

    def faces(self) -> list[tuple[np.ndarray, float]]:
        """Half-spaces ``(n, d)`` whose free side is outside the surface: one for a plane, five for a box."""
        if self.kind == "plane":
            return [(self.normal, self.offset)]
        lo, hi = self.lower, self.upper
        axes = np.eye(3)
        return [(axes[2], hi[2]), (axes[0], hi[0]), (-axes[0], -lo[0]), (axes[1], hi[1]), (-axes[1], -lo[1])]

    def face_distances(self, points) -> np.ndarray:
        """Per face, the smallest ``n . p - d`` over ``points`` (n, 3), m; shape (faces,)."""
        points = np.atleast_2d(points)
        return np.array([float(np.min(points @ n - d)) for n, d in self.faces()])

    def best_face(self, points) -> int:
        """Index (into :meth:`faces`) of the face that separates ``points`` best."""
        return int(np.argmax(self.face_distances(points)))

    def distance(self, points, radius: float = 0.0) -> float:
        """Signed distance of the swollen hull of ``points`` (n, 3) from the surface (m; see module doc)."""
        return float(np.max(self.face_distances(points))) - float(radius)

    def point_distance(self, point) -> float:
        """Exact signed distance of one point (3,) from the surface, m (negative inside a box)."""
        p = np.asarray(point, float)
        if self.kind == "plane":
            return float(p @ self.normal - self.offset)
        outside = np.maximum(np.maximum(self.lower - p, p - self.upper), 0.0)
        if np.any(outside > 0):
            return float(np.linalg.norm(outside))
        return -float(np.min(np.minimum(p - self.lower, self.upper - p)))

    def as_dict(self) -> dict:
        """Plan-file form."""
        if self.kind == "plane":
            return {"name": self.name, "kind": "plane", "normal": self.normal.tolist(), "offset": self.offset}
        return {"name": self.name, "kind": "box", "lower": self.lower.tolist(), "upper": self.upper.tolist()}

    @staticmethod
    def from_dict(data: dict) -> "Surface":
        if data["kind"] == "plane":
            return Surface(str(data["name"]), "plane", normal=np.asarray(data["normal"], float),
                           offset=float(data["offset"]))
        return Surface.box(str(data["name"]), data["lower"], data["upper"])


def ground_planes(contacts, tolerance: float = 1e-3) -> tuple[list[Surface], dict[str, str]]:
    """Ground planes of explicit contacts: one plane per distinct (normal, foothold plane).

    A plane is kept only when every foothold lies on or above it (within
    ``tolerance`` m): a plane under one foot that cuts through another foot's
    surface is not a surface of the scene. Returns the surfaces and the
    surface name of each contact frame (the plane it stands on).
    """
    groups: list[tuple[Surface, list[str]]] = []
    for c in contacts:
        plane = Surface.plane("", c.normal, c.foothold)
        for surface, frames in groups:
            if np.allclose(surface.normal, plane.normal, atol=1e-6) and abs(surface.offset - plane.offset) < 1e-6:
                frames.append(c.frame)
                break
        else:
            groups.append((plane, [c.frame]))
    holds = np.array([c.foothold for c in contacts])
    surfaces, names = [], {}
    for plane, frames in groups:
        name = "ground" if len(groups) == 1 else f"ground@{frames[0]}"
        names.update({frame: name for frame in frames})
        if np.all(holds @ plane.normal - plane.offset >= -tolerance):
            surfaces.append(Surface("ground" if len(groups) == 1 else name, "plane", plane.normal, plane.offset))
    return surfaces, names
