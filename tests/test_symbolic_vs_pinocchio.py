"""Symbolic kinematics and dynamics checked against Pinocchio's numeric algorithms.

Reference throughout: Pinocchio (``rnea``, ``framesForwardKinematics``,
``computeJointJacobians`` + ``getFrameJacobian``, ``centerOfMass``,
``integrate``, ``difference``, ``exp3``/``log3``, ``Quaternion``) evaluated at
random states. Errors are measured as ``|x - ref| / max(1, |ref|)``.
"""
from __future__ import annotations

from pathlib import Path

import casadi as ca
import numpy as np
import pinocchio as pin
import pytest

from optimizer.robot import spatial
from optimizer.robot.symbolic import SymbolicRobot

ROOT = Path(__file__).resolve().parents[1]
MODEL_FILES = [ROOT / "models" / "stilt.urdf", ROOT / "tests" / "models" / "mixed_joints.urdf"]
N_STATES = 20
RTOL = 1e-9


def relative_error(value, reference) -> float:
    value = np.asarray(value, dtype=float)
    reference = np.asarray(reference, dtype=float)
    return np.linalg.norm(value - reference) / max(1.0, np.linalg.norm(reference))


def load_model(path: Path) -> pin.Model:
    if not path.exists():
        pytest.skip(f"{path.relative_to(ROOT)} does not exist yet")
    model = pin.buildModelFromUrdf(str(path), pin.JointModelFreeFlyer())
    # Finite base position bounds so pin.randomConfiguration can sample them.
    model.lowerPositionLimit[:3] = -1.0
    model.upperPositionLimit[:3] = 1.0
    return model


@pytest.fixture(scope="module", params=MODEL_FILES, ids=lambda p: p.name)
def case(request):
    model = load_model(request.param)
    robot = SymbolicRobot(model)
    rng = np.random.default_rng(20240611)
    pin.seed(7)
    states = [(pin.randomConfiguration(model), rng.normal(size=model.nv),
               rng.normal(size=model.nv)) for _ in range(N_STATES)]
    return model, model.createData(), robot, states, rng


def test_sizes_match_model(case):
    model, _, robot, _, _ = case
    assert (robot.nq, robot.nv, robot.nj) == (model.nq, model.nv, model.nv - 6)


def test_rnea_matches_pinocchio(case):
    model, data, robot, states, _ = case
    for q, v, a in states:
        reference = pin.rnea(model, data, q, v, a)  # Pinocchio RNEA
        assert relative_error(robot.rnea(q, v, a).full().ravel(), reference) <= RTOL


def test_frame_placements_match_pinocchio(case):
    model, data, robot, states, _ = case
    for q, _, _ in states:
        pin.framesForwardKinematics(model, data, q)  # Pinocchio forward kinematics
        for name in robot.frame_names:
            reference = data.oMf[model.getFrameId(name)]
            pos, rot = robot.frame_placement(name)(q)
            assert relative_error(pos.full().ravel(), reference.translation) <= RTOL, name
            assert relative_error(rot.full(), reference.rotation) <= RTOL, name


def test_frame_jacobians_match_pinocchio(case):
    model, data, robot, states, _ = case
    for q, _, _ in states:
        pin.computeJointJacobians(model, data, q)  # Pinocchio Jacobians
        pin.updateFramePlacements(model, data)
        for name in robot.frame_names:
            reference = pin.getFrameJacobian(model, data, model.getFrameId(name),
                                             pin.LOCAL_WORLD_ALIGNED)
            assert relative_error(robot.frame_jacobian(name)(q).full(), reference) <= RTOL, name
            translation = robot.frame_translation_jacobian(name)(q).full()
            assert relative_error(translation, reference[:3]) <= RTOL, name


def test_point_kinematics_matches_pinocchio(case):
    model, data, robot, states, _ = case
    names = [f.name for f in model.frames if f.type == pin.FrameType.BODY][-4:]
    points = robot.point_kinematics(names)
    for q, _, _ in states:
        pin.computeJointJacobians(model, data, q)  # Pinocchio kinematics + Jacobians
        pin.updateFramePlacements(model, data)
        positions, jacobian = (out.full() for out in points(q))
        assert positions.shape == (3, len(names))
        assert jacobian.shape == (3 * len(names), model.nv)
        for i, name in enumerate(names):
            fid = model.getFrameId(name)
            reference = pin.getFrameJacobian(model, data, fid, pin.LOCAL_WORLD_ALIGNED)[:3]
            assert relative_error(positions[:, i], data.oMf[fid].translation) <= RTOL
            assert relative_error(jacobian[3 * i:3 * i + 3], reference) <= RTOL


def test_center_of_mass_matches_pinocchio(case):
    model, data, robot, states, _ = case
    for q, _, _ in states:
        reference = pin.centerOfMass(model, data, q)  # Pinocchio centerOfMass
        assert relative_error(robot.com(q).full().ravel(), reference) <= RTOL


