"""Self-collision pairs of the robot file: reading, distances, the NLP's rows, plan checks, pre-solve, diagnosis.

References: Coal (hpp-fcl, shipped with Pinocchio) for distances between
capsules, spheres and boxes (GJK); Pinocchio's forward kinematics of the plan
file's own URDF for where the shapes are. Neither goes through brace's CasADi
rows or its separating planes.
"""
from __future__ import annotations

import copy
from pathlib import Path

import coal
import numpy as np
import pinocchio as pin
import pytest
import yaml

from clearance_checks import shape_geometry
from optimizer.analysis.clearance import plan_self_clearance
from optimizer.analysis.failure import diagnose
from optimizer.analysis.plan_check import check_plan
from optimizer.analysis.presolve import require_possible
from optimizer.cli import main
from optimizer.errors import InfeasibleTask, ModelError
from optimizer.planfile import load_plan, save_plan
from optimizer.planner import Planner
from optimizer.problem.task import load_task
from optimizer.robot.model import load_robot
from optimizer.robot.separation import hull_separation
from test_solve_demo_tasks import plan_of

ROOT = Path(__file__).resolve().parents[1]
DEMO_PAIR = "gripper/capsule0 vs fl_shank/capsule0"


def robot_file(tmp_path, pairs, distance=None) -> Path:
    """The demo robot file with its own ``collision.self_pairs`` (and ``self_distance``)."""
    data = yaml.safe_load((ROOT / "models" / "stilt.yaml").read_text())
    data["urdf"] = str(ROOT / "models" / "stilt.urdf")
    data["collision"]["self_pairs"] = pairs
    if distance is not None:
        data["collision"]["self_distance"] = distance
    path = tmp_path / "robot.yaml"
    path.write_text(yaml.safe_dump(data))
    return path


def task_file(tmp_path, name: str, robot: Path, **changes) -> Path:
    data = yaml.safe_load((ROOT / "tasks" / f"{name}.yaml").read_text())
    data["robot"] = str(robot)
    data.update(changes)
    path = tmp_path / f"{name}.yaml"
    path.write_text(yaml.safe_dump(data))
    return path


def coal_distances(plan) -> np.ndarray:
    """Per knot and self pair of the plan file: Coal's distance of the two shapes placed by Pinocchio, m."""
    section = plan.meta["clearance"]
    shapes = {s["name"]: s for s in section["shapes"]}
    model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
    data = model.createData()
    out = np.zeros((len(plan.q), len(section["self_pairs"])))
    for k, q in enumerate(plan.q):
        pin.framesForwardKinematics(model, data, q)
        for i, pair in enumerate(section["self_pairs"]):
            geometry = []
            for name in (pair["first"], pair["second"]):
                shape = shapes[name]
                placement = data.oMf[model.getFrameId(shape["link"], pin.FrameType.BODY)]
                geometry += shape_geometry(np.asarray(shape["points"], float), shape["radius"], placement)
            out[k, i] = coal.distance(*geometry, coal.DistanceRequest(), coal.DistanceResult())
    return out


def test_robot_file_pairs_expand_to_shape_pairs(tmp_path):
    robot = load_robot(robot_file(tmp_path, [
        {"between": "gripper", "and": ["body", "fl_shank/capsule0"], "distance": 0.05},
        {"between": ["gripper/capsule0"], "and": "body", "distance": 0.01},
        {"between": ["arm_upper", "arm_fore"], "and": "fr_thigh"}], distance=0.04))
    shapes = robot.collision.shapes
    named = {(shapes[p.first].name, shapes[p.second].name): p.distance for p in robot.collision.self_pairs}
    # a pair named twice keeps the larger distance; the default comes from self_distance
    assert named == {("gripper/capsule0", "body/box0"): 0.05, ("gripper/capsule0", "fl_shank/capsule0"): 0.05,
                     ("arm_upper/capsule0", "fr_thigh/capsule0"): 0.04, ("arm_fore/capsule0", "fr_thigh/capsule0"): 0.04}


