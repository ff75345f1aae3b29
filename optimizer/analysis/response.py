"""The disturbance-response problem at one knot (docs/formulation.md sections 3 and 4).

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

from dataclasses import dataclass, field

import numpy as np

from ..problem.limits import KnotLimits, LimitValues


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
        Planned joint torques and their limits [N m or N]; an infinite limit
        means no limit.
    forces : ndarray, shape (nc, 3)
        Planned contact forces, world frame [N].
    facets : ndarray, shape (nc, m, 3)
        Pyramid rows ``g`` with ``g . f <= 0`` for an admissible force.
    normals : ndarray, shape (nc, 3)
        Unit surface normals, world frame.
    min_normal_force : float or ndarray, shape (nc,)
        Smallest admissible ``n . f`` of an active contact [N]: one for
        every contact, or each contact's own.
    active : ndarray of bool, shape (nc,)
        Contacts in stance; inactive contacts carry no force and no change.
    base_dofs : int
        Number of unactuated leading velocity coordinates: 6 for a floating
        base, 0 for a fixed-base arm.
    joint_names : tuple of str
        Names of the nj actuated joints (for reports); empty for "joint i".
    contact_names : tuple of str
        Names of the nc contacts (for reports); empty for "contact c".
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
    min_normal_force: float | np.ndarray
    active: np.ndarray
    base_dofs: int = 6
    joint_names: tuple = field(default_factory=tuple)
    contact_names: tuple = field(default_factory=tuple)

    @property
    def nc(self) -> int:
        return self.forces.shape[0]

    @property
    def nj(self) -> int:
        return self.tau.shape[0]

    @property
    def dim(self) -> int:
        """Dimension d of the disturbance (3 for a force, 6 for a wrench)."""
        return self.shape.shape[1]

    def split(self):
        """Base and joint blocks: ``(Jc_b, Jc_j, Je_b, Je_j)``.

        ``Jc_b`` has shape (3 nc, b), ``Jc_j`` (3 nc, nj); ``Je_b`` (d, b),
        ``Je_j`` (d, nj), with b = ``base_dofs``; ``Je`` already multiplied
        by the shape matrix.
        """
        b = self.base_dofs
        jc = self.contact_jacobian
        je = self.shape.T @ self.disturbance_jacobian
        return jc[:, :b], jc[:, b:], je[:, :b], je[:, b:]

    def joint_name(self, i: int) -> str:
        return self.joint_names[i] if self.joint_names else f"joint {i}"

    def contact_name(self, c: int) -> str:
        return self.contact_names[c] if self.contact_names else f"contact {c}"

    def active_gains(self, gains) -> np.ndarray:
        """Rows of the active contacts of all-contact gains (3 nc, d) -> (3 na, d)."""
        return np.asarray(gains, float)[np.repeat(np.asarray(self.active, bool), 3)]

    def all_gains(self, gains) -> np.ndarray:
        """Active-contact gains (3 na, d) -> (3 nc, d), zero rows for the contacts not in stance."""
        out = np.zeros((3 * self.nc, self.dim))
        out[np.repeat(np.asarray(self.active, bool), 3)] = np.asarray(gains, float).reshape(-1, self.dim)
        return out

    def limit_rows(self) -> "LimitRows":
        """The response problem as linear rows in ``x = (u, dlambda_active)``."""
        return build_limit_rows(self)


@dataclass
class LimitRows:
    """The response problem ``A_ub x <= b_ub, A_eq x = 0`` in ``x = (u, dlambda)``.

    ``u`` (first ``dim`` entries) is the disturbance coordinate, ``dlambda``
    the changes of the active contacts' forces (3 per active contact, world
    frame, N); ``dtau`` is eliminated through the joint rows.

    Attributes
    ----------
    a_ub : ndarray, shape (r, dim + 3 na)
    b_ub : ndarray, shape (r,)
        Room left at the plan's own point; a negative entry is a limit the
        plan already violates.
    a_eq : ndarray, shape (base_dofs, dim + 3 na)
    names : list of str, length r
        One name per row, e.g. ``"knee torque (upper)"``.
    dim : int
    limits : list of LimitName, length r
        The structured name of each row (kind, joint or contact, side or facet).
    """

    a_ub: np.ndarray
    b_ub: np.ndarray
    a_eq: np.ndarray
    names: list
    dim: int
    limits: list = field(default_factory=list)


def limit_values(resp: KnotResponse) -> LimitValues:
    """The knot's limits as :class:`~optimizer.problem.limits.LimitValues` (the weight is not used here)."""
    return LimitValues(resp.tau_lower, resp.tau_upper, list(resp.facets), list(resp.normals),
                       resp.min_normal_force, weight=1.0)


def _owner_order(limits: KnotLimits, joints, contacts, active) -> list[int]:
    """Rows by owner: each joint's upper and lower torque, then each active contact's facets and normal force."""
    names = limits.names
    by_owner: dict[str, list[int]] = {}
    for i, name in enumerate(names):
        by_owner.setdefault(name.owner, []).append(i)
    order = [i for joint in joints for i in sorted(by_owner.get(joint, []),
                                                  key=lambda i: names[i].side != "upper")]
    return order + [i for c, on in zip(contacts, active) if on for i in by_owner.get(c, [])]


def build_limit_rows(resp: KnotResponse) -> LimitRows:
    """Linear rows of the knot's limits (:mod:`optimizer.problem.limits`) in ``x = (u, dlambda_active)``.

    A limit's room changes by ``A_tau dtau + A_lam dlambda`` with
    ``dtau = -T x``; it must stay >= 0, so the row reads
    ``(A_tau T - A_lam E) x <= room``. Rows of inactive contacts and of
    infinite torque limits are left out. Rows come by owner (see
    :func:`_owner_order`), so names and bottlenecks read joint by joint; the
    projection's figure does not depend on the order.
    """
    jc_b, jc_j, je_b, je_j = resp.split()
    active = np.asarray(resp.active, bool)
    cols = np.flatnonzero(np.repeat(active, 3))
    d = resp.dim
    joints = tuple(resp.joint_name(i) for i in range(resp.nj))
    contacts = tuple(resp.contact_name(c) for c in range(resp.nc))
    limits = KnotLimits(joints, contacts, resp.facets.shape[1] if resp.nc else 0)
    a_tau, a_lam, b = limits.linear(limit_values(resp))
    room = limits.rooms(np.asarray(resp.tau, float), np.asarray(resp.forces, float).reshape(-1), limit_values(resp))
    t_map = np.hstack([je_j.T, jc_j[cols].T])          # dtau = -T x
    a_ub = np.hstack([np.zeros((len(b), d)), -a_lam[:, cols]]) + a_tau @ t_map
    keep = [i for i in _owner_order(limits, joints, contacts, active) if np.isfinite(b[i])]
    a_eq = np.hstack([je_b.T, jc_b[cols].T])
    names = limits.names
    return LimitRows(a_ub[keep].reshape(len(keep), d + cols.size), np.asarray(room, float)[keep], a_eq,
                     [str(names[i]) for i in keep], d, [names[i] for i in keep])
