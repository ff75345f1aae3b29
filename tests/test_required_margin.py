"""Required margins: reading ``require``, per-knot thresholds, the NLP bound, low-margin ranges.

External references: the task's own knot times (``numpy.linspace``, the
horizon's definition) for which knots a window covers; the robot's weight
from Pinocchio's total mass (``pinocchio.computeTotalMass``) times |g|.
"""
import json

import numpy as np
import pinocchio as pin
import pytest
import yaml

from optimizer.analysis.margin_flags import DEFAULT_WARN_FRACTION, find_shortfalls, unmet
from optimizer.errors import TaskError
from optimizer.problem.requirement import required_margins
from optimizer.problem.task import load_task
from optimizer.robot.symbolic import SymbolicRobot
from optimizer.transcription.nlp import Transcription
from optimizer.transcription.objectives import objective_named
from optimizer.transcription.structure import structure_of
from test_task_file import BASE_TASK


def write_task(tmp_path, **extra):
    data = json.loads(json.dumps(BASE_TASK))
    data.update(extra)
    path = tmp_path / "task.yaml"
    path.write_text(yaml.safe_dump(data))
    return path


def weight_of(task):
    # m g from Pinocchio's own total mass, not the robot loader's figure
    return pin.computeTotalMass(task.robot.model) * np.linalg.norm(task.robot.gravity)


def test_newtons_and_fraction_of_weight(tmp_path):
    task = load_task(write_task(tmp_path, require=[{"at_least": 30}, {"at_least_weight": 0.15}]))
    assert [r.newtons for r in task.requirements] == pytest.approx([30.0, 0.15 * weight_of(task)], rel=1e-9)


def test_window_covers_the_knots_inside_it(tmp_path):
    task = load_task(write_task(tmp_path, require=[{"at_least": 12, "window": [0.5, 1.0]}]))
    times = np.linspace(0.0, task.duration, task.knots)   # the horizon's knot times by definition
    need = required_margins(task.requirements, task.times, 1)[:, 0]
    inside = (times >= 0.5 - 1e-12) & (times <= 1.0 + 1e-12)
    assert inside.any() and np.all(need[inside] == 12) and np.all(need[~inside] == 0)


def test_during_takes_the_hand_targets_window(tmp_path):
    task = load_task(write_task(tmp_path, require=[{"at_least": 7, "during": "pick"}]))
    times = np.linspace(0.0, task.duration, task.knots)
    need = required_margins(task.requirements, task.times, 1)[:, 0]
    held = (times >= 0.5 - 1e-12) & (times <= 0.8 + 1e-12)    # BASE_TASK's pick window
    assert np.all(need[held] == 7) and np.all(need[~held] == 0)


def test_a_point_gets_only_its_own_requirement(tmp_path):
    points = [{"frame": "grip_point", "kind": "force"}, {"frame": "body", "kind": "force"}]
    task = load_task(write_task(tmp_path, disturbances=points,
                                require=[{"at_least": 9, "point": "body"}, {"at_least": 4, "point": 0}]))
    need = required_margins(task.requirements, task.times, 2)
    assert np.all(need[:, 0] == 4) and np.all(need[:, 1] == 9)


def test_overlapping_requirements_keep_the_larger(tmp_path):
    task = load_task(write_task(tmp_path, require=[{"at_least": 5}, {"at_least": 20, "window": [0.0, 0.3]}]))
    need = required_margins(task.requirements, task.times, 1)[:, 0]
    assert need.max() == 20 and need.min() == 5


@pytest.mark.parametrize("entry, field, expected", [
    ({"at_least": -1}, "require[0].at_least", "> 0"),
    ({"at_least": 5, "at_least_weight": 0.1}, "require[0].at_least", "exactly one"),
    ({}, "require[0].at_least", "exactly one"),
    ({"at_least": 5, "window": [1.0, 0.5]}, "require[0].window", "start <= end"),
    ({"at_least": 5, "window": [0.0, 9.0]}, "require[0].window", "within the horizon"),
    ({"at_least": 5, "during": "plcae"}, "require[0].during", "label of a hand target"),
    ({"at_least": 5, "point": 3}, "require[0].point", "index from 0 to 0"),
    ({"at_least": 5, "point": "elbow"}, "require[0].point", "disturbance point"),
    ({"at_leest": 5}, "require[0].at_leest", "known fields"),
])
def test_bad_entries_name_field_and_expectation(tmp_path, entry, field, expected):
    with pytest.raises(TaskError) as err:
        load_task(write_task(tmp_path, require=[entry]))
    assert f"'{field}'" in str(err.value) and expected in str(err.value)
    assert "\n" not in str(err.value)


def test_shortfalls_group_neighbouring_knots_and_tell_requirement_from_warning():
    times = np.linspace(0.0, 1.0, 6)
    weight = 400.0
    margins = np.array([0.0, 1.0, 50.0, 50.0, 8.0, 60.0])[:, None]
    need = np.array([0, 0, 0, 30, 30, 0.0])[:, None]
    found = find_shortfalls(times, margins, need, weight, lambda k, p: f"limit at {k}")
    assert [(s.first, s.last, s.required) for s in found] == [(0, 1, False), (4, 4, True)]
    assert found[0].threshold == pytest.approx(DEFAULT_WARN_FRACTION * weight)
    assert found[1].smallest == 8.0 and found[1].bottleneck == "limit at 4"
    assert unmet(found) == [found[1]]
    assert find_shortfalls(times, margins + 100.0, need, weight) == []


def test_robust_bounds_carry_the_requirement_and_torque_has_none(tmp_path):
    task = load_task(write_task(tmp_path, require=[{"at_least": 15, "window": [0.5, 1.0]}])).with_knots(6)
    need = required_margins(task.requirements, task.times, 1)
    symbolic = SymbolicRobot(task.robot.model)
    robust = Transcription(task.robot, symbolic, structure_of(task), objective_named("robust"))
    lo, _ = robust.bounds(task.initial_posture, need)
    rho = robust.variables.get(lo, "rho0")[0]
    assert np.any(need[:, 0] > 0) and np.any(need[:, 0] == 0)
    assert np.all(rho[need[:, 0] > 0] >= 15) and np.all(rho[need[:, 0] == 0] == 0)
    torque = Transcription(task.robot, symbolic, structure_of(task), objective_named("torque"))
    assert "rho0" not in torque.variables
