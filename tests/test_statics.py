"""Standing statics of the demo robot.

References: Newton's laws for a body at rest (forces sum to the weight, moments
about the centre of mass sum to zero), Pinocchio's rnea and centerOfMass,
SciPy's null_space for the minimum-norm property, and the inclined plane
(Coulomb friction holds a load on a slope of angle theta iff tan(theta) <= mu).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest
from scipy.linalg import null_space

from optimizer.analysis.statics import rest_terms, standing_statics, torque_use
from optimizer.problem.friction import tangent_basis
from optimizer.problem.stance import static_support_lp
from optimizer.problem.task import ContactSpec
from optimizer.robot.model import load_robot

STILT = Path(__file__).resolve().parents[1] / "models" / "stilt.yaml"


@pytest.fixture(scope="module")
def stilt():
    return load_robot(STILT)


def perturbed_postures(robot, count: int, seed: int):
    """Standing posture with small random joint changes and a random small base tilt."""
    rng = np.random.default_rng(seed)
    for _ in range(count):
        q = robot.standing_posture.copy()
        q[7:] += rng.uniform(-0.15, 0.15, robot.nq - 7)
        rotation = pin.rpy.rpyToMatrix(*rng.uniform(-0.2, 0.2, 3))
        q[3:7] = pin.Quaternion(rotation).coeffs()
        yield q


def test_standing_weight_is_carried(stilt):
    # Newton: at rest the vertical contact forces sum to m g, horizontal ones to 0.
    result = standing_statics(stilt, stilt.standing_posture)
    weight = stilt.mass * 9.81
    np.testing.assert_allclose(result.forces[:, 2].sum(), weight, rtol=1e-6)
    np.testing.assert_allclose(result.forces[:, :2].sum(axis=0), 0.0, atol=1e-6 * weight)
    assert np.all(result.forces[:, 2] > 0)  # every foot pushes
    assert result.base_residual < 1e-9 * weight


def test_full_rnea_residual_vanishes(stilt):
    # Reference: Pinocchio's rnea at rest equals S^T tau + sum J_c^T lambda_c (EOM, docs/formulation.md section 1).
    model, data = stilt.model, stilt.model.createData()
    for q in [stilt.standing_posture, *perturbed_postures(stilt, 5, seed=3)]:
        result = standing_statics(stilt, q)
        pin.computeJointJacobians(model, data, q)
        pin.updateFramePlacements(model, data)
        generalized = np.zeros(model.nv)
        generalized[6:] = result.torques
        for name, force in zip(result.contact_frames, result.forces):
            jac = pin.getFrameJacobian(model, data, model.getFrameId(name), pin.LOCAL_WORLD_ALIGNED)[:3]
            generalized += jac.T @ force
        gravity = pin.rnea(model, data, q, np.zeros(model.nv), np.zeros(model.nv))
        np.testing.assert_allclose(generalized, gravity, atol=1e-9 * stilt.mass * 9.81)


def test_moments_about_the_centre_of_mass_balance(stilt):
    # Newton-Euler at rest: sum_c (p_c - com) x f_c = 0 and sum_c f_c = -m g;
    # positions from forward kinematics, com from pinocchio.centerOfMass.
    model, data = stilt.model, stilt.model.createData()
    for q in perturbed_postures(stilt, 5, seed=11):
        result = standing_statics(stilt, q)
        com = pin.centerOfMass(model, data, q)
        moment = np.cross(result.contact_positions - com, result.forces).sum(axis=0)
        np.testing.assert_allclose(moment, 0.0, atol=1e-8 * stilt.mass * 9.81)
        np.testing.assert_allclose(result.forces.sum(axis=0), -stilt.mass * stilt.gravity, rtol=1e-9, atol=1e-9)


def test_forces_have_minimum_norm(stilt):
    # Minimum-norm least squares: lambda is orthogonal to the null space of the
    # base rows (any other solution adds a null-space part and is longer). SciPy reference.
    result = standing_statics(stilt, stilt.standing_posture)
    _, jacobian, _ = rest_terms(stilt, stilt.standing_posture)
    null = null_space(jacobian[:, :6].T)
    assert null.shape[1] == 3 * 4 - 6
    np.testing.assert_allclose(null.T @ result.forces.ravel(), 0.0, atol=1e-9)


def test_left_right_symmetry(stilt):
    # Mirror symmetry of the robot and posture about the x-z plane: equal vertical loads left/right.
    result = standing_statics(stilt, stilt.standing_posture)
    fz = dict(zip(result.contact_frames, result.forces[:, 2]))
    np.testing.assert_allclose([fz["foot_fl"], fz["foot_rl"]], [fz["foot_fr"], fz["foot_rr"]], rtol=1e-9)
    assert fz["foot_fl"] > fz["foot_rl"]  # the arm sits at the front


def test_two_feet_on_a_diagonal_still_carry_the_weight(stilt):
    # Newton with a subset of contacts: vertical forces still sum to m g.
    result = standing_statics(stilt, stilt.standing_posture, ["foot_fl", "foot_rr"])
    assert result.forces.shape == (2, 3)
    np.testing.assert_allclose(result.forces[:, 2].sum(), stilt.mass * 9.81, rtol=1e-6)


def test_torque_use_fraction():
    # Fraction of the limit on each side; a side whose limit is 0 cannot be used at all.
    use = torque_use(np.array([5.0, -5.0, 0.0, 2.0]), np.array([-10.0, -20.0, -1.0, -1.0]),
                     np.array([10.0, 10.0, 1.0, 0.0]))
    np.testing.assert_allclose(use[:3], [0.5, 0.25, 0.0], rtol=1e-12)
    assert use[3] == np.inf


def contacts_with(robot, normal, mu):
    """Every foot of ``robot`` on a surface of unit ``normal`` and friction ``mu``."""
    normal = np.asarray(normal, float)
    return [ContactSpec(frame, np.zeros(3), normal, tangent_basis(normal), mu) for frame in robot.contact_frames]


def test_friction_lp_on_flat_ground(stilt):
    # SciPy HiGHS finds forces inside the 4-facet pyramids (|f_t| <= mu/sqrt2 f_n)
    # and torque limits; Newton still holds.
    mu = 0.6
    result = static_support_lp(stilt, stilt.standing_posture, contacts_with(stilt, [0.0, 0.0, 1.0], mu))
    assert result.feasible
    np.testing.assert_allclose(result.forces[:, 2].sum(), stilt.mass * 9.81, rtol=1e-6)
    tangential = np.abs(result.forces[:, :2]).max(axis=1)
    assert np.all(tangential <= mu / np.sqrt(2) * result.forces[:, 2] + 1e-6)
    assert np.all(result.tau <= stilt.torque_upper + 1e-6)
    assert np.all(result.tau >= stilt.torque_lower - 1e-6)


@pytest.mark.parametrize("ratio, feasible", [(0.9, True), (1.1, False)])
def test_friction_lp_inclined_plane(stilt, ratio, feasible):
    # Inclined plane (textbook): with every surface normal tilted by theta about y,
    # all contact cones are equal, so the weight is held iff the vertical lies in
    # the pyramid: tan(theta) <= mu_p, with mu_p = mu / sqrt(2) along a facet axis.
    mu = 0.5
    theta = np.arctan(ratio * mu / np.sqrt(2))
    normal = [np.sin(theta), 0.0, np.cos(theta)]
    result = static_support_lp(stilt, stilt.standing_posture, contacts_with(stilt, normal, mu))
    assert result.feasible is feasible
