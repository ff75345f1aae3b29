"""The plan as a reference for a tracking controller, and the controller's gains.

Between knots ``t_k <= t < t_k+1`` the joint positions follow the plan's
integrator (``q[k+1] = q[k] + h v[k+1]`` for joints: linear in time), joint
velocities and feed-forward torques are interpolated linearly; after the last
knot the reference holds the last knot. The base has no reference: it is not
actuated.

PD gains are set per joint and per knot from the joint's torque limit and
its reflected inertia (the diagonal of Pinocchio's joint-space inertia at
that knot): the stiffness reaches the torque limit at an error of
``full_error`` rad (``Kp = tau_max / full_error``), the damping makes the
joint alone critically damped (``Kd = 2 zeta sqrt(Kp M_ii)``), and no joint
alone is faster than ``max_bandwidth`` Hz (``Kp <= M_ii (2 pi f)^2``).
Scaling by the limit gives the stance legs, which carry the body, the
stiffness they need; the cap keeps light wrist joints well inside what an
explicit controller at the simulation step can stabilize. The gains of knot
k hold from ``t_k`` until ``t_k+1``.

Informed mode: the torque change that rejects a push ``F = W u`` at the
disturbance frame is ``dtau = D_k u`` with
``D_k = -(Jc_j^T K_k + Je_j^T W)`` (the joint rows of the response balance,
:mod:`optimizer.analysis.response`), ``K_k`` the gains behind the plan's
certified figure at knot k (:func:`optimizer.analysis.linear_margin.plan_margin`:
the plan's own stored response gains, else the best linear response);
``D`` is interpolated like the torques.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pinocchio as pin

from ..analysis.knot_response import PlanRobot, knot_response
from ..analysis.linear_margin import plan_margin
from ..planfile import response_gains


@dataclass
class PDGains:
    """Joint PD gains per knot.

    Attributes
    ----------
    kp : ndarray, shape (K, nj)
        N m / rad (N / m for prismatic joints).
    kd : ndarray, shape (K, nj)
        N m s / rad.
    full_error : ndarray, shape (K, nj)
        Error [rad] at which the stiffness alone reaches the torque limit.
    damping : float
        Damping ratio of each joint alone.
    """

    kp: np.ndarray
    kd: np.ndarray
    full_error: np.ndarray
    damping: float


def pd_gains(pin_model, qs, torque_limit, full_error, damping: float = 1.0,
             max_bandwidth: float = 40.0) -> PDGains:
    """Gains from the torque limits (nj,) [N m] and the joint-space inertia diagonal at each of the
    configurations ``qs`` (K, nq).

    ``full_error`` is one number, one per joint, or one per knot and joint (K, nj) [rad]. A joint
    without a torque limit is treated as having 100 N m.
    """
    data = pin_model.createData()
    qs = np.atleast_2d(np.asarray(qs, float))
    inertia = np.array([np.diag(pin.crba(pin_model, data, q))[6:] for q in qs])
    limit = np.asarray(torque_limit, float)
    full_error = np.broadcast_to(np.asarray(full_error, float), inertia.shape)
    kp = np.where(np.isfinite(limit), limit, 100.0) / full_error
    kp = np.minimum(kp, inertia * (2.0 * np.pi * max_bandwidth) ** 2)
    return PDGains(kp, 2.0 * damping * np.sqrt(kp * inertia), np.array(full_error), damping)


class PlanReference:
    """Joint reference, feed-forward torques and (lazily) informed gains of a plan.

    Parameters
    ----------
    plan : Plan
    joint_angles : ndarray, shape (K, nj)
        The plan's joint coordinates per knot (continuous joints as angles,
        unwrapped), from :meth:`Scene.joint_angles`.
    disturbance : int
        Which disturbance point informed mode responds to.
    """

    def __init__(self, plan, joint_angles, disturbance: int = 0):
        self.plan = plan
        self.t = np.asarray(plan.t, float)
        self.q = np.unwrap(np.asarray(joint_angles, float), axis=0)
        self.v = np.asarray(plan.v, float)[:, 6:]
        self.tau = np.asarray(plan.tau, float)
        self.disturbance = disturbance
        self._robot = None
        self._gains: dict = {}
        self._stored = response_gains(plan, disturbance)
        self.certified: dict = {}
        self.response: dict = {}

    @property
    def duration(self) -> float:
        return float(self.t[-1])

    def locate(self, t: float) -> tuple[int, float]:
        """Knot k and fraction s in [0, 1] with ``t = t_k + s (t_k+1 - t_k)``."""
        K = self.t.shape[0]
        if K == 1 or t >= self.t[-1]:
            return K - 1, 0.0
        if t <= self.t[0]:
            return 0, 0.0
        k = int(np.searchsorted(self.t, t, side="right") - 1)
        h = self.t[k + 1] - self.t[k]
        return k, float((t - self.t[k]) / h) if h > 0 else 0.0

    def at(self, t: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Joint position, velocity and feed-forward torque references at time ``t`` [s]."""
        k, s = self.locate(t)
        if s == 0.0:
            return self.q[k], self.v[k], self.tau[k]
        return ((1 - s) * self.q[k] + s * self.q[k + 1], (1 - s) * self.v[k] + s * self.v[k + 1],
                (1 - s) * self.tau[k] + s * self.tau[k + 1])

    def response_gains(self, k: int) -> np.ndarray:
        """``K_k`` (3 na, d): force change of the na contacts in stance at knot k per unit disturbance
        coordinate (the plan's stored gains keep zero rows for swinging contacts; those are dropped)."""
        if k not in self.response:
            if self._robot is None:
                self._robot = PlanRobot(self.plan.meta, self.disturbance)
            response = knot_response(self.plan, k, self._robot)
            stored = None if self._stored is None else response.active_gains(self._stored[k])
            margin = plan_margin(response.limit_rows(), stored)
            _, jc_j, _, je_j = response.split()
            cols = np.flatnonzero(np.repeat(np.asarray(response.active, bool), 3))
            self.response[k] = margin.gains
            self._gains[k] = -(jc_j[cols].T @ margin.gains + je_j.T)
            self.certified[k] = margin.rho
        return self.response[k]

    def torque_gains(self, k: int) -> np.ndarray:
        """``D_k`` (nj, d): joint torque change per unit disturbance coordinate at knot k."""
        self.response_gains(k)
        return self._gains[k]

    def informed_torque(self, t: float, u) -> np.ndarray:
        """Torque change [N m] rejecting the disturbance coordinate ``u`` at time ``t``."""
        k, s = self.locate(t)
        dtau = self.torque_gains(k) @ u
        if s > 0.0:
            dtau = (1 - s) * dtau + s * (self.torque_gains(k + 1) @ u)
        return dtau


