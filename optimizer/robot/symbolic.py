"""Symbolic kinematics and dynamics of a floating-base robot in CasADi SX.

The geometry (joint placements, axes, inertias, frames) is read from a parsed
``pinocchio.Model``; the algorithms are written here in CasADi so the NLP can
differentiate them. One forward-kinematics pass over a symbolic ``q`` is built
when the robot is created and every function reuses it, so the SX graphs stay
small. Conventions follow Pinocchio (``q = [x y z qx qy qz qw, joints]``, base
twist in the base frame, spatial vectors ``[linear; angular]``).

Supported joints: a free-flyer root at joint 1; revolute (principal or any
axis), continuous (cos/sin configuration) and prismatic (principal or any
axis) joints; fixed joints, which Pinocchio merges into joint placements and
frames when it parses a URDF.
"""
from __future__ import annotations

from dataclasses import dataclass

import casadi as ca
import numpy as np
import pinocchio

from optimizer.robot import spatial

_KIND_OF_JOINT = {
    "JointModelFreeFlyer": "free_flyer",
    "JointModelRX": "revolute",
    "JointModelRY": "revolute",
    "JointModelRZ": "revolute",
    "JointModelRevoluteUnaligned": "revolute",
    "JointModelRUBX": "continuous",
    "JointModelRUBY": "continuous",
    "JointModelRUBZ": "continuous",
    "JointModelRevoluteUnboundedUnaligned": "continuous",
    "JointModelPX": "prismatic",
    "JointModelPY": "prismatic",
    "JointModelPZ": "prismatic",
    "JointModelPrismaticUnaligned": "prismatic",
}


@dataclass(frozen=True)
class JointInfo:
    """Geometry of one joint, read from the Pinocchio model.

    Attributes
    ----------
    index, parent : int
        Joint index and parent joint index in the model (0 is the world).
    name, kind : str
        Joint name; one of ``free_flyer, revolute, continuous, prismatic``.
    idx_q, idx_v, nq, nv : int
        Slices of the joint in ``q`` and ``v``.
    axis : numpy.ndarray, shape (3,)
        Unit axis in the joint frame (zeros for the free flyer).
    rotation, translation : numpy.ndarray, shapes (3, 3) and (3,)
        Joint placement in the parent joint frame (m).
    """

    index: int
    parent: int
    name: str
    kind: str
    idx_q: int
    idx_v: int
    nq: int
    nv: int
    axis: np.ndarray
    rotation: np.ndarray
    translation: np.ndarray


def _joint_axis(joint, kind: str) -> np.ndarray:
    """Unit axis of a one-dof joint, read from its motion subspace (Pinocchio)."""
    data = joint.createData()
    q_neutral = np.array([1.0, 0.0]) if kind == "continuous" else np.zeros(joint.nq)
    joint.calc(data, q_neutral)
    subspace = np.asarray(data.S).reshape(6)
    return subspace[3:] if kind in ("revolute", "continuous") else subspace[:3]


def read_joints(model: pinocchio.Model) -> list[JointInfo]:
    """Joint geometry of a floating-base model, in Pinocchio's (topological) order.

    Raises
    ------
    ValueError
        If joint 1 is not a free flyer, another free flyer appears, or a joint
        type is not supported.
    """
    if model.njoints < 2 or model.joints[1].shortname() != "JointModelFreeFlyer":
        got = model.joints[1].shortname() if model.njoints > 1 else "no joints"
        raise ValueError(f"expected a free-flyer root at joint 1, got {got}")
    joints = []
    for index in range(1, model.njoints):
        joint = model.joints[index]
        kind = _KIND_OF_JOINT.get(joint.shortname())
        name = model.names[index]
        if kind is None or (kind == "free_flyer" and index != 1):
            raise ValueError(
                f"joint '{name}': expected one of {sorted(_KIND_OF_JOINT)} "
                f"(free flyer only as root), got {joint.shortname()}")
        axis = np.zeros(3) if kind == "free_flyer" else _joint_axis(joint, kind)
        placement = model.jointPlacements[index]
        joints.append(JointInfo(
            index=index, parent=model.parents[index], name=name, kind=kind,
            idx_q=joint.idx_q, idx_v=joint.idx_v, nq=joint.nq, nv=joint.nv, axis=axis,
            rotation=np.array(placement.rotation), translation=np.array(placement.translation)))
    return joints


