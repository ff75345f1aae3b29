"""A contact's own minimum normal force and its preload, through a solve and the plan file.

The task file is read back as plain YAML (not through brace's loader) and the
plan's forces are checked against it; the weight they carry is Pinocchio's
total mass times g (Newton's statics on flat ground: the normal forces of a
robot at rest sum to m g).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest
import yaml

from flat_ground import flat_stance
from optimizer.analysis.plan_check import check_plan
from optimizer.planfile import load_plan, save_plan
from optimizer.planner import solve
from optimizer.problem.task import load_task

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def task_and_plan(tmp_path_factory):
    # foot_fl keeps its own minimum of 150 N (a limit), foot_rr a preload of 140 N; the task-wide
    # minimum is 5 N. Both lie well above an even share of the weight (about 390 N / 4).
    folder = tmp_path_factory.mktemp("minima")
    stance = flat_stance()
    stance["contacts"]["foot_fl"]["min_normal_force"] = 150.0
    stance["contacts"]["foot_rr"]["preload"] = 140.0
    data = {"robot": str(ROOT / "models" / "stilt.yaml"), "horizon": {"duration": 1.0, "knots": 3},
            "stance": stance, "min_normal_force": 5.0, "objective": "torque"}
    path = folder / "task.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    outcome = solve(load_task(path))
    assert outcome.success, [(s.objective, s.status) for s in outcome.stages]
    save_plan(outcome.plan, folder / "plan.npz")
    return yaml.safe_load(path.read_text(encoding="utf-8")), load_plan(folder / "plan.npz")


def test_each_contact_keeps_its_own_minimum_or_preload(task_and_plan):
    data, plan = task_and_plan
    frames = plan.meta["contact_frames"]
    push = plan.contact_forces[:, :, 2]                     # flat ground: the normal is +z
    for frame, spec in data["stance"]["contacts"].items():
        least = max(spec.get("min_normal_force", data["min_normal_force"]), spec.get("preload", 0.0))
        assert push[:, frames.index(frame)].min() >= least - 1e-6, frame
    model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
    weight = pin.computeTotalMass(model) * np.linalg.norm(plan.meta["gravity"])
    np.testing.assert_allclose(push[-1].sum(), weight, rtol=1e-6)   # the last knot is at rest
    assert 140.0 > 1.4 * weight / 4     # the raised values are no even share the plan meets by chance


def test_the_plan_file_records_both_and_the_plan_check_reads_them(task_and_plan):
    data, plan = task_and_plan
    frames = plan.meta["contact_frames"]
    assert plan.meta["min_normal_force"][frames.index("foot_fl")] == 150.0
    assert plan.meta["min_normal_force"][frames.index("foot_rr")] == 5.0
    assert plan.meta["contact_preload"][frames.index("foot_rr")] == 140.0
    assert check_plan(plan).passed
    # a preload above what foot_rr carries fails the normal-force check there
    plan.meta["contact_preload"][frames.index("foot_rr")] = float(plan.contact_forces[:, frames.index("foot_rr"),
                                                                                      2].min()) + 1.0
    failed = {r.name: r for r in check_plan(plan).failures()}
    assert failed["normal-force"].where == "foot_rr"
