"""Collision shapes, terrain surfaces, clearance proofs before a solve and clearance of plans.

References: Pinocchio's own URDF geometry parser (``buildGeomFromUrdfString``)
and forward kinematics for where shapes sit; Coal (hpp-fcl) for distances
between shapes and planes or boxes; the task files' own numbers for the
terrain.
"""
from __future__ import annotations

import copy
import json
from pathlib import Path
from types import SimpleNamespace

import coal
import numpy as np
import pinocchio as pin
import pytest
import yaml

from certify_checks import demo_standing, standing_plan
from optimizer.analysis.clearance import plan_clearance
from optimizer.analysis.presolve import require_possible
from optimizer.errors import InfeasibleTask, ModelError
from optimizer.planfile import load_plan, save_plan
from optimizer.problem.geometry import Surface
from optimizer.problem.task import load_task
from optimizer.robot.model import load_robot

ROOT = Path(__file__).resolve().parents[1]
MODELS = Path(__file__).parent / "models"
TASKS = ["stair_landing", "steep_ramp", "trench", "crawl_space", "drawer_pull"]
CYLINDER = ('<collision><origin xyz="0.01 0.02 -0.14" rpy="0.3 0.2 0.1"/>'
            '<geometry><cylinder radius="0.03" length="0.28"/></geometry></collision>')


def robot_file(tmp_path, collision: dict | None, urdf_text: str | None = None) -> Path:
    """A copy of the demo robot file with its own ``collision`` section (and URDF text)."""
    data = yaml.safe_load((ROOT / "models" / "stilt.yaml").read_text())
    urdf = tmp_path / "robot.urdf"
    urdf.write_text(urdf_text or (ROOT / "models" / "stilt.urdf").read_text())
    data["urdf"] = str(urdf)
    data.pop("collision")
    if collision is not None:
        data["collision"] = collision
    path = tmp_path / "robot.yaml"
    path.write_text(yaml.safe_dump(data))
    return path


def test_urdf_collision_elements_match_pinocchios_geometry_parser(tmp_path):
    # Reference: Pinocchio's URDF geometry parser places each <collision> element on its joint;
    # spheres sit at the centre, boxes span their half sides, cylinders along their local z.
    text = (ROOT / "models" / "stilt.urdf").read_text()
    link = text.index('<link name="fl_thigh">')
    text = text[:link] + '<link name="fl_thigh">' + CYLINDER + text[link + len('<link name="fl_thigh">'):]
    robot = load_robot(robot_file(tmp_path, {"radius": 0.0}, text))
    geometry = pin.buildGeomFromUrdfString(robot.model, text, pin.GeometryType.COLLISION)
    assert len(robot.collision.shapes) == len(geometry.geometryObjects) == 6
    ours = sorted(robot.collision.shapes, key=lambda s: (s.joint, s.kind, s.joint_points.sum()))
    theirs = sorted(geometry.geometryObjects, key=lambda g: (g.parentJoint, type(g.geometry).__name__ != "Box",
                                                             g.placement.translation.sum()))
    for shape, obj in zip(ours, theirs):
        assert shape.joint == obj.parentJoint
        g, placement = obj.geometry, obj.placement
        if isinstance(g, coal.Sphere):
            assert shape.kind == "sphere" and shape.radius == pytest.approx(g.radius)
            np.testing.assert_allclose(shape.joint_points[0], placement.translation, atol=1e-12)
        elif isinstance(g, coal.Box):
            corners = np.array([placement.act(np.array(s) * g.halfSide) for s in np.ndindex(2, 2, 2)
                                for s in [np.array(s) * 2 - 1]])
            assert shape.kind == "box" and shape.radius == 0.0
            np.testing.assert_allclose(np.sort(shape.joint_points, axis=0), np.sort(corners, axis=0), atol=1e-12)
        else:
            assert isinstance(g, coal.Cylinder) and shape.kind == "capsule"
            ends = [placement.act(np.array([0, 0, s * g.halfLength])) for s in (-1, 1)]
            np.testing.assert_allclose(shape.joint_points, ends, atol=1e-12)
            assert shape.radius == pytest.approx(g.radius)


