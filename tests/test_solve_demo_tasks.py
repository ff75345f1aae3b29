"""Every demo task solves with every objective; each plan is re-checked from outside.

Plans are solved at a small knot count (fast, for CI); the full 60-knot sizes
run in ``benchmarks/solve.py``. The checks use Pinocchio's numeric algorithms
and SciPy's LP solver only, never our CasADi model.
"""
from __future__ import annotations

import copy
import json
import math
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest
import yaml

from certify_checks import check_plan_against_sampled_lps, internal_push, sampled_bounds
from clearance_checks import smallest_clearances, terrain_primitives
from optimizer.analysis.certify import certify_plan
from optimizer.analysis.clearance import plan_clearance
from optimizer.analysis.model_change import ModelChange
from optimizer.analysis.plan_check import check_plan
from optimizer.cli import main
from optimizer.planfile import load_plan, save_plan
from optimizer.planner import shared_planner, solve
from optimizer.problem.task import load_task, task_from_mapping
from optimizer.transcription.objectives import OBJECTIVES as REGISTERED_OBJECTIVES

TASKS = ["stair_landing", "steep_ramp", "trench", "crawl_space"]
OBJECTIVES = sorted(REGISTERED_OBJECTIVES)   # every registered objective on every demo task
KNOTS = 8
_SOLVED: dict = {}


def solved(task_name: str, objective: str):
    """The plan of (task, objective), solved once per test session.

    The first request for a task solves every objective of :data:`OBJECTIVES`
    from one feasibility seed (as ``brace compare`` does): the seed is the same
    solve for each of them, so solving it once changes no plan.
    """
    key = (task_name, objective)
    if key not in _SOLVED:
        task = load_task(f"tasks/{task_name}.yaml")
        outcomes = shared_planner().solve_objectives(task.with_knots(KNOTS), OBJECTIVES)
        _SOLVED.update({(task_name, name): (task, outcome) for name, outcome in outcomes.items()})
    return _SOLVED[key]


def plan_of(task_name, objective):
    task, outcome = solved(task_name, objective)
    assert outcome.success, [(s.objective, s.status, s.message) for s in outcome.stages]
    return task, outcome.plan


@pytest.mark.parametrize("objective", OBJECTIVES)
@pytest.mark.parametrize("task_name", TASKS)
def test_plan_meets_the_equations_of_motion_by_pinocchio(task_name, objective):
    # Reference: Pinocchio's rnea and frame Jacobians (LOCAL_WORLD_ALIGNED) on the plan file's
    # own URDF: rnea(q, v, a) - S^T tau - sum_c J_c^T lambda_c = 0 at every knot.
    task, plan = plan_of(task_name, objective)
    meta = plan.meta
    model = pin.buildModelFromXML(meta["urdf"], pin.JointModelFreeFlyer())
    data = model.createData()
    weight = pin.computeTotalMass(model) * np.linalg.norm(meta["gravity"])
    ids = [model.getFrameId(name) for name in meta["contact_frames"]]
    for k in range(len(plan.t)):
        q = plan.q[k]
        pin.computeJointJacobians(model, data, q)
        pin.updateFramePlacements(model, data)
        contact = sum(pin.getFrameJacobian(model, data, i, pin.LOCAL_WORLD_ALIGNED)[:3].T @ f
                      for i, f in zip(ids, plan.contact_forces[k]))
        residual = pin.rnea(model, data, q, plan.v[k], plan.a[k]) - np.concatenate([np.zeros(6), plan.tau[k]]) - contact
        assert np.abs(residual).max() <= 1e-6 * weight, (k, np.abs(residual).max())
        # stance contacts stay on their footholds (Pinocchio forward kinematics)
        for i, target in zip(ids, plan.contact_targets[k]):
            assert np.linalg.norm(data.oMf[i].translation - target) <= 1e-5


