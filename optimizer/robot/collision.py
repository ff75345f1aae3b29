"""Collision shapes of a robot: what must keep clear of the terrain.

Every shape is a set of points fixed on one link plus a radius: the shape is
the convex hull of the points, swollen by the radius. Its signed distance to a
plane is therefore exactly ``min_i (n . p_i - d) - radius``, a few smooth rows
per plane, which is all the clearance constraints need.

- ``sphere``: one point, the centre.
- ``capsule``: two points (the segment's ends).
- ``box``: its eight corners, radius 0.
- a URDF ``<cylinder>`` becomes the capsule along its axis with the same
  radius and length between the end-face centres (it encloses the cylinder:
  conservative by up to one radius at each end).

Sources, in order (see ``models/stilt.yaml``, section ``collision``):

1. the URDF's ``<collision>`` elements (sphere, box, cylinder, and the
   ``<capsule radius length>`` extension); meshes are skipped;
2. a default capsule along every moving link, from its joint origin to the
   origin of each child joint and each fixed frame below it, with radius
   ``collision.radius`` of the robot file (no default capsule when it is 0);
3. ``collision.replace: {link: [shapes]}`` drops the shapes of steps 1-2 on
   that link and uses the listed ones (an empty list: the link has none);
   ``collision.add: {link: [shapes]}`` adds shapes.

``collision.self_pairs`` names shapes that must keep apart from each other
(:mod:`optimizer.robot.self_pairs`); none by default.

Robot-file shapes: ``{sphere: {center: [x, y, z], radius}}`` or
``{capsule: {from: [x, y, z], to: [x, y, z], radius}}``, m, link frame.

Points are stored in the link frame (the URDF's, what a plan file carries) and
in the frame of the Pinocchio joint that moves the link (what kinematics use).
A shape point within ``collision.exempt_radius`` (m) of a contact frame on
the same joint is exempt from the surface that contact stands on: a foot
touches its own foothold by design.
"""
from __future__ import annotations

import itertools
import xml.etree.ElementTree as ET
from dataclasses import dataclass

import numpy as np
import pinocchio as pin

from ..errors import ModelError
from ..schema import Fields
from .self_pairs import read_self_pairs

COLLISION_FIELDS = ("radius", "exempt_radius", "replace", "add", "self_distance", "self_pairs")
DEFAULT_EXEMPT_RADIUS = 0.05   # m


@dataclass(frozen=True)
class CollisionShape:
    """Points on one link swollen by a radius.

    Attributes
    ----------
    name : str
        ``<link>/<kind><index>``, e.g. ``fl_shank/capsule0``; unique per robot.
    link : str
        URDF link (a Pinocchio BODY frame).
    kind : str
        ``sphere``, ``capsule`` or ``box``.
    points : ndarray, shape (n, 3)
        m, link frame.
    radius : float
        m.
    joint : int
        Pinocchio joint that moves the link.
    joint_points : ndarray, shape (n, 3)
        The points in that joint's frame, m.
    """

    name: str
    link: str
    kind: str
    points: np.ndarray
    radius: float
    joint: int
    joint_points: np.ndarray

    def as_dict(self) -> dict:
        """The plan-file form: name, link, kind, points (link frame, m), radius (m)."""
        return {"name": self.name, "link": self.link, "kind": self.kind,
                "points": np.round(self.points, 12).tolist(), "radius": float(self.radius)}


@dataclass(frozen=True)
class CollisionModel:
    """All collision shapes of a robot, the foot exemption radius (m) and the self-collision pairs.

    ``self_pairs`` holds :class:`~optimizer.robot.self_pairs.SelfPair` entries
    (shape indices into ``shapes``, distance m).
    """

    shapes: tuple
    exempt_radius: float
    self_pairs: tuple = ()

    def point_table(self):
        """Every shape point: list of (shape index, point index within the shape)."""
        return [(s, i) for s, shape in enumerate(self.shapes) for i in range(len(shape.points))]


def _body_frame(model: pin.Model, link: str):
    if not model.existFrame(link, pin.FrameType.BODY):
        return None
    return model.frames[model.getFrameId(link, pin.FrameType.BODY)]


def _origin(elem: ET.Element) -> pin.SE3:
    origin = elem.find("origin")
    xyz = np.zeros(3) if origin is None else np.array([float(v) for v in origin.get("xyz", "0 0 0").split()])
    rpy = np.zeros(3) if origin is None else np.array([float(v) for v in origin.get("rpy", "0 0 0").split()])
    return pin.SE3(pin.rpy.rpyToMatrix(*rpy), xyz)


def _urdf_geometry(elem: ET.Element):
    """(kind, points in the element's frame (n, 3), radius) or None for meshes and unknown tags."""
    geometry = elem.find("geometry")
    if geometry is None or len(geometry) == 0:
        return None
    shape = geometry[0]
    if shape.tag == "sphere":
        return "sphere", np.zeros((1, 3)), float(shape.get("radius"))
    if shape.tag == "box":
        half = np.array([float(v) for v in shape.get("size").split()]) / 2
        corners = np.array(list(itertools.product(*[(-h, h) for h in half])))
        return "box", corners, 0.0
    if shape.tag in ("cylinder", "capsule"):
        half = float(shape.get("length")) / 2
        return "capsule", np.array([[0.0, 0.0, -half], [0.0, 0.0, half]]), float(shape.get("radius"))
    return None


