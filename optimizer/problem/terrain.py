"""Terrain generators: where a foot placed at (x, y) lands, and on what surface.

A terrain is built from the ``stance.terrain`` mapping of a task file. Its
kind picks a class from :data:`TERRAINS`; the class reads its own parameters
and answers :meth:`Terrain.place`: for a foot's horizontal position (x, y), m,
world frame, and optionally the name of the surface it should press on, the
foothold (3,) [m, world], the unit surface normal (3,) pointing into the robot
(out of the surface) and the friction coefficient of that surface.

Kinds
-----
``flat``     one horizontal plane.
``blocks``   a floor plus axis-aligned blocks with flat tops (a stair landing);
             a foot may also brace on a block's vertical side face
             (:meth:`BlocksTerrain.place_side`).
``ramp``     one inclined plane of given slope angle and uphill direction.
``trench``   two facing slopes along the x axis (left wall at +y, right at -y),
             optionally with a flat bottom between them.
``ceiling``  a floor plus a horizontal ceiling; feet named onto the ceiling
             press up against it, their normal points down.

Every parameter and every friction value is validated; a mistake raises
``TaskError`` naming the task file and the field.

:meth:`Terrain.geometry` gives the same surfaces as geometry for clearance
(:mod:`optimizer.problem.geometry`): planes whose free side faces the robot,
and solid boxes (the blocks).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import TaskError
from ..schema import Fields
from .geometry import Surface

UP = np.array([0.0, 0.0, 1.0])
DOWN = np.array([0.0, 0.0, -1.0])


@dataclass
class Placement:
    """Where a foot lands.

    Attributes
    ----------
    foothold : ndarray, shape (3,)
        Contact point, m, world frame.
    normal : ndarray, shape (3,)
        Unit surface normal, world frame, pointing into the robot.
    friction : float
        Coulomb friction coefficient of the surface.
    surface : str
        Name of the surface the foot landed on.
    """

    foothold: np.ndarray
    normal: np.ndarray
    friction: float
    surface: str


def read_friction(fields: Fields, surfaces, default=None) -> dict:
    """Friction per surface: one number for all, or a mapping surface -> number."""
    value = fields.raw("friction", default)
    if isinstance(value, dict):
        sub = fields.sub("friction")
        sub.allow_only(surfaces)
        return {name: sub.number(name, lo=0.0, lo_open=True) for name in surfaces}
    mu = fields.number("friction", default, lo=0.0, lo_open=True)
    return {name: mu for name in surfaces}


def slope_normal(angle: float, uphill) -> np.ndarray:
    """Unit normal of a plane rising at ``angle`` rad along horizontal unit ``uphill`` (2,)."""
    dx, dy = uphill
    return np.array([-math.sin(angle) * dx, -math.sin(angle) * dy, math.cos(angle)])


class Terrain:
    """Base class: subclasses set ``surfaces`` and ``EXAMPLE`` and implement ``_place``.

    ``EXAMPLE`` is a valid ``stance.terrain`` mapping of the kind (the
    contract tests run every registered kind on its example).
    """

    surfaces: tuple = ()
    EXAMPLE: dict = {}

    def __init__(self, fields: Fields):
        self.fields = fields

    def place(self, xy, surface: str | None, field: str) -> Placement:
        """Foothold, normal and friction for a foot at horizontal ``xy`` (2,), m.

        ``surface`` names the surface to land on (None: the one under ``xy``);
        ``field`` is the task-file field of the foot, used in error messages.
        """
        if surface is not None and surface not in self.surfaces:
            raise TaskError(self.fields.file, field + ".surface",
                            "one of the surfaces " + ", ".join(self.surfaces), surface)
        return self._place(np.asarray(xy, dtype=float), surface, field)

    def _place(self, xy, surface, field) -> Placement:  # pragma: no cover - abstract
        raise NotImplementedError

    def place_side(self, surface: str, side: str, at, field: str) -> Placement:
        """A foothold on a vertical side face; only terrains with blocks have them."""
        raise TaskError(self.fields.file, field + ".side", "a terrain with blocks (kind: blocks) for a foothold "
                        "on a side face", f"kind {self.fields.raw('kind')}")

    def geometry(self) -> list[Surface]:  # pragma: no cover - abstract
        """The terrain's surfaces as half-spaces and boxes, named as in ``surfaces``."""
        raise NotImplementedError