def test_default_capsules_run_between_joint_origins(tmp_path):
    # Reference: Pinocchio forward kinematics: the thigh capsule of a standing robot runs from the
    # hip-flexion joint to the knee joint, the shank capsule from the knee to the foot frame.
    robot = load_robot(robot_file(tmp_path, {"radius": 0.025}))
    model, data = robot.model, robot.model.createData()
    pin.framesForwardKinematics(model, data, robot.standing_posture)
    by_link = {s.link: s for s in robot.collision.shapes if s.kind == "capsule"}
    for leg in ("fl", "rr"):
        thigh, shank = by_link[f"{leg}_thigh"], by_link[f"{leg}_shank"]
        ends = thigh.joint_points @ data.oMi[thigh.joint].rotation.T + data.oMi[thigh.joint].translation
        np.testing.assert_allclose(ends[0], data.oMi[model.getJointId(f"{leg}_hip_flex")].translation, atol=1e-12)
        np.testing.assert_allclose(ends[1], data.oMi[model.getJointId(f"{leg}_knee")].translation, atol=1e-12)
        ends = shank.joint_points @ data.oMi[shank.joint].rotation.T + data.oMi[shank.joint].translation
        np.testing.assert_allclose(ends[1], data.oMf[model.getFrameId(f"foot_{leg}")].translation, atol=1e-12)
        assert thigh.radius == shank.radius == 0.025


def test_robot_file_shapes_replace_and_add(tmp_path):
    robot = load_robot(robot_file(tmp_path, {
        "radius": 0.03, "replace": {"arm_upper": [{"sphere": {"center": [0.2, 0, 0], "radius": 0.05}}], "body": []},
        "add": {"gripper": [{"capsule": {"from": [0, 0, 0], "to": [0.1, 0, 0], "radius": 0.02}}]}}))
    links = [s.link for s in robot.collision.shapes]
    assert "body" not in links and links.count("arm_upper") == 1 and links.count("gripper") == 2
    sphere = next(s for s in robot.collision.shapes if s.link == "arm_upper")
    assert sphere.kind == "sphere" and sphere.radius == 0.05 and sphere.points.tolist() == [[0.2, 0.0, 0.0]]


@pytest.mark.parametrize("section, field", [
    ({"replace": {"no_such_link": []}}, "collision.replace.no_such_link"),
    ({"add": {"gripper": [{"cone": {}}]}}, "collision.add.gripper[0].cone"),
    ({"radius": -0.1}, "collision.radius"),
])
def test_bad_collision_sections_name_the_field(tmp_path, section, field):
    with pytest.raises(ModelError) as err:
        load_robot(robot_file(tmp_path, section))
    assert f"field '{field}'" in str(err.value)


def test_surface_distances_agree_with_coal():
    # Reference: Coal's distance between a capsule and a half-space (exact) or a box (ours is the
    # best separating face: never above the true distance).
    rng = np.random.default_rng(3)
    plane = Surface.plane("p", [0.2, -0.1, 1.0], [0.1, 0.0, 0.3])
    box = Surface.box("b", [0.2, -0.5, 0.0], [0.6, 0.5, 0.3])
    request = coal.DistanceRequest()
    for _ in range(200):
        a, b = rng.uniform(-1, 1.2, 3), rng.uniform(-1, 1.2, 3)
        radius = rng.uniform(0.01, 0.1)
        z = (b - a) / np.linalg.norm(b - a)
        x = np.cross(z, [1.0, 0, 0]) if abs(z[0]) < 0.9 else np.cross(z, [0, 1.0, 0])
        x /= np.linalg.norm(x)
        tf = coal.Transform3s(np.column_stack([x, np.cross(z, x), z]), (a + b) / 2)
        capsule = coal.Capsule(radius, float(np.linalg.norm(b - a)))
        half = coal.Halfspace(plane.normal, plane.offset)
        exact = coal.distance(half, coal.Transform3s(), capsule, tf, request, coal.DistanceResult())
        assert plane.distance(np.array([a, b]), radius) == pytest.approx(exact, abs=1e-9)
        solid = coal.Box(*(box.upper - box.lower))
        box_tf = coal.Transform3s(np.eye(3), (box.upper + box.lower) / 2)
        true = coal.distance(solid, box_tf, capsule, tf, request, coal.DistanceResult())
        assert box.distance(np.array([a, b]), radius) <= true + 1e-9


