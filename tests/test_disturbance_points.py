"""Several disturbance points: each point's certified margin, and the objective over the points.

External references: SciPy's HiGHS LPs over the lifted response polytope
written from the plan file alone (``certify_checks.LiftedLP``: sampled
support values bound rho from above, the inscribed radius of their hull from
below; membership LPs just inside and beyond the weakest direction); the
definitions of a minimum and of a weighted mean (NumPy) for the objective's
knot margin.
"""
import json

import casadi as ca
import numpy as np
import pytest

from certify_checks import LiftedLP, check_plan_against_sampled_lps
from optimizer.analysis.certify import certify_points
from optimizer.cli import main
from optimizer.planfile import save_plan
from optimizer.transcription.objectives import POINT_FLOOR, Context, RobustSum, knot_margins


def test_plan_stores_one_margin_column_per_point_and_margin_is_the_first(two_point_plans):
    plan = two_point_plans["smallest"]
    assert plan.margins.shape == (plan.knots, 2)
    np.testing.assert_array_equal(plan.margin, plan.margins[:, 0])
    assert [d["frame"] for d in plan.meta["disturbances"]] == ["grip_point", "body"]
    assert plan.meta["combine_points"] == "smallest"


@pytest.mark.parametrize("point", [0, 1])
def test_each_points_exact_figure_lies_between_independent_lp_bounds(two_point_plans, point):
    # SciPy linprog over (u, dtau, dlambda) with all nv rows and the point's own W: 100 sampled
    # directions bound rho from above, the inscribed radius of their support points' hull from below.
    plan = two_point_plans["smallest"]
    rows = check_plan_against_sampled_lps(plan, n_dirs=100, knots=[0, 2, 5], disturbance=point)
    assert [r["knot"] for r in rows] == [0, 2, 5]
    for r in rows:   # the plan's own figure for this point is sound: never above the exact one
        assert r["planned"] == pytest.approx(plan.margins[r["knot"], point], rel=1e-12)
        assert 0.0 < r["planned"] <= r["rho"] * (1 + 1e-6)


def test_every_point_is_certified_and_its_weakest_push_confirmed_by_membership_lps(two_point_plans):
    plan = two_point_plans["smallest"]
    cert = certify_points(plan)
    assert [c.disturbance["frame"] for c in cert.points] == ["grip_point", "body"]
    assert cert.problems() == [] and cert.to_json()["certified"] is True
    for point in cert.points:
        p = point.disturbance["index"]
        for c in point.knots:
            assert c.exact and c.status == "ok"
            # Just inside rho along the weakest push (u coordinates, F = W u) an admissible
            # response exists, just beyond its support value none: judged by SciPy's LP alone.
            lifted = LiftedLP(plan, c.knot, disturbance=p)
            assert lifted.contains(c.rho * (1 - 1e-5) * c.weakest_u)
            assert not lifted.contains(c.weakest_support * (1 + 1e-5) * c.weakest_u)


def test_smallest_raises_the_smaller_points_margin_over_optimizing_the_first_point_only(two_point_plans):
    # Same seed, same built solver; only the body's objective weight differs (1 against 0).
    both, first = two_point_plans["smallest"].margins, two_point_plans["first only"].margins
    weaker = int(np.argmin(first.min(axis=0)))
    assert weaker == 1, "optimizing the grip alone leaves the body the smaller margin"
    assert both[:, 1].min() > 1.1 * first[:, 1].min()
    assert both.min() > first.min()
    # what the objective maximizes at each knot: min over points of rho_p / w_p, w = (1, 1)
    assert np.min(both.min(axis=1)) >= np.min(first.min(axis=1))


def test_certify_command_reports_every_point_and_one_selected_by_index(two_point_plans, tmp_path, capsys):
    path, out = tmp_path / "two.npz", tmp_path / "cert.json"
    save_plan(two_point_plans["smallest"], path)
    assert main(["certify", str(path), "--json", str(out), "--max-lps", "60"]) == 0
    text = capsys.readouterr().out
    assert "2 disturbance points (force at grip_point, force at body)" in text
    assert "point 0: force at grip_point [N]" in text and "point 1: force at body [N]" in text
    assert "each of the 2 disturbance points" in text.splitlines()[-3]
    doc = json.loads(out.read_text())
    assert [p["disturbance"]["frame"] for p in doc["points"]] == ["grip_point", "body"]
    for p, point in enumerate(doc["points"]):
        planned = [k["planned_margin_N"] for k in point["knots"]]
        np.testing.assert_allclose(planned, two_point_plans["smallest"].margins[:, p], rtol=1e-12)
    assert main(["certify", str(path), "--disturbance", "1", "--quiet", "--max-lps", "60"]) == 0
    text = capsys.readouterr().out
    assert text.splitlines()[0].endswith("force at body, 6 knots, projection refined around the figure, tol 1e-07")
    assert "point 0" not in text


@pytest.mark.parametrize("combine", ["smallest", "weighted-sum"])
def test_knot_margin_of_several_points_is_the_smallest_or_the_weighted_mean(combine):
    # Reference: NumPy's minimum of rho_p / w_p, or sum w_p rho_p / sum w_p (weights normalized).
    rng = np.random.default_rng(3)
    K, weights = 5, np.array([1.0, 0.5, 2.0])
    rho = rng.uniform(10.0, 90.0, size=(3, K))
    w = weights / (weights.max() if combine == "smallest" else weights.sum())
    V = {f"rho{p}": ca.DM(rho[p][None, :]) for p in range(3)}
    smallest = np.min(rho / weights[:, None], axis=0) * weights.max()
    V[POINT_FLOOR] = ca.DM(smallest[None, :])
    ctx = Context(weight=100.0, torque_scale=1.0, knots=K, points=3, combine=combine)
    got = np.array(knot_margins(V, {"point_weights": ca.DM(w)}, ctx)).ravel()
    expected = smallest if combine == "smallest" else (weights @ rho) / weights.sum()
    np.testing.assert_allclose(got, expected, rtol=1e-12)
    if combine == "smallest":   # the epigraph rows hold with equality at the smallest point
        stack = _Rows()
        RobustSum().add_constraints(V, {"point_weights": ca.DM(w)}, stack, ctx)
        rows = np.array(stack.rows).reshape(3, K, order="F") * ctx.weight
        assert rows.min() >= -1e-9
        np.testing.assert_allclose(rows.min(axis=0), 0.0, atol=1e-9)


class _Rows:
    """Collects the rows an objective adds (stand-in for the transcription's constraint stack)."""

    def add(self, name, expr, knots, lower, upper, unit="", who=()):
        self.rows = np.array(ca.DM(expr)).reshape(-1, order="F")
        assert name == "point floor" and list(knots) == list(range(expr.shape[1]))
