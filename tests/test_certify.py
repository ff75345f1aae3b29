"""Certification of plans against Coulomb friction, an independent LP method and replay."""
import json
import math
import re

import numpy as np
import pinocchio as pin
import pytest

from certify_checks import (MODELS, LiftedLP, check_plan_against_sampled_lps, demo_standing,
                            least_squares_margin, sampled_bounds, standing_plan)
from optimizer.analysis.certify import KnotCertificate, PlanCertificate, Settings, certify_plan
from optimizer.analysis.knot_response import knot_responses
from optimizer.report.page import certification_html, reading, table_html
from optimizer.report.table import Entry, row, text_table, titles
from optimizer.sweep.page import findings, results_table

BOX_FEET = ["foot_fl", "foot_fr", "foot_hl", "foot_hr"]


def box_plan(mu=0.6, **kw):
    urdf = (MODELS / "box_on_four_feet.urdf").read_text()
    return standing_plan(urdf, BOX_FEET, 0.25, mu=mu, margin=[0.0], **kw)


@pytest.fixture(scope="module")
def demo_plan():
    return standing_plan(**demo_standing(sweep=0.6, knots=3))


@pytest.mark.parametrize("mu", [0.4, 0.6, 1.0])
def test_standing_box_matches_coulomb_pyramid_geometry(mu):
    # Coulomb friction with a 4-facet pyramid inscribed in the cone, mu_p = mu / sqrt(2),
    # same axes at every foot, force at the centre of mass, no torque limits, no minimum
    # normal force: rho = m g mu_p / sqrt(1 + mu_p^2) (docs/formulation.md section 8; statics).
    plan = box_plan(mu)
    m = 20.0  # mass written in box_on_four_feet.urdf
    mu_p = mu / math.sqrt(2.0)
    expected = m * 9.81 * mu_p / math.sqrt(1.0 + mu_p**2)
    cert = certify_plan(plan).knots[0]
    assert cert.rho == pytest.approx(expected, rel=1e-4)
    # weakest: pushing sideways along a pyramid axis and lifting by mu_p, i.e. the normal of
    # the summed pyramid's facet (one of four symmetric ones)
    normals = [np.array([sx, sy, mu_p]) for sx, sy in ((1, 0), (-1, 0), (0, 1), (0, -1))]
    assert max(abs(cert.direction @ (n / np.linalg.norm(n))) for n in normals) == pytest.approx(1.0, abs=1e-6)
    assert cert.bottleneck and all(re.fullmatch(r"foot_(fl|fr|hl|hr) friction facet [0-3]", b)
                                   for b in cert.bottleneck)


def test_box_on_three_feet_with_its_centre_over_a_support_edge_has_zero_margin():
    # Statics (moments about the support edge): with foot_hr lifted, the centre of mass lies
    # on the line foot_fr - foot_hl; any push across that line tips the box, so rho = 0.
    # The lifted foot never appears in the bottleneck.
    plan = box_plan(active=[True, True, True, False])
    assert plan.contact_forces[0, 0, 2] == pytest.approx(0.0, abs=1e-9)  # foot_fl unloaded
    cert = certify_plan(plan).knots[0]
    assert cert.rho == pytest.approx(0.0, abs=1e-6)
    assert cert.bottleneck and not any(b.startswith("foot_hr") for b in cert.bottleneck)


def test_box_on_three_feet_around_the_centre_is_weaker_than_on_four():
    # Moving the centre of mass inside the triangle fl-fr-hl gives a positive figure, never
    # above the four-foot one (a fourth foot only adds admissible responses). Pushing towards
    # the left edge unloads foot_hr anyway, so the two may be equal.
    urdf = (MODELS / "box_on_four_feet.urdf").read_text()
    urdf = urdf.replace('<origin xyz="0 0 0"/>', '<origin xyz="0.1 0.05 0"/>')
    three = certify_plan(standing_plan(urdf, BOX_FEET, 0.25, margin=[0.0], active=[1, 1, 1, 0])).knots[0]
    four = certify_plan(standing_plan(urdf, BOX_FEET, 0.25, margin=[0.0])).knots[0]
    assert 0.0 < three.rho <= four.rho * (1 + 1e-9)
    assert not any(b.startswith("foot_hr") for b in three.bottleneck)


