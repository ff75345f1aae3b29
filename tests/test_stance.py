"""Stance IK and the static support LP against Pinocchio and textbook statics.

References:
- Pinocchio ``framesForwardKinematics``: independent check that every foot
  sits on its foothold.
- Newton's laws for a body at rest: the contact forces sum to the weight
  (mass from ``pinocchio.computeTotalMass``) and their moments about the
  centre of mass (``pinocchio.centerOfMass``) cancel.
- Inclined plane (textbook Coulomb friction): a body on a slope of angle theta
  holds iff mu >= tan(theta); with a pyramid of m facets inscribed in the cone
  and the slope along a facet's axis, iff mu cos(pi / m) >= tan(theta)
  (common practice for linearized cones).
- Two facing slopes (a trench) hold below mu = tan(theta) by squeezing
  (textbook statics, docs/formulation.md section 8).
"""
import math
from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest
from scipy.spatial import Delaunay

from optimizer.errors import InfeasibleTask
from optimizer.problem.schedule import stance_at
from optimizer.problem.stance import solve_stance, stance_checks, static_support_lp
from optimizer.problem.task import HandTarget, load_task, make_contact
from optimizer.problem.terrain import slope_normal
from optimizer.robot.model import load_robot

ROOT = Path(__file__).resolve().parents[1]
DEMOS = sorted((ROOT / "tasks").glob("*.yaml"))
FEET = {"foot_fl": (0.25, 0.19), "foot_fr": (0.25, -0.19), "foot_rl": (-0.25, 0.19), "foot_rr": (-0.25, -0.19)}


@pytest.fixture(scope="module")
def robot():
    return load_robot(ROOT / "models" / "stilt.yaml")


def unlimited(robot):
    return np.full(robot.nj, -np.inf), np.full(robot.nj, np.inf)


def frame_positions(robot, q, frames):
    data = robot.model.createData()
    pin.framesForwardKinematics(robot.model, data, q)
    return np.array([data.oMf[robot.model.getFrameId(f)].translation for f in frames])


def ramp_contacts(degrees, mu):
    theta = math.radians(degrees)
    normal = slope_normal(theta, (1.0, 0.0))
    return [make_contact(f, [x, y, math.tan(theta) * x], normal, mu) for f, (x, y) in FEET.items()]


def trench_contacts(degrees, mu):
    theta = math.radians(degrees)
    out = []
    for frame, (x, y) in FEET.items():
        side = 1.0 if y > 0 else -1.0
        out.append(make_contact(frame, [x, y, math.tan(theta) * (abs(y) - 0.05)],
                                slope_normal(theta, (0.0, side)), mu))
    return out


@pytest.fixture(scope="module")
def demo_checks():
    return {p.stem: (load_task(p), stance_checks(load_task(p))) for p in DEMOS}


@pytest.mark.parametrize("name", [p.stem for p in DEMOS])
def test_demo_stances_are_reachable_and_statically_held(demo_checks, name):
    task, checks = demo_checks[name]
    robot = task.robot
    assert [c.label for c in checks] == ["start"] + [h.label for h in task.hand_targets]
    for check, target in zip(checks, [None] + task.hand_targets):
        # the feet in stance at the posture's time, on the footholds of that time (a stepping task moves them)
        stance = stance_at(task, 0.0 if target is None else target.t_start)
        feet = frame_positions(robot, check.q, [c.frame for c in stance])
        np.testing.assert_allclose(feet, np.array([c.foothold for c in stance]), rtol=0, atol=1e-6)
        assert np.all(check.q[7:] >= robot.joint_lower - 1e-12) and np.all(check.q[7:] <= robot.joint_upper + 1e-12)
        if target is not None:
            hand = frame_positions(robot, check.q, [target.frame])[0]
            np.testing.assert_allclose(hand, target.position, rtol=0, atol=1e-3)
        # Designed with margin: every limit kept by >= 3 % (see docs/task-files.md).
        assert check.support.feasible and check.support.slack >= 0.03, (check.label, check.support.tight)


def test_flat_stance_obeys_newton(robot):
    contacts = [make_contact(f, [x, y, 0.0], [0, 0, 1], 0.8) for f, (x, y) in FEET.items()]
    q = solve_stance(robot, contacts)
    result = static_support_lp(robot, q, contacts, facets=4, min_normal_force=5.0)
    assert result.feasible and result.slack > 0
    weight = pin.computeTotalMass(robot.model) * 9.81
    np.testing.assert_allclose(result.forces.sum(axis=0), [0.0, 0.0, weight], rtol=0, atol=1e-6 * weight)
    com = pin.centerOfMass(robot.model, robot.model.createData(), q)
    points = np.array([c.foothold for c in contacts])
    moment = np.cross(points - com, result.forces).sum(axis=0)
    np.testing.assert_allclose(moment, 0.0, atol=1e-6 * weight)
    assert np.all(result.forces[:, 2] >= 5.0 - 1e-9)
    assert np.all(result.tau <= robot.torque_upper + 1e-9) and np.all(result.tau >= robot.torque_lower - 1e-9)


