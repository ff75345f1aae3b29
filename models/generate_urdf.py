"""Write the URDF of a brace demo robot from its small parameter file.

Usage::

    python models/generate_urdf.py models/stilt.params.yaml models/stilt.urdf

The robot is a floating body with four 3-DoF legs (hip abduction about x,
hip flexion about y, knee about y) and a serial arm on the body's top face.
Inertias come from simple solid shapes (boxes, cylinders) about their centre
of mass; the point frames (feet, grip point) are massless links on fixed
joints. The output is deterministic, so the committed URDF can be regenerated
and compared.
"""
from __future__ import annotations

import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import yaml

AXES = {"x": (1, 0, 0), "y": (0, 1, 0), "z": (0, 0, 1)}
LEGS = {"fl": (1, 1), "fr": (1, -1), "rl": (-1, 1), "rr": (-1, -1)}  # name: (sign x, sign y)


def box_inertia(mass: float, size) -> np.ndarray:
    """Principal moments of a solid box about its centre, shape (3,), kg m^2."""
    a, b, c = size
    return mass / 12.0 * np.array([b * b + c * c, a * a + c * c, a * a + b * b])


def cylinder_inertia(mass: float, radius: float, length: float, axis: str) -> np.ndarray:
    """Principal moments of a solid cylinder about its centre, shape (3,), kg m^2."""
    side = mass * (3.0 * radius**2 + length**2) / 12.0
    moments = np.full(3, side)
    moments["xyz".index(axis)] = 0.5 * mass * radius**2
    return moments


def shape_inertia(mass: float, shape: dict) -> np.ndarray:
    """Principal moments for a shape entry ``{box: [x, y, z]}`` or ``{cylinder: {...}}``."""
    if "box" in shape:
        return box_inertia(mass, shape["box"])
    cyl = shape["cylinder"]
    return cylinder_inertia(mass, cyl["radius"], cyl["length"], cyl["axis"])


def fmt(values) -> str:
    return " ".join(f"{float(v):.6g}" for v in values)


def geometry(parent: ET.Element, shape: dict) -> None:
    geom = ET.SubElement(parent, "geometry")
    if "box" in shape:
        ET.SubElement(geom, "box", size=fmt(shape["box"]))
    elif "sphere" in shape:
        ET.SubElement(geom, "sphere", radius=f"{shape['sphere']:.6g}")
    else:
        cyl = shape["cylinder"]
        ET.SubElement(geom, "cylinder", radius=f"{cyl['radius']:.6g}", length=f"{cyl['length']:.6g}")


def cylinder_rpy(shape: dict) -> tuple[float, float, float]:
    """URDF cylinders lie along z; turn them onto the named axis."""
    axis = shape.get("cylinder", {}).get("axis", "z")
    return {"x": (0.0, np.pi / 2, 0.0), "y": (np.pi / 2, 0.0, 0.0), "z": (0.0, 0.0, 0.0)}[axis]


def add_link(robot: ET.Element, name: str, mass: float | None = None, com=(0, 0, 0),
             shape: dict | None = None, collide: bool = False) -> ET.Element:
    link = ET.SubElement(robot, "link", name=name)
    if mass is not None:
        inertial = ET.SubElement(link, "inertial")
        ET.SubElement(inertial, "origin", xyz=fmt(com), rpy="0 0 0")
        ET.SubElement(inertial, "mass", value=f"{mass:.6g}")
        ixx, iyy, izz = shape_inertia(mass, shape)
        ET.SubElement(inertial, "inertia", ixx=f"{ixx:.6g}", ixy="0", ixz="0",
                      iyy=f"{iyy:.6g}", iyz="0", izz=f"{izz:.6g}")
    if shape is not None:
        tags = ("visual", "collision") if collide else ("visual",)
        for tag in tags:
            elem = ET.SubElement(link, tag)
            ET.SubElement(elem, "origin", xyz=fmt(com), rpy=fmt(cylinder_rpy(shape)))
            geometry(elem, shape)
    return link