@pytest.mark.parametrize("task_name", TASKS)
def test_footholds_lie_on_the_surface_they_stand_on(task_name):
    # The terrain's contact placement and its geometry agree: each foothold is on its own surface.
    task = load_task(ROOT / "tasks" / f"{task_name}.yaml")
    surfaces = {s.name: s for s in task.clearance.surfaces}
    for contact in task.contacts:
        surface = surfaces[contact.surface]
        if surface.kind == "plane":
            assert surface.point_distance(contact.foothold) == pytest.approx(0.0, abs=1e-12)
            np.testing.assert_allclose(surface.normal, contact.normal, atol=1e-12)
        else:
            assert contact.foothold[2] == pytest.approx(surface.upper[2])


def _stair_with_pick_at(tmp_path, height: float) -> Path:
    data = yaml.safe_load((ROOT / "tasks" / "stair_landing.yaml").read_text())
    data["robot"] = str(ROOT / "models" / "stilt.yaml")
    data["hand_targets"][0]["position"][2] = height
    path = tmp_path / "task.yaml"
    path.write_text(yaml.safe_dump(data))
    return path


def test_presolve_rejects_a_hand_target_below_a_block_top(tmp_path):
    # The landing (block1) tops out at 0.32 m (task file); a pick at 0.25 m puts the grip point,
    # which lies inside the gripper's collision capsule, inside the block.
    task = load_task(_stair_with_pick_at(tmp_path, 0.25))
    with pytest.raises(InfeasibleTask) as err:
        require_possible(task)
    text = str(err.value) + " ".join(f.text() for f in getattr(err.value, "findings", []) or [])
    assert "clearance" in text and "gripper" in text and "block1" in text
    # 0.33 m is above the top but closer than the 3 cm clearance: still impossible; 0.40 m is fine
    with pytest.raises(InfeasibleTask):
        require_possible(load_task(_stair_with_pick_at(tmp_path, 0.33)))
    assert not [f for f in require_possible(load_task(_stair_with_pick_at(tmp_path, 0.40))) if f.check == "clearance"]


@pytest.mark.parametrize("task_name", TASKS)
def test_every_demo_start_posture_clears_the_terrain(task_name):
    # Independent check (Pinocchio FK + Coal, tests/clearance_checks.py) of the stance IK's start.
    from clearance_checks import smallest_clearances
    from optimizer.planner import plan_meta

    task = load_task(ROOT / "tasks" / f"{task_name}.yaml")
    plan = SimpleNamespace(q=task.initial_posture[None, :], meta=plan_meta(task, "feasible", {}))
    (distance, link, surface), = smallest_clearances(plan, task.raw)
    assert distance >= task.clearance.distance, (link, surface, distance)


def test_plans_without_clearance_still_load_and_are_not_checked(tmp_path):
    plan = standing_plan((MODELS / "box_on_four_feet.urdf").read_text(), ["foot_fl", "foot_fr", "foot_hl", "foot_hr"],
                         0.25, margin=[0.0])
    assert "clearance" not in plan.meta
    save_plan(plan, tmp_path / "old.npz")
    assert plan_clearance(load_plan(tmp_path / "old.npz")) is None


def test_plan_file_with_a_broken_clearance_section_is_refused(tmp_path):
    from optimizer.analysis.clearance import clearance_meta
    from optimizer.errors import PlanFileError

    task = load_task(ROOT / "tasks" / "steep_ramp.yaml")
    plan = standing_plan(**demo_standing(), margin=[0.0])
    meta = copy.deepcopy(plan.meta)
    meta["clearance"] = clearance_meta(task.clearance)
    plan.meta = meta
    save_plan(plan, tmp_path / "ok.npz")
    assert plan_clearance(load_plan(tmp_path / "ok.npz")) is not None
    meta["clearance"]["pairs"][0]["shape"] = "no/such0"
    plan.meta = json.loads(json.dumps(meta))
    save_plan(plan, tmp_path / "bad.npz")
    with pytest.raises(PlanFileError) as err:
        load_plan(tmp_path / "bad.npz")
    assert "meta.clearance.pairs[0].shape" in str(err.value)