@pytest.mark.parametrize("pairs, field", [
    ([{"between": "grippr", "and": "body"}], "collision.self_pairs[0].between"),
    ([{"between": ["gripper"], "and": ["body", "no_link"]}], "collision.self_pairs[0].and[1]"),
    ([{"between": "gripper", "and": "gripper/capsule0"}], "collision.self_pairs[0].and"),
    ([{"between": "gripper", "with": "body"}], "collision.self_pairs[0].with"),
])
def test_bad_pair_gives_one_line_error_naming_file_and_field(tmp_path, pairs, field):
    path = robot_file(tmp_path, pairs)
    with pytest.raises(ModelError) as err:
        load_robot(path)
    text = str(err.value)
    assert f"field '{field}'" in text and str(path) in text and "\n" not in text


def test_bad_pair_name_exits_2_on_the_command_line(tmp_path, capsys):
    path = robot_file(tmp_path, [{"between": "grippr", "and": "body"}])
    assert main(["check-model", str(path)]) == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "self_pairs[0].between" in err and "gripper" in err
    assert "Traceback" not in err


def test_hull_separation_agrees_with_coal():
    # Reference: Coal's GJK distance between capsules, spheres and a box. brace's figure is a lower
    # bound by construction and should equal the distance up to round-off.
    rng = np.random.default_rng(7)
    corners = np.array([[x, y, z] for x in (0.1, 0.5) for y in (-0.2, 0.1) for z in (0.0, 0.15)])
    box, box_tf = coal.Box(0.4, 0.3, 0.15), coal.Transform3s(np.eye(3), np.array([0.3, -0.05, 0.075]))
    for _ in range(100):
        a, b = rng.uniform(-0.6, 0.8, (2, 3))
        ra, rb = rng.uniform(0.0, 0.05, 2)
        capsule, tf = shape_geometry(np.array([a, b]), ra, pin.SE3.Identity())
        for points, radius, other, other_tf in [
            (corners, 0.0, box, box_tf),
            (np.array([b]), rb, coal.Sphere(rb), coal.Transform3s(np.eye(3), b)),
        ] + [(np.array([c, d]), rb, *shape_geometry(np.array([c, d]), rb, pin.SE3.Identity()))
             for c, d in [rng.uniform(-0.6, 0.8, (2, 3))]]:
            exact = coal.distance(capsule, tf, other, other_tf, coal.DistanceRequest(), coal.DistanceResult())
            ours = hull_separation(np.array([a, b]), points).gap - ra - radius
            if exact > 1e-6:
                assert ours == pytest.approx(exact, abs=1e-6)
            else:
                assert ours <= 1e-6


def test_solved_plan_keeps_every_named_pair_apart():
    # The stair-landing robust plan (8 knots, the demo-task tests' own solve). Its gripper passes the
    # front-left shank at the pair's 2 cm. Reference: Coal distances of the shapes placed by Pinocchio
    # forward kinematics, every pair of meta.clearance.self_pairs at every knot.
    task, plan = plan_of("stair_landing", "robust")
    pairs = plan.meta["clearance"]["self_pairs"]
    assert len(pairs) == len(task.robot.collision.self_pairs) == 10
    required = np.array([p["distance"] for p in pairs])
    distances = coal_distances(plan)
    assert np.all(distances >= required - 1e-6), distances.min(axis=0)
    # the rows are active: some pair sits at its distance, so they changed the plan
    assert np.min(distances - required) < 1e-3
    ours = plan_self_clearance(plan)
    assert ours.passed and np.allclose([k.distance - k.required for k in ours.knots],
                                       (distances - required).min(axis=1), atol=1e-6)
    assert check_plan(plan).passed