def _joint_transform(joint: JointInfo, q):
    """Placement of a joint's child frame relative to its zero position, (R, p)."""
    qj = q[joint.idx_q:joint.idx_q + joint.nq]
    if joint.kind == "free_flyer":
        return spatial.rotation_from_quaternion(qj[3:7]), qj[0:3]
    if joint.kind == "revolute":
        return spatial.rotation_about_axis(joint.axis, ca.cos(qj[0]), ca.sin(qj[0])), ca.SX.zeros(3)
    if joint.kind == "continuous":
        return spatial.rotation_about_axis(joint.axis, qj[0], qj[1]), ca.SX.zeros(3)
    return ca.SX.eye(3), ca.DM(joint.axis) * qj[0]


def _joint_motion(joint: JointInfo, rates):
    """Joint motion ``S * rates`` in the joint frame; (lin, ang), each (3, 1)."""
    if joint.kind == "free_flyer":
        return rates[0:3], rates[3:6]
    axis = ca.DM(joint.axis) * rates[joint.idx_v]
    zero = ca.SX.zeros(3)
    return (axis, zero) if joint.kind == "prismatic" else (zero, axis)


def _joint_force(joint: JointInfo, lin, ang):
    """Generalized force ``S^T f`` of a spatial force in the joint frame."""
    if joint.kind == "free_flyer":
        return ca.vertcat(lin, ang)
    return ca.dot(ca.DM(joint.axis), lin if joint.kind == "prismatic" else ang)


class _Kinematics:
    """One forward-kinematics pass over a symbolic ``q`` (SX, shape (nq,)).

    ``local[i]`` is the placement of joint ``i`` in its parent joint frame and
    ``world[i]`` its placement in the world frame, both ``(R, p)``.
    """

    def __init__(self, joints: list[JointInfo], q):
        self.local = {}
        self.world = {0: (ca.SX.eye(3), ca.SX.zeros(3))}
        for joint in joints:
            rot_j, pos_j = _joint_transform(joint, q)
            rot_pl, pos_pl = ca.DM(joint.rotation), ca.DM(joint.translation)
            rot, pos = rot_pl @ rot_j, pos_pl + rot_pl @ pos_j
            self.local[joint.index] = (rot, pos)
            if joint.parent == 0:
                self.world[joint.index] = (rot, pos)
            else:
                rot_parent, pos_parent = self.world[joint.parent]
                self.world[joint.index] = (rot_parent @ rot, pos_parent + rot_parent @ pos)


