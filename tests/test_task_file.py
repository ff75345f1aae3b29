"""Task files: the demo tasks load; every validation rule names file, field and expectation.

External references: Pinocchio's forward kinematics (frames of the robot),
the JSON standard library (meta.task must serialize), numpy linear algebra
(tangent bases orthonormal to the normal).
"""
import json
import os
import textwrap
from pathlib import Path

import numpy as np
import pytest
import yaml

from optimizer.errors import TaskError
from optimizer.problem.task import load_task

ROOT = Path(__file__).resolve().parents[1]
ROBOT = ROOT / "models" / "stilt.yaml"
DEMOS = sorted((ROOT / "tasks").glob("*.yaml"))

BASE_TASK = {
    "robot": str(ROBOT),
    "horizon": {"duration": 2.0, "knots": 20},
    "stance": {"contacts": {
        "foot_fl": {"position": [0.25, 0.18, 0.0], "normal": [0, 0, 1], "friction": 0.8},
        "foot_fr": {"position": [0.25, -0.18, 0.0], "normal": [0, 0, 1], "friction": 0.8},
        "foot_rl": {"position": [-0.25, 0.18, 0.0], "normal": [0, 0, 1], "friction": 0.8},
        "foot_rr": {"position": [-0.25, -0.18, 0.0], "normal": [0, 0, 1], "friction": 0.8},
    }},
    "hand_targets": [{"position": [0.7, 0.0, 0.4], "window": [0.5, 0.8], "label": "pick"}],
}


def write(tmp_path, data, name="task.yaml"):
    path = tmp_path / name
    path.write_text(yaml.safe_dump(data) if isinstance(data, dict) else textwrap.dedent(data))
    return path


def variant(**changes):
    data = json.loads(json.dumps(BASE_TASK))
    for dotted, value in changes.items():
        keys = dotted.split("__")
        node = data
        for key in keys[:-1]:
            node = node[int(key)] if isinstance(node, list) else node[key]
        node[keys[-1]] = value
    return data


def test_the_demo_tasks():
    assert [p.stem for p in DEMOS] == ["crawl_space", "drawer_bump", "drawer_pull", "landing_pick", "stair_landing",
                                       "steep_ramp", "trench", "wall_brace"]


@pytest.mark.parametrize("path", DEMOS, ids=lambda p: p.stem)
def test_demo_task_loads(path):
    task = load_task(path)
    assert task.knots == 60 and 2.0 <= task.duration <= 4.0
    assert [c.frame for c in task.contacts] == ["foot_fl", "foot_fr", "foot_rl", "foot_rr"]
    if path.stem == "drawer_bump":   # the grip as in drawer_pull, and the body bumped sideways
        assert [(d.frame, d.kind) for d in task.disturbances] == [("grip_point", "force"), ("body", "force")]
        assert task.combine_points == "smallest"
        np.testing.assert_allclose(task.disturbances[1].shape, np.diag([0.3, 1.0, 0.3]), atol=1e-12)
    else:
        assert [(d.frame, d.kind) for d in task.disturbances] == [("grip_point", "force")]
    if path.stem.startswith("drawer_"):   # pushes expected along the pull axis, a fifth across it
        np.testing.assert_allclose(task.disturbances[0].shape, np.diag([1.0, 0.2, 0.2]), atol=1e-12)
        assert [h.label for h in task.hand_targets] == ["grip", "pulled"]
    else:
        np.testing.assert_array_equal(task.disturbances[0].shape, np.eye(3))
        labels = {"landing_pick": ["pick"], "wall_brace": ["reach"]}.get(path.stem, ["pick", "place"])
        assert [h.label for h in task.hand_targets] == labels
    for contact in task.contacts:
        basis = np.vstack([contact.tangents, contact.normal])
        np.testing.assert_allclose(basis @ basis.T, np.eye(3), atol=1e-12)
    assert task.initial_posture.shape == (task.robot.nq,)
    assert json.loads(json.dumps(task.raw)) == task.raw


def test_with_knots_copies_and_records_the_count():
    task = load_task(DEMOS[0])
    short = task.with_knots(12)
    assert (short.knots, task.knots) == (12, 60)
    assert short.raw["horizon"]["knots"] == 12 and task.raw["horizon"]["knots"] == 60
    np.testing.assert_allclose(short.times, np.linspace(0, task.duration, 12))
    with pytest.raises(TaskError, match=r"horizon.knots.*a whole number >= 2"):
        task.with_knots(1)


def test_defaults(tmp_path):
    task = load_task(write(tmp_path, BASE_TASK))
    assert task.name == "task" and task.objective == "robust" and task.facets == 4
    assert task.initial_posture is None and task.solver_options == {}
    # Default minimum normal force: 5 % of the average foot load m g / nc.
    assert task.min_normal_force == pytest.approx(0.05 * task.robot.mass * 9.81 / 4, rel=1e-3)
    assert task.robot_path == ROBOT
    target = task.hand_targets[0]
    assert (target.frame, target.t_start, target.t_end, target.orientation) == ("grip_point", 0.5, 0.8, None)


