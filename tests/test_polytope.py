"""Iterative projection against textbook polytopes with known figures."""
import math

import numpy as np
import pytest
from scipy.optimize import linprog

from certify_checks import demo_standing, sampled_bounds, standing_plan
from optimizer.analysis.certify import Settings, certify_response
from optimizer.analysis.knot_response import knot_responses
from optimizer.analysis.polytope import EmptyResidualSet, SupportLP, nearest_point, project
from optimizer.analysis.response import KnotResponse

BACKENDS = ["resident", "linprog"]


def fixed_arm(jacobian, tau, lower, upper) -> KnotResponse:
    """A fixed-base arm (base_dofs = 0) without contacts; disturbance at the tip."""
    nj = len(tau)
    return KnotResponse(
        contact_jacobian=np.zeros((0, nj)), disturbance_jacobian=np.asarray(jacobian, float),
        shape=np.eye(np.shape(jacobian)[0]), tau=np.asarray(tau, float), tau_lower=np.asarray(lower, float),
        tau_upper=np.asarray(upper, float), forces=np.zeros((0, 3)), facets=np.zeros((0, 4, 3)),
        normals=np.zeros((0, 3)), min_normal_force=0.0, active=np.zeros(0, bool), base_dofs=0,
        joint_names=tuple(f"j{i}" for i in range(nj)))


def planar_two_link_jacobian(q1, q2, l1=0.5, l2=0.4):
    """Tip Jacobian of a planar 2R arm (Siciliano et al., Robotics: Modelling, Planning and
    Control, section 3.1, two-link planar arm), as a 3 x 2 world matrix (z row zero)."""
    s1, c1, s12, c12 = math.sin(q1), math.cos(q1), math.sin(q1 + q2), math.cos(q1 + q2)
    return np.array([[-l1 * s1 - l2 * s12, -l2 * s12], [l1 * c1 + l2 * c12, l2 * c12], [0.0, 0.0]])


def lp_of(resp, cap=1e6, backend="auto"):
    rows = resp.limit_rows()
    return SupportLP(rows.a_ub, rows.b_ub, rows.a_eq, rows.dim, cap, backend, rows.names)


@pytest.mark.parametrize("backend", BACKENDS)
def test_two_link_arm_matches_the_manipulator_force_polytope(backend):
    # Classic manipulator force polytope (Chiacchio, Bouffard-Vercelli, Pierrot 1997,
    # J. Robotic Systems; reference from memory): with torque limits only, dtau = -J^T F is
    # forced, so each joint is a slab |[J^T]_i F| <= margin_i and
    # rho = min_i margin_i / |row i of J^T|.
    rng = np.random.default_rng(7)
    for _ in range(5):
        q1, q2 = rng.uniform(-2.5, 2.5, size=2)
        jac = planar_two_link_jacobian(q1, q2)
        upper = rng.uniform(5.0, 20.0, size=2)
        lower = -rng.uniform(5.0, 20.0, size=2)
        tau = rng.uniform(0.3, 0.7, size=2) * (upper - lower) + lower
        margin = np.minimum(upper - tau, tau - lower)
        expected = np.min(margin / np.linalg.norm(jac.T, axis=1))
        cert, _ = certify_response(fixed_arm(jac, tau, lower, upper), settings=Settings(backend=backend))
        assert cert.rho == pytest.approx(expected, rel=1e-6)
        weakest = int(np.argmin(margin / np.linalg.norm(jac.T, axis=1)))
        side = "upper" if upper[weakest] - tau[weakest] < tau[weakest] - lower[weakest] else "lower"
        assert cert.bottleneck == [f"j{weakest} torque ({side})"]
        # the planar arm resists any force along z: that direction is capped and reported
        assert cert.unbounded and not cert.capped
        # weakest direction: the normal of the binding slab, in the arm's plane
        normal = jac[:, weakest] / np.linalg.norm(jac[:, weakest])
        assert abs(cert.direction @ normal) == pytest.approx(1.0, abs=1e-9)