def test_integrate_matches_pinocchio(case):
    model, _, robot, states, rng = case
    for q, _, _ in states:
        for scale in (0.1, 1.0, 3.0):  # 3.0 includes base rotations beyond pi
            dv = scale * rng.normal(size=model.nv)
            reference = pin.integrate(model, q, dv)  # Pinocchio integrate
            assert relative_error(robot.integrate(q, dv).full().ravel(), reference) <= RTOL


def test_difference_matches_pinocchio(case):
    model, _, robot, states, rng = case
    for q0, _, _ in states:
        for q1 in (pin.randomConfiguration(model),
                   pin.integrate(model, q0, 0.01 * rng.normal(size=model.nv))):
            reference = pin.difference(model, q0, q1)  # Pinocchio difference
            assert relative_error(robot.difference(q0, q1).full().ravel(), reference) <= RTOL


def base_rotation_states(model, rng):
    """Configurations whose step is a zero or tiny rotation (1e-10 rad)."""
    q = pin.randomConfiguration(model)
    zero = np.zeros(model.nv)
    tiny = np.zeros(model.nv)
    tiny[3:6] = 1e-10 * rng.normal(size=3)
    tiny[:3] = rng.normal(size=3)
    return q, [zero, tiny]


def test_integrate_derivatives_finite_near_zero_rotation(case):
    model, _, robot, _, rng = case
    q, steps = base_rotation_states(model, rng)
    dv = ca.SX.sym("dv", model.nv)
    weights = rng.normal(size=model.nq)
    out = robot.integrate(ca.DM(q), dv)
    jac = ca.Function("jacobian_fn", [dv], [ca.jacobian(out, dv)])
    hess = ca.Function("hessian_fn", [dv], [ca.hessian(ca.dot(ca.DM(weights), out), dv)[0]])
    for step in steps:
        value = robot.integrate(q, step).full().ravel()
        assert relative_error(value, pin.integrate(model, q, step)) <= RTOL  # Pinocchio
        derivative = jac(step).full()
        assert np.all(np.isfinite(derivative))
        assert np.all(np.isfinite(hess(step).full()))
        # Reference: central differences of pinocchio.integrate (step 1e-6).
        eps = 1e-6
        numeric = np.column_stack([
            (pin.integrate(model, q, step + eps * e) - pin.integrate(model, q, step - eps * e))
            / (2 * eps) for e in np.eye(model.nv)])
        np.testing.assert_allclose(derivative, numeric, rtol=0, atol=1e-8)


def test_difference_derivatives_finite_near_zero_rotation(case):
    model, _, robot, _, rng = case
    q0, steps = base_rotation_states(model, rng)
    q1_sym = ca.SX.sym("q1", model.nq)
    out = robot.difference(ca.DM(q0), q1_sym)
    weights = rng.normal(size=model.nv)
    jac = ca.Function("jacobian_fn", [q1_sym], [ca.jacobian(out, q1_sym)])
    hess = ca.Function("hessian_fn", [q1_sym], [ca.hessian(ca.dot(ca.DM(weights), out), q1_sym)[0]])
    step_sym = ca.SX.sym("dv", model.nv)
    integ_jac = ca.Function("ij", [step_sym], [ca.jacobian(robot.integrate(ca.DM(q0), step_sym),
                                                           step_sym)])
    for step in steps:
        q1 = pin.integrate(model, q0, step)
        value = robot.difference(q0, q1).full().ravel()
        assert relative_error(value, pin.difference(model, q0, q1)) <= RTOL  # Pinocchio
        derivative = jac(q1).full()
        assert np.all(np.isfinite(derivative))
        assert np.all(np.isfinite(hess(q1).full()))
        # Lie-group identity difference(q0, integrate(q0, d)) = d, so the chain
        # rule gives identity; Pinocchio's dDifference o dIntegrate says the same.
        chain = derivative @ integ_jac(step).full()
        reference = (pin.dDifference(model, q0, q1, pin.ArgumentPosition.ARG1)
                     @ pin.dIntegrate(model, q0, step, pin.ArgumentPosition.ARG1))
        np.testing.assert_allclose(chain, reference, rtol=0, atol=1e-8)


# --------------------------------------------------------------- spatial.py
def random_rotations(rng, count):
    """Random rotations plus half-turns about each axis (every Shepperd branch)."""
    rotations = [pin.exp3(rng.normal(size=3)) for _ in range(count)]
    rotations += [pin.exp3(np.pi * 0.999 * axis) for axis in np.eye(3)]
    rotations += [pin.exp3(np.array([0.0, 0.0, 1e-10])), np.eye(3)]
    return rotations


def test_quaternion_from_rotation_matches_pinocchio():
    rng = np.random.default_rng(3)
    rot = ca.SX.sym("R", 3, 3)
    to_quat = ca.Function("to_quat", [rot], [spatial.quaternion_from_rotation(rot)])
    quat = ca.SX.sym("quat", 4)
    to_rot = ca.Function("to_rot", [quat], [spatial.rotation_from_quaternion(quat)])
    for matrix in random_rotations(rng, 20):
        reference = pin.Quaternion(matrix).coeffs()  # Pinocchio (Eigen) quaternion, xyzw
        value = to_quat(matrix).full().ravel()
        sign = np.sign(value @ reference)  # q and -q are the same rotation
        assert relative_error(sign * value, reference) <= RTOL
        assert relative_error(to_rot(value).full(), matrix) <= RTOL


