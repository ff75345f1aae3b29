"""What the figures and the motion preview draw, checked against outside references.

- Skeleton feet and hand: the plan's own footholds and hand targets (constraints
  the solver met; positions by Pinocchio's forward kinematics).
- Terrain surfaces: every foothold lies on a drawn surface (point in a convex
  polygon and on its plane, textbook geometry).
- Limit use: hand-made forces against Coulomb's four-facet pyramid
  |f.t1|, |f.t2| <= (mu / sqrt 2) f.n and torques against their limits.
- Polytope section: vertices rejectable and points beyond it not, by SciPy's
  HiGHS LP on the knot's limit rows; its inscribed radius equals the exact figure.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import linprog

import test_solve_demo_tasks as demo
from optimizer.analysis.certify import certify_plan
from optimizer.analysis.knot_response import PlanRobot, knot_response
from optimizer.analysis.limit_use import friction_use, torque_use
from optimizer.analysis.polytope_cut import polytope_cut
from optimizer.problem.friction import pyramid_facets, tangent_basis
from optimizer.report.figures import azimuth_elevation
from optimizer.report.geometry import Skeleton, hand_targets, scene_extent, terrain_surfaces


@pytest.mark.parametrize("task", demo.TASKS)
def test_skeleton_feet_and_hand_meet_footholds_and_targets(task):
    plan = demo.plan_of(task, "torque")[1]
    skeleton = Skeleton(plan.meta)
    for k in range(plan.knots - 1):           # the last knot repeats K-2 (rest) and carries no equality
        pose = skeleton.pose(plan.q[k])
        assert np.allclose(pose.feet, plan.contact_targets[k], atol=1e-5)
    path = skeleton.hand_path(plan.q)
    for target in hand_targets(plan.meta):
        inside = [k for k in range(plan.knots - 1) if target.t_start - 1e-9 <= plan.t[k] <= target.t_end + 1e-9]
        for k in inside:
            assert np.allclose(path[k], target.position, atol=1e-4), (task, target.label, k)


def _inside_convex(point, corners) -> bool:
    """Point on the polygon's plane (1 mm) and inside it (same side of every edge)."""
    normal = np.cross(corners[1] - corners[0], corners[2] - corners[0])
    normal /= np.linalg.norm(normal)
    if abs((point - corners[0]) @ normal) > 1e-3:
        return False
    signs = [np.cross(b - a, point - a) @ normal for a, b in zip(corners, np.roll(corners, -1, axis=0))]
    return all(s >= -1e-9 for s in signs) or all(s <= 1e-9 for s in signs)


@pytest.mark.parametrize("task", demo.TASKS)
def test_every_foothold_lies_on_a_drawn_surface(task):
    plan = demo.plan_of(task, "torque")[1]
    footholds = plan.contact_targets[0]
    surfaces = terrain_surfaces(plan.meta, scene_extent(footholds, margin=0.3))
    for c, p in enumerate(footholds):
        assert any(_inside_convex(p, s.corners) for s in surfaces), (task, plan.meta["contact_frames"][c])


def test_friction_use_against_the_four_facet_pyramid():
    # Flat ground, mu = 0.6: a force (0.3, 0, 1) N uses 0.3 / (0.6 / sqrt 2) of the pyramid (Coulomb, inscribed).
    n = np.array([0.0, 0.0, 1.0])
    t = tangent_basis(n)
    facets = pyramid_facets(n, t, 0.6, 4)[None]
    forces = np.array([[[0.3, 0.0, 1.0]], [[0.0, 0.0, 2.0]], [[0.2, -0.2, 1.0]]])
    use = friction_use(forces, facets, n[None], np.ones((3, 1), bool))[:, 0]
    assert use == pytest.approx([0.3 / (0.6 / math.sqrt(2)), 0.0, 0.2 / (0.6 / math.sqrt(2))])
    # an inactive contact or one without pressure has no friction use
    assert np.isnan(friction_use(forces[:1], facets, n[None], np.zeros((1, 1), bool))).all()
    assert np.isnan(friction_use(-forces[:1], facets, n[None], np.ones((1, 1), bool))).all()


def test_torque_use_against_limits_on_each_side():
    tau = np.array([[-5.0, 10.0, 3.0]])
    use = torque_use(tau, np.array([-10.0, -10.0, -np.inf]), np.array([20.0, 20.0, np.inf]))
    assert use[0] == pytest.approx([0.5, 0.5, 0.0])


def test_azimuth_and_elevation_of_axis_directions():
    azimuth, elevation = azimuth_elevation(np.array([[1.0, 0, 0], [0, 1.0, 0], [0, 0, -1.0]]))
    assert azimuth[:2] == pytest.approx([0.0, 90.0])
    assert elevation == pytest.approx([0.0, 0.0, -90.0])


def _rejectable(rows, u) -> bool:
    """Some response keeps every limit under disturbance u (SciPy HiGHS feasibility LP)."""
    d = rows.dim
    a_ub, a_eq = rows.a_ub[:, d:], rows.a_eq[:, d:]
    b_ub = rows.b_ub - rows.a_ub[:, :d] @ u
    b_eq = -rows.a_eq[:, :d] @ u
    res = linprog(np.zeros(a_ub.shape[1]), A_ub=a_ub, b_ub=b_ub, A_eq=a_eq, b_eq=b_eq,
                  bounds=(None, None), method="highs")
    return res.status == 0


def test_polytope_section_matches_lps_and_the_exact_figure():
    plan = demo.plan_of("steep_ramp", "robust")[1]
    low = certify_plan(plan).smallest()
    cut = polytope_cut(plan, low.knot, low.weakest_u)
    assert abs(cut.e1 @ cut.e2) < 1e-9 and np.linalg.norm(cut.e1) == pytest.approx(1.0)
    rows = knot_response(plan, low.knot, PlanRobot(plan.meta)).limit_rows()
    basis = np.column_stack([cut.e1, cut.e2])
    for a, b in cut.polygon:
        if max(abs(a), abs(b)) > 1e5:            # a vertex on the cap box: the set goes on that way
            continue
        assert _rejectable(rows, basis @ (np.array([a, b]) * (1 - 1e-6)))
        assert not _rejectable(rows, basis @ (np.array([a, b]) * 1.01))
    # inscribed radius of the section = distance from the origin to its nearest edge = the exact figure
    edges = zip(cut.polygon, np.roll(cut.polygon, -1, axis=0))
    nearest = min(abs((q - p)[0] * p[1] - (q - p)[1] * p[0]) / np.linalg.norm(q - p) for p, q in edges)
    assert nearest == pytest.approx(low.rho, rel=1e-4)
    assert cut.second >= low.rho * (1 - 1e-6)