def test_box_polytope_full_projection_counts_six_facets_and_eight_vertices():
    # J = I: the residual set is the box [lower - tau, upper - tau]^3 (common practice);
    # its inscribed origin-centred ball touches the nearest face.
    tau, lower, upper = np.array([1.0, -2.0, 0.5]), np.array([-4.0, -5.0, -3.0]), np.array([6.0, 2.0, 1.5])
    resp = fixed_arm(-np.eye(3), tau, lower, upper)
    lp = lp_of(resp)
    full = project(lp, 1e-9, full=True)
    assert full.facets == 6 and len(full.vertices) == 8
    assert full.rho == pytest.approx(1.0, rel=1e-12)  # joint 2 has 1.0 left to its upper limit
    assert full.gap <= 1e-8
    quick = project(lp_of(resp), 1e-9)
    assert quick.rho == pytest.approx(full.rho, rel=1e-12)
    assert quick.lps < full.lps


@pytest.mark.parametrize("backend", BACKENDS)
def test_support_lp_matches_plain_linprog_on_random_polytopes(backend):
    # Reference: scipy.optimize.linprog (HiGHS) on the same rows, fresh for every direction.
    rng = np.random.default_rng(3)
    a_ub = rng.normal(size=(40, 9))
    b_ub = rng.uniform(0.5, 2.0, size=40)
    a_eq = rng.normal(size=(3, 9))
    lp = SupportLP(a_ub, b_ub, a_eq, 3, 1e3, backend)
    for d in rng.normal(size=(10, 3)):
        d /= np.linalg.norm(d)
        cost = np.zeros(9)
        cost[:3] = -d
        ref = linprog(cost, A_ub=np.vstack([a_ub, np.hstack([np.eye(3), np.zeros((3, 6))]),
                                             np.hstack([-np.eye(3), np.zeros((3, 6))])]),
                      b_ub=np.concatenate([b_ub, np.full(6, 1e3)]), A_eq=a_eq, b_eq=np.zeros(3),
                      bounds=(None, None), method="highs")
        assert lp.support(d).value == pytest.approx(-ref.fun, rel=1e-9, abs=1e-9)


def test_nominal_outside_a_limit_gives_minus_the_distance_and_a_violation():
    # Joint 0 is 3 N m beyond its upper limit; with J = I the residual set is a box not
    # containing the origin, at distance 3 along joint 0's axis (dtau_0 = -F_0 must be <= -3).
    resp = fixed_arm(np.eye(3), [13.0, 0.0, 0.0], [-10.0] * 3, [10.0] * 3)
    cert, _ = certify_response(resp)
    assert cert.rho == pytest.approx(-3.0, rel=1e-6)
    assert cert.status == "violation"
    assert cert.violations == ["j0 torque (upper) exceeded by 3"]
    assert math.isnan(cert.ratio)


def test_flat_residual_set_gives_a_zero_figure():
    # Joint 1 has no room at all (lower = tau = upper): every admissible force has
    # [J^T]_1 F = 0, a plane through the origin, so no force along its normal is rejectable.
    jac = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
    resp = fixed_arm(jac, [0.0, 2.0, 0.0], [-5.0, 2.0, -5.0], [5.0, 2.0, 5.0])
    cert, _ = certify_response(resp)
    assert cert.rho == 0.0 and cert.flat
    assert abs(cert.direction[1]) == pytest.approx(1.0)
    assert set(cert.bottleneck) <= {"j1 torque (upper)", "j1 torque (lower)"} and cert.bottleneck


def test_no_limit_at_all_is_capped_and_reported():
    resp = fixed_arm(np.eye(3), [0.0] * 3, [-np.inf] * 3, [np.inf] * 3)
    cert, _ = certify_response(resp, settings=Settings(cap=500.0))
    assert cert.rho == pytest.approx(500.0) and cert.capped and cert.unbounded
    assert all(name.startswith("cap ") for name in cert.bottleneck)


def test_no_admissible_response_is_reported_not_raised():
    # Lower limit above the upper one: the joint row has no solution for any force.
    resp = fixed_arm(np.eye(3), [0.0] * 3, [-1.0, 3.0, -1.0], [1.0, 2.0, 1.0])
    with pytest.raises(EmptyResidualSet, match="infeasible"):
        project(lp_of(resp))
    cert, _ = certify_response(resp)
    assert cert.rho == -math.inf and cert.status == "no admissible response"
    assert cert.to_json()["rho_exact_N"] is None