def test_minimum_normal_force_can_be_the_bottleneck():
    # With f_min close to the static share m g / 4, pushing down a corner or lifting unloads a
    # foot first: the reported limit is a minimum normal force, and the figure drops.
    loose = certify_plan(box_plan()).knots[0]
    plan = box_plan(min_normal_force=0.95 * 20.0 * 9.81 / 4)
    tight = certify_plan(plan).knots[0]
    assert tight.rho < loose.rho
    assert any(b.endswith("minimum normal force") for b in tight.bottleneck)


def test_a_contact_s_own_minimum_normal_force_is_certified_per_contact():
    # Per-contact minima (plan/1 meta.min_normal_force as a list): only foot_hr keeps 95 % of
    # its static share. Independent check: SciPy linprog over (u, dtau, dlambda) with every
    # row, along sampled directions (upper bound) and their hull's inscribed radius (lower).
    share = 20.0 * 9.81 / 4
    loose = certify_plan(box_plan()).knots[0]
    everywhere = certify_plan(box_plan(min_normal_force=0.95 * share)).knots[0]
    plan = box_plan(min_normal_force=[0.0, 0.0, 0.0, 0.95 * share])
    one = certify_plan(plan).knots[0]
    assert everywhere.rho <= one.rho < loose.rho
    assert "foot_hr minimum normal force" in one.bottleneck, one.bottleneck
    check_plan_against_sampled_lps(plan, n_dirs=200, knots=[0])


def test_demo_plan_lies_between_independent_sampled_lp_bounds(demo_plan):
    # Independent method: SciPy linprog over (u, dtau, dlambda) with all nv rows along 200
    # sampled directions (upper bound) and the inscribed radius of their support points'
    # hull (lower bound); the projection's facet count is reported.
    rows = check_plan_against_sampled_lps(demo_plan, n_dirs=200, knots=[0, 2])
    assert [r["knot"] for r in rows] == [0, 2]
    assert all(r["facets"] >= 4 for r in rows)
    assert all(r["lower"] <= r["upper"] for r in rows)


def test_linear_gain_margin_never_exceeds_exact_and_ratio_is_reported(demo_plan):
    # A linear response is one admissible response (docs/formulation.md section 6): its margin is
    # a lower bound of rho_exact.
    cert = certify_plan(demo_plan)
    for c in cert.knots:
        assert c.planned == pytest.approx(least_squares_margin(demo_plan, c.knot))
        assert c.planned <= c.rho * (1 + 1e-6)
        assert c.margin_ok and c.ratio == pytest.approx(c.planned / c.rho)
        assert 0.0 < c.ratio <= 1.0 + 1e-6
    assert cert.summary()["margin_above_exact_knots"] == 0


def test_weakest_direction_is_confirmed_by_independent_membership_lps(demo_plan):
    # Just inside rho along the weakest direction is rejectable, just beyond it is not,
    # judged by the lifted LP written from the plan file (SciPy linprog).
    cert = certify_plan(demo_plan, knots=[1]).knots[0]
    lifted = LiftedLP(demo_plan, 1)
    assert lifted.contains(cert.rho * (1 - 1e-5) * cert.direction)
    assert not lifted.contains(cert.rho * (1 + 1e-5) * cert.direction)


def test_replay_rejects_every_draw_within_the_margin_and_none_beyond(demo_plan):
    cert = certify_plan(demo_plan, replay=40, seed=1)
    r = cert.replay
    assert (r.drawn, r.rejected) == (120, 120)
    assert (r.beyond_tried, r.beyond_unrejectable) == (3, 3)
    assert cert.summary()["certified"]


def test_replay_catches_a_margin_above_the_exact_figure(demo_plan):
    exact = [c.rho for c in certify_plan(demo_plan).knots]
    inflated = standing_plan(**demo_standing(sweep=0.6, knots=3), margin=2.0 * np.array(exact))
    cert = certify_plan(inflated, replay=200, seed=2)
    assert all(c.status == "margin above exact" for c in cert.knots)
    assert cert.replay.rejected < cert.replay.drawn
    assert not cert.summary()["certified"]


