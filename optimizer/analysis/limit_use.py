"""How much of each limit a plan uses, knot by knot, from the plan file alone.

- Torque use of joint i: ``tau_i / tau_upper_i`` when ``tau_i >= 0``, else
  ``tau_i / tau_lower_i`` (1 = on the limit; a joint without a limit on that
  side has use 0).
- Friction use of contact c: how far its force is towards its friction
  pyramid, ``max_j (a_j . f) / (mu_j (n . f))`` over the pyramid's facets
  ``g_j = a_j - mu_j n`` (``a_j`` the facet's tangent direction): 0 for a
  force along the normal, 1 on the pyramid. For four facets this is
  ``max(|f.t1|, |f.t2|) / ((mu / sqrt 2) f.n)``.
- Normal force of contact c: ``n . f`` [N].
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..planfile import knot_surfaces, meta_at_knot
from .knot_response import contact_facets, torque_limits


@dataclass
class LimitUse:
    """Limit use of one plan.

    Attributes
    ----------
    torque : ndarray, shape (K, nj)
        |tau| over the limit on its side, 1 = on the limit.
    friction : ndarray, shape (K, nc)
        Position of each contact force towards its pyramid, 1 = on it; NaN
        where the contact is inactive or pushes with no normal force.
    normal_force : ndarray, shape (K, nc)
        ``n . f`` [N], NaN where inactive.
    joint_names, contact_names : list of str
    """

    torque: np.ndarray
    friction: np.ndarray
    normal_force: np.ndarray
    joint_names: list
    contact_names: list

    def peak_torque(self) -> tuple[float, int, int]:
        """(largest torque use, knot, joint index)."""
        k, j = np.unravel_index(int(np.argmax(self.torque)), self.torque.shape)
        return float(self.torque[k, j]), int(k), int(j)

    def peak_friction(self) -> tuple[float, int, int]:
        """(largest friction use, knot, contact index); NaN use when no contact is active."""
        if not np.isfinite(self.friction).any():
            return float("nan"), 0, 0
        k, c = np.unravel_index(int(np.nanargmax(self.friction)), self.friction.shape)
        return float(self.friction[k, c]), int(k), int(c)


def torque_use(tau: np.ndarray, lower: np.ndarray, upper: np.ndarray) -> np.ndarray:
    """``tau`` (K, nj) [N m] as a fraction of the limit on its side; infinite limits give 0."""
    limit = np.where(tau >= 0.0, upper, -lower)
    with np.errstate(divide="ignore", invalid="ignore"):
        use = np.abs(tau) / limit
    return np.where(np.isfinite(limit) & (limit > 0.0), use, 0.0)


def friction_use(forces: np.ndarray, facets: np.ndarray, normals: np.ndarray, active: np.ndarray) -> np.ndarray:
    """Friction use (K, nc) of contact forces (K, nc, 3) [N] against pyramid rows (nc, m, 3) and unit
    normals (nc, 3), one surface per contact, or per knot (K, nc, m, 3) and (K, nc, 3)."""
    K = forces.shape[0]
    facets = np.broadcast_to(facets, (K,) + np.shape(facets)[-3:])
    normals = np.broadcast_to(normals, (K,) + np.shape(normals)[-2:])
    normal = np.einsum("kci,kci->kc", forces, normals)
    mu = -np.einsum("kcmi,kci->kcm", facets, normals)                  # (K, nc, m)
    tangential = np.einsum("kci,kcmi->kcm", forces, facets) + mu * normal[..., None]
    with np.errstate(divide="ignore", invalid="ignore"):
        use = np.max(tangential / (mu * normal[..., None]), axis=2)
    return np.where(active & (normal > 0.0), use, np.nan)


def limit_use(plan) -> LimitUse:
    """Torque use, friction use and normal forces of ``plan`` (a plan/1 :class:`Plan`), each contact
    against the surface it presses on at each knot."""
    meta = plan.meta
    lower, upper = torque_limits(meta)
    K = plan.q.shape[0]
    normals = knot_surfaces(meta, K).normals
    facets = np.array([contact_facets(meta_at_knot(meta, k)) for k in range(K)]) if "contact_knot_surfaces" in meta \
        else contact_facets(meta)
    active = np.asarray(plan.contact_active, bool)
    normal_force = np.where(active, np.einsum("kci,kci->kc", plan.contact_forces, normals), np.nan)
    return LimitUse(
        torque=torque_use(np.asarray(plan.tau, float), lower, upper),
        friction=friction_use(np.asarray(plan.contact_forces, float), facets, normals, active),
        normal_force=normal_force,
        joint_names=list(meta["joint_names"]),
        contact_names=list(meta["contact_frames"]),
    )
