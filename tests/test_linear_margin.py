"""Linear-gain margins against textbook figures and the exact certifier's LPs."""
from __future__ import annotations

import math

import numpy as np
import pytest

from certify_checks import MODELS, sampled_bounds, standing_plan
from optimizer.analysis.knot_response import knot_responses
from optimizer.analysis.linear_margin import best_linear_margin, certify_gains
from optimizer.analysis.response import KnotResponse


def two_link_arm(q1, q2, tau, lower, upper, l1=0.5, l2=0.4) -> KnotResponse:
    """Fixed-base planar 2R arm, disturbance at the tip, torque limits only.

    Tip Jacobian of the planar two-link arm (Siciliano et al., Robotics: Modelling,
    Planning and Control, section 3.1), z row zero.
    """
    s1, c1, s12, c12 = math.sin(q1), math.cos(q1), math.sin(q1 + q2), math.cos(q1 + q2)
    jac = np.array([[-l1 * s1 - l2 * s12, -l2 * s12], [l1 * c1 + l2 * c12, l2 * c12], [0.0, 0.0]])
    return KnotResponse(
        contact_jacobian=np.zeros((0, 2)), disturbance_jacobian=jac, shape=np.eye(3),
        tau=np.asarray(tau, float), tau_lower=np.asarray(lower, float), tau_upper=np.asarray(upper, float),
        forces=np.zeros((0, 3)), facets=np.zeros((0, 4, 3)), normals=np.zeros((0, 3)),
        min_normal_force=0.0, active=np.zeros(0, bool), base_dofs=0), jac


def test_two_link_arm_linear_margin_is_the_manipulator_force_polytope_radius():
    # Manipulator force polytope (textbook; e.g. Chiacchio et al. 1997, from memory): with
    # torque limits only the response dtau = -J^T F is forced, so the linear response is
    # the only response and rho = min_i margin_i / |row i of J^T|.
    rng = np.random.default_rng(11)
    for _ in range(5):
        q1, q2 = rng.uniform(-2.5, 2.5, size=2)
        upper, lower = rng.uniform(5, 20, size=2), -rng.uniform(5, 20, size=2)
        tau = lower + rng.uniform(0.3, 0.7, size=2) * (upper - lower)
        response, jac = two_link_arm(q1, q2, tau, lower, upper)
        expected = np.min(np.minimum(upper - tau, tau - lower) / np.linalg.norm(jac.T, axis=1))
        assert best_linear_margin(response.limit_rows()).rho == pytest.approx(expected, rel=1e-9)


def test_torque_outside_its_limit_gives_a_negative_margin():
    response, jac = two_link_arm(0.3, 0.9, tau=[12.0, 0.0], lower=[-10, -10], upper=[10, 10])
    margin = best_linear_margin(response.limit_rows())
    # 2 N m over the limit, lever |row 0 of J^T|: the plan is short by that force
    assert margin.rho == pytest.approx(-2.0 / np.linalg.norm(jac[:, 0]), rel=1e-9)
    assert "torque" in margin.note


@pytest.mark.parametrize("mu", [0.4, 0.8])
def test_box_pushed_at_its_sole_centre_matches_coulomb_geometry(mu):
    # Coulomb friction, 4-facet pyramid inscribed in the cone, mu_p = mu / sqrt 2, same axes at
    # every foot, no torque limits (docs/formulation.md section 8): a push at the sole's centre,
    # below the centre of mass, needs no moment from the feet; each foot taking a quarter of
    # it meets the summed pyramid's limit, so the best linear response reaches the exact
    # figure rho = m g mu_p / sqrt(1 + mu_p^2).
    plan = standing_plan((MODELS / "box_with_sole_point.urdf").read_text(),
                         ["foot_fl", "foot_fr", "foot_hl", "foot_hr"], 0.25, mu=mu, margin=[0.0],
                         disturbance_frame="sole_centre")
    mu_p = mu / math.sqrt(2.0)
    expected = 20.0 * 9.81 * mu_p / math.sqrt(1 + mu_p ** 2)   # 20 kg: the URDF's mass
    (_, response), = knot_responses(plan)
    assert best_linear_margin(response.limit_rows()).rho == pytest.approx(expected, rel=1e-6)


def test_certified_gains_are_a_lower_bound_of_sampled_support_lps():
    # A linear response is one admissible response, so whatever gains are certified, the
    # figure is below the support value of the residual set along every direction (SciPy
    # linprog on the lifted polytope, tests/certify_checks.py).
    plan = standing_plan((MODELS / "box_on_four_feet.urdf").read_text(),
                         ["foot_fl", "foot_fr", "foot_hl", "foot_hr"], 0.25, mu=0.6, margin=[0.0])
    (_, response), = knot_responses(plan)
    rows = response.limit_rows()
    _, upper = sampled_bounds(plan, 0, n_dirs=100)
    rng = np.random.default_rng(5)
    for _ in range(10):
        random_gains = rng.normal(scale=0.3, size=(rows.a_ub.shape[1] - 3, 3))
        assert certify_gains(rows, random_gains).rho <= upper * (1 + 1e-9)
    best = best_linear_margin(rows).rho
    assert 0.0 < best <= upper * (1 + 1e-9)
