"""The plan as a reference for a tracking controller, and the controller's gains.

Between knots ``t_k <= t < t_k+1`` the joint positions follow the plan's
integrator (``q[k+1] = q[k] + h v[k+1]`` for joints: linear in time), joint
velocities and feed-forward torques are interpolated linearly; after the last
knot the reference holds the last knot. The base has no reference: it is not
actuated.

PD gains are set per joint from its torque limit and its reflected inertia
(the diagonal of Pinocchio's joint-space inertia at the first knot): the
stiffness reaches the torque limit at an error of ``full_error`` rad
(``Kp = tau_max / full_error``), the damping makes the joint alone critically
damped (``Kd = 2 zeta sqrt(Kp M_ii)``), and no joint alone is faster than
``max_bandwidth`` Hz (``Kp <= M_ii (2 pi f)^2``). Scaling by the limit gives
the stance legs, which carry the body, the stiffness they need; the cap keeps
light wrist joints well inside what an explicit controller at the simulation
step can stabilize.

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
    """Joint PD gains.

    Attributes
    ----------
    kp : ndarray, shape (nj,)
        N m / rad (N / m for prismatic joints).
    kd : ndarray, shape (nj,)
        N m s / rad.
    full_error : float
        Error [rad] at which the stiffness alone reaches the torque limit.
    damping : float
        Damping ratio of each joint alone.
    """

    kp: np.ndarray
    kd: np.ndarray
    full_error: float
    damping: float


def pd_gains(pin_model, q0, torque_limit, full_error, damping: float = 1.0,
             max_bandwidth: float = 40.0) -> PDGains:
    """Gains from the torque limits (nj,) [N m] and the joint-space inertia diagonal at ``q0``.

    ``full_error`` is one number or one per joint [rad]. A joint without a
    torque limit is treated as having 100 N m.
    """
    data = pin_model.createData()
    inertia = np.diag(pin.crba(pin_model, data, np.asarray(q0, float)))[6:]
    limit = np.asarray(torque_limit, float)
    kp = np.where(np.isfinite(limit), limit, 100.0) / np.asarray(full_error, float)
    kp = np.minimum(kp, inertia * (2.0 * np.pi * max_bandwidth) ** 2)
    return PDGains(kp, 2.0 * damping * np.sqrt(kp * inertia), full_error, damping)


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
        """``K_k`` (3 na, d): contact force change per unit disturbance coordinate at knot k."""
        if k not in self.response:
            if self._robot is None:
                self._robot = PlanRobot(self.plan.meta, self.disturbance)
            response = knot_response(self.plan, k, self._robot)
            margin = plan_margin(response.limit_rows(), None if self._stored is None else self._stored[k])
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