class SymbolicRobot:
    """CasADi functions of a floating-base robot, built from a Pinocchio model.

    Parameters
    ----------
    model : pinocchio.Model
        Parsed model with a free-flyer root at joint 1.

    Attributes
    ----------
    nq, nv, nj : int
        Sizes of ``q``, ``v`` and of the actuated joint velocities (``nv - 6``).
    rnea : casadi.Function
        ``(q[nq], v[nv], a[nv]) -> tau[nv]``, N and N m: inverse dynamics with
        ``model.gravity``, same convention as ``pinocchio.rnea``.
    com : casadi.Function
        ``q -> com[3]``, m, world frame.
    integrate : casadi.Function
        ``(q[nq], dv[nv]) -> q_next[nq]``, as ``pinocchio.integrate``: base
        moved by the SE(3) exponential of ``dv[:6]`` (base frame), continuous
        joints rotated on their (cos, sin) circle, others added. The base
        quaternion is multiplied by a unit quaternion, so its norm is kept
        exactly (Pinocchio also renormalizes to first order; the two agree on
        unit quaternions).
    difference : casadi.Function
        ``(q0[nq], q1[nq]) -> dv[nv]``, as ``pinocchio.difference`` (SE(3)
        log of the relative base placement, rotation angle in [0, pi]).
    """

    def __init__(self, model: pinocchio.Model):
        self.model = model
        self.joints = read_joints(model)
        self._joint_by_index = {joint.index: joint for joint in self.joints}
        self.nq, self.nv = model.nq, model.nv
        self.nj = model.nv - 6
        self._q = ca.SX.sym("q", self.nq)
        self._kin = _Kinematics(self.joints, self._q)
        self._frame_ids = {}
        for frame_id, frame in enumerate(model.frames):
            self._frame_ids.setdefault(frame.name, frame_id)
        self._cache = {}
        self.rnea = self._build_rnea()
        self.com = self._build_com()
        self.integrate = self._build_integrate()
        self.difference = self._build_difference()

    # ----------------------------------------------------------------- dynamics
    def _build_rnea(self) -> ca.Function:
        v = ca.SX.sym("v", self.nv)
        a = ca.SX.sym("a", self.nv)
        force = self._body_forces(v, a)
        tau = {}
        for joint in reversed(self.joints):
            tau[joint.idx_v] = _joint_force(joint, *force[joint.index])
            if joint.parent != 0:
                rot, pos = self._kin.local[joint.index]
                force[joint.parent] = _add(force[joint.parent],
                                           spatial.force_act(rot, pos, *force[joint.index]))
        tau_vector = ca.vertcat(*(tau[i] for i in sorted(tau)))
        return ca.Function("rnea", [self._q, v, a], [tau_vector], ["q", "v", "a"], ["tau"])

    def _body_forces(self, v, a) -> dict:
        """Forward RNEA pass: net spatial force of each body, in its joint frame.

        Gravity enters as an upward acceleration of the world, ``-model.gravity``.
        Returns ``{joint index: (force (3, 1) N, moment (3, 1) N m)}``.
        """
        gravity = self.model.gravity
        vel = {}
        acc = {0: (-ca.DM(gravity.linear), -ca.DM(gravity.angular))}
        force = {}
        for joint in self.joints:
            rot, pos = self._kin.local[joint.index]
            vj = _joint_motion(joint, v)
            vi = vj if joint.parent == 0 else _add(
                spatial.motion_act_inverse(rot, pos, *vel[joint.parent]), vj)
            ai = _add(spatial.motion_act_inverse(rot, pos, *acc[joint.parent]),
                      _joint_motion(joint, a), spatial.motion_cross_motion(*vi, *vj))
            vel[joint.index], acc[joint.index] = vi, ai
            inertia = self.model.inertias[joint.index]
            momentum = _inertia_times_motion(inertia, *vi)
            force[joint.index] = _add(_inertia_times_motion(inertia, *ai),
                                      spatial.motion_cross_force(*vi, *momentum))
        return force

    def _build_com(self) -> ca.Function:
        weighted = ca.SX.zeros(3)
        total = 0.0
        for joint in self.joints:
            inertia = self.model.inertias[joint.index]
            rot, pos = self._kin.world[joint.index]
            weighted += inertia.mass * (pos + rot @ ca.DM(inertia.lever))
            total += inertia.mass
        if total <= 0:
            raise ValueError(f"expected a robot with positive total mass, got {total} kg")
        return ca.Function("com", [self._q], [weighted / total], ["q"], ["com"])

    # ------------------------------------------------------ configuration space
    def _build_integrate(self) -> ca.Function:
        dv = ca.SX.sym("dv", self.nv)
        parts = [_integrate_joint(joint, self._q, dv) for joint in self.joints]
        return ca.Function("integrate", [self._q, dv], [ca.vertcat(*parts)],
                           ["q", "dv"], ["q_next"])

    def _build_difference(self) -> ca.Function:
        q0 = ca.SX.sym("q0", self.nq)
        q1 = ca.SX.sym("q1", self.nq)
        parts = [_difference_joint(joint, q0, q1) for joint in self.joints]
        return ca.Function("difference", [q0, q1], [ca.vertcat(*parts)],
                           ["q0", "q1"], ["dv"])

    # ------------------------------------------------------------------ frames
    @property
    def frame_names(self) -> list[str]:
        """Names of all frames of the model, in Pinocchio's order (first of duplicates)."""
        return list(self._frame_ids)

    def _frame_id(self, name: str) -> int:
        if name not in self._frame_ids:
            raise KeyError(f"unknown frame '{name}'; expected one of: {', '.join(self._frame_ids)}")
        return self._frame_ids[name]

    def _frame_world(self, name: str):
        """World placement ``(R, p)`` of a frame as SX expressions of ``q``."""
        frame = self.model.frames[self._frame_id(name)]
        rot_j, pos_j = self._kin.world[frame.parentJoint]
        rot_f = ca.DM(np.array(frame.placement.rotation))
        pos_f = ca.DM(np.array(frame.placement.translation))
        return rot_j @ rot_f, pos_j + rot_j @ pos_f, frame.parentJoint

    def _support(self, joint_index: int) -> list[JointInfo]:
        """Joints between the world and ``joint_index`` (inclusive), root first."""
        by_index = self._joint_by_index
        chain = []
        while joint_index != 0:
            chain.append(by_index[joint_index])
            joint_index = by_index[joint_index].parent
        return chain[::-1]

    def _jacobian_columns(self, point, joint_index: int):
        """World-aligned Jacobian of a point on joint ``joint_index``'s body.

        Returns (linear, angular) SX matrices, each shape (3, nv), columns of
        joints outside the support are structural zeros.
        """
        lin = ca.SX(3, self.nv)
        ang = ca.SX(3, self.nv)
        for joint in self._support(joint_index):
            rot, pos = self._kin.world[joint.index]
            offset = point - pos
            cols = slice(joint.idx_v, joint.idx_v + joint.nv)
            if joint.kind == "free_flyer":
                lin[:, joint.idx_v:joint.idx_v + 3] = rot
                lin[:, joint.idx_v + 3:joint.idx_v + 6] = -spatial.skew(offset) @ rot
                ang[:, joint.idx_v + 3:joint.idx_v + 6] = rot
                continue
            axis = rot @ ca.DM(joint.axis)
            if joint.kind == "prismatic":
                lin[:, cols] = axis
            else:
                lin[:, cols] = ca.cross(axis, offset)
                ang[:, cols] = axis
        return lin, ang

    def _cached(self, key, build):
        if key not in self._cache:
            self._cache[key] = build()
        return self._cache[key]

    def frame_placement(self, name: str) -> ca.Function:
        """``q -> (p[3], R[3x3])``: world position (m) and orientation of a frame."""
        self._frame_id(name)

        def build():
            rot, pos, _ = self._frame_world(name)
            return ca.Function(f"placement_{_safe(name)}", [self._q], [pos, rot],
                               ["q"], ["p", "R"])
        return self._cached(("placement", name), build)

    def frame_jacobian(self, name: str) -> ca.Function:
        """``q -> J[6 x nv]``: frame Jacobian, LOCAL_WORLD_ALIGNED, rows [linear; angular].

        Same as ``pinocchio.getFrameJacobian(..., LOCAL_WORLD_ALIGNED)``:
        linear rows give the velocity of the frame origin (m/s), angular rows
        the angular velocity (rad/s), both in world axes.
        """
        self._frame_id(name)

        def build():
            _, pos, parent = self._frame_world(name)
            lin, ang = self._jacobian_columns(pos, parent)
            return ca.Function(f"jacobian_{_safe(name)}", [self._q], [ca.vertcat(lin, ang)],
                               ["q"], ["J"])
        return self._cached(("jacobian", name), build)

    def frame_translation_jacobian(self, name: str) -> ca.Function:
        """``q -> J[3 x nv]``: the linear rows of :meth:`frame_jacobian`, world axes."""
        self._frame_id(name)

        def build():
            _, pos, parent = self._frame_world(name)
            lin, _ = self._jacobian_columns(pos, parent)
            return ca.Function(f"translation_jacobian_{_safe(name)}", [self._q], [lin],
                               ["q"], ["J"])
        return self._cached(("translation_jacobian", name), build)

    def point_kinematics(self, names: list[str]) -> ca.Function:
        """``q -> (P[3 x n], J[3n x nv])`` for frames ``names``, in one pass.

        ``P[:, i]`` is the world position (m) of frame ``names[i]``; rows
        ``3i:3i+3`` of ``J`` its translational Jacobian, world-aligned.
        """
        names = list(names)
        for name in names:
            self._frame_id(name)

        def build():
            positions, jacobians = [], []
            for name in names:
                _, pos, parent = self._frame_world(name)
                positions.append(pos)
                jacobians.append(self._jacobian_columns(pos, parent)[0])
            return ca.Function("point_kinematics", [self._q],
                               [ca.horzcat(*positions), ca.vertcat(*jacobians)],
                               ["q"], ["P", "J"])
        return self._cached(("points", tuple(names)), build)