def urdf_shapes(urdf_text: str, model: pin.Model) -> dict[str, list]:
    """``{link: [(kind, points (n, 3) link frame, radius)]}`` from the URDF's ``<collision>`` elements."""
    out: dict[str, list] = {}
    for link in ET.fromstring(urdf_text).iter("link"):
        for elem in link.findall("collision"):
            found = _urdf_geometry(elem)
            if found is None:
                continue
            kind, points, radius = found
            placement = _origin(elem)
            world = points @ placement.rotation.T + placement.translation
            out.setdefault(link.get("name"), []).append((kind, world, radius))
    return out


def default_capsules(model: pin.Model, radius: float) -> dict[str, list]:
    """A capsule along every moving link: joint origin to each child joint and fixed frame origin."""
    out: dict[str, list] = {}
    if radius <= 0:
        return out
    for j in range(2, model.njoints):
        link = next((f.name for f in model.frames if f.type == pin.FrameType.BODY and f.parentJoint == j
                     and f.placement.isIdentity()), None)
        if link is None:
            continue
        ends = [np.array(model.jointPlacements[c].translation) for c in range(j + 1, model.njoints)
                if model.parents[c] == j]
        ends += [np.array(f.placement.translation) for f in model.frames
                 if f.parentJoint == j and f.type == pin.FrameType.FIXED_JOINT]
        for end in ends:
            if np.linalg.norm(end) > 1e-9:
                out.setdefault(link, []).append(("capsule", np.array([np.zeros(3), end]), radius))
    return out


def _file_shape(spec: Fields):
    """One robot-file shape: (kind, points (n, 3) link frame, radius)."""
    spec.allow_only(("sphere", "capsule"))
    if len(spec.data) != 1:
        spec.fail("", "exactly one of sphere: {center, radius} or capsule: {from, to, radius}", sorted(spec.data))
    if spec.has("sphere"):
        sphere = spec.sub("sphere")
        sphere.allow_only(("center", "radius"))
        return "sphere", sphere.vector("center", 3)[None, :], sphere.number("radius", lo=0.0)
    capsule = spec.sub("capsule")
    capsule.allow_only(("from", "to", "radius"))
    return "capsule", np.array([capsule.vector("from", 3), capsule.vector("to", 3)]), capsule.number("radius", lo=0.0)


def _file_shapes(section: Fields, key: str, model: pin.Model) -> dict[str, list]:
    mapping = section.sub(key, {})
    out = {}
    for link in mapping.data:
        if not isinstance(link, str) or _body_frame(model, link) is None:
            mapping.fail(str(link), "a link of the robot's URDF", link)
        items = mapping.raw(link, [])
        if not isinstance(items, list):
            mapping.fail(link, "a list of shapes (sphere or capsule)", items)
        out[link] = [_file_shape(Fields(item, mapping.file, mapping.at(f"{link}[{i}]"), ModelError))
                     for i, item in enumerate(items)]
    return out


def load_collision(fields: Fields, urdf_text: str, model: pin.Model) -> CollisionModel:
    """The robot's :class:`CollisionModel` from its URDF and the robot file's ``collision`` section."""
    section = fields.sub("collision", {})
    section.allow_only(COLLISION_FIELDS)
    radius = section.number("radius", 0.0, lo=0.0)
    exempt = section.number("exempt_radius", DEFAULT_EXEMPT_RADIUS, lo=0.0)
    by_link = urdf_shapes(urdf_text, model)
    for link, shapes in default_capsules(model, radius).items():
        by_link.setdefault(link, []).extend(shapes)
    by_link.update(_file_shapes(section, "replace", model))
    for link, shapes in _file_shapes(section, "add", model).items():
        by_link.setdefault(link, []).extend(shapes)
    shapes = []
    for link, items in by_link.items():
        frame = _body_frame(model, link)
        if frame is None or frame.parentJoint == 0:
            continue
        counts: dict[str, int] = {}
        for kind, points, r in items:
            index = counts.get(kind, 0)
            counts[kind] = index + 1
            joint_points = points @ np.array(frame.placement.rotation).T + np.array(frame.placement.translation)
            shapes.append(CollisionShape(f"{link}/{kind}{index}", link, kind, np.array(points, float), float(r),
                                         int(frame.parentJoint), joint_points))
    return CollisionModel(tuple(shapes), exempt, read_self_pairs(section, shapes))


def shape_points_world(model: pin.Model, data: pin.Data, shapes) -> list[np.ndarray]:
    """World positions (n, 3) of every shape's points, m; needs ``forwardKinematics`` done on ``data``."""
    out = []
    for shape in shapes:
        placement = data.oMi[shape.joint]
        out.append(shape.joint_points @ np.array(placement.rotation).T + np.array(placement.translation))
    return out