class FlatTerrain(Terrain):
    """One horizontal plane at ``height`` (m, default 0) with one ``friction``."""

    surfaces = ("ground",)

    EXAMPLE = {"kind": "flat", "height": 0.1, "friction": 0.7}

    def __init__(self, fields: Fields):
        super().__init__(fields)
        fields.allow_only({"kind", "height", "friction"})
        self.height = fields.number("height", 0.0)
        self.friction = read_friction(fields, self.surfaces)

    def _place(self, xy, surface, field) -> Placement:
        return Placement(np.array([xy[0], xy[1], self.height]), UP.copy(), self.friction["ground"], "ground")

    def geometry(self) -> list[Surface]:
        return [Surface.plane("ground", UP, [0.0, 0.0, self.height])]


class BlocksTerrain(Terrain):
    """A floor at ``floor_height`` plus axis-aligned blocks with flat tops.

    Each block: ``center`` [x, y] m, ``size`` [length x, width y] m, ``height``
    of its top face (m), optional ``friction``. A foot lands on the highest
    top under it, else on the floor. Feet closer than ``edge_clearance``
    (m, default 0.03) to a block edge are rejected: a foot on an edge has no
    well-defined surface.
    """

    EXAMPLE = {"kind": "blocks", "friction": 0.8,
               "blocks": [{"center": [0.5, 0.0], "size": [0.4, 2.0], "height": 0.2}]}

    def __init__(self, fields: Fields):
        super().__init__(fields)
        fields.allow_only({"kind", "floor_height", "friction", "blocks", "edge_clearance"})
        self.floor_height = fields.number("floor_height", 0.0)
        self.floor_friction = fields.number("friction", lo=0.0, lo_open=True)
        self.clearance = fields.number("edge_clearance", 0.03, lo=0.0)
        blocks = fields.raw("blocks")
        if not isinstance(blocks, list) or not blocks:
            fields.fail("blocks", "a non-empty list of blocks", blocks)
        self.blocks = [self._read_block(Fields(b, fields.file, fields.at(f"blocks[{i}]"), TaskError))
                       for i, b in enumerate(blocks)]
        self.surfaces = ("floor",) + tuple(f"block{i}" for i in range(len(self.blocks)))

    def _read_block(self, block: Fields) -> dict:
        block.allow_only({"center", "size", "height", "friction"})
        size = block.vector("size", 2)
        if np.any(size <= 0):
            block.fail("size", "two positive lengths [x, y] in m", size.tolist())
        return {"center": block.vector("center", 2), "half": size / 2, "height": block.number("height"),
                "friction": block.number("friction", self.floor_friction, lo=0.0, lo_open=True)}

    def _edge_distance(self, block: dict, xy) -> float:
        """Signed distance from ``xy`` to the block's outline (positive inside), m."""
        return float(np.min(block["half"] - np.abs(xy - block["center"])))

    def _place(self, xy, surface, field) -> Placement:
        under = []
        for i, block in enumerate(self.blocks):
            distance = self._edge_distance(block, xy)
            if abs(distance) < self.clearance:
                raise TaskError(self.fields.file, field, f"a foot at least {self.clearance} m from every block edge",
                                f"{abs(distance):.3f} m from the edge of block{i}")
            if distance > 0:
                under.append(i)
        best = max(under, key=lambda i: self.blocks[i]["height"], default=None)
        name = "floor" if best is None else f"block{best}"
        if surface is not None and surface != name:
            raise TaskError(self.fields.file, field, f"a position on {surface}", f"a position on {name}")
        if best is None:
            return Placement(np.array([xy[0], xy[1], self.floor_height]), UP.copy(), self.floor_friction, name)
        block = self.blocks[best]
        return Placement(np.array([xy[0], xy[1], block["height"]]), UP.copy(), block["friction"], name)

    def place_side(self, surface: str, side: str, at, field: str) -> Placement:
        """A foothold on a vertical side face of a block (a wall to brace against).

        ``surface`` names the block (``block<i>``); ``side`` its face: ``+x``,
        ``-x``, ``+y`` or ``-y`` (the face's outward normal, which points into
        the robot); ``at`` (2,) m the point on the face: its horizontal world
        coordinate along the face (y for an x face, x for a y face) and its
        height z. The point must lie on the face at least ``edge_clearance``
        from its edges (the floor counts as an edge).
        """
        blocks = {f"block{i}": b for i, b in enumerate(self.blocks)}
        if surface not in blocks:
            raise TaskError(self.fields.file, field + ".surface", "a block (side faces belong to blocks): "
                            + ", ".join(blocks), surface)
        block, axis = blocks[surface], "xy".index(side[1])
        along, (u, z) = 1 - axis, (float(x) for x in at)
        lo = block["center"] - block["half"]
        room = min(block["half"][along] - abs(u - block["center"][along]), z - self.floor_height,
                   block["height"] - z)
        if room < self.clearance:
            raise TaskError(self.fields.file, field + ".at", f"a point on the {side} face of {surface} at least "
                            f"{self.clearance} m from its edges", f"[{u}, {z}] ({room:.3f} m)")
        normal = np.zeros(3)
        normal[axis] = 1.0 if side[0] == "+" else -1.0
        foothold = np.zeros(3)
        foothold[axis] = lo[axis] + (2 * block["half"][axis] if side[0] == "+" else 0.0)
        foothold[along], foothold[2] = u, z
        return Placement(foothold, normal, block["friction"], surface)

    def geometry(self) -> list[Surface]:
        """The floor plane and one solid box per block, from the floor up to its top."""
        out = [Surface.plane("floor", UP, [0.0, 0.0, self.floor_height])]
        for i, block in enumerate(self.blocks):
            lo, hi = block["center"] - block["half"], block["center"] + block["half"]
            out.append(Surface.box(f"block{i}", [lo[0], lo[1], self.floor_height], [hi[0], hi[1], block["height"]]))
        return out