def body_points_function(robot: "SymbolicRobot", points) -> ca.Function:
    """``q -> P[3 x n]``: world positions (m) of points fixed on joints' bodies.

    ``points`` is a list of ``(joint index, (3,) point in that joint's frame, m)``.
    """
    columns = []
    for joint, point in points:
        rot, pos = robot._kin.world[int(joint)]
        columns.append(pos + rot @ ca.DM(np.asarray(point, float)))
    out = ca.horzcat(*columns) if columns else ca.SX(3, 0)
    return ca.Function("body_points", [robot._q], [out], ["q"], ["P"])


def _safe(name: str) -> str:
    """A frame name turned into a valid CasADi function-name suffix."""
    return "".join(ch if ch.isalnum() else "_" for ch in name)


def _add(*motions):
    """Sum of spatial vectors given as (lin, ang) pairs."""
    lin = motions[0][0]
    ang = motions[0][1]
    for m_lin, m_ang in motions[1:]:
        lin, ang = lin + m_lin, ang + m_ang
    return lin, ang


def _inertia_times_motion(inertia, lin, ang):
    """Spatial inertia (Pinocchio layout: mass, lever c, inertia at c) times a motion.

    Returns ``(m (v - c x w), I_c w + c x m (v - c x w))``.
    """
    lever = ca.DM(np.array(inertia.lever))
    momentum = inertia.mass * (lin - ca.cross(lever, ang))
    return momentum, ca.DM(np.array(inertia.inertia)) @ ang + ca.cross(lever, momentum)


