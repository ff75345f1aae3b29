"""Constraint rows carry the labels they were added with; diagnosis names rows by them.

The case that once went wrong: a robot with 12 actuated joints and a force
disturbance has 6 d = 18 robust base-balance rows per knot, exactly 6 + nj.
Those rows are the floating base's six rows of the disturbance balance for
each of the three push directions (the base rows of the equations of motion,
Featherstone, "Rigid Body Dynamics Algorithms", 2008, ch. 9: the first six
rows of a floating-base model carry no joint torque). None of them belongs to
a joint. The 12-joint test robot is the demo robot with its arm removed and
the disturbance point fixed on the body.
"""
from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pinocchio as pin
import pytest
import yaml

from flat_ground import FEET, flat_stance
from optimizer.analysis.failure import diagnose
from optimizer.planner import Planner
from optimizer.problem.task import load_task
from optimizer.transcription.nlp import velocity_names

ROOT = Path(__file__).resolve().parents[1]
LEGS = ("fl", "fr", "rl", "rr")


def legs_only_urdf() -> str:
    """The demo robot's URDF without its arm, with a massless frame ``push_point`` on the body."""
    tree = ET.parse(ROOT / "models" / "stilt.urdf")
    robot = tree.getroot()
    arm_joints = [j for j in robot.findall("joint") if not j.get("name").startswith(LEGS)]
    arm_links = {j.find("child").get("link") for j in arm_joints}
    for element in arm_joints + [link for link in robot.findall("link") if link.get("name") in arm_links]:
        robot.remove(element)
    ET.SubElement(robot, "link", name="push_point")
    mount = ET.SubElement(robot, "joint", name="push_mount", type="fixed")
    ET.SubElement(mount, "parent", link="body")
    ET.SubElement(mount, "child", link="push_point")
    ET.SubElement(mount, "origin", xyz="0.2 0 0.1", rpy="0 0 0")
    return ET.tostring(robot, encoding="unicode")


@pytest.fixture(scope="module")
def twelve_joint_task(tmp_path_factory):
    folder = tmp_path_factory.mktemp("quad12")
    (folder / "quad12.urdf").write_text(legs_only_urdf(), encoding="utf-8")
    standing = yaml.safe_load((ROOT / "models" / "stilt.yaml").read_text())["standing"]
    standing["joints"] = {k: v for k, v in standing["joints"].items() if k.startswith(LEGS)}
    robot = {"urdf": "quad12.urdf", "contacts": list(FEET), "hand": "push_point", "standing": standing}
    (folder / "quad12.yaml").write_text(yaml.safe_dump(robot), encoding="utf-8")
    task = {"robot": "quad12.yaml", "horizon": {"duration": 1.0, "knots": 3},
            "stance": flat_stance(),
            "objective": "robust"}
    (folder / "task.yaml").write_text(yaml.safe_dump(task), encoding="utf-8")
    return load_task(folder / "task.yaml")


@pytest.fixture(scope="module")
def transcription(twelve_joint_task):
    with Planner() as planner:
        yield planner.transcription(twelve_joint_task, "robust")


def test_the_test_robot_is_the_mislabelling_case(twelve_joint_task):
    robot = twelve_joint_task.robot
    assert robot.nj == 12 and 6 * 3 == 6 + robot.nj


def test_robust_balance_rows_are_labelled_as_base_rows(twelve_joint_task, transcription):
    base = set(velocity_names(twelve_joint_task.robot)[:6])
    group = transcription.constraints.group("robust balance")
    assert len(group.labels) == 18 * twelve_joint_task.knots
    assert {label.who for label in group.labels} == base
    assert {label.family for label in group.labels} == {"robust balance"}
    # each knot's 18 rows: the six base rows for push direction x, then y, then z
    knot0 = [label.who for label in group.labels if label.knot == 0]
    assert knot0 == velocity_names(twelve_joint_task.robot)[:6] * 3


def test_diagnosis_names_base_rows_of_the_violated_balance(twelve_joint_task, transcription):
    # A point with margin 50 N and zero contact-force gains violates the robust base balance
    # by 50 N times the base rows of the disturbance Jacobian (Pinocchio's frame Jacobian,
    # world-aligned); diagnosis must blame base rows only, never a joint.
    task = twelve_joint_task
    robot = task.robot
    arrays = transcription.variables.unpack(transcription.variables.zeros())
    arrays["q"][:] = robot.standing_posture[:, None]
    arrays["rho0"][:] = 50.0
    outcome = SimpleNamespace(task=task, last=arrays, transcription=transcription, stages=[])
    found = {v.family: v for v in diagnose(outcome)}["robust balance"]
    assert found.worst and set(found.worst) <= set(velocity_names(robot)[:6])
    model, data = robot.model, robot.model.createData()
    pin.computeJointJacobians(model, data, robot.standing_posture)
    pin.updateFramePlacements(model, data)
    je = pin.getFrameJacobian(model, data, model.getFrameId("push_point"), pin.ReferenceFrame.LOCAL_WORLD_ALIGNED)[:3]
    weight = robot.mass * np.linalg.norm(robot.gravity)
    assert found.largest == pytest.approx(50.0 * np.abs(je[:, :6]).max() / weight, rel=1e-9)
