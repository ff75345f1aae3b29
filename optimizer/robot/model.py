"""The robot: a URDF loaded by Pinocchio with a free-flyer root, plus brace's robot file.

A robot file (YAML, see ``models/stilt.yaml`` for the documented schema) names
the URDF, the contact frames, the hand frame, a standing posture and optional
limit overrides. :func:`load_robot` checks all of it and returns a
:class:`RobotModel`; every mistake becomes a :class:`~optimizer.errors.ModelError`
naming the file, the field and what was expected.
"""
from __future__ import annotations

import difflib
import math
import xml.etree.ElementTree as ET
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pinocchio as pin

from ..capture import captured_stderr
from ..errors import ModelError
from ..files import read_text, read_yaml_mapping
from ..schema import Fields

ROBOT_FIELDS = ("name", "urdf", "contacts", "hand", "standing", "limits")
MOVING_JOINTS = ("revolute", "continuous", "prismatic")
NUMERIC_ATTRIBUTES = ("xyz", "rpy", "value", "ixx", "ixy", "ixz", "iyy", "iyz", "izz",
                      "lower", "upper", "effort", "velocity", "radius", "length", "size")


@dataclass
class UrdfJoint:
    """What brace reads of one URDF joint itself (before Pinocchio)."""

    name: str
    kind: str            # URDF type: revolute, continuous, prismatic, fixed, ...
    child: str           # child link name
    effort: float | None  # None when the URDF gives no usable effort limit
    velocity: float | None


@dataclass
class RobotModel:
    """A floating-base robot with its contact frames, hand frame and limits.

    Attributes
    ----------
    name : str
    yaml_path, urdf_path : Path
    urdf_text : str
    model : pinocchio.Model
        Free-flyer root named ``root_joint``; ``q = [x y z qx qy qz qw, joints]``.
    contact_frames : list of str
    hand_frame : str
    joint_names : list of str
        The ``nj`` actuated joints in Pinocchio order.
    joint_kinds : list of str
        URDF type of each actuated joint (revolute, continuous, prismatic).
    nq, nv, nj : int
        Configuration size, velocity size, number of actuated joints (nv - 6).
    joint_lower, joint_upper : ndarray, shape (nq - 7,)
        Configuration bounds of the joints, rad or m. A continuous joint takes
        two entries (cos, sin), bounded by -inf/+inf.
    velocity_limit : ndarray, shape (nj,)
        rad/s or m/s.
    torque_lower, torque_upper : ndarray, shape (nj,)
        N m or N (URDF effort, unless the robot file overrides it).
    mass : float
        kg.
    gravity : ndarray, shape (3,)
        m/s^2, world frame.
    standing_posture : ndarray, shape (nq,)
        Pinocchio layout.
    """

    name: str
    yaml_path: Path
    urdf_path: Path
    urdf_text: str
    model: pin.Model
    contact_frames: list[str]
    hand_frame: str
    joint_names: list[str]
    joint_kinds: list[str]
    nq: int
    nv: int
    nj: int
    joint_lower: np.ndarray
    joint_upper: np.ndarray
    velocity_limit: np.ndarray
    torque_lower: np.ndarray
    torque_upper: np.ndarray
    mass: float
    gravity: np.ndarray
    standing_posture: np.ndarray = field(repr=False)

    def frame_id(self, name: str, field: str = "") -> int:
        """Pinocchio id of the frame ``name``; ModelError listing close names if unknown."""
        if not isinstance(name, str) or not self.model.existFrame(name):
            names = [f.name for f in self.model.frames]
            close = difflib.get_close_matches(str(name), names, n=4, cutoff=0.5)
            hint = "close names: " + ", ".join(close) if close else None
            raise ModelError(self.yaml_path, field, f"a frame name of {self.urdf_path.name}", name, hint)
        return int(self.model.getFrameId(name))

    def joint_index(self, name: str, field: str = "") -> int:
        """Position of the actuated joint ``name`` in ``joint_names`` (0-based)."""
        if name not in self.joint_names:
            close = difflib.get_close_matches(str(name), self.joint_names, n=3, cutoff=0.5)
            hint = "close names: " + ", ".join(close) if close else None
            raise ModelError(self.yaml_path, field, f"an actuated joint of {self.urdf_path.name}", name, hint)
        return self.joint_names.index(name)