def model_weight(meta) -> float:
    """m g of the plan's own URDF, N (Pinocchio's total mass)."""
    model = pin.buildModelFromXML(meta["urdf"], pin.JointModelFreeFlyer())
    return pin.computeTotalMass(model) * float(np.linalg.norm(meta["gravity"]))


def task_file_minimum(task_name: str, frame: str, weight: float, nc: int) -> float:
    """The minimum normal force [N] the task file asks of ``frame``, read from the YAML itself (not through
    brace's loader): the foot's own ``min_normal_force``, else the top-level one, else the documented
    default of 5 % of the weight per contact (docs/task-files.md)."""
    data = yaml.safe_load(Path(f"tasks/{task_name}.yaml").read_text(encoding="utf-8"))
    stance = data["stance"]
    foot = (stance.get("feet") or stance.get("contacts") or {}).get(frame)
    if isinstance(foot, dict) and "min_normal_force" in foot:
        return float(foot["min_normal_force"])
    return float(data.get("min_normal_force", 0.05 * weight / nc))


@pytest.mark.parametrize("objective", OBJECTIVES)
@pytest.mark.parametrize("task_name", TASKS)
def test_plan_respects_friction_cones_and_limits(task_name, objective):
    task, plan = plan_of(task_name, objective)
    meta = plan.meta
    for c, (normal, mu) in enumerate(zip(np.array(meta["contact_normals"]), meta["friction"])):
        f = plan.contact_forces[:, c]
        push = f @ normal
        tangential = np.linalg.norm(f - push[:, None] * normal, axis=1)
        # Coulomb friction (textbook): |f_t| <= mu f_n; the plan's pyramid is inscribed, so the
        # true cone holds as well; and the minimum normal force
        assert np.all(tangential <= mu * push + 1e-9)
        assert np.all(push >= task_file_minimum(task_name, meta["contact_frames"][c], model_weight(meta),
                                                len(meta["contact_frames"])) - 1e-9)
    lower, upper = np.array(meta["torque_limits"]["lower"]), np.array(meta["torque_limits"]["upper"])
    assert np.all(plan.tau <= upper) and np.all(plan.tau >= lower)
    model = pin.buildModelFromXML(meta["urdf"], pin.JointModelFreeFlyer())
    assert np.all(plan.q[:, 7:] >= model.lowerPositionLimit[7:] - 1e-9)
    assert np.all(plan.q[:, 7:] <= model.upperPositionLimit[7:] + 1e-9)
    assert np.all(np.abs(plan.v[:, 6:]) <= model.velocityLimit[6:] + 1e-9)


@pytest.mark.parametrize("task_name", TASKS)
def test_knots_follow_the_declared_integrator(task_name):
    # semi-implicit Euler with Pinocchio's integrate: q[k+1] = integrate(q[k], h v[k+1]),
    # v[k+1] = v[k] + h a[k]; rest at both ends.
    task, plan = plan_of(task_name, "robust")
    assert plan.meta["integrator"] == "semi-implicit-euler"
    model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
    h = np.diff(plan.t)
    for k in range(len(h)):
        assert np.allclose(plan.v[k + 1], plan.v[k] + h[k] * plan.a[k], atol=1e-6)
        assert np.allclose(plan.q[k + 1], pin.integrate(model, plan.q[k], h[k] * plan.v[k + 1]), atol=1e-6)
    assert np.allclose(plan.v[[0, -1]], 0.0) and np.allclose(plan.a[-1], 0.0)


@pytest.mark.parametrize("task_name", TASKS)
def test_hand_reaches_its_targets(task_name):
    task, plan = plan_of(task_name, "robust")
    model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
    data = model.createData()
    for target in task.hand_targets:
        inside = [k for k, t in enumerate(plan.t) if target.t_start - 1e-9 <= t <= target.t_end + 1e-9]
        knots = inside or [int(np.argmin(abs(plan.t - 0.5 * (target.t_start + target.t_end))))]
        for k in knots:
            pin.framesForwardKinematics(model, data, plan.q[k])
            assert np.linalg.norm(data.oMf[model.getFrameId(target.frame)].translation - target.position) <= 1e-5