def _integrate_joint(joint: JointInfo, q, dv):
    """Configuration of one joint after moving by ``dv`` (its slice of it)."""
    qj = q[joint.idx_q:joint.idx_q + joint.nq]
    dj = dv[joint.idx_v:joint.idx_v + joint.nv]
    if joint.kind == "free_flyer":
        quat = qj[3:7]
        rot = spatial.rotation_from_quaternion(quat)
        pos = qj[0:3] + rot @ (spatial.exp_translation_matrix(dj[3:6]) @ dj[0:3])
        quat_next = spatial.quaternion_multiply(quat, spatial.quaternion_exp(dj[3:6]))
        # Same hemisphere as the start quaternion, as pinocchio.integrate does
        # (only flips for rotation steps beyond pi rad).
        hemisphere = ca.if_else(ca.dot(quat_next, quat) < 0, -1.0, 1.0)
        return ca.vertcat(pos, hemisphere * quat_next)
    if joint.kind == "continuous":
        c, s = ca.cos(dj[0]), ca.sin(dj[0])
        return ca.vertcat(c * qj[0] - s * qj[1], s * qj[0] + c * qj[1])
    return qj + dj


def _difference_joint(joint: JointInfo, q0, q1):
    """Tangent vector moving one joint from ``q0`` to ``q1`` (its slice of it)."""
    a = q0[joint.idx_q:joint.idx_q + joint.nq]
    b = q1[joint.idx_q:joint.idx_q + joint.nq]
    if joint.kind == "free_flyer":
        rot0 = spatial.rotation_from_quaternion(a[3:7])
        relative = spatial.quaternion_multiply(spatial.quaternion_conjugate(a[3:7]), b[3:7])
        w = spatial.quaternion_log(relative)
        v = spatial.log_translation_matrix(w) @ (rot0.T @ (b[0:3] - a[0:3]))
        return ca.vertcat(v, w)
    if joint.kind == "continuous":
        return ca.atan2(a[0] * b[1] - a[1] * b[0], a[0] * b[0] + a[1] * b[1])
    return b - a