class RampTerrain(Terrain):
    """One plane through ``origin`` [x, y, z] m rising at ``slope_deg`` along ``uphill``.

    ``uphill`` is a horizontal direction [dx, dy] (normalized here; default
    [1, 0], uphill towards +x). Height at (x, y):
    ``z0 + tan(slope) * ((x, y) - (x0, y0)) . uphill``.
    """

    surfaces = ("ramp",)

    EXAMPLE = {"kind": "ramp", "slope_deg": 25.0, "uphill": [1.0, 1.0], "origin": [0.1, -0.2, 0.05], "friction": 0.7}

    def __init__(self, fields: Fields):
        super().__init__(fields)
        fields.allow_only({"kind", "slope_deg", "uphill", "origin", "friction"})
        self.angle = math.radians(fields.number("slope_deg", lo=0.0, hi=80.0))
        uphill = fields.vector("uphill", 2, [1.0, 0.0])
        if np.linalg.norm(uphill) < 1e-9:
            fields.fail("uphill", "a non-zero horizontal direction [dx, dy]", uphill.tolist())
        self.uphill = uphill / np.linalg.norm(uphill)
        self.origin = fields.vector("origin", 3, [0.0, 0.0, 0.0])
        self.friction = read_friction(fields, self.surfaces)

    def height(self, xy) -> float:
        """Ramp height at horizontal ``xy`` (2,), m."""
        return float(self.origin[2] + math.tan(self.angle) * (np.asarray(xy) - self.origin[:2]) @ self.uphill)

    def _place(self, xy, surface, field) -> Placement:
        foothold = np.array([xy[0], xy[1], self.height(xy)])
        return Placement(foothold, slope_normal(self.angle, self.uphill), self.friction["ramp"], "ramp")

    def geometry(self) -> list[Surface]:
        return [Surface.plane("ramp", slope_normal(self.angle, self.uphill), self.origin)]


