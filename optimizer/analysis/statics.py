"""Standing still: the contact forces and joint torques that hold a posture.

At rest (``v = a = 0``) the equations of motion reduce to

    g(q) = rnea(q, 0, 0) = S^T tau + sum_c J_c(q)^T lambda_c

The six floating-base rows involve no torque. :func:`standing_statics` takes
the smallest contact forces (least squares, ``min |lambda|^2``) that satisfy
them and reads the torques off the joint rows.
:func:`optimizer.problem.stance.static_support_lp` instead asks SciPy's LP
solver for forces inside friction pyramids and torque limits.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pinocchio as pin

from ..robot.model import RobotModel


@dataclass
class StaticsResult:
    """Contact forces and joint torques holding a posture at rest.

    Attributes
    ----------
    q : ndarray, shape (nq,)
    contact_frames : list of str
    forces : ndarray, shape (nc, 3)
        Force of the ground on the robot at each contact, N, world frame.
    torques : ndarray, shape (nj,)
        Joint torques, N m (or N for prismatic joints).
    torque_use : ndarray, shape (nj,)
        Torque as a fraction of the limit on its side (1 = at the limit).
    contact_positions : ndarray, shape (nc, 3)
        m, world frame.
    base_residual : float
        Norm of the floating-base rows left unbalanced, N and N m mixed;
        near zero when the contacts can hold the robot at all.
    feasible : bool
        Always True for :func:`standing_statics` (no friction or unilateral
        limits are imposed).
    """

    q: np.ndarray
    contact_frames: list[str]
    forces: np.ndarray
    torques: np.ndarray
    torque_use: np.ndarray
    contact_positions: np.ndarray
    base_residual: float
    feasible: bool = True

    @property
    def contact_heights(self) -> np.ndarray:
        """Height of each contact point above z = 0, shape (nc,), m."""
        return self.contact_positions[:, 2]


def rest_terms(robot: RobotModel, q, contact_frames=None):
    """Gravity vector, contact Jacobian and contact positions at ``q``.

    Returns
    -------
    gravity : ndarray, shape (nv,)
        ``rnea(q, 0, 0)``, generalized gravity force.
    jacobian : ndarray, shape (3 nc, nv)
        Stacked translational contact Jacobians, world-aligned.
    positions : ndarray, shape (nc, 3)
        Contact points, m, world frame.
    """
    model, data = robot.model, robot.model.createData()
    q = np.asarray(q, dtype=float)
    frames = robot.contact_frames if contact_frames is None else list(contact_frames)
    gravity = pin.rnea(model, data, q, np.zeros(model.nv), np.zeros(model.nv))
    pin.computeJointJacobians(model, data, q)
    pin.updateFramePlacements(model, data)
    ids = [robot.frame_id(name, "contacts") for name in frames]
    jacobian = np.vstack([pin.getFrameJacobian(model, data, i, pin.LOCAL_WORLD_ALIGNED)[:3] for i in ids])
    positions = np.array([data.oMf[i].translation for i in ids]).reshape(len(ids), 3)
    return np.array(gravity), jacobian, positions


def torque_use(torques, lower, upper) -> np.ndarray:
    """Torque over the limit on its side, shape (nj,); inf when that side's limit is not beyond 0."""
    torques = np.asarray(torques, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        use = np.where(torques >= 0, torques / upper, torques / lower)
    wrong_side = ((torques > 0) & (upper <= 0)) | ((torques < 0) & (lower >= 0))
    use = np.where(wrong_side, np.inf, use)
    return np.where(torques == 0, 0.0, use)


def _result(robot, q, frames, gravity, jacobian, positions, lam, feasible=True) -> StaticsResult:
    torques = gravity[6:] - jacobian[:, 6:].T @ lam
    residual = float(np.linalg.norm(gravity[:6] - jacobian[:, :6].T @ lam))
    return StaticsResult(q=np.asarray(q, dtype=float), contact_frames=frames,
                         forces=lam.reshape(-1, 3), torques=torques,
                         torque_use=torque_use(torques, robot.torque_lower, robot.torque_upper),
                         contact_positions=positions, base_residual=residual, feasible=feasible)


def standing_statics(robot: RobotModel, q, contact_frames=None) -> StaticsResult:
    """Smallest contact forces and the torques holding ``q`` at rest.

    Solves ``min |lambda|^2`` subject to the floating-base rows
    ``g_b(q) = J_b^T lambda`` (minimum-norm least squares), then
    ``tau = g_j(q) - J_j^T lambda``. No friction or unilateral limits are
    imposed: a negative vertical force means the foot would have to pull.

    Parameters
    ----------
    robot : RobotModel
    q : array-like, shape (nq,)
    contact_frames : list of str, optional
        Contacts carrying load; default: all of ``robot.contact_frames``.
    """
    frames = robot.contact_frames if contact_frames is None else list(contact_frames)
    gravity, jacobian, positions = rest_terms(robot, q, frames)
    lam = np.linalg.lstsq(jacobian[:, :6].T, gravity[:6], rcond=None)[0]
    return _result(robot, q, frames, gravity, jacobian, positions, lam)