def load_robot(path, urdf_text: str | None = None) -> RobotModel:
    """Load a robot file (YAML) and its URDF; see the module docstring.

    ``urdf_text`` replaces the URDF file's text (a derived model, e.g. with a
    payload added); the file's path still names it in messages.

    Raises
    ------
    ModelError
        Missing or unreadable files, YAML or URDF errors, unknown frame or
        joint names, moving links without inertia, missing limits,
        non-finite numbers.
    """
    yaml_path = Path(path)
    fields = Fields(read_yaml_mapping(yaml_path, ModelError), yaml_path, "", ModelError)
    fields.allow_only(ROBOT_FIELDS)
    urdf_path = yaml_path.parent / fields.string("urdf")
    urdf_text = read_text(urdf_path, ModelError) if urdf_text is None else urdf_text
    urdf_joints = read_urdf_joints(urdf_text, urdf_path)
    model = build_pinocchio_model(urdf_text, urdf_path)
    check_moving_inertias(model, urdf_joints, urdf_path)
    robot = _assemble(fields, yaml_path, urdf_path, urdf_text, model, urdf_joints)
    robot.standing_posture = standing_posture(robot, fields.sub("standing"))
    return robot


def _assemble(fields, yaml_path, urdf_path, urdf_text, model, urdf_joints) -> RobotModel:
    names = list(model.names)[2:]
    kinds = [urdf_joints[n].kind for n in names]
    torque_lower, torque_upper, velocity = joint_limits(names, urdf_joints, fields, urdf_path)
    robot = RobotModel(
        name=fields.string("name", yaml_path.stem), yaml_path=yaml_path, urdf_path=urdf_path,
        urdf_text=urdf_text, model=model, contact_frames=[], hand_frame="",
        joint_names=names, joint_kinds=kinds, nq=model.nq, nv=model.nv, nj=model.nv - 6,
        joint_lower=configuration_bounds(model, kinds, lower=True),
        joint_upper=configuration_bounds(model, kinds, lower=False),
        velocity_limit=velocity, torque_lower=torque_lower, torque_upper=torque_upper,
        mass=float(pin.computeTotalMass(model)), gravity=np.array(model.gravity.linear, dtype=float),
        standing_posture=np.zeros(model.nq))
    robot.contact_frames = contact_frame_names(robot, fields)
    robot.hand_frame = fields.string("hand")
    robot.frame_id(robot.hand_frame, "hand")
    return robot


def contact_frame_names(robot: RobotModel, fields: Fields) -> list[str]:
    """The ``contacts`` list, each checked against the URDF frames."""
    value = fields.raw("contacts")
    if not isinstance(value, list) or not value:
        fields.fail("contacts", "a non-empty list of frame names", value)
    if len(set(map(str, value))) != len(value):
        fields.fail("contacts", "frame names without repeats", value)
    for i, name in enumerate(value):
        robot.frame_id(name, f"contacts[{i}]")
    return list(value)


# ---------------------------------------------------------------- URDF


def read_urdf_joints(urdf_text: str, urdf_path: Path) -> dict[str, UrdfJoint]:
    """Parse the URDF's XML, check its numbers are finite and read its joints."""
    try:
        root = ET.fromstring(urdf_text)
    except ET.ParseError as exc:
        raise ModelError(urdf_path, "", "well-formed URDF XML", str(exc)) from None
    if root.tag != "robot":
        raise ModelError(urdf_path, "", "a <robot> element at the top", f"<{root.tag}>")
    check_finite_attributes(root, urdf_path)
    joints = {}
    for elem in root.iter("joint"):
        joint = _urdf_joint(elem)
        joints[joint.name] = joint
    return joints


def check_finite_attributes(root: ET.Element, urdf_path: Path) -> None:
    """Every numeric attribute of the URDF must hold finite numbers."""
    for elem in root.iter():
        for key in NUMERIC_ATTRIBUTES:
            text = elem.get(key)
            if text is None:
                continue
            try:
                ok = all(math.isfinite(float(part)) for part in text.split())
            except ValueError:
                ok = False
            if not ok:
                owner = _owner_name(root, elem)
                raise ModelError(urdf_path, f"{owner}<{elem.tag} {key}>", "finite numbers", text)


def _owner_name(root: ET.Element, target: ET.Element) -> str:
    for elem in root:
        if elem is target or any(e is target for e in elem.iter()):
            return f"{elem.tag} '{elem.get('name')}' "
    return ""


def _urdf_joint(elem: ET.Element) -> UrdfJoint:
    limit = elem.find("limit")
    child = elem.find("child")

    def positive(key):
        text = None if limit is None else limit.get(key)
        value = None if text is None else float(text)
        return value if value is not None and value > 0 else None

    return UrdfJoint(name=elem.get("name", ""), kind=elem.get("type", ""),
                     child="" if child is None else child.get("link", ""),
                     effort=positive("effort"), velocity=positive("velocity"))


