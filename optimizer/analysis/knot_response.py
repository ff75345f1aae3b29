"""Response data of every knot of a plan, from the plan file alone.

Reads only what ``plan/1`` holds (docs/plan-files.md): the URDF, joint and
contact names, normals, friction, pyramid axes (per contact, or per knot in
``contact_knot_surfaces``), limits and disturbances in ``meta``, and ``q``, ``tau``, ``contact_forces``, ``contact_active`` per knot.
Jacobians come from Pinocchio's numeric algorithms, so plans made by other
tools are certified on the same footing as our own.
"""
from __future__ import annotations

import numpy as np
import pinocchio as pin

from ..planfile import meta_at_knot, min_normal_forces
from ..problem.friction import pyramid_facets
from .response import KnotResponse


def contact_facets(meta: dict) -> np.ndarray:
    """Pyramid rows of every contact, shape (nc, m, 3), world frame (the per-contact
    fields of ``meta``: for a plan with per-knot surfaces pass :func:`meta_at_knot`).

    With ``inscribed: false`` the pyramid's facets touch the Coulomb cone
    (the pyramid contains it); with ``true`` its edges lie on the cone.
    """
    pyramid = meta["friction_pyramid"]
    m = int(pyramid["facets"])
    widen = 1.0 if pyramid.get("inscribed", True) else 1.0 / np.cos(np.pi / m)
    rows = [pyramid_facets(n, t, mu * widen, m)
            for n, t, mu in zip(meta["contact_normals"], pyramid["tangents"], meta["friction"])]
    return np.array(rows, dtype=float).reshape(len(rows), m, 3)


def torque_limits(meta: dict) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper torque limits, shape (nj,) each; null means no limit."""
    limits = meta["torque_limits"]
    lower = np.array([-np.inf if x is None else x for x in limits["lower"]], dtype=float)
    upper = np.array([np.inf if x is None else x for x in limits["upper"]], dtype=float)
    return lower, upper


class PlanRobot:
    """Pinocchio model of a plan's robot, with the frames the plan names.

    Parameters
    ----------
    meta : dict
        The plan's ``meta``.
    disturbance : int
        Index into ``meta["disturbances"]``.
    """

    def __init__(self, meta: dict, disturbance: int = 0):
        self.model = pin.buildModelFromXML(meta["urdf"], pin.JointModelFreeFlyer())
        self.data = self.model.createData()
        self.meta = meta
        self.contact_ids = [self.model.getFrameId(name) for name in meta["contact_frames"]]
        entry = meta["disturbances"][disturbance]
        self.disturbance_id = self.model.getFrameId(entry["frame"])
        self.disturbance_rows = 3 if entry["kind"] == "force" else 6
        self.shape = np.array(entry["shape"], dtype=float)
        self.facets = contact_facets(meta)
        self.normals = np.array(meta["contact_normals"], dtype=float).reshape(-1, 3)
        self.per_knot = "contact_knot_surfaces" in meta
        self.tau_lower, self.tau_upper = torque_limits(meta)

    def surfaces_at(self, k: int) -> tuple[np.ndarray, np.ndarray]:
        """Pyramid rows (nc, m, 3) and unit normals (nc, 3) of the surfaces the contacts press on at knot ``k``."""
        if not self.per_knot:
            return self.facets, self.normals
        meta = meta_at_knot(self.meta, k)
        return contact_facets(meta), np.array(meta["contact_normals"], dtype=float).reshape(-1, 3)

    def jacobians(self, q) -> tuple[np.ndarray, np.ndarray]:
        """Contact Jacobian (3 nc, nv) and disturbance Jacobian (d, nv), world-aligned."""
        model, data = self.model, self.data
        pin.computeJointJacobians(model, data, q)
        pin.updateFramePlacements(model, data)
        frame = pin.ReferenceFrame.LOCAL_WORLD_ALIGNED
        contacts = [pin.getFrameJacobian(model, data, i, frame)[:3] for i in self.contact_ids]
        jc = np.vstack(contacts) if contacts else np.zeros((0, model.nv))
        je = pin.getFrameJacobian(model, data, self.disturbance_id, frame)[: self.disturbance_rows]
        return jc, je


def knot_response(plan, k: int, robot: PlanRobot) -> KnotResponse:
    """The response problem at knot ``k`` of ``plan``."""
    jc, je = robot.jacobians(plan.q[k])
    meta = plan.meta
    facets, normals = robot.surfaces_at(k)
    return KnotResponse(
        contact_jacobian=jc, disturbance_jacobian=je, shape=robot.shape,
        tau=np.asarray(plan.tau[k], float), tau_lower=robot.tau_lower, tau_upper=robot.tau_upper,
        forces=np.asarray(plan.contact_forces[k], float), facets=facets, normals=normals,
        min_normal_force=min_normal_forces(meta), active=np.asarray(plan.contact_active[k], bool),
        base_dofs=6, joint_names=tuple(meta["joint_names"]), contact_names=tuple(meta["contact_frames"]),
    )


def knot_responses(plan, knots=None, disturbance: int = 0):
    """Yield ``(k, KnotResponse)`` for the chosen knots (all by default)."""
    robot = PlanRobot(plan.meta, disturbance)
    for k in range(plan.t.shape[0]) if knots is None else knots:
        yield k, knot_response(plan, k, robot)
