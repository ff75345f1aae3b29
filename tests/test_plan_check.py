"""Physics checks of a plan before certification: each check passes on honest plans and fails,
naming itself and the knot, when the physics it guards is broken.

Honest plans: a robot standing still with forces and torques from Pinocchio's ``rnea`` and
frame Jacobians (Newton's statics), and a plan ``brace solve`` wrote for a demo task. Broken
plans are made from them by hand, with Pinocchio computing what must change.
"""
from __future__ import annotations

import copy
import json

import numpy as np
import pinocchio as pin
import pytest

from certify_checks import demo_standing, internal_push, standing_plan
from optimizer.analysis.certify import certify_plan
from optimizer.analysis.plan_check import CHECKS, check_plan
from optimizer.cli import main
from optimizer.planfile import save_plan



@pytest.fixture(scope="module")
def standing():
    return standing_plan(**demo_standing(sweep=0.4, knots=4))


def failures(plan, **tolerances) -> dict:
    return {r.name: r for r in check_plan(plan, tolerances).failures()}


def _joint(plan, name: str) -> int:
    return plan.meta["joint_names"].index(name)


def test_an_honest_standing_plan_passes_every_check(standing):
    report = check_plan(standing)
    assert [r.name for r in report.results] == [c.name for c in CHECKS]
    assert report.passed, [r.reason() for r in report.failures()]


def test_scaled_torques_break_the_equations_of_motion(standing):
    # Pinocchio rnea: tau = rnea(q, 0, 0)[6:] - J_j^T f at rest; 1.3 tau leaves 0.3 tau unbalanced.
    plan = copy.deepcopy(standing)
    plan.tau = 1.3 * plan.tau
    bad = failures(plan)
    assert "dynamics" in bad and bad["dynamics"].failing_knots == [0, 1, 2, 3]
    residual = 0.3 * np.abs(standing.tau).max() / (pin.computeTotalMass(
        pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())) * 9.81)
    assert bad["dynamics"].worst == pytest.approx(residual, rel=1e-6)
    assert bad["dynamics"].where in plan.meta["joint_names"]


def test_a_force_pushed_outside_its_pyramid_fails_only_the_friction_check(standing):
    # Coulomb pyramid (inscribed, 4 facets): |f.t| <= mu cos(pi/4) f.n per axis. Foot 0 and
    # foot 2 (same side) get an internal push along the line joining them, well past that.
    load = standing.contact_forces[2, 0, 2]
    plan = internal_push(standing, 2, 0, 2, 0.6 * np.cos(np.pi / 4) * load + 20.0)
    bad = failures(plan)
    assert set(bad) == {"friction"}
    assert bad["friction"].knot == 2 and bad["friction"].failing_knots == [2]
    assert bad["friction"].where.split()[0] in (plan.meta["contact_frames"][0], plan.meta["contact_frames"][2])
    # the same push inside the pyramid passes
    assert check_plan(internal_push(standing, 2, 0, 2, 1.0)).passed


@pytest.mark.parametrize("name, change, where", [
    # a foothold 1 mm away from where Pinocchio's forward kinematics puts the foot
    ("footholds", lambda p: p.contact_targets.__setitem__((1, 2, 0), p.contact_targets[1, 2, 0] + 1e-3),
     "foot_rl"),
    # a minimum normal force above what a foot carries (statics: about m g / 4)
    ("normal-force", lambda p: p.meta.update(min_normal_force=float(p.contact_forces[:, :, 2].min()) + 1.0), None),
    # one contact's own minimum (per-contact meta.min_normal_force) above what that foot carries,
    # the other contacts' minima zero: only that contact is named
    ("normal-force", lambda p: p.meta.update(min_normal_force=[0.0, 0.0, float(p.contact_forces[:, 2, 2].min()) + 1.0,
                                                               0.0]), "foot_rl"),
    # a torque limit just under a torque the plan needs
    ("torque", lambda p: p.meta["torque_limits"]["upper"].__setitem__(
        int(np.argmax(p.tau[3])), float(p.tau[3].max()) - 0.5), None),
    # a joint speed over its URDF limit (Pinocchio's velocityLimit)
    ("joint-velocity", lambda p: p.v.__setitem__((2, 6 + _joint(p, "arm_shoulder")),
                                                  1.5 * p.meta["joint_velocity_limits"][_joint(p, "arm_shoulder")]),
     "arm_shoulder"),
    # the base quaternion off the unit sphere
    ("quaternion", lambda p: p.q.__setitem__((1, slice(3, 7)), 1.01 * p.q[1, 3:7]), "base orientation"),
    # a configuration off the integrator's path: q[2] != integrate(q[1], h v[2])
    ("integrator", lambda p: p.q.__setitem__((2, 7), p.q[2, 7] + 1e-3), None),
    # a contact out of stance that still carries force
    ("swing-forces", lambda p: p.contact_active.__setitem__((3, 1), False), "foot_fr"),
])
def test_each_check_fails_when_its_physics_is_broken(standing, name, change, where):
    plan = copy.deepcopy(standing)
    plan.meta.setdefault("joint_velocity_limits", list(pin.buildModelFromXML(
        plan.meta["urdf"], pin.JointModelFreeFlyer()).velocityLimit[6:]))
    change(plan)
    bad = failures(plan)
    assert name in bad, [r.reason() for r in check_plan(plan).results]
    assert bad[name].knot is not None and bad[name].failing_knots
    if where is not None:
        assert bad[name].where == where
    assert f"{name} check failed at knot {bad[name].knot}" in bad[name].reason()


