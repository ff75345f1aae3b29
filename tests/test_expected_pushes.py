"""Pushes that come from the task: expected directions, wrench length scale, the drawer demo.

External references: NumPy's SVD (the ellipsoid's semi-axes are W's singular
values and vectors), the lifted response LP of tests/certify_checks.py
(SciPy HiGHS, built from the plan file alone) for what is rejectable.
"""
import dataclasses
import json

import numpy as np
import pytest
import yaml

from certify_checks import LiftedLP, sampled_bounds
from optimizer.analysis.certify import certify_plan
from optimizer.analysis.plan_check import check_plan
from optimizer.errors import TaskError
from optimizer.planner import solve
from optimizer.problem.push_shape import shape_from_directions, wrench_shape
from optimizer.problem.task import load_task
from test_task_file import BASE_TASK

KNOTS = 8


def test_orthogonal_directions_give_their_weights_as_semi_axes():
    W = shape_from_directions([[0, 0, 2.0], [1, 1, 0]], [0.5, 1.5], 0.1)
    _, axes, vt = np.linalg.svd(W)
    expected = {0.5: [0, 0, 1], 1.5: np.array([1, 1, 0]) / np.sqrt(2), 0.1: np.array([1, -1, 0]) / np.sqrt(2)}
    for value, direction in expected.items():
        i = int(np.argmin(np.abs(axes - value)))
        assert axes[i] == pytest.approx(value, abs=1e-12)
        assert abs(abs(vt[i] @ direction) - 1.0) < 1e-12


def test_wrench_length_scale_measures_moments_against_forces():
    # |f|^2 + |m / L|^2 <= rho^2: a pure moment of L rho is on the boundary of W u, |u| <= rho
    L, rho = 0.3, 50.0
    u = np.linalg.solve(wrench_shape(L), np.array([0, 0, 0, 0, 0, L * rho]))
    assert np.linalg.norm(u) == pytest.approx(rho)


def write(tmp_path, disturbance):
    data = json.loads(json.dumps(BASE_TASK))
    data["disturbances"] = [disturbance]
    path = tmp_path / "task.yaml"
    path.write_text(yaml.safe_dump(data))
    return path


def test_expected_pushes_in_a_task_file(tmp_path):
    task = load_task(write(tmp_path, {"frame": "grip_point", "kind": "force",
                                      "expected": {"directions": [{"along": [1, 0, 0]}], "others": 0.2}}))
    assert np.allclose(task.disturbances[0].shape, np.diag([1.0, 0.2, 0.2]), atol=1e-12)
    task = load_task(write(tmp_path, {"frame": "grip_point", "kind": "wrench", "length_scale": 0.4}))
    assert np.allclose(task.disturbances[0].shape, np.diag([1, 1, 1, 0.4, 0.4, 0.4]))


@pytest.mark.parametrize("entry, field, expected", [
    ({"kind": "wrench", "expected": {"directions": [{"along": [1, 0, 0]}]}}, "expected", "force disturbance"),
    ({"kind": "force", "length_scale": 0.3}, "length_scale", "wrench disturbance"),
    ({"kind": "force", "shape": np.eye(3).tolist(), "expected": {"directions": [{"along": [1, 0, 0]}]}},
     "expected", "at most one"),
    ({"kind": "force", "expected": {"directions": [{"along": [0, 0, 0]}]}}, "directions[0].along", "non-zero"),
    ({"kind": "force", "expected": {"directions": []}}, "expected.directions", "non-empty"),
    ({"kind": "force", "expected": {"directions": [{"along": [1, 0, 0], "weight": -1}]}}, "weight", "> 0"),
])
def test_bad_expected_pushes_name_field_and_expectation(tmp_path, entry, field, expected):
    with pytest.raises(TaskError) as err:
        load_task(write(tmp_path, dict(entry, frame="grip_point")))
    assert field in str(err.value) and expected in str(err.value) and "\n" not in str(err.value)


@pytest.fixture(scope="module")
def drawer_plans():
    task = load_task("tasks/drawer_pull.yaml")
    assert np.allclose(task.disturbances[0].shape, np.diag([1.0, 0.2, 0.2]), atol=1e-12)
    isotropic = dataclasses.replace(task, disturbances=[dataclasses.replace(task.disturbances[0], shape=np.eye(3))])
    plans = {}
    for name, variant in (("directional", task), ("isotropic", isotropic)):
        outcome = solve(variant, "robust", knots=KNOTS)
        assert outcome.success, [(s.objective, s.status) for s in outcome.stages]
        plans[name] = outcome.plan
    return plans


def test_directional_plan_keeps_at_least_the_isotropic_margin(drawer_plans):
    # The isotropic ball of radius rho contains the ellipsoid W u, |u| <= rho, so the
    # directional problem is a relaxation: its planned and exact margins are no smaller.
    directional, isotropic = drawer_plans["directional"], drawer_plans["isotropic"]
    assert np.all(directional.margin >= isotropic.margin - 1e-6 * isotropic.margin.max())
    exact_d = [c.rho for c in certify_plan(directional).knots]
    exact_i = [c.rho for c in certify_plan(isotropic).knots]
    assert np.all(np.array(exact_d) >= np.array(exact_i) - 1e-6 * max(exact_i))


def test_certification_of_a_directional_plan_rejects_every_push_in_the_scaled_ball(drawer_plans):
    plan = drawer_plans["directional"]
    cert = certify_plan(plan, [0, KNOTS // 2])
    rng = np.random.default_rng(7)
    for c in cert.knots:
        lower, upper = sampled_bounds(plan, c.knot, 60)
        assert lower - 1e-6 * upper <= c.rho <= upper * (1 + 1e-6)
        lp = LiftedLP(plan, c.knot)
        for u in rng.normal(size=(25, 3)):
            u *= (1 - 1e-6) * c.rho * rng.uniform() ** (1 / 3) / np.linalg.norm(u)
            assert lp.contains(u), (c.knot, u)


def test_drawer_plans_pass_the_physics_checks(drawer_plans):
    # The checks certify runs first recompute the plan with Pinocchio (rnea with the contact
    # forces, frame placements, integrate / difference) from the file alone: every plan brace
    # solve writes for a demo task must pass them.
    for name, plan in drawer_plans.items():
        report = check_plan(plan)
        assert report.passed, (name, [r.reason() for r in report.failures()])
