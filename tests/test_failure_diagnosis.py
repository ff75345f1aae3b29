"""Post-failure diagnosis: violated groups in plain words, checked against Pinocchio; the stopping point saved apart.

A solve is made to fail quickly (6 knots, Ipopt max_iter 2). References:
Pinocchio's forward kinematics (feet off their footholds) and RNEA with
contact Jacobians (equations-of-motion residual, docs/plan-files.md,
"Checking a plan with Pinocchio alone"), and the 4-facet inscribed pyramid written out by hand
(|f.t| <= mu cos(45 deg) f.n, common practice).
"""
from __future__ import annotations

import copy
import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest
import yaml

from flat_ground import FEET, flat_stance
from optimizer.analysis.failure import constraint_values, diagnose, knot_ranges
from optimizer.cli import main
from optimizer.errors import PlanFileError
from optimizer.planfile import load_plan
from optimizer.planner import Planner, solve
from optimizer.problem.task import load_task
from optimizer.transcription.parameters import parameter_values

ROOT = Path(__file__).resolve().parents[1]
TASK = {
    "robot": str(ROOT / "models" / "stilt.yaml"),
    "horizon": {"duration": 2.0, "knots": 6},
    "stance": flat_stance(),
    "hand_targets": [{"position": [0.85, 0.3, 0.25], "time": 0.8, "label": "pick"}],
    "objective": "feasible",
    "solver": {"max_iter": 2},
}
WORLD = pin.ReferenceFrame.LOCAL_WORLD_ALIGNED


@pytest.fixture(scope="module")
def failed(tmp_path_factory):
    folder = tmp_path_factory.mktemp("failing")
    path = folder / "task.yaml"
    path.write_text(yaml.safe_dump(TASK), encoding="utf-8")
    outcome = solve(load_task(path))
    assert not outcome.success
    return path, outcome


def by_family(violations):
    return {v.family: v for v in violations}


