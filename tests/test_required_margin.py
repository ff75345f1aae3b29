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
from test_task_file import BASE_TASK, ROBOT

ROOT_MODELS = ROBOT.parent


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


# ---------------------------------------------------------------- end to end (small knot counts)

from optimizer.analysis.requirement_checks import rest_push  # noqa: E402
from optimizer.cli import main  # noqa: E402
from optimizer.planfile import load_plan, save_plan  # noqa: E402
from optimizer.planner import solve  # noqa: E402
from test_solve_demo_tasks import KNOTS, plan_of  # noqa: E402


def test_rest_bound_on_the_ramp_is_the_inclined_plane_figure():
    # Textbook inclined plane (slope theta, pyramid coefficient mu' = mu / sqrt 2 for the
    # 4-facet inscribed pyramid, all feet on one plane): a horizontal push t down the slope
    # is held at rest while t cos(theta) + m g sin(theta) <= mu' (m g cos(theta) - t sin(theta)),
    # i.e. t <= m g (mu' cos - sin) / (cos + mu' sin).
    task = load_task("tasks/steep_ramp.yaml")
    theta, mu = np.radians(task.raw["stance"]["terrain"]["slope_deg"]), task.contacts[0].friction / np.sqrt(2)
    mg = weight_of(task)
    textbook = mg * (mu * np.cos(theta) - np.sin(theta)) / (np.cos(theta) + mu * np.sin(theta))
    t, tight = rest_push(task, 0, [-1.0, 0.0, 0.0])
    assert t == pytest.approx(textbook, rel=1e-6)
    assert any("friction" in name for name in tight)


def test_a_reachable_requirement_is_met_at_every_knot_by_the_certified_margin():
    # Witness of reachability: the robust-min plan keeps its floor at every knot, so a
    # requirement just under it is reachable. Checked on the certified margin (the closed-form
    # linear-response figure), not on the optimizer's own rho.
    task, witness = plan_of("trench", "robust-min")
    required = 0.97 * float(witness.margin.min())
    outcome = solve(task.with_required_margin(required), "robust", knots=KNOTS)
    assert outcome.success, [(s.objective, s.status) for s in outcome.stages]
    assert np.all(outcome.plan.margin >= required)
    assert outcome.plan.meta["requirements"]["items"][0]["newtons"] == pytest.approx(required)


def test_an_unreachable_requirement_is_refused_before_solving(tmp_path, capsys):
    out = tmp_path / "ramp.npz"
    assert main(["solve", "tasks/steep_ramp.yaml", "--knots", "6", "--require-margin", "5000",
                 "--out", str(out), "--quiet"]) == 1
    err = capsys.readouterr().err
    assert "5000.0 N at the last knot" in err and "limited by" in err and "friction" in err
    assert not out.exists() and not list(tmp_path.glob("*.npz"))


def test_a_requirement_the_solver_cannot_reach_names_knots_and_bottleneck(tmp_path, capsys):
    data = yaml.safe_load(open("tasks/trench.yaml"))
    data["robot"] = str(ROOT_MODELS / "stilt.yaml")
    data["solver"] = {"max_iter": 25}
    data["require"] = [{"at_least": 150, "window": [0.0, 0.5]}]
    path = tmp_path / "trench.yaml"
    path.write_text(yaml.safe_dump(data))
    out = tmp_path / "trench.npz"
    assert main(["solve", str(path), "--knots", str(KNOTS), "--out", str(out), "--quiet", "--skip-checks"]) == 1
    err = capsys.readouterr().err
    assert "required margin" in err and "required 150.0 N" in err and "limited by" in err
    assert "knot" in err and not out.exists()


def test_torque_baseline_is_checked_not_constrained(tmp_path, capsys):
    _, baseline = plan_of("trench", "torque")
    required = 1.5 * float(baseline.margin.max())        # above the baseline's margin everywhere
    out = tmp_path / "torque.npz"
    argv = ["solve", "tasks/trench.yaml", "--knots", str(KNOTS), "--objective", "torque", "--out", str(out),
            "--quiet", "--skip-checks", "--require-margin", f"{required:.3f}"]
    assert main(argv) == 1
    text = capsys.readouterr().out
    assert "REQUIRED MARGIN NOT MET" in text and "NO plan written" in text and not out.exists()
    assert main(argv + ["--keep-unmet"]) == 1
    kept = load_plan(out)
    assert kept.meta["requirements"]["met"] is False
    # the baseline was not bent toward the requirement: same margins as without it
    assert np.allclose(kept.margin, baseline.margin, rtol=1e-4, atol=1e-3)


@pytest.mark.parametrize("command", ["solve", "certify"])
def test_low_margins_are_flagged_with_their_time_range(tmp_path, capsys, command):
    task, plan = plan_of("trench", "torque")
    low, high = float(plan.margin.min()), float(plan.margin.max())
    if command == "solve":
        argv = ["solve", "tasks/trench.yaml", "--knots", str(KNOTS), "--objective", "torque", "--quiet",
                "--skip-checks", "--out", str(tmp_path / "p.npz")]
    else:
        save_plan(plan, tmp_path / "p.npz")
        argv = ["certify", str(tmp_path / "p.npz"), "--quiet"]
    # the exact figure of certify is >= the planned margin, so a level above the plan's
    # largest margin flags knots in both commands, one below its smallest flags none
    assert main(argv + ["--warn-below", f"{0.5 * low:.4f}"]) == 0
    assert "!!" not in capsys.readouterr().out
    main(argv + ["--warn-below", f"{2.0 * high + 100:.4f}"])
    text = capsys.readouterr().out
    assert "!! LOW MARGIN" in text and f"t = 0.00-{plan.t[-1]:.2f} s (knots 0-{len(plan.t) - 1})" in text