def test_torque_reserve_scales_every_torque_limit_the_plan_meets(tmp_path):
    # Reference: the limits of the robot file loaded on its own (its URDF efforts and overrides).
    plain = load_task(write(tmp_path, BASE_TASK))
    assert plain.torque_reserve == 0.0
    reserved = load_task(write(tmp_path, variant(torque_reserve=0.05)))
    assert reserved.torque_reserve == 0.05
    np.testing.assert_allclose(reserved.robot.torque_upper, 0.95 * plain.robot.torque_upper, rtol=1e-12)
    np.testing.assert_allclose(reserved.robot.torque_lower, 0.95 * plain.robot.torque_lower, rtol=1e-12)


def test_friction_reserve_scales_every_contact_friction_the_plan_meets(tmp_path):
    # Reference: the coefficients written in the task file (0.8 on every contact).
    plain = load_task(write(tmp_path, BASE_TASK))
    assert plain.friction_reserve == 0.0
    reserved = load_task(write(tmp_path, variant(friction_reserve=0.15)))
    assert reserved.friction_reserve == 0.15
    np.testing.assert_allclose([c.friction for c in reserved.contacts], [0.8 * 0.85] * 4, rtol=1e-12)
    np.testing.assert_allclose(reserved.robot.torque_upper, plain.robot.torque_upper, rtol=0)


def test_friction_reserve_also_scales_a_stance_interval_on_its_own_surface(tmp_path):
    # Reference: the coefficients written in the task file (0.8 for the contact, 0.5 for its second foothold).
    schedule = {"foot_fl": [{"window": [0.0, 0.8]},
                            {"window": [1.2, 2.0], "position": [0.3, 0.18, 0.0], "normal": [0, 0, 1], "friction": 0.5}]}
    task = load_task(write(tmp_path, variant(friction_reserve=0.2, stance__schedule=schedule)))
    _, _, friction = task.schedule.surfaces(task.contacts, task.times)
    assert friction[0, 0] == pytest.approx(0.8 * 0.8, rel=1e-12)
    assert friction[-1, 0] == pytest.approx(0.5 * 0.8, rel=1e-12)


def test_relative_robot_path_resolves_against_the_task_folder(tmp_path):
    folder = tmp_path / "deep"
    folder.mkdir()
    data = variant(robot=os.path.relpath(ROBOT, folder))
    assert not Path(data["robot"]).is_absolute()
    assert load_task(write(folder, data)).robot_path == ROBOT


def test_orientation_as_rpy_is_a_rotation(tmp_path):
    task = load_task(write(tmp_path, variant(hand_targets__0__orientation={"rpy_deg": [10, -20, 30]})))
    rot = task.hand_targets[0].orientation
    np.testing.assert_allclose(rot @ rot.T, np.eye(3), atol=1e-12)
    assert np.linalg.det(rot) == pytest.approx(1.0, abs=1e-12)
    # Fixed-axis roll-pitch-yaw, as Pinocchio defines it (pinocchio.rpy.rpyToMatrix).
    import pinocchio as pin
    np.testing.assert_allclose(rot, pin.rpy.rpyToMatrix(*np.radians([10, -20, 30])), atol=1e-12)