def test_cli_failure_saves_the_stopping_point_and_no_plan(failed, tmp_path, capsys):
    path, _ = failed
    out = tmp_path / "plan.npz"
    assert main(["solve", str(path), "--out", str(out), "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "no plan was written" in err and "diagnosis at the point where the solver stopped" in err
    assert "1. " in err and "hint: " in err and "ran out of iterations" in err
    point = tmp_path / "plan.infeasible.npz"
    assert not out.exists() and point.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plan.infeasible.npz", "plan.ipopt.log"]
    with np.load(point, allow_pickle=False) as archive:
        meta = json.loads(str(archive["meta"]))
        assert archive["q"].shape == (6, 25)
    assert meta["format"] == "infeasible-point/1" and meta["infeasible"] is True
    assert meta["diagnosis"] and meta["diagnosis"][0]["hint"]
    with pytest.raises(PlanFileError, match=r"meta.format.*infeasible-point/1.*not a plan"):
        load_plan(point)
    assert main(["certify", str(point)]) == 2


def test_quiet_solve_prints_no_solver_banner(tmp_path):
    # Ipopt prints its banner ("This program contains Ipopt ...") on the first solve of a
    # process unless told not to; a fresh process is the only honest place to look for it.
    # No solver options in the task, so no option probe runs (and swallows it) first.
    task = {k: v for k, v in TASK.items() if k not in ("solver", "hand_targets")}
    path = tmp_path / "standing.yaml"
    path.write_text(yaml.safe_dump(dict(task, horizon={"duration": 1.0, "knots": 2})), encoding="utf-8")
    run = subprocess.run([sys.executable, "-m", "optimizer", "solve", str(path), "--out", str(tmp_path / "p.npz"),
                          "--quiet", "--skip-checks"], capture_output=True, text=True, cwd=ROOT,
                         env=dict(os.environ, PYTHONPATH=str(ROOT)), timeout=300)
    assert run.returncode == 0, run.stderr
    assert "Ipopt" not in run.stdout.replace("Ipopt log", "") and "*****" not in run.stdout, run.stdout


def test_feet_violation_matches_pinocchio_kinematics(failed):
    _, outcome = failed
    found = by_family(diagnose(outcome))["stance contacts"]
    robot, q = outcome.task.robot, outcome.last["q"]
    data = robot.model.createData()
    worst = 0.0
    for k in found.knots:
        pin.framesForwardKinematics(robot.model, data, q[:, k])
        for c in outcome.task.contacts:
            gap = data.oMf[robot.model.getFrameId(c.frame)].translation - c.foothold
            worst = max(worst, float(np.abs(gap).max()))
    assert found.largest == pytest.approx(worst, rel=1e-9, abs=1e-12)
    assert found.size.endswith("mm") and found.worst[0] in FEET


def test_equations_of_motion_violation_matches_rnea(failed):
    _, outcome = failed
    found = by_family(diagnose(outcome))["equations of motion"]
    task, last = outcome.task, outcome.last
    robot = task.robot
    model, data = robot.model, robot.model.createData()
    weight = robot.mass * np.linalg.norm(robot.gravity)
    worst, worst_knot = 0.0, -1
    for k in range(task.knots):
        q, v, a = last["q"][:, k], last["v"][:, k], last["a"][:, k]
        pin.computeJointJacobians(model, data, q)
        pin.updateFramePlacements(model, data)
        contact = sum(pin.getFrameJacobian(model, data, model.getFrameId(c.frame), WORLD)[:3].T
                      @ last["lam"][3 * i:3 * i + 3, k] for i, c in enumerate(task.contacts))
        residual = pin.rnea(model, data, q, v, a) - np.concatenate([np.zeros(6), last["tau"][:, k]]) - contact
        if np.abs(residual).max() / weight > worst:
            worst, worst_knot = np.abs(residual).max() / weight, k
    assert found.largest == pytest.approx(worst, rel=1e-6)
    assert worst_knot in found.knots


def test_slipping_contact_is_named_with_its_violation(failed):
    _, outcome = failed
    doctored = copy.copy(outcome)
    doctored.last = {k: v.copy() for k, v in outcome.last.items()}
    force = np.array([200.0, 0.0, 50.0])              # N, world frame: far outside mu = 0.8 at 50 N normal
    doctored.last["lam"][6:9, :] = force[:, None]     # contact 2 = foot_rl
    found = by_family(diagnose(doctored))["friction pyramid"]
    assert found.worst[0] == "foot_rl"
    weight = outcome.task.robot.mass * np.linalg.norm(outcome.task.robot.gravity)
    # facet toward +x on flat ground: f.x - mu cos(45 deg) f.z <= -1e-6 (the NLP's back-off), in units of m g
    expected = (force[0] - 0.8 * math.cos(math.pi / 4) * force[2]) / weight + 1e-6
    assert found.largest == pytest.approx(expected, rel=1e-9)
    assert found.knots == list(range(outcome.task.knots))
    assert "slip" in found.hint


def test_joint_at_its_torque_limit_is_named(failed):
    _, outcome = failed
    doctored = copy.copy(outcome)
    doctored.last = {k: v.copy() for k, v in outcome.last.items()}
    robot = outcome.task.robot
    j = robot.joint_names.index("rl_knee")
    doctored.last["tau"][j, 2] = robot.torque_upper[j]
    found = by_family(diagnose(doctored))["torque limits"]
    assert "rl_knee" in found.worst and 2 in found.knots


def test_row_violations_agree_with_group_violations(failed):
    _, outcome = failed
    transcription = outcome.transcription
    g = constraint_values(transcription, outcome.task, outcome.last)
    per_group = transcription.constraints.violations(g, transcription.lbg, transcription.ubg)
    rows = transcription.constraints.row_violations(g, transcription.lbg, transcription.ubg)
    for group in transcription.constraints.groups:
        for j, knot in enumerate(group.knots):
            mine = [e for e, label in zip(rows[group.name], group.labels) if label.knot == knot]
            assert max(mine, default=0.0) == per_group[group.name][j]
    # the planner recorded the same violations at the stopping point
    for name, per_knot in outcome.violations.items():
        np.testing.assert_allclose(per_group[name], per_knot, rtol=1e-9, atol=1e-12)


def test_robust_limit_rows_are_named_after_the_limit_they_measure(failed):
    # Name the rows from the transcription's own room function: a torque put exactly at
    # one joint's upper limit must leave zero room in the row labelled with that joint and
    # side, and a foot carrying exactly the minimum normal force zero room in its row.
    _, outcome = failed
    task = outcome.task
    transcription = Planner().transcription(task, "robust")
    p = parameter_values(task, transcription.structure, transcription.parameters)
    robot, K, nc = task.robot, task.knots, len(task.contacts)
    tau = np.zeros((robot.nj, K))
    tau[3, :] = robot.torque_upper[3]
    lam = np.zeros((3 * nc, K))
    for c, contact in enumerate(task.contacts):
        lam[3 * c:3 * c + 3, :] = 100.0 * np.asarray(contact.normal)[:, None]
    lam[3:6, :] = task.min_normal_force * np.asarray(task.contacts[1].normal)[:, None]
    rooms = transcription.rooms_at({"tau": tau, "lam": lam}, p)[:, 0]
    group = transcription.constraints.group("limit rooms")
    names = [label.who for label in group.labels if label.knot == 0]
    assert len(names) == rooms.size
    zero = {names[i] for i in np.flatnonzero(np.abs(rooms) < 1e-9)}
    assert zero == {f"{robot.joint_names[3]} torque (upper)", f"{task.contacts[1].frame} minimum normal force"}


def test_diagnosis_keeps_the_solver_multipliers_of_each_family(failed):
    # Ipopt's constraint multipliers where it stopped, one per row; each family reports the
    # largest magnitude over the rows labelled with it.
    _, outcome = failed
    labels = outcome.transcription.constraints.labels
    assert outcome.multipliers is not None and len(outcome.multipliers) == len(labels)
    for violation in diagnose(outcome):
        if violation.family == "torque limits":
            continue                      # variable bounds, not rows of g
        rows = [abs(m) for m, label in zip(outcome.multipliers, labels) if label.family == violation.family]
        assert violation.multiplier == pytest.approx(max(rows), rel=1e-12)
        assert violation.as_dict()["multiplier"] == pytest.approx(max(rows), rel=1e-12)


def test_knot_ranges():
    assert knot_ranges([7, 1, 2, 3]) == "1-3, 7"
    assert knot_ranges([]) == "-"


def test_clearance_blocking_a_solve_is_named_with_link_and_surface(tmp_path):
    # A pick 5 cm below the ground plane of the feet (explicit contacts get a ground plane through
    # their footholds). Pre-solve would refuse it; solved anyway, the diagnosis names clearance,
    # the hand's link and the ground, and no plan comes out. Reference for the named row:
    # Pinocchio forward kinematics of the gripper capsule at the stopping point (its end points
    # and radius from the plan-file shapes) against the plane z = 0.
    task = copy.deepcopy(TASK)
    task["hand_targets"] = [{"position": [0.6, 0.0, -0.05], "time": 0.8, "label": "pick"}]
    path = tmp_path / "task.yaml"
    path.write_text(yaml.safe_dump(task), encoding="utf-8")
    outcome = solve(load_task(path))
    assert not outcome.success and outcome.plan is None
    found = by_family(diagnose(outcome))["terrain clearance"]
    assert "clearance" in found.words and found.worst
    link, surface = found.worst[0].split(" vs ")
    assert surface == "ground"
    robot = outcome.task.robot
    data = robot.model.createData()
    lowest = math.inf
    for k in found.knots:
        pin.forwardKinematics(robot.model, data, outcome.last["q"][:, k])
        for shape in robot.collision.shapes:
            if shape.link == link:
                placement = data.oMi[shape.joint]
                ends = shape.joint_points @ placement.rotation.T + placement.translation
                lowest = min(lowest, ends[:, 2].min() - shape.radius)
    assert lowest < outcome.task.clearance.distance - 1e-6