def build_pinocchio_model(urdf_text: str, urdf_path: Path) -> pin.Model:
    """Pinocchio model with a free-flyer root; parser messages become a ModelError."""
    try:
        with captured_stderr() as messages:
            model = pin.buildModelFromXML(urdf_text, pin.JointModelFreeFlyer())
    except (ValueError, RuntimeError) as exc:
        errors = [m.split("Error:", 1)[1].strip() for m in messages if "Error:" in m]
        raise ModelError(urdf_path, "", "a URDF model Pinocchio can read",
                         errors[0] if errors else str(exc)) from None
    return model


def check_moving_inertias(model: pin.Model, urdf_joints: dict[str, UrdfJoint], urdf_path: Path) -> None:
    """Each body moved by a joint needs mass > 0 and a positive definite inertia."""
    for j in range(2, model.njoints):
        name = model.names[j]
        kind = urdf_joints[name].kind if name in urdf_joints else "unknown"
        if kind not in MOVING_JOINTS:
            raise ModelError(urdf_path, f"joint '{name}'", "revolute, continuous or prismatic joints", kind)
        inertia = model.inertias[j]
        moments = np.linalg.eigvalsh(inertia.inertia)
        if inertia.mass <= 0 or moments.min() <= 0:
            link = urdf_joints[name].child
            raise ModelError(urdf_path, f"link '{link}' <inertial>",
                             f"mass > 0 and a positive definite inertia (the link moves with joint '{name}')",
                             f"mass {inertia.mass:g} kg, principal moments {np.round(moments, 9).tolist()} kg m^2")


def configuration_bounds(model: pin.Model, kinds: list[str], lower: bool) -> np.ndarray:
    """Joint part of Pinocchio's position limits, shape (nq - 7,); continuous: -inf/+inf."""
    bounds = np.array(model.lowerPositionLimit if lower else model.upperPositionLimit, dtype=float)[7:]
    for j, kind in enumerate(kinds, start=2):
        if kind == "continuous":
            start = model.idx_qs[j] - 7
            bounds[start:start + model.nqs[j]] = -np.inf if lower else np.inf
    return bounds


# ---------------------------------------------------------------- robot file


def joint_limits(names, urdf_joints, fields: Fields, urdf_path: Path):
    """Torque bounds (nj,), (nj,) and velocity limits (nj,) after the robot file's overrides."""
    limits = fields.sub("limits", {})
    limits.allow_only(("torque", "velocity"))
    torque = limits.sub("torque", {})
    velocity = limits.sub("velocity", {})
    for sub in (torque, velocity):
        for key in sub.data:
            if key not in names:
                close = difflib.get_close_matches(str(key), names, n=1)
                sub.fail(str(key), f"an actuated joint of {urdf_path.name}", key,
                         f"did you mean '{close[0]}'?" if close else None)
    lower, upper, speed = np.zeros(len(names)), np.zeros(len(names)), np.zeros(len(names))
    for i, name in enumerate(names):
        lower[i], upper[i] = _torque_bounds(name, urdf_joints[name], torque, urdf_path)
        speed[i] = _velocity_limit(name, urdf_joints[name], velocity, urdf_path)
    return lower, upper, speed


def _torque_bounds(name: str, joint: UrdfJoint, torque: Fields, urdf_path: Path) -> tuple[float, float]:
    if torque.has(name):
        lo, up = torque.vector(name, 2)
        if not lo < up:
            torque.fail(name, "[lower, upper] with lower < upper, N m or N", [lo, up])
        return lo, up
    if joint.effort is None:
        raise ModelError(urdf_path, f"joint '{name}' <limit effort>",
                         "an effort limit > 0 in the URDF", "none",
                         f"or set limits.torque.{name} in {torque.file}")
    return -joint.effort, joint.effort


def _velocity_limit(name: str, joint: UrdfJoint, velocity: Fields, urdf_path: Path) -> float:
    if velocity.has(name):
        return velocity.number(name, lo=0.0, lo_open=True)
    if joint.velocity is None:
        raise ModelError(urdf_path, f"joint '{name}' <limit velocity>",
                         "a velocity limit > 0 in the URDF", "none",
                         f"or set limits.velocity.{name} in {velocity.file}")
    return joint.velocity


def standing_posture(robot: RobotModel, standing: Fields) -> np.ndarray:
    """The ``standing`` section as a configuration, shape (nq,), Pinocchio layout."""
    standing.allow_only(("base_height", "joints"))
    q = pin.neutral(robot.model)
    q[2] = standing.number("base_height")
    joints = standing.sub("joints", {})
    for key in joints.data:
        j = robot.joint_index(key, joints.at(str(key))) + 2
        angle = joints.number(key)
        start = robot.model.idx_qs[j]
        if robot.joint_kinds[j - 2] == "continuous":
            q[start:start + 2] = math.cos(angle), math.sin(angle)
        else:
            q[start] = angle
    return q