def test_torque_bottleneck_is_named_and_moves_the_figure_when_that_limit_moves():
    # Weak wrist: a tight limit on one joint must show up by name, and raising exactly that
    # limit must raise the figure (the limit really is active).
    args = demo_standing()
    model = pin.buildModelFromXML(args["urdf"], pin.JointModelFreeFlyer())
    effort = model.effortLimit[6:].copy()
    names = list(model.names[2:])
    weak = names.index("wrist_pitch")
    effort[weak] = 3.0
    plan = standing_plan(**args, torque_limits=(-effort, effort))
    cert = certify_plan(plan).knots[0]
    assert any(re.fullmatch(r"wrist_pitch torque \((upper|lower)\)", b) for b in cert.bottleneck)
    effort[weak] = 3.5
    stronger = certify_plan(standing_plan(**args, torque_limits=(-effort, effort))).knots[0]
    assert stronger.rho > cert.rho * 1.01


@pytest.mark.parametrize("excess, repairable", [(5.0, True), (40.0, False)])
def test_torque_beyond_its_limit_is_a_violation_and_never_a_crash(excess, repairable):
    # The plan's own knee torque is above its (lowered) limit. Whether some change of contact
    # forces brings it back is decided independently by the lifted LP (SciPy linprog) at F = 0.
    plan = standing_plan(**demo_standing())
    knee = plan.meta["joint_names"].index("fl_knee")
    plan.meta["torque_limits"]["upper"][knee] = float(plan.tau[0, knee]) - excess
    cert = certify_plan(plan).knots[0]
    assert cert.status == ("violation" if repairable else "no admissible response")
    assert cert.violations == [f"fl_knee torque (upper) exceeded by {excess:g}"]
    assert LiftedLP(plan, 0).contains(np.zeros(3)) is repairable
    assert (cert.rho > 0.0) is repairable
    assert json.loads(json.dumps(cert.to_json()))["status"] == cert.status


def test_wrench_figure_is_exact_and_lies_between_independent_sampled_lp_bounds():
    # 6-D: the projection runs to its tolerance like in 3-D. Bracketed by SciPy linprog on the
    # lifted polytope (u, dtau, dlambda) along 300 sampled directions: the smallest support is
    # an upper bound, the inscribed radius of their hull a lower bound.
    args = demo_standing()
    plan = standing_plan(**args, kind="wrench")
    cert = certify_plan(plan).knots[0]
    assert cert.exact and cert.method == "projection" and cert.direction.shape == (6,)
    assert cert.upper - cert.lower <= 1e-6 * cert.upper
    lower, upper = sampled_bounds(plan, 0, n_dirs=300, seed=4)
    assert lower * (1 - 1e-6) <= cert.rho <= upper * (1 + 1e-6)
    # a wrench set contains the pure forces: its figure cannot exceed the force figure
    force_only = certify_plan(standing_plan(**args)).knots[0].rho
    assert cert.rho <= force_only * (1 + 1e-9)


def test_a_stopped_wrench_projection_reports_a_sound_bound_pair():
    # With a budget of 14 LPs the 6-D projection cannot close; the knot then carries the inner
    # hull's radius (a point set inside the residual set: a sound lower bound) and the smallest
    # support value (a sound upper bound), never an "exact" figure.
    plan = standing_plan(**demo_standing(), kind="wrench")
    exact = certify_plan(plan, check=False).knots[0]
    stopped = certify_plan(plan, check=False, settings=Settings(max_lps=14, samples=50)).knots[0]
    assert not stopped.exact and stopped.to_json()["rho_exact_N"] is None
    assert stopped.to_json()["figure"] == "bounds"
    assert stopped.lower <= exact.rho * (1 + 1e-9) and exact.rho <= stopped.upper * (1 + 1e-9)
    assert stopped.upper > stopped.lower
    assert any("bound pair" in n for n in stopped.notes)
    # a planned margin between the bounds is not proven: the verdict says so
    between = 0.5 * (max(stopped.lower, 0.0) + stopped.upper)
    plan.margin[:] = between
    again = certify_plan(plan, check=False, settings=Settings(max_lps=14, samples=50)).knots[0]
    assert again.status == "margin not proven (between the bounds)"


