"""Certification under a changed model, the plan fixed: friction, torque limits, payload and
minimum normal force, checked against plain certification of plans written with those
numbers, against Coulomb statics and against the inclined plane."""
from __future__ import annotations

import copy
import json
import math

import numpy as np
import pinocchio as pin
import pytest

from certify_checks import MODELS, demo_standing, standing_plan
from optimizer.analysis.certify import certify_plan
from optimizer.analysis.model_change import ModelChange
from optimizer.cli import main
from optimizer.planfile import save_plan

BOX_FEET = ["foot_fl", "foot_fr", "foot_hl", "foot_hr"]
BOX_MASS = 20.0  # kg, written in box_on_four_feet.urdf


def box_plan(**kw):
    return standing_plan((MODELS / "box_on_four_feet.urdf").read_text(), BOX_FEET, 0.25, margin=[0.0], **kw)


def rho(plan, change=None, knots=None):
    report = certify_plan(plan, knots=knots, check=False, change=change, friction_floor=False)
    if change is None:
        return np.array([c.rho for c in report.knots])
    return np.array([c.changed.cert.rho for c in report.knots])


@pytest.mark.parametrize("payload", [0.0, 5.0, 12.0])
def test_payload_at_the_centre_of_mass_adds_its_weight_to_the_coulomb_figure(payload):
    # Coulomb friction on a 4-facet pyramid inscribed in the cone (mu_p = mu / sqrt 2), force
    # at the centre of mass, no torque limits: rho = W mu_p / sqrt(1 + mu_p^2) with W the
    # weight carried (statics). A payload hanging at that point adds m_p g to W.
    mu = 0.6
    mu_p = mu / math.sqrt(2.0)
    expected = (BOX_MASS + payload) * 9.81 * mu_p / math.sqrt(1.0 + mu_p**2)
    figure = rho(box_plan(mu=mu), ModelChange(payload_kg=payload))[0]
    assert figure == pytest.approx(expected, rel=1e-4)


@pytest.mark.parametrize("scale", [0.5, 0.8, 1.7])
def test_friction_scale_matches_the_coulomb_figure_of_the_scaled_coefficient(scale):
    # Same statics, with mu scaled: rho = m g mu_p / sqrt(1 + mu_p^2), mu_p = scale mu / sqrt 2.
    mu_p = scale * 0.6 / math.sqrt(2.0)
    expected = BOX_MASS * 9.81 * mu_p / math.sqrt(1.0 + mu_p**2)
    assert rho(box_plan(mu=0.6), ModelChange(friction_scale=scale))[0] == pytest.approx(expected, rel=1e-4)


def test_minimum_normal_force_and_torque_scale_equal_plans_written_with_those_limits():
    # The changed model must give what plain certification gives for a plan file whose meta
    # already holds the changed numbers (written here by the test helper, not by brace).
    f_min = 0.9 * BOX_MASS * 9.81 / 4
    assert rho(box_plan(), ModelChange(min_normal_force=f_min))[0] == pytest.approx(
        rho(box_plan(min_normal_force=f_min))[0], rel=1e-9)
    args = demo_standing(sweep=0.3, knots=2)
    model = pin.buildModelFromXML(args["urdf"], pin.JointModelFreeFlyer())
    effort = model.effortLimit[6:].copy()
    effort[list(model.names[2:]).index("wrist_pitch")] = 3.0   # a weak wrist, so torque binds
    plan = standing_plan(**args, torque_limits=(-effort, effort))
    weaker = standing_plan(**args, torque_limits=(-0.8 * effort, 0.8 * effort))
    np.testing.assert_allclose(rho(plan, ModelChange(torque_scale=0.8)), rho(weaker), rtol=1e-9)
    assert (rho(weaker) < rho(plan)).all()


def test_unit_scales_give_plain_certification_exactly(tmp_path, capsys):
    plan = standing_plan(**demo_standing(sweep=0.4, knots=3))
    save_plan(plan, tmp_path / "p.npz")
    assert main(["certify", str(tmp_path / "p.npz"), "--json", str(tmp_path / "plain.json")]) == 0
    assert main(["certify", str(tmp_path / "p.npz"), "--friction-scale", "1", "--torque-scale", "1",
                 "--json", str(tmp_path / "same.json")]) == 0
    text = capsys.readouterr().out
    assert "changed model: friction x1, torque limits x1" in text
    plain = json.loads((tmp_path / "plain.json").read_text())["points"][0]["knots"]
    same = json.loads((tmp_path / "same.json").read_text())["points"][0]["knots"]
    for a, b in zip(plain, same):
        assert b["rho_exact_N"] == a["rho_exact_N"]
        assert b["changed_model"]["rho_N"] == a["rho_exact_N"] and b["changed_model"]["feasible"]


def test_too_little_friction_makes_knots_infeasible_and_exits_1(tmp_path, capsys):
    # A payload that pulls sideways: the plan's forces carry the box's weight upright (the
    # helper computed them with gravity along -z); the file's gravity, which only sets the
    # payload's force here, is tilted, so 10 kg pull (20, 0, -96) N. Coulomb on the summed
    # pyramids: the feet need |F_x| <= mu cos(45 deg) F_z in total, F = box weight + payload,
    # so the friction floor is (20 / (20 * 9.81 + 96)) / (0.6 cos 45 deg) of the planned mu.
    plan = box_plan(mu=0.6)
    plan.meta["gravity"] = [2.0, 0.0, -9.6]
    save_plan(plan, tmp_path / "p.npz")
    floor = (10 * 2.0 / (BOX_MASS * 9.81 + 10 * 9.6)) / (0.6 * math.cos(math.pi / 4))
    assert main(["certify", str(tmp_path / "p.npz"), "--no-check", "--payload", "10",
                 "--friction-scale", f"{0.9 * floor:.6f}", "--json", str(tmp_path / "c.json")]) == 1
    text = capsys.readouterr().out
    assert "NOT feasible at all" in text and "not feasible at all at knots 0" in text
    doc = json.loads((tmp_path / "c.json").read_text())["points"][0]
    assert doc["summary"]["changed_infeasible_knots"] == [0]
    assert doc["knots"][0]["changed_model"]["feasible"] is False
    assert doc["summary"]["friction_floor_scale"] == pytest.approx(floor, rel=1e-3)
    # just above the floor the knot is feasible again
    assert main(["certify", str(tmp_path / "p.npz"), "--no-check", "--payload", "10", "--quiet",
                 "--friction-scale", f"{1.01 * floor:.6f}"]) == 0


@pytest.mark.parametrize("argv, pattern", [
    (["--friction-scale", "0"], "field '--friction-scale': expected a number > 0"),
    (["--torque-scale", "-1"], "field '--torque-scale': expected a number > 0"),
    (["--payload", "-2"], "field '--payload': expected a number of kg >= 0"),
    (["--min-normal-force", "nan"], "field '--min-normal-force': expected a number of N >= 0"),
])
def test_bad_changed_model_options_exit_2(tmp_path, capsys, argv, pattern):
    save_plan(box_plan(), tmp_path / "p.npz")
    assert main(["certify", str(tmp_path / "p.npz"), *argv]) == 2
    assert pattern in capsys.readouterr().err
