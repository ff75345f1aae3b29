"""Robots derived from a loaded one: a payload held at the hand, scaled torque limits.

Both change numbers a plan depends on, so both appear in the plan file: the
payload as a link in the URDF text (``meta.urdf``), the scaled limits in
``meta.torque_limits``. A derived robot never shares a built solver with its
origin (the planner's cache keys on the URDF text and the torque limits).
"""
from __future__ import annotations

import dataclasses
import xml.etree.ElementTree as ET

import numpy as np

from ..errors import ModelError
from .model import load_robot

PAYLOAD_LINK = "brace_payload"
PAYLOAD_RADIUS = 0.03  # m; the payload is a solid sphere centred on the hand frame


def urdf_with_payload(urdf_text: str, link: str, mass: float, source="URDF") -> str:
    """``urdf_text`` with a solid sphere of ``mass`` kg fixed at the origin of ``link``.

    The sphere (radius :data:`PAYLOAD_RADIUS`, inertia ``2/5 m r^2`` about
    each axis) hangs on a fixed joint, so Pinocchio merges it into the body
    that carries ``link``.
    """
    root = ET.fromstring(urdf_text)
    if not any(elem.get("name") == link for elem in root.iter("link")):
        raise ModelError(source, "hand", "a hand frame that is a URDF link (to hold a payload)", link)
    inertia = 0.4 * mass * PAYLOAD_RADIUS ** 2
    body = ET.SubElement(root, "link", name=PAYLOAD_LINK)
    inertial = ET.SubElement(body, "inertial")
    ET.SubElement(inertial, "origin", xyz="0 0 0", rpy="0 0 0")
    ET.SubElement(inertial, "mass", value=repr(float(mass)))
    ET.SubElement(inertial, "inertia", ixx=repr(inertia), iyy=repr(inertia), izz=repr(inertia),
                  ixy="0", ixz="0", iyz="0")
    joint = ET.SubElement(root, "joint", name=PAYLOAD_LINK + "_mount", type="fixed")
    ET.SubElement(joint, "parent", link=link)
    ET.SubElement(joint, "child", link=PAYLOAD_LINK)
    ET.SubElement(joint, "origin", xyz="0 0 0", rpy="0 0 0")
    return ET.tostring(root, encoding="unicode")


def with_payload(robot, mass: float):
    """``robot`` holding ``mass`` kg at its hand frame (a new model; 0 kg returns ``robot``)."""
    if mass == 0.0:
        return robot
    text = urdf_with_payload(robot.urdf_text, robot.hand_frame, mass, robot.urdf_path)
    derived = load_robot(robot.yaml_path, urdf_text=text)
    return dataclasses.replace(derived, torque_lower=robot.torque_lower.copy(),
                               torque_upper=robot.torque_upper.copy())


def with_torque_scale(robot, scale: float):
    """``robot`` with every torque limit multiplied by ``scale`` (> 0)."""
    if scale == 1.0:
        return robot
    return dataclasses.replace(robot, torque_lower=np.asarray(robot.torque_lower) * scale,
                               torque_upper=np.asarray(robot.torque_upper) * scale)
