"""Certification under a changed model, the plan itself fixed.

The plan's motion (``q``, ``v``, ``a``) stays as it is; what changes is the
model its limits come from: friction coefficients scaled, torque limits
scaled, a different minimum normal force, or a payload at the disturbance
point (a constant extra force ``m_p g``, world frame). The knot's limit rows
are then built by the same code as for the planned model
(:func:`optimizer.analysis.knot_response.knot_response` and
:mod:`optimizer.problem.limits`), from a copy of the plan's ``meta`` with the
changed numbers, so a changed model is never a private copy of the rows.

A payload is balanced before any disturbance: the particular contact-force
change ``dlambda_p`` (least squares over the active contacts) that balances
the floating-base rows ``Jc_b^T dlambda_p + Je_b^T F_p = 0``, and the joint
torques that follow from the joint rows, move the knot's nominal point. Since
every admissible response may add any further change, the residual set is
the same as for a response that must also carry the payload.

Per knot this gives the figure under the changed model and whether the plan
is still feasible at all there (some response keeps every limit with no
disturbance: the origin is in the residual set), and the *friction floor*:
the smallest friction scale (relative to the plan's own coefficients, the
other changes applied) at which the knot stays feasible, by bisection.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from ..planfile import meta_at_knot, min_normal_forces
from .knot_response import PlanRobot, contact_facets, knot_response
from .polytope import SupportLP
from .response import KnotResponse

FLOOR_RTOL = 1e-4       # relative width at which the friction-floor bisection stops
FLOOR_CEILING = 64.0    # largest friction scale tried when the plan is infeasible at its own friction
PAYLOAD_RESIDUAL = 1e-9  # relative base-balance residual accepted for the payload's contact forces


@dataclass(frozen=True)
class ModelChange:
    """How the model differs from the one the plan was made for.

    Attributes
    ----------
    friction_scale : float
        Multiplies every contact's friction coefficient (> 0).
    torque_scale : float
        Multiplies every torque limit, lower and upper (> 0).
    payload_kg : float
        Mass [kg] hanging at the disturbance point: a constant force
        ``payload_kg * gravity`` (world frame) there.
    min_normal_force : float or None
        Minimum normal force [N] of every active contact (replacing each
        contact's own, where the plan has per-contact minima); None keeps
        the plan's.
    """

    friction_scale: float = 1.0
    torque_scale: float = 1.0
    payload_kg: float = 0.0
    min_normal_force: float | None = None

    def meta(self, meta: dict, friction_scale: float | None = None) -> dict:
        """A copy of a plan's ``meta`` with the changed friction, torque limits and minimum normal force.

        ``friction_scale`` overrides :attr:`friction_scale` (for the friction floor).
        """
        scale = self.friction_scale if friction_scale is None else friction_scale
        out = dict(meta)  # shallow: every changed entry below is a new object
        out["friction"] = [scale * float(mu) for mu in meta["friction"]]
        if "contact_knot_surfaces" in meta:
            per_knot = meta["contact_knot_surfaces"]
            out["contact_knot_surfaces"] = dict(per_knot, friction=[[scale * float(mu) for mu in row]
                                                                    for row in per_knot["friction"]])
        out["torque_limits"] = {side: [None if x is None else self.torque_scale * float(x)
                                       for x in meta["torque_limits"][side]] for side in ("lower", "upper")}
        if self.min_normal_force is not None:
            out["min_normal_force"] = float(self.min_normal_force)
        return out

    def payload_force(self, meta: dict) -> np.ndarray:
        """The payload's force on the robot [N], world frame, shape (3,)."""
        return self.payload_kg * np.asarray(meta["gravity"], float)

    def describe(self, meta: dict, disturbance: int = 0) -> str:
        """One line naming every change, with units."""
        frame = meta["disturbances"][disturbance]["frame"]
        parts = [f"friction x{self.friction_scale:g}", f"torque limits x{self.torque_scale:g}"]
        if self.payload_kg:
            parts.append(f"payload {self.payload_kg:g} kg at {frame}")
        if self.min_normal_force is not None:
            planned = min_normal_forces(meta)
            words = (f"{planned[0]:g} N" if np.all(planned == planned[0]) else
                     ", ".join(f"{name} {value:g} N" for name, value in zip(meta["contact_frames"], planned)))
            parts.append(f"minimum normal force {self.min_normal_force:g} N on every contact (planned {words})")
        return ", ".join(parts)

    def to_json(self) -> dict:
        return dataclasses.asdict(self)


def carry_payload(resp: KnotResponse, force) -> KnotResponse:
    """The knot's response data with a constant ``force`` [N, world] at the disturbance point balanced.

    The active contacts' forces change by the least-squares solution of the
    floating-base rows and the joint torques by the joint rows (Newton-Euler
    balance of the extra force). A force the contacts cannot balance (the
    base rows keep a residual) leaves the nominal point unbalanced; the
    equality rows of the response problem then make the knot infeasible.
    """
    force = np.asarray(force, float)
    if not force.any():
        return resp
    b = resp.base_dofs
    je = resp.disturbance_jacobian[:3]          # translational rows, world-aligned
    active = np.repeat(np.asarray(resp.active, bool), 3)
    jc = resp.contact_jacobian
    rhs = -je[:, :b].T @ force
    dlam = np.zeros(jc.shape[0])
    if active.any():
        dlam[active] = np.linalg.lstsq(jc[active, :b].T, rhs, rcond=None)[0]
    residual = jc[:, :b].T @ dlam - rhs
    scale = max(1.0, float(np.abs(rhs).max()))
    if np.abs(residual).max(initial=0.0) > PAYLOAD_RESIDUAL * scale:
        dlam[:] = np.nan
    dtau = -(jc[:, b:].T @ np.nan_to_num(dlam) + je[:, b:].T @ force)
    forces = resp.forces + dlam.reshape(-1, 3)
    return dataclasses.replace(resp, tau=resp.tau + dtau, forces=forces)


def feasible_at_rest(resp: KnotResponse) -> bool:
    """Some change of torques and contact forces keeps every limit with no disturbance.

    One LP: is the origin in the knot's residual set? (False also when the
    payload could not be balanced.)
    """
    if not np.isfinite(resp.forces).all():
        return False
    rows = resp.limit_rows()
    lp = SupportLP(rows.a_ub, rows.b_ub, rows.a_eq, rows.dim, 1.0, "linprog", rows.names)  # one LP: no resident model
    return lp.contains(np.zeros(rows.dim))


class ChangedKnots:
    """Response data of a plan's knots under a :class:`ModelChange`.

    Parameters
    ----------
    plan : Plan
    change : ModelChange
    disturbance : int
        Index into ``meta["disturbances"]``; the payload hangs at its frame.
    """

    def __init__(self, plan, change: ModelChange, disturbance: int = 0):
        self.plan, self.change = plan, change
        self.changed_plan = dataclasses.replace(plan, meta=change.meta(plan.meta))
        self.robot = PlanRobot(self.changed_plan.meta, disturbance)
        self.force = change.payload_force(plan.meta)

    def response(self, k: int) -> KnotResponse:
        """Knot ``k``'s response data under the changed model."""
        return carry_payload(knot_response(self.changed_plan, k, self.robot), self.force)

    def with_friction(self, resp: KnotResponse, friction_scale: float, k: int = 0) -> KnotResponse:
        """``resp`` (knot ``k``) with the pyramids of ``friction_scale`` times the plan's friction (other
        changes kept)."""
        facets = contact_facets(meta_at_knot(self.change.meta(self.plan.meta, friction_scale), k))
        return dataclasses.replace(resp, facets=facets)

    def friction_floor(self, resp: KnotResponse, k: int = 0) -> float:
        """Smallest friction scale (times the plan's coefficients) at which knot ``resp`` stays feasible.

        Bisection to ``FLOOR_RTOL`` on ``[0, hi]``, ``hi`` the changed
        model's own scale (doubled up to ``FLOOR_CEILING`` while infeasible);
        feasibility only grows with friction, as every pyramid contains the
        smaller ones. ``inf`` when no friction up to the ceiling helps, 0 when
        the knot needs none.
        """
        hi = max(self.change.friction_scale, 1e-3)
        while not feasible_at_rest(self.with_friction(resp, hi, k)):
            hi *= 2.0
            if hi > FLOOR_CEILING:
                return math.inf
        if feasible_at_rest(self.with_friction(resp, 0.0, k)):
            return 0.0
        lo = 0.0
        while hi - lo > FLOOR_RTOL * hi:
            mid = 0.5 * (lo + hi)
            if feasible_at_rest(self.with_friction(resp, mid, k)):
                hi = mid
            else:
                lo = mid
        return hi