def test_knot_responses_use_pinocchio_jacobians_and_plan_data(demo_plan):
    model = pin.buildModelFromXML(demo_plan.meta["urdf"], pin.JointModelFreeFlyer())
    data = model.createData()
    for k, resp in knot_responses(demo_plan, [2]):
        fid = model.getFrameId("grip_point")
        ref = pin.computeFrameJacobian(model, data, demo_plan.q[k], fid, pin.ReferenceFrame.LOCAL_WORLD_ALIGNED)
        np.testing.assert_allclose(resp.disturbance_jacobian, ref[:3], atol=1e-12)
        np.testing.assert_array_equal(resp.tau, demo_plan.tau[k])
        # pyramid rows: every planned force satisfies g . f <= 0 (inscribed 4-facet pyramid)
        assert (np.einsum("cmi,ci->cm", resp.facets, resp.forces) <= 1e-9).all()


def _knot_with_bottleneck(k: int, names) -> KnotCertificate:
    return KnotCertificate(knot=k, time=0.1 * k, rho=10.0, lower=10.0, upper=10.0, direction=np.eye(3)[0],
                           bottleneck=list(names), planned=5.0, ratio=0.5, facets=6, vertices=8, lps=10,
                           method="projection")


def test_most_frequent_bottleneck_ties_go_to_the_earliest_knot_then_row():
    # Every limit below is in the bottleneck at both knots: a tie, broken by the limit met
    # first (knot 0, rows in limit-row order), whatever the order of string hashing.
    names = [f"joint_{i} torque (upper)" for i in range(12)]
    cert = PlanCertificate(knots=[_knot_with_bottleneck(0, names), _knot_with_bottleneck(1, names[::-1])],
                           disturbance={}, settings=Settings())
    assert cert.summary()["most_frequent_bottleneck"] == names[0]
    assert cert.summary()["bottleneck_knots"] == 2
    # a limit at more knots wins over the tie
    cert.knots.append(_knot_with_bottleneck(2, [names[5]]))
    assert cert.summary()["most_frequent_bottleneck"] == names[5]


def test_tables_and_pages_head_the_figures_by_what_they_hold():
    # A 6-D projection stopped after 14 LPs holds a bound pair (see above): every table, page
    # and sweep page must call its figure a lower bound, never "exact"; an exact one, "exact".
    plan = standing_plan(**demo_standing(), kind="wrench")
    exact = Entry("exact", plan, certify_plan(plan, check=False))
    bounded = Entry("bounded", plan, certify_plan(plan, check=False, settings=Settings(max_lps=14, samples=50)))
    assert exact.figure == "exact" and bounded.figure == "lower bound"
    for entries, word in (([exact], "exact"), ([bounded], "lower bound"), ([exact, bounded], "exact or lower bound")):
        rows = [row(e) for e in entries]
        assert f"{word} min [N]" in titles(rows) and f"{word} mean [N]" in titles(rows)
        assert f"{word} min [N]" in text_table(rows)[0]
        head = table_html(entries).split("</thead>")[0]
        assert f"{word} min [N]" in head
    lone = [bounded]
    assert "exact" not in text_table([row(bounded)])[0] and "exact" not in table_html(lone).split("</thead>")[0]
    assert "lower bound margin" in reading(lone)[0] and "exact" not in reading(lone)[0]
    assert "(0 exact)" in certification_html(lone) and "checked exactly" not in certification_html(lone)
    # the sweep page heads its columns by the stored records' figure
    manifest = {"axes": [], "objectives": ["robust"]}
    record = {"variant": "v0000", "objective": "robust", "status": "solved", "margin_min_exact_N": 1.0,
              "margin_mean_exact_N": 2.0, "margin_figure": "lower bound", "low_margin_knots": 0}
    assert "smallest lower bound [N]" in results_table(manifest, [record])
    assert "smallest lower bound margin" in findings(manifest, [record])[0]
    assert "smallest exact [N]" in results_table(manifest, [dict(record, margin_figure="exact")])