class SwingPaths:
    """Where the plan puts each swinging foot, for the swing legs' world-frame correction.

    A swinging leg tracked in joint space alone carries every base error
    into its foot: a base that sags 2 cm sets the foot down 2 cm off its
    foothold. So over every step that begins or ends at a knot where a
    contact is not in stance (lift-off, swing, the step onto the touchdown
    knot), the joints that move
    only that contact get their reference shifted by
    ``dq = J^T (J J^T + l^2 I)^-1 (p_ref - p)`` (damped least squares on the
    contact point's world Jacobian, ``l`` = ``damping``), ``p`` the contact
    point in the simulation and ``p_ref`` the plan's, linear between the
    knots' contact points (Pinocchio forward kinematics of ``plan.q``). The
    joint PD then steers the foot along its planned world path from wherever
    the base is. Which joints move only one contact is read from the
    contact Jacobians at the first knot (a leg's joints; plan joint order).

    Parameters
    ----------
    plan : Plan
    pin_model : pinocchio.Model
        Model of the plan's URDF with a free-flyer root.
    damping : float
        Damped least-squares factor [m].
    """

    def __init__(self, plan, pin_model, damping: float = 0.01):
        data = pin_model.createData()
        frames = [pin_model.getFrameId(n) for n in plan.meta["contact_frames"]]
        K, nc = np.asarray(plan.contact_active).shape
        self.points = np.zeros((K, nc, 3))
        legs = np.zeros((nc, len(plan.meta["joint_names"])), bool)
        for k, q in enumerate(plan.q):
            pin.framesForwardKinematics(pin_model, data, q)
            self.points[k] = [data.oMf[f].translation for f in frames]
        pin.computeJointJacobians(pin_model, data, plan.q[0])
        dofs = [pin_model.joints[pin_model.getJointId(n)].idx_v for n in plan.meta["joint_names"]]
        moves = np.array([np.abs(pin.getFrameJacobian(pin_model, data, f, pin.ReferenceFrame.LOCAL_WORLD_ALIGNED)
                                 [:3, dofs]).max(axis=0) > 1e-9 for f in frames]).reshape(nc, -1)
        for c in range(nc):
            legs[c] = moves[c] & ~np.delete(moves, c, axis=0).any(axis=0)
        self.legs = [np.flatnonzero(row) for row in legs]
        self.swinging = ~np.asarray(plan.contact_active, bool)
        self.damping = damping

    def swinging_at(self, k: int) -> np.ndarray:
        """Contacts whose leg is corrected over the step after knot k: not in stance at k or at k+1
        (lift-off, swing and the step onto the touchdown knot)."""
        nxt = min(k + 1, self.swinging.shape[0] - 1)
        return np.flatnonzero(self.swinging[k] | self.swinging[nxt])

    def point(self, k: int, s: float, c: int) -> np.ndarray:
        """The plan's contact point c [m] at fraction s of the step after knot k."""
        nxt = min(k + 1, self.points.shape[0] - 1)
        return (1 - s) * self.points[k, c] + s * self.points[nxt, c]

    def shift(self, jacobian, error) -> np.ndarray:
        """Damped least-squares joint shift (n,) for a world position error (3,) [m]."""
        jj = jacobian @ jacobian.T + self.damping ** 2 * np.eye(3)
        return jacobian.T @ np.linalg.solve(jj, error)