@pytest.mark.parametrize("objective", OBJECTIVES)
@pytest.mark.parametrize("task_name", TASKS)
def test_every_collision_shape_clears_the_terrain_at_every_knot(task_name, objective):
    # Independent of the NLP: Pinocchio forward kinematics of the plan's own URDF places each
    # collision shape; Coal (hpp-fcl) measures its distance to terrain primitives written in the
    # test from the task file's numbers (tests/clearance_checks.py).
    task, plan = plan_of(task_name, objective)
    section = plan.meta["clearance"]
    required = section["distance"]
    assert required == pytest.approx(task.raw.get("clearance", {}).get("distance", 0.03))
    # every shape is checked against every surface of the scene, all its points except a
    # foot's own points near the surface that foot stands on
    surfaces = set(terrain_primitives(task.raw))
    pairs = {(p["shape"], p["surface"]): p["points"] for p in section["pairs"]}
    for shape in section["shapes"]:
        for surface in surfaces:
            points = pairs[(shape["name"], surface)] if (shape["name"], surface) in pairs else []
            if len(points) < len(shape["points"]):
                assert shape["link"].endswith("_shank") and points, (shape["name"], surface)
    for k, (distance, link, surface) in enumerate(smallest_clearances(plan, task.raw)):
        assert distance >= required - 1e-9, (k, distance, link, surface)


def test_a_plan_sunk_into_the_floor_fails_certification_naming_link_and_surface():
    # The crawl-space plan with its base lowered 0.2 m: Coal (tests/clearance_checks.py) finds
    # shapes inside the floor; brace's own clearance analysis must say the same and refuse it.
    task, plan = plan_of("crawl_space", "robust")
    sunk = copy.deepcopy(plan)
    sunk.q[:, 2] -= 0.2
    independent = smallest_clearances(sunk, task.raw)
    ours = plan_clearance(sunk)
    assert not ours.passed and ours.penetrating
    for k, (distance, link, surface) in enumerate(independent):
        assert distance < 0.0 and ours.knots[k].distance <= distance + 1e-9
    assert ours.smallest.surface == "floor"
    report = check_plan(sunk)
    failed = {r.name: r for r in report.failures()}
    assert "clearance" in failed, failed
    reason = failed["clearance"].reason()
    assert "inside floor" in reason and ours.smallest.link in reason
    assert failed["clearance"].failing_knots == list(range(len(plan.t)))
    assert plan_clearance(plan).passed and check_plan(plan).passed


@pytest.mark.parametrize("objective", ["robust", "torque"])
@pytest.mark.parametrize("task_name", TASKS)
def test_margin_never_exceeds_what_sampled_lps_allow(task_name, objective):
    # Upper bound from outside the NLP: SciPy linprog (HiGHS) on the lifted polytope
    # (u, dtau, dlambda) along >= 100 sampled directions (docs/formulation.md sections 7-8).
    task, plan = plan_of(task_name, objective)
    for k in range(len(plan.t)):
        _, upper = sampled_bounds(plan, k, n_dirs=100, seed=k)
        assert plan.margin[k] <= upper * (1 + 1e-6) + 1e-9, (k, plan.margin[k], upper)
        assert plan.margin[k] >= 0.0


@pytest.mark.parametrize("task_name", TASKS)
def test_robust_plan_margin_is_bracketed_and_below_the_exact_figure(task_name):
    # Exact figure bracketed by 200 sampled LPs (upper) and the inscribed ball of their hull
    # (lower); the planned margin is a lower bound of the exact figure.
    task, plan = plan_of(task_name, "robust")
    rows = check_plan_against_sampled_lps(plan, n_dirs=200)
    for row in rows:
        assert row["planned"] <= row["rho"] * (1 + 1e-6) + 1e-9
        assert row["facets"] >= 4


