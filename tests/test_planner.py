"""The Planner: built NLPs keyed by everything they read, one feasibility seed for several objectives,
temporary files removed.

References: the limits written in the robot files below (a robot file's
``limits:`` overrides its URDF, docs/task-files.md and the robot file's own
header), and the feasibility solve itself (a plan solved from a seed starts
from that seed's stage).
"""
from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest
import yaml

from flat_ground import flat_stance
from optimizer.planner import Planner
from optimizer.problem.task import load_task

ROOT = Path(__file__).resolve().parents[1]


def write_task(folder: Path, robot_overrides: dict, name: str) -> Path:
    """A robot file on the demo URDF with ``limits`` overrides, and a standing task using it."""
    robot = yaml.safe_load((ROOT / "models" / "stilt.yaml").read_text())
    robot["urdf"] = str(ROOT / "models" / "stilt.urdf")
    robot["limits"] = robot_overrides
    (folder / f"{name}.yaml").write_text(yaml.safe_dump(robot), encoding="utf-8")
    task = {"robot": f"{name}.yaml", "horizon": {"duration": 1.0, "knots": 3},
            "stance": flat_stance(),
            "objective": "feasible"}
    path = folder / f"task_{name}.yaml"
    path.write_text(yaml.safe_dump(task), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def two_robot_files(tmp_path_factory):
    # Same URDF; the second file lowers fl_knee's lower torque limit and its velocity limit only
    # (the upper torque limit stays the URDF's 90 N m).
    folder = tmp_path_factory.mktemp("limits")
    plain = load_task(write_task(folder, {}, "plain"))
    changed = load_task(write_task(folder, {"torque": {"fl_knee": [-40.0, 90.0]}, "velocity": {"fl_knee": 4.0}},
                                   "changed"))
    return plain, changed


def physical_bounds(transcription, task):
    lo, hi = transcription.bounds(task.initial_posture)
    L = transcription.variables
    return {name: (L.get(lo, name), L.get(hi, name)) for name in ("v", "tau")}


def test_robot_files_sharing_a_urdf_get_their_own_bounds(two_robot_files):
    plain, changed = two_robot_files
    j = plain.robot.joint_names.index("fl_knee")
    with Planner() as planner:
        first = physical_bounds(planner.transcription(plain, "feasible"), plain)
        second = physical_bounds(planner.transcription(changed, "feasible"), changed)
    # the numbers written in the robot files, less the planner's 1e-6 relative back-off on torques
    assert second["tau"][0][j, 1] == pytest.approx(-40.0 + 90.0 * 1e-6, rel=1e-12)
    assert first["tau"][0][j, 1] == pytest.approx(-90.0 + 90.0 * 1e-6, rel=1e-12)
    assert second["v"][1][6 + j, 1] == pytest.approx(4.0, rel=1e-12)
    assert first["v"][1][6 + j, 1] == pytest.approx(plain.robot.velocity_limit[j], rel=1e-12)
    assert first["v"][1][6 + j, 1] != second["v"][1][6 + j, 1]


def test_one_seed_serves_several_objectives_and_files_go_with_the_planner(two_robot_files):
    plain, _ = two_robot_files
    planner = Planner(knots=3)
    folder = planner.folder
    seed = planner.seed(plain)
    assert seed.success and seed.task.knots == 3
    feasible = planner.solve_from_seed(seed, "feasible")
    torque = planner.solve_from_seed(seed, "torque")
    # both plans start from the one feasibility stage; the feasible plan is the seed itself
    assert feasible.stages == seed.outcome.stages and torque.stages[0] is seed.outcome.stages[0]
    assert [s.objective for s in torque.stages] == ["feasible", "torque"]
    np.testing.assert_array_equal(feasible.plan.q, seed.arrays["q"].T)
    assert any(folder.iterdir())          # the solver logs live in the planner's folder
    planner.close()
    assert not folder.exists()


def test_planners_in_threads_keep_their_own_builds(two_robot_files):
    # One planner per thread, as documented: each builds its own NLP and reads its own
    # robot file's limits (the numbers written in the files above).
    plain, changed = two_robot_files
    j = plain.robot.joint_names.index("fl_knee")

    def knee_velocity_bound(task):
        with Planner() as planner:
            return physical_bounds(planner.transcription(task, "feasible"), task)["v"][1][6 + j, 1]

    with ThreadPoolExecutor(max_workers=2) as pool:
        first, second = pool.map(knee_velocity_bound, [plain, changed])
    assert second == pytest.approx(4.0, rel=1e-12)
    assert first == pytest.approx(plain.robot.velocity_limit[j], rel=1e-12)


def test_each_solve_log_holds_that_solve_only(two_robot_files, tmp_path):
    # A planner reuses its built solvers; Ipopt's own log ends every solve with one "EXIT:"
    # line, so each solve's log must hold one stage header and one EXIT line.
    plain, _ = two_robot_files
    logs = [tmp_path / f"solve-{i}.log" for i in range(3)]
    with Planner(knots=3) as planner:
        for log in logs:
            assert planner.seed(plain, log_path=log).success
    for log in logs:
        text = log.read_text(encoding="utf-8")
        assert text.count("===== brace stage: feasible") == 1 and text.count("EXIT:") == 1, log.name