def test_plan_check_fails_a_plan_with_a_pair_overlapping(tmp_path):
    # The same plan with the forearm folded back onto the body at one knot (elbow at its upper limit,
    # shoulder lowered): Coal finds the pair overlapping; brace's check must fail at that knot.
    task, plan = plan_of("stair_landing", "robust")
    bent = copy.deepcopy(plan)
    model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
    k = 3
    for joint, value in (("arm_shoulder", 1.2), ("arm_elbow", 2.9)):
        bent.q[k, model.idx_qs[model.getJointId(joint)]] = value
    save_plan(bent, tmp_path / "bent.npz")
    bent = load_plan(tmp_path / "bent.npz")
    distances = coal_distances(bent)
    required = np.array([p["distance"] for p in bent.meta["clearance"]["self_pairs"]])
    assert np.any(distances[k] < required)
    found = plan_self_clearance(bent)
    assert [s.knot for s in found.short] == [k]
    failed = {r.name: r for r in check_plan(bent).failures()}
    assert "self-clearance" in failed and failed["self-clearance"].failing_knots == [k]
    assert failed["self-clearance"].knot == k and "body" in failed["self-clearance"].reason()


def test_fixed_start_breaking_a_pair_is_rejected_before_the_solve(tmp_path):
    # The drawer pull starts fixed at the standing stance, where the gripper is 0.47 m from the front
    # thighs (Coal, test above's method); a pair asking 0.6 m can only be met by moving through a
    # posture the start forbids: pre-solve must refuse the task and name the pair.
    robot = robot_file(tmp_path, [{"between": "gripper", "and": "fl_thigh", "distance": 0.6}])
    task = load_task(task_file(tmp_path, "drawer_pull", robot))
    with pytest.raises(InfeasibleTask) as err:
        require_possible(task)
    found = [f for f in err.value.findings if f.check == "self clearance"]
    assert found and "gripper/capsule0 vs fl_thigh/capsule0" in found[0].what
    assert found[0].impossible and 0.1 < found[0].shortfall < 0.2


def test_check_model_flags_a_pair_broken_when_standing(tmp_path, capsys):
    # Standing, the gripper is 0.47 m from the front-left thigh (Coal, checked here on the same posture).
    robot = load_robot(ROOT / "models" / "stilt.yaml")
    data = robot.model.createData()
    pin.framesForwardKinematics(robot.model, data, robot.standing_posture)
    shapes = {s.link: s for s in robot.collision.shapes}
    geometry = []
    for link in ("gripper", "fl_thigh"):
        placement = data.oMf[robot.model.getFrameId(link, pin.FrameType.BODY)]
        geometry += shape_geometry(shapes[link].points, shapes[link].radius, placement)
    apart = coal.distance(*geometry, coal.DistanceRequest(), coal.DistanceResult())
    for asked, code in ((apart - 0.01, 0), (apart + 0.01, 1)):
        path = robot_file(tmp_path, [{"between": "gripper", "and": "fl_thigh", "distance": float(asked)}])
        assert main(["check-model", str(path)]) == code
        out = capsys.readouterr().out
        assert f"least room standing: gripper/capsule0 vs fl_thigh/capsule0 {apart * 100:.1f} cm apart" in out
        assert ("standing posture brings gripper/capsule0 vs fl_thigh/capsule0" in out) == (code == 1)


def test_pair_no_posture_can_keep_ends_with_a_diagnosis_naming_it(tmp_path):
    # The upper arm hangs from the shoulder, 0.1 m above the body's top (URDF): no posture keeps it
    # 0.3 m from the body. Solved anyway (no pre-solve), no plan comes out and the diagnosis names
    # self clearance and that pair. Reference for the stopping point: Coal distance below 0.3 m.
    robot = robot_file(tmp_path, [{"between": "arm_upper", "and": "body", "distance": 0.3}])
    task = load_task(task_file(tmp_path, "drawer_pull", robot, solver={"max_iter": 60},
                               horizon={"duration": 2.5, "knots": 6}))
    with Planner() as planner:
        outcome = planner.solve(task, "feasible")
    assert not outcome.success and outcome.plan is None
    found = {v.family: v for v in diagnose(outcome)}
    assert "self clearance" in found, list(found)
    assert found["self clearance"].worst[0] == "arm_upper/capsule0 vs body/box0"