@pytest.mark.parametrize("task_name", TASKS)
def test_robust_objectives_beat_the_torque_baseline(task_name):
    # What a robustness objective is for: larger margins than the torque-minimizing plan,
    # on the same certified figure.
    _, torque = plan_of(task_name, "torque")
    _, robust = plan_of(task_name, "robust")
    _, robust_min = plan_of(task_name, "robust-min")
    assert robust.margin.mean() > torque.margin.mean()
    assert robust_min.margin.min() > torque.margin.min()


def test_default_robust_keeps_the_floor_of_robust_min_and_the_mean_of_the_plain_sum():
    # On the steep ramp the plain sum of margins leaves the first knots with almost nothing
    # (all of facet 0's friction goes to starting the arm). The default objective must hold
    # 90 % of robust-min's smallest margin and 90 % of the plain sum's mean margin, on the
    # plans' certified figures (each checked against sampled SciPy LPs and the exact
    # polytope figure in the tests above).
    _, robust = plan_of("steep_ramp", "robust")
    _, robust_min = plan_of("steep_ramp", "robust-min")
    _, robust_sum = plan_of("steep_ramp", "robust-sum")
    assert robust.margin.min() >= 0.9 * robust_min.margin.min()
    assert robust.margin.mean() >= 0.9 * robust_sum.margin.mean()
    assert robust_sum.margin.min() < robust.margin.min()  # the case the default exists for


REPLAN = """
import sys
from optimizer.planfile import save_plan
from optimizer.planner import solve
from optimizer.problem.task import load_task
outcome = solve(load_task("tasks/steep_ramp.yaml"), "robust", knots=int(sys.argv[1]))
save_plan(outcome.plan, sys.argv[2])
"""