def add_joint(robot: ET.Element, name: str, parent: str, child: str, xyz, axis: str | None = None,
              limits: dict | None = None) -> None:
    kind = "fixed" if axis is None else "revolute"
    joint = ET.SubElement(robot, "joint", name=name, type=kind)
    ET.SubElement(joint, "origin", xyz=fmt(xyz), rpy="0 0 0")
    ET.SubElement(joint, "parent", link=parent)
    ET.SubElement(joint, "child", link=child)
    if axis is not None:
        ET.SubElement(joint, "axis", xyz=fmt(AXES[axis]))
        ET.SubElement(joint, "limit", lower=f"{limits['lower']:.6g}", upper=f"{limits['upper']:.6g}",
                      velocity=f"{limits['velocity']:.6g}", effort=f"{limits['effort']:.6g}")


def add_leg(robot: ET.Element, leg: dict, name: str, sx: int, sy: int) -> None:
    hip, thigh, shank, joints = leg["hip_link"], leg["thigh"], leg["shank"], leg["joints"]
    off = hip["offset_y"]
    add_joint(robot, f"{name}_hip_abd", "body", f"{name}_hip",
              (sx * leg["hip_x"], sy * leg["hip_y"], leg["hip_z"]), "x", joints["hip_abd"])
    add_link(robot, f"{name}_hip", hip["mass"], (0, sy * off / 2, 0), hip["shape"])
    add_joint(robot, f"{name}_hip_flex", f"{name}_hip", f"{name}_thigh", (0, sy * off, 0), "y",
              joints["hip_flex"])
    add_link(robot, f"{name}_thigh", thigh["mass"], (0, 0, -thigh["length"] / 2), thigh["shape"])
    add_joint(robot, f"{name}_knee", f"{name}_thigh", f"{name}_shank", (0, 0, -thigh["length"]), "y",
              joints["knee"])
    link = add_link(robot, f"{name}_shank", shank["mass"], (0, 0, -shank["length"] / 2), shank["shape"])
    radius = shank["foot_radius"]
    for tag in ("visual", "collision"):
        elem = ET.SubElement(link, tag)
        ET.SubElement(elem, "origin", xyz=fmt((0, 0, -shank["length"] + radius)), rpy="0 0 0")
        geometry(elem, {"sphere": radius})
    add_joint(robot, f"{name}_foot_mount", f"{name}_shank", f"foot_{name}", (0, 0, -shank["length"]))
    add_link(robot, f"foot_{name}")


def add_arm(robot: ET.Element, arm: dict) -> None:
    parent, offset = "body", arm["mount"]
    for entry in arm["links"]:
        offset = np.add(offset, entry["offset"]) if parent == "body" else entry["offset"]
        add_joint(robot, entry["joint"], parent, entry["link"], offset, entry["axis"], entry)
        add_link(robot, entry["link"], entry["mass"], entry["com"], entry["shape"])
        parent = entry["link"]
    add_joint(robot, "grip_mount", parent, "grip_point", arm["grip_offset"])
    add_link(robot, "grip_point")


def build_urdf(params: dict) -> str:
    """URDF text of the robot described by ``params`` (the parsed parameter file)."""
    robot = ET.Element("robot", name=params["name"])
    body = params["body"]
    add_link(robot, "body", body["mass"], (0, 0, 0), body["shape"], collide=True)
    for name, (sx, sy) in LEGS.items():
        add_leg(robot, params["leg"], name, sx, sy)
    add_arm(robot, params["arm"])
    ET.indent(robot, space="  ")
    header = ("<?xml version=\"1.0\"?>\n"
              f"<!-- Generated by models/generate_urdf.py from {params['name']}.params.yaml; "
              "edit the parameters, not this file. -->\n")
    return header + ET.tostring(robot, encoding="unicode") + "\n"


def main(argv: list[str]) -> int:
    if len(argv) != 2:
        print("usage: python models/generate_urdf.py PARAMS.yaml OUT.urdf", file=sys.stderr)
        return 2
    params = yaml.safe_load(Path(argv[0]).read_text(encoding="utf-8"))
    Path(argv[1]).write_text(build_urdf(params), encoding="utf-8")
    print(f"wrote {argv[1]}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