@pytest.mark.parametrize("changes, match", [
    ({"horizn": {"duration": 1.0}}, r"'horizn'.*did you mean 'horizon'"),
    ({"stance__contacts__foot_fl__normal": [0, 0, 0]}, r"stance.contacts.foot_fl.normal.*a unit vector"),
    ({"stance__contacts__foot_fl__normal": [0, 0, 2]}, r"stance.contacts.foot_fl.normal.*a unit vector.*length 2"),
    ({"stance__contacts__foot_fl__friction": 0.0}, r"stance.contacts.foot_fl.friction.*a number > 0"),
    ({"stance__contacts__foot_fl__friction": -0.3}, r"friction.*a number > 0"),
    ({"horizon__knots": 1}, r"horizon.knots.*a whole number >= 2"),
    ({"horizon__duration": 0}, r"horizon.duration.*a number > 0"),
    ({"hand_targets__0__window": [1.5, 2.5]}, r"hand_targets\[0\].window.*within the horizon \[0, 2.0\] s"),
    ({"hand_targets__0__window": [0.8, 0.5]}, r"hand_targets\[0\].window.*start <= end"),
    ({"hand_targets__0__time": 0.4}, r"hand_targets\[0\].time.*exactly one of 'time'"),
    ({"hand_targets__0__frame": "grip_pint"}, r"hand_targets\[0\].frame.*a frame of robot 'stilt'"),
    ({"stance__contacts__foot_xx": {"position": [0, 0, 0], "normal": [0, 0, 1], "friction": 1}},
     r"stance.contacts.foot_xx.*a frame of robot"),
    ({"disturbances": [{"frame": "wrist"}]}, r"disturbances\[0\].frame.*a frame of robot"),
    ({"disturbances": [{"kind": "wrench", "shape": [[1, 0, 0], [0, 1, 0], [0, 0, 1]]}]},
     r"disturbances\[0\].shape.*a 6x6 matrix"),
    ({"disturbances": [{"kind": "torque"}]}, r"disturbances\[0\].kind.*one of force, wrench"),
    ({"disturbances": [{"objective_weight": -1}]}, r"disturbances\[0\].objective_weight.*a number >= 0"),
    ({"disturbances": [{"objective_weight": 0}, {"frame": "body", "objective_weight": 0}]},
     r"field 'disturbances'.*at least one point with objective_weight > 0"),
    ({"combine_points": "largest"}, r"combine_points.*one of smallest, weighted-sum"),
    ({"objective": "robustest"}, r"objective.*one of feasible, robust, robust-min, robust-sum, torque"),
    ({"pyramid_facets": 2}, r"pyramid_facets.*a whole number >= 3"),
    ({"min_normal_force": -1.0}, r"min_normal_force.*a number >= 0"),
    ({"torque_reserve": 0.7}, r"torque_reserve.*a number <= 0.5"),
    ({"friction_reserve": -0.1}, r"friction_reserve.*a number >= 0"),
    ({"friction_reserve": 0.6}, r"friction_reserve.*a number <= 0.5"),
    ({"hand_targets__0__orientation": [[1, 0, 0], [0, 1, 0], [0, 0, -1]]}, r"orientation.*a rotation matrix"),
    ({"robot": "missing.yaml"}, r"field 'robot'.*an existing robot file"),
    ({"solver": {"max_iter": [1, 2]}}, r"solver.max_iter.*a number, text or true/false"),
    ({"initial_posture": [0.0] * 25}, r"initial_posture.*a unit base quaternion"),
    ({"initial_posture": "standing"}, r"initial_posture.*'stance', a mapping of stance hints"),
    ({"stance__terrain": {"kind": "flat", "friction": 0.8}}, r"stance.*either 'contacts' or 'terrain' with 'feet'"),
])
def test_validation_errors_name_the_field(tmp_path, changes, match):
    path = write(tmp_path, variant(**changes))
    with pytest.raises(TaskError, match=match) as info:
        load_task(path)
    assert str(path) in str(info.value)


def test_nan_and_inf_are_rejected(tmp_path):
    text = yaml.safe_dump(BASE_TASK).replace("- 0.7\n", "- .nan\n", 1)
    with pytest.raises(TaskError, match=r"hand_targets\[0\].position.*all finite"):
        load_task(write(tmp_path, text))
    text = yaml.safe_dump(BASE_TASK).replace("duration: 2.0", "duration: .inf")
    with pytest.raises(TaskError, match=r"horizon.duration.*a finite number"):
        load_task(write(tmp_path, text))


def test_overlapping_targets_of_one_frame_are_rejected(tmp_path):
    data = variant()
    data["hand_targets"].append({"position": [0.6, 0.2, 0.3], "time": 0.7})
    with pytest.raises(TaskError, match=r"hand_targets\[1\].*overlaps \[0.5, 0.8\] s"):
        load_task(write(tmp_path, data))


def test_posture_list_must_put_the_feet_on_their_footholds(tmp_path):
    task = load_task(write(tmp_path, BASE_TASK))
    q = task.robot.standing_posture.copy()
    q[0] += 0.05                                  # whole robot shifted 5 cm forward
    with pytest.raises(TaskError, match=r"initial_posture.*every contact frame on its foothold.*0.05"):
        load_task(write(tmp_path, variant(initial_posture=q.tolist())))


def test_unreachable_stance_is_a_task_error(tmp_path):
    data = variant(initial_posture="stance", stance__contacts__foot_fl__position=[1.5, 0.18, 0.0])
    with pytest.raises(TaskError, match=r"initial_posture.*footholds the robot reaches.*foot_fl stays"):
        load_task(write(tmp_path, data))


def test_terrain_feet_are_placed_on_the_terrain(tmp_path):
    data = variant()
    data["stance"] = {"terrain": {"kind": "ramp", "slope_deg": 10, "friction": 0.6},
                      "feet": {"foot_fl": [0.25, 0.18], "foot_fr": {"xy": [0.25, -0.18], "surface": "ramp"}}}
    task = load_task(write(tmp_path, data))
    fl = task.contacts[0]
    assert fl.foothold[2] == pytest.approx(0.25 * np.tan(np.radians(10)), abs=1e-12)
    assert fl.friction == 0.6 and fl.normal[0] < 0