def test_a_plan_solved_again_in_another_process_is_identical(tmp_path):
    # Reproducibility: the same task, objective and knots solved in a fresh interpreter, with
    # another string-hash seed (so any dict or set order that depends on hashing changes) and one
    # BLAS thread, takes the same iterations in every stage and gives the same plan to the bit
    # (Ipopt and MUMPS are deterministic for identical inputs, per their documentation).
    _, plan = plan_of("steep_ramp", "robust")
    path = tmp_path / "again.npz"
    env = dict(os.environ, PYTHONHASHSEED="12345", OPENBLAS_NUM_THREADS="1",
               PYTHONPATH=str(Path.cwd()) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    subprocess.run([sys.executable, "-c", REPLAN, str(KNOTS), str(path)], check=True, env=env,
                   capture_output=True)
    again = load_plan(path)
    stages = [(s["objective"], s["iterations"]) for s in plan.meta["solver"]["stages"]]
    assert [(s["objective"], s["iterations"]) for s in again.meta["solver"]["stages"]] == stages
    for key in ("q", "v", "a", "tau", "contact_forces", "margin"):
        np.testing.assert_array_equal(getattr(again, key), getattr(plan, key), err_msg=key)


def test_plan_file_round_trip_keeps_every_array_and_meta(tmp_path):
    task, plan = plan_of("steep_ramp", "robust")
    path = tmp_path / "plan.npz"
    save_plan(plan, path)
    raw = np.load(path, allow_pickle=False)
    meta = json.loads(str(raw["meta"]))
    assert meta["format"] == "plan/1" and meta["objective"] == "robust"
    assert meta["task"]["horizon"]["knots"] == KNOTS
    again = load_plan(path)
    for key in ("t", "q", "v", "a", "tau", "contact_forces", "contact_active", "margin"):
        np.testing.assert_array_equal(getattr(again, key), getattr(plan, key))
    assert certify_plan(again).knots[0].rho >= again.margin[0]


@pytest.mark.parametrize("objective", OBJECTIVES)
@pytest.mark.parametrize("task_name", TASKS)
def test_every_plans_margin_is_below_its_exact_figure(task_name, objective):
    # The linear-gain margin is one admissible response, so it never exceeds the exact smallest
    # unrejectable force of the residual polytope (docs/formulation.md section 7); the ratio says
    # how tight the bound is. Tolerance:
    # 1e-6 relative, plus 0.1 micronewton absolute for figures near zero (the projection
    # stops when its inner and outer bounds agree to 1e-7 of the polytope's size).
    _, plan = plan_of(task_name, objective)
    report = certify_plan(plan)
    for knot in report.knots:
        assert plan.margin[knot.knot] <= knot.rho * (1 + 1e-6) + 1e-7, (knot.knot, plan.margin[knot.knot], knot.rho)
        if knot.rho > 1e-3:   # the report gives the ratio, at most 1 within the same tolerance
            assert 0.0 <= knot.ratio * knot.rho <= knot.rho * (1 + 1e-6) + 1e-7


@pytest.mark.parametrize("objective", OBJECTIVES)
@pytest.mark.parametrize("task_name", TASKS)
def test_every_solved_plan_passes_the_physics_checks(task_name, objective):
    # The checks recompute everything with Pinocchio (rnea, frame placements and Jacobians,
    # integrate / difference) from the plan file; a plan brace writes must pass all of them.
    _, plan = plan_of(task_name, objective)
    report = check_plan(plan)
    assert report.passed, [r.reason() for r in report.failures()]


def test_a_solved_plan_with_scaled_torques_is_not_certified(tmp_path, capsys):
    # 1.3 tau no longer balances rnea(q, v, a) - J_c^T lambda (Pinocchio): the dynamics check
    # fails, named with its knot, and the command exits 1.
    _, plan = plan_of("steep_ramp", "robust")
    scaled = copy.deepcopy(plan)
    scaled.tau = 1.3 * scaled.tau
    save_plan(scaled, tmp_path / "scaled.npz")
    assert main(["certify", str(tmp_path / "scaled.npz"), "--quiet", "--json", str(tmp_path / "c.json")]) == 1
    text = capsys.readouterr().out
    assert "result: NOT certified" in text
    assert re.search(r"dynamics check failed at knot \d+, ", text)
    doc = json.loads((tmp_path / "c.json").read_text())
    failed = [c for c in doc["plan_checks"]["checks"] if not c["passed"]]
    assert [c["name"] for c in failed] == ["dynamics"] and failed[0]["knot"] is not None


def test_a_solved_plan_with_a_foot_force_outside_its_pyramid_is_not_certified(tmp_path, capsys):
    # Two feet on the same side of the ramp push each other along the line joining them
    # (no net force, no net moment: statics), torques corrected through Pinocchio's contact
    # Jacobians, so only friction breaks: Coulomb's |f_t| <= mu cos(pi/4) f_n per pyramid axis.
    _, plan = plan_of("steep_ramp", "robust")
    k, front, rear = 3, 0, 2
    normal = np.array(plan.meta["contact_normals"][front])
    load = plan.contact_forces[k, front] @ normal
    pushed = internal_push(plan, k, front, rear, plan.meta["friction"][front] * load + 10.0)
    save_plan(pushed, tmp_path / "pushed.npz")
    assert main(["certify", str(tmp_path / "pushed.npz"), "--quiet"]) == 1
    text = capsys.readouterr().out
    assert "result: NOT certified" in text
    match = re.search(r"(\S+) check failed at knot (\d+), (\S+) facet", text)
    assert match and match.group(1) == "friction" and int(match.group(2)) == k
    assert match.group(3) in (plan.meta["contact_frames"][front], plan.meta["contact_frames"][rear])
    assert "dynamics check failed" not in text


def test_ramp_friction_floor_is_the_inclined_plane_condition():
    # Inclined plane (textbook): a body at rest on a slope theta needs mu >= tan(theta); with the
    # plan's inscribed pyramid of m facets the per-axis coefficient is mu cos(pi / m), so the
    # knot at rest (the last one) stops being feasible at mu = tan(theta) / cos(pi / m).
    # A moving knot carries F = dh/dt - m g instead of -m g (Newton; dh/dt from Pinocchio's
    # centroidal momentum rate): it needs max(|F.t1|, |F.t2|) / (F.n) / cos(pi / m). All four
    # feet share one plane, so that per-axis ratio is also enough (each foot takes its share
    # of F in proportion to its normal force). The plan stops being feasible at the largest.
    task, plan = plan_of("steep_ramp", "robust")
    meta = plan.meta
    slope = math.radians(task.raw["stance"]["terrain"]["slope_deg"])
    m = meta["friction_pyramid"]["facets"]
    mu = meta["friction"][0]
    report = certify_plan(plan, check=False, change=ModelChange())
    floors = [c.changed.friction_floor * mu for c in report.knots]
    assert floors[-1] == pytest.approx(math.tan(slope) / math.cos(math.pi / m), rel=0.02)
    model = pin.buildModelFromXML(meta["urdf"], pin.JointModelFreeFlyer())
    data = model.createData()
    mass, g = pin.computeTotalMass(model), np.array(meta["gravity"])
    n, (t1, t2) = np.array(meta["contact_normals"][0]), np.array(meta["friction_pyramid"]["tangents"][0])
    needed = []
    for k in range(len(plan.t)):
        rate = pin.computeCentroidalMomentumTimeVariation(model, data, plan.q[k], plan.v[k], plan.a[k])
        total = np.array(rate.linear) - mass * g
        needed.append(max(abs(total @ t1), abs(total @ t2)) / (total @ n) / math.cos(math.pi / m))
    np.testing.assert_allclose(floors, needed, rtol=0.02)
    assert report.summary()["friction_floor_scale"] * mu == pytest.approx(max(needed), rel=0.02)


def test_a_hold_plan_on_the_ramp_stops_being_feasible_at_the_inclined_plane_friction():
    # Inclined plane (textbook): a body at rest on a slope theta needs mu >= tan(theta); per axis
    # of the plan's inscribed m-facet pyramid that is mu >= tan(theta) / cos(pi / m). The demo
    # ramp's plan moves, so its whole-plan floor is set by its accelerations (checked above
    # against Newton); the same ramp, robot and start held still (no hand targets, regularizer
    # objective: nothing asks it to move) must stop being feasible at the inclined plane's mu.
    raw = copy.deepcopy(load_task("tasks/steep_ramp.yaml").raw)
    raw.pop("hand_targets")
    raw["name"] = "steep_ramp_hold"
    task = task_from_mapping(raw, "tasks/steep_ramp_hold.yaml")
    outcome = solve(task, "feasible", knots=6)
    assert outcome.success, [(s.objective, s.status) for s in outcome.stages]
    plan = outcome.plan
    slope = math.radians(raw["stance"]["terrain"]["slope_deg"])
    m, mu = plan.meta["friction_pyramid"]["facets"], plan.meta["friction"][0]
    report = certify_plan(plan, check=False, change=ModelChange())
    assert report.summary()["friction_floor_scale"] * mu == pytest.approx(math.tan(slope) / math.cos(math.pi / m),
                                                                          rel=0.02)


def test_lowering_friction_never_raises_a_margin():
    # A smaller friction coefficient shrinks every pyramid, so the set of admissible responses
    # only shrinks (set inclusion): no knot's figure may grow. Tolerance: the projection's own.
    _, plan = plan_of("steep_ramp", "robust")
    previous = None
    for scale in (1.2, 1.0, 0.9, 0.8, 0.7):
        report = certify_plan(plan, check=False, change=ModelChange(friction_scale=scale), friction_floor=False)
        figures = np.array([c.changed.cert.rho for c in report.knots])
        if previous is not None:
            finite = np.isfinite(figures)
            assert (figures[finite] <= previous[finite] + 1e-6 * np.abs(previous[finite]) + 1e-7).all(), scale
        previous = figures
    assert (previous < 0).any()   # at 0.7 the plan is infeasible somewhere, so the sweep means something