def test_joint_outside_its_urdf_range_fails_the_position_check(standing):
    # Pinocchio's lowerPositionLimit / upperPositionLimit come from the URDF <limit> tags.
    model = pin.buildModelFromXML(standing.meta["urdf"], pin.JointModelFreeFlyer())
    plan = copy.deepcopy(standing)
    iq = model.idx_qs[model.getJointId("fl_knee")]
    plan.q[1, iq] = model.upperPositionLimit[iq] + 0.05
    bad = failures(plan)
    assert bad["joint-position"].where == "fl_knee" and bad["joint-position"].knot == 1
    assert bad["joint-position"].worst == pytest.approx(0.05, rel=1e-9)


def test_tolerances_are_settable_and_unknown_names_refused(standing):
    plan = copy.deepcopy(standing)
    plan.tau = 1.001 * plan.tau
    assert "dynamics" in failures(plan)
    assert "dynamics" not in failures(plan, dynamics=0.1)
    with pytest.raises(KeyError, match="unknown check 'dynamic'"):
        check_plan(plan, {"dynamic": 1.0})


def test_cli_reports_failed_checks_in_table_and_json_and_exits_1(standing, tmp_path, capsys):
    plan = copy.deepcopy(standing)
    plan.tau = 1.3 * plan.tau
    save_plan(plan, tmp_path / "p.npz")
    out = tmp_path / "c.json"
    assert main(["certify", str(tmp_path / "p.npz"), "--json", str(out)]) == 1
    text = capsys.readouterr().out
    assert "result: NOT certified" in text and "dynamics check failed at knot" in text
    assert any(line.split()[:1] == ["dynamics"] and "FAILED" in line for line in text.splitlines())
    doc = json.loads(out.read_text())
    assert doc["plan_checks"]["passed"] is False and doc["certified"] is False
    assert doc["points"][0]["summary"]["certified"] is False
    dyn = [c for c in doc["plan_checks"]["checks"] if c["name"] == "dynamics"][0]
    assert dyn["passed"] is False and dyn["knot"] in (0, 1, 2, 3)
    # --no-check certifies the margins but warns that the physics was not checked
    assert main(["certify", str(tmp_path / "p.npz"), "--no-check", "--json", str(out)]) == 0
    text = capsys.readouterr().out
    assert "WARNING: the plan's physics was not checked" in text and "NOT checked" in text
    assert json.loads(out.read_text())["plan_checks"] == {"run": False}
    # a looser tolerance from the command line lets it pass
    assert main(["certify", str(tmp_path / "p.npz"), "--check-tol", "dynamics=1", "--quiet"]) == 0
    assert main(["certify", str(tmp_path / "p.npz"), "--check-tol", "dynamic=1"]) == 2
    assert "field '--check-tol': expected NAME=VALUE with NAME one of dynamics" in capsys.readouterr().err


def test_the_checks_run_before_the_margins_in_the_python_api(standing):
    plan = copy.deepcopy(standing)
    plan.tau = 1.3 * plan.tau
    report = certify_plan(plan, knots=[0])
    assert not report.summary()["certified"]
    assert report.problems()[0].startswith("dynamics check failed at knot")
    assert certify_plan(plan, knots=[0], check=False).summary()["certified"]