def test_wrench_disturbance_on_a_6d_box_is_exact():
    # 6-D: with J = I the residual set is the box |u_i| <= room_i; the largest centred ball
    # inside a box has the smallest half-width as radius (elementary geometry).
    room = np.array([4.0, 5.0, 6.0, 0.7, 0.8, 0.9])
    resp = fixed_arm(np.eye(6), np.zeros(6), -room, room)
    cert, _ = certify_response(resp)
    assert cert.exact and cert.method == "projection"
    assert cert.rho == pytest.approx(0.7, rel=1e-9)
    assert abs(abs(cert.direction[3]) - 1.0) < 1e-9


def test_nearest_point_of_a_square_off_the_origin():
    # Square [1, 2] x [-1, 1] at z = 0.5: nearest point to the origin is (1, 0, 0.5).
    square = np.array([[1, -1, 0.5], [1, 1, 0.5], [2, -1, 0.5], [2, 1, 0.5]], float)
    np.testing.assert_allclose(nearest_point(square), [1.0, 0.0, 0.5], atol=1e-6)


def test_nearest_point_on_points_a_million_units_away():
    # Optimality condition of the nearest point x of a convex hull: p . x >= |x|^2 for every p.
    rng = np.random.default_rng(11)
    pts = rng.uniform(-1e6, 1e6, size=(12, 3)) + np.array([3e6, 0.0, 0.0])
    x = nearest_point(pts)
    assert (pts @ x >= x @ x * (1 - 1e-6)).all()


def test_figure_does_not_depend_on_the_order_of_the_limit_rows():
    # The residual set does not depend on how its rows are listed, so neither may its figure.
    # A 6-D wrench at the demo robot's hand, standing with the arm swept (Pinocchio statics);
    # in some row orders the support LPs return other optimal vertices and Qhull's default
    # merging fails on them. Reference: SciPy linprog (HiGHS) on the lifted LP written from
    # the plan file alone (tests/certify_checks.py): its smallest sampled support value is an
    # upper bound of the figure, its hull's inscribed radius a lower bound.
    plan = standing_plan(**demo_standing(sweep=0.6, knots=3), kind="wrench")
    (_, resp), = knot_responses(plan, [2])
    rows = resp.limit_rows()
    reference = project(SupportLP(rows.a_ub, rows.b_ub, rows.a_eq, rows.dim, 1e6), 1e-7)
    lower, upper = sampled_bounds(plan, 2, 200)
    assert reference.complete and lower - 1e-6 <= reference.rho <= upper + 1e-6
    rng = np.random.default_rng(0)
    for _ in range(16):
        order = rng.permutation(rows.a_ub.shape[0])
        proj = project(SupportLP(rows.a_ub[order], rows.b_ub[order], rows.a_eq, rows.dim, 1e6), 1e-7)
        assert proj.complete and proj.rho == pytest.approx(reference.rho, rel=1e-6)


def test_planned_margin_near_zero_is_judged_with_an_absolute_and_a_relative_tolerance():
    # Fixed 3-joint arm with torque limits only and a full-rank tip Jacobian: dtau = -J^T F is
    # forced, so the residual set is a parallelepiped and rho = min_i room_i / |[J^T]_i|
    # (manipulator force polytope, see above). One joint is 1e-3 N m from its limit, so the
    # exact margin is about 1e-3 N. A planned margin 0.5 uN above it is rounding (MARGIN_ATOL =
    # 1e-6 N plus 1e-6 relative); 10 uN above it (1 % of the margin) is a margin the plan lacks.
    jac = np.array([[0.9, 0.2, -0.1], [0.1, 0.8, 0.3], [-0.2, 0.1, 0.7]])
    lower, upper = np.full(3, -10.0), np.full(3, 10.0)

    def status(tau, planned):
        expected = np.min(np.minimum(upper - tau, tau - lower) / np.linalg.norm(jac.T, axis=1))
        cert, _ = certify_response(fixed_arm(jac, tau, lower, upper), planned=expected + planned(expected))
        assert cert.exact and cert.rho == pytest.approx(expected, rel=1e-6)
        return cert.status

    near_zero = np.array([10.0 - 1e-3, 2.0, -1.0])
    assert status(near_zero, lambda rho: 0.0) == "ok"
    assert status(near_zero, lambda rho: 5e-7) == "ok"
    assert status(near_zero, lambda rho: 1e-5) == "margin above exact"
    # far from zero the relative part rules: 1e-5 relative above a figure of several N fails
    far = np.array([5.0, 2.0, -1.0])
    assert status(far, lambda rho: 5e-7 * rho) == "ok"
    assert status(far, lambda rho: 1e-5 * rho) == "margin above exact"