def test_rotation_exp_and_log_match_pinocchio():
    rng = np.random.default_rng(4)
    w = ca.SX.sym("w", 3)
    exp_fn = ca.Function("exp", [w], [spatial.rotation_exp(w)])
    quat_exp_fn = ca.Function("qexp", [w], [spatial.quaternion_exp(w)])
    rot = ca.SX.sym("R", 3, 3)
    log_fn = ca.Function("log", [rot], [spatial.rotation_log(rot)])
    vectors = [rng.normal(size=3) for _ in range(20)] + [np.zeros(3), 1e-10 * rng.normal(size=3),
                                                          4e-3 * rng.normal(size=3),
                                                          0.0099 * np.array([0.48, 0.6, 0.64]),
                                                          3.1 * np.array([0.0, 0.6, 0.8])]
    for vec in vectors:
        reference = pin.exp3(vec)  # Pinocchio exp3
        assert relative_error(exp_fn(vec).full(), reference) <= RTOL
        quat = pin.Quaternion(reference).coeffs()
        value = quat_exp_fn(vec).full().ravel()
        assert relative_error(np.sign(value @ quat) * value, quat) <= RTOL
        assert relative_error(log_fn(reference).full().ravel(), pin.log3(reference)) <= RTOL


def test_rigid_motion_exp_and_log_match_pinocchio():
    rng = np.random.default_rng(5)
    w = ca.SX.sym("w", 3)
    v_of = ca.Function("v_of", [w], [spatial.exp_translation_matrix(w)])
    v_inv_of = ca.Function("v_inv_of", [w], [spatial.log_translation_matrix(w)])
    # Angles in the series region (< 1e-2 rad), near its edge and well beyond.
    for scale in (1e-10, 1e-3, 9.9e-3, 2e-2, 1.0):
        for _ in range(5):
            lin, ang = rng.normal(size=3), scale * rng.normal(size=3)
            ang = ang if scale != 9.9e-3 else scale * ang / np.linalg.norm(ang)  # |w| ~ 1e-2 edge
            motion = pin.exp6(pin.Motion(lin, ang))  # Pinocchio exp6
            assert relative_error(v_of(ang).full() @ lin, motion.translation) <= RTOL
            log = pin.log6(motion)  # Pinocchio log6
            assert relative_error(v_inv_of(log.angular).full() @ motion.translation,
                                  log.linear) <= RTOL


def test_small_angle_jacobians_are_finite():
    w = ca.SX.sym("w", 3)
    outputs = ca.vertcat(ca.vec(spatial.rotation_exp(w)), spatial.quaternion_exp(w),
                         spatial.quaternion_log(spatial.quaternion_exp(w)),
                         ca.vec(spatial.exp_translation_matrix(w)),
                         ca.vec(spatial.log_translation_matrix(w)))
    jac = ca.Function("jacobian_fn", [w], [ca.jacobian(outputs, w)])
    for vec in (np.zeros(3), np.array([1e-10, -2e-10, 0.5e-10])):
        assert np.all(np.isfinite(jac(vec).full()))
    # log(exp(w)) = w, so its Jacobian at zero is the identity (textbook Lie group fact).
    log_exp = ca.Function("le", [w], [ca.jacobian(spatial.quaternion_log(spatial.quaternion_exp(w)), w)])
    np.testing.assert_allclose(log_exp(np.zeros(3)).full(), np.eye(3), rtol=0, atol=1e-12)


# ------------------------------------------------------------------- errors
def test_unknown_frame_lists_valid_names():
    robot = SymbolicRobot(load_model(MODEL_FILES[1]))
    with pytest.raises(KeyError, match="unknown frame 'no_such_link'.*paddle_tip"):
        robot.frame_jacobian("no_such_link")
    with pytest.raises(KeyError, match="unknown frame"):
        robot.point_kinematics(["tool", "no_such_link"])


def test_fixed_base_model_is_rejected():
    model = pin.buildModelFromUrdf(str(MODEL_FILES[1]))  # root joint is then hip_yaw_l
    with pytest.raises(ValueError, match="free-flyer root at joint 1, got JointModelRZ"):
        SymbolicRobot(model)


def test_unsupported_joint_type_is_rejected():
    model = pin.Model()
    root = model.addJoint(0, pin.JointModelFreeFlyer(), pin.SE3.Identity(), "root")
    model.appendBodyToJoint(root, pin.Inertia.Random(), pin.SE3.Identity())
    ball = model.addJoint(root, pin.JointModelSpherical(), pin.SE3.Identity(), "ball")
    model.appendBodyToJoint(ball, pin.Inertia.Random(), pin.SE3.Identity())
    with pytest.raises(ValueError, match="joint 'ball'.*got JointModelSpherical"):
        SymbolicRobot(model)