def test_inclined_plane_at_40_degrees(robot):
    # Textbook: holds iff mu >= tan 40 = 0.839. Unlimited torques, no minimum normal force,
    # 16 facets so the inscribed pyramid reaches mu cos(pi/16) = 0.98 mu.
    q = solve_stance(robot, ramp_contacts(40.0, 1.0))
    com = pin.centerOfMass(robot.model, robot.model.createData(), q)
    feet = np.array([c.foothold for c in ramp_contacts(40.0, 1.0)])
    # Precondition (tipping, not sliding): the vertical through the CoM meets the slope inside the feet.
    assert Delaunay(feet[:, :2]).find_simplex(com[:2]) >= 0
    assert not static_support_lp(robot, q, ramp_contacts(40.0, 0.5), 16, 0.0, unlimited(robot)).feasible
    assert static_support_lp(robot, q, ramp_contacts(40.0, 1.0), 16, 0.0, unlimited(robot)).feasible
    # And with the demo robot's own torque limits.
    assert static_support_lp(robot, q, ramp_contacts(40.0, 1.0), 16, 0.0).feasible


@pytest.mark.parametrize("facets", [4, 8])
def test_pyramid_threshold_on_a_slope(robot, facets):
    # Slope along t1 (a facet axis): the inscribed pyramid holds iff mu cos(pi/m) >= tan(theta).
    threshold = math.tan(math.radians(40.0)) / math.cos(math.pi / facets)
    q = solve_stance(robot, ramp_contacts(40.0, 1.0))
    below = static_support_lp(robot, q, ramp_contacts(40.0, 0.97 * threshold), facets, 0.0, unlimited(robot))
    above = static_support_lp(robot, q, ramp_contacts(40.0, 1.03 * threshold), facets, 0.0, unlimited(robot))
    assert not below.feasible and below.slack < 0
    assert above.feasible and above.slack > 0


def test_trench_holds_by_squeezing_where_one_slope_slides(robot):
    # mu = 0.6 < tan 35 = 0.70: a single slope slides, two facing slopes hold.
    q_ramp = solve_stance(robot, ramp_contacts(35.0, 0.6))
    assert not static_support_lp(robot, q_ramp, ramp_contacts(35.0, 0.6), 16, 0.0, unlimited(robot)).feasible
    q_trench = solve_stance(robot, trench_contacts(35.0, 0.6))
    result = static_support_lp(robot, q_trench, trench_contacts(35.0, 0.6), 4, 0.0, unlimited(robot))
    assert result.feasible
    # Squeezing: the left feet push toward -y, the right toward +y (forces on the robot).
    assert np.all(result.forces[[0, 2], 1] < 0) and np.all(result.forces[[1, 3], 1] > 0)


def test_torque_limits_bind(robot):
    # Textbook statics: shrinking every torque limit to 1 N m cannot carry ~390 N of weight.
    contacts = [make_contact(f, [x, y, 0.0], [0, 0, 1], 0.8) for f, (x, y) in FEET.items()]
    q = solve_stance(robot, contacts)
    result = static_support_lp(robot, q, contacts, 4, 0.0, (np.full(robot.nj, -1.0), np.full(robot.nj, 1.0)))
    assert not result.feasible and any(name.kind == "torque" for name in result.tight)


def test_unreachable_foothold_names_the_foot(robot):
    contacts = [make_contact(f, [x, y, 0.0], [0, 0, 1], 0.8) for f, (x, y) in FEET.items()]
    contacts[1] = make_contact("foot_fr", [1.6, -0.19, 0.0], [0, 0, 1], 0.8)
    with pytest.raises(InfeasibleTask, match=r"foot_fr stays \d\.\d{4} m from its foothold \[1.6, -0.19, 0.0\]"):
        solve_stance(robot, contacts, max_iter=60)


def test_hand_target_is_reached_with_the_feet_kept(robot):
    contacts = [make_contact(f, [x, y, 0.0], [0, 0, 1], 0.8) for f, (x, y) in FEET.items()]
    rng = np.random.default_rng(3)
    target = np.array([0.6, 0.0, 0.35]) + rng.uniform(-0.1, 0.1, 3)
    rotation = pin.rpy.rpyToMatrix(0.0, 0.5, 0.0)     # gripper pitched down
    q = solve_stance(robot, contacts, hand_target=HandTarget("grip_point", target, rotation, 1.0, 1.0))
    data = robot.model.createData()
    pin.framesForwardKinematics(robot.model, data, q)
    grip = data.oMf[robot.model.getFrameId("grip_point")]
    np.testing.assert_allclose(grip.translation, target, atol=1e-3)
    np.testing.assert_allclose(grip.rotation, rotation, atol=1e-2)
    feet = frame_positions(robot, q, list(FEET))
    np.testing.assert_allclose(feet, [c.foothold for c in contacts], atol=1e-6)