class TrenchTerrain(Terrain):
    """Two facing slopes along the x axis: a V (or U) trench.

    The bottom is the strip ``|y - center_y| <= bottom_width / 2`` at
    ``bottom_height``; the ``left`` wall (y above the strip) and the ``right``
    wall (y below) rise at ``slope_deg`` away from it. A foot lands on the
    surface under it; naming ``surface: left|right`` checks that it does.
    Friction: one number or ``{left, right, bottom}``.
    """

    surfaces = ("left", "right", "bottom")

    EXAMPLE = {"kind": "trench", "slope_deg": 30.0, "bottom_width": 0.1,
               "friction": {"left": 0.5, "right": 0.6, "bottom": 0.7}}

    def __init__(self, fields: Fields):
        super().__init__(fields)
        fields.allow_only({"kind", "slope_deg", "bottom_width", "bottom_height", "center_y", "friction"})
        self.angle = math.radians(fields.number("slope_deg", lo=0.0, hi=80.0))
        self.half_width = fields.number("bottom_width", 0.0, lo=0.0) / 2
        self.bottom = fields.number("bottom_height", 0.0)
        self.center_y = fields.number("center_y", 0.0)
        self.friction = read_friction(fields, self.surfaces)

    def _side(self, y: float) -> tuple[str, float, float]:
        """Surface name, distance up the wall (m, horizontal) and uphill sign for a foot at ``y``."""
        offset = y - self.center_y
        if abs(offset) <= self.half_width:
            return "bottom", 0.0, 0.0
        return ("left", offset - self.half_width, 1.0) if offset > 0 else ("right", -offset - self.half_width, -1.0)

    def _place(self, xy, surface, field) -> Placement:
        name, run, sign = self._side(float(xy[1]))
        if surface is not None and surface != name:
            raise TaskError(self.fields.file, field, f"a position on the {surface} surface", f"y = {xy[1]} lies on {name}")
        normal = UP.copy() if name == "bottom" else slope_normal(self.angle, (0.0, sign))
        foothold = np.array([xy[0], xy[1], self.bottom + math.tan(self.angle) * run])
        return Placement(foothold, normal, self.friction[name], name)

    def geometry(self) -> list[Surface]:
        """Both wall planes and the bottom plane: the free space above a trench is the
        intersection of their half-spaces (the ground height is the largest of three affine
        functions). The bottom plane is left out when the walls meet in a line."""
        edge = self.center_y + self.half_width
        out = [Surface.plane("left", slope_normal(self.angle, (0.0, 1.0)), [0.0, edge, self.bottom]),
               Surface.plane("right", slope_normal(self.angle, (0.0, -1.0)),
                             [0.0, self.center_y - self.half_width, self.bottom])]
        if self.half_width > 0:
            out.append(Surface.plane("bottom", UP, [0.0, self.center_y, self.bottom]))
        return out


class CeilingTerrain(Terrain):
    """A floor at ``floor_height`` and a ceiling at ``ceiling_height`` above it.

    Feet land on the floor unless their placement names ``surface: ceiling``;
    those press up against the ceiling and its normal points down (into the
    robot beneath it). Friction: one number or ``{floor, ceiling}``.
    """

    surfaces = ("floor", "ceiling")

    EXAMPLE = {"kind": "ceiling", "ceiling_height": 0.7, "friction": {"floor": 0.8, "ceiling": 0.9}}

    def __init__(self, fields: Fields):
        super().__init__(fields)
        fields.allow_only({"kind", "floor_height", "ceiling_height", "friction"})
        self.floor = fields.number("floor_height", 0.0)
        self.ceiling = fields.number("ceiling_height")
        if self.ceiling <= self.floor:
            fields.fail("ceiling_height", f"a height above floor_height ({self.floor} m)", self.ceiling)
        self.friction = read_friction(fields, self.surfaces)

    def _place(self, xy, surface, field) -> Placement:
        name = surface or "floor"
        height, normal = (self.ceiling, DOWN.copy()) if name == "ceiling" else (self.floor, UP.copy())
        return Placement(np.array([xy[0], xy[1], height]), normal, self.friction[name], name)

    def geometry(self) -> list[Surface]:
        return [Surface.plane("floor", UP, [0.0, 0.0, self.floor]),
                Surface.plane("ceiling", DOWN, [0.0, 0.0, self.ceiling])]


TERRAINS = {
    "flat": FlatTerrain,
    "blocks": BlocksTerrain,
    "ramp": RampTerrain,
    "trench": TrenchTerrain,
    "ceiling": CeilingTerrain,
}


def build_terrain(fields: Fields) -> Terrain:
    """The terrain described by ``fields`` (a ``stance.terrain`` mapping)."""
    kind = fields.string("kind", choices=list(TERRAINS))
    return TERRAINS[kind](fields)
