"""The disturbance-response problem at one knot (FORMULATION.md sections 3 and 6).

With the knot's state, torques and contact forces fixed, a disturbance
``F = W u`` at a point with Jacobian ``Je`` must be balanced by torque changes
``dtau`` and contact-force changes ``dlambda``:

    S^T dtau + Jc^T dlambda + Je^T W u = 0

Rows 0..5 of that equation (the floating base) involve no torque:
``Jc_b^T dlambda + Je_b^T W u = 0``; rows 6.. give ``dtau`` in closed form.
The limits are the torque box and, for every active contact, its pyramid
facets and its minimum normal force. This module holds that data; the
linear-gain margin and the exact certification both read it.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass
class KnotResponse:
    """Data of the response problem at one knot.

    Attributes
    ----------
    contact_jacobian : ndarray, shape (3 nc, nv)
        Stacked translational Jacobians of the contact points, world-aligned.
    disturbance_jacobian : ndarray, shape (d, nv)
        Jacobian of the disturbance point, world-aligned; d = 3 (force) or
        6 (wrench, rows [linear; angular]).
    shape : ndarray, shape (d, d)
        Shape matrix W of the disturbance set ``{W u : |u| <= rho}``.
    tau, tau_lower, tau_upper : ndarray, shape (nj,)
        Planned joint torques and their limits [N m or N].
    forces : ndarray, shape (nc, 3)
        Planned contact forces, world frame [N].
    facets : ndarray, shape (nc, m, 3)
        Pyramid rows ``g`` with ``g . f <= 0`` for an admissible force.
    normals : ndarray, shape (nc, 3)
        Unit surface normals, world frame.
    min_normal_force : float
        Smallest admissible ``n . f`` of an active contact [N].
    active : ndarray of bool, shape (nc,)
        Contacts in stance; inactive contacts carry no force and no change.
    """

    contact_jacobian: np.ndarray
    disturbance_jacobian: np.ndarray
    shape: np.ndarray
    tau: np.ndarray
    tau_lower: np.ndarray
    tau_upper: np.ndarray
    forces: np.ndarray
    facets: np.ndarray
    normals: np.ndarray
    min_normal_force: float
    active: np.ndarray

    @property
    def nc(self) -> int:
        return self.forces.shape[0]

    @property
    def nj(self) -> int:
        return self.tau.shape[0]

    def split(self):
        """Base and joint blocks: ``(Jc_b, Jc_j, Je_b, Je_j)``.

        ``Jc_b`` has shape (3 nc, 6), ``Jc_j`` (3 nc, nj); ``Je_b`` (d, 6),
        ``Je_j`` (d, nj); ``Je`` already multiplied by the shape matrix.
        """
        jc = self.contact_jacobian
        je = self.shape.T @ self.disturbance_jacobian
        return jc[:, :6], jc[:, 6:], je[:, :6], je[:, 6:]
