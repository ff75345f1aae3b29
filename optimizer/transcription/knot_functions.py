"""One knot's constraints as CasADi functions (SX inside), mapped over knots.

Every function here is built once per (robot, structure) and evaluated on all
knots at once with ``Function.map``, so the expression graph stays the size
of one knot and the NLP stays sparse.

Notation (FORMULATION.md): ``q`` (nq,), ``v``, ``a`` (nv,), ``tau`` (nj,),
``lam`` (3 nc,) contact forces stacked per contact, world frame [N];
``G`` the homogenized contact-force gains ``rho * K_lambda``, shape (3 nc, d)
stored column-major as (3 nc d,); ``rho`` the margin [N].
"""
from __future__ import annotations

import casadi as ca

from .structure import DisturbanceSlot, Structure


class KnotFunctions:
    """Per-knot residuals of the transcription for one robot and structure.

    Parameters
    ----------
    symbolic : SymbolicRobot
        The robot's CasADi kinematics and dynamics.
    structure : Structure
        Contacts, facets, disturbances.
    weight : float
        The robot's weight ``m g`` [N]; residual rows are divided by it (and by
        its square for the squared robust rows) so every group is of order one.
    """

    def __init__(self, symbolic, structure: Structure, weight: float, torque_gains: str = "eliminated"):
        self.torque_gains = torque_gains
        self.sym = symbolic
        self.structure = structure
        self.weight = float(weight)
        self.nq, self.nv, self.nj = symbolic.nq, symbolic.nv, symbolic.nj
        self.contacts = symbolic.point_kinematics(list(structure.contact_frames))
        self.dynamics = self._dynamics()
        self.stance = self._stance()
        self.friction = self._friction()
        self.step = self._step()
        self.robust = [self._robust(p, slot) for p, slot in enumerate(structure.disturbances)]
        self.hand = {frame: self._hand(frame) for frame in {s.frame for s in structure.targets}}

    def _sym(self, name, rows=1, cols=1):
        return ca.SX.sym(name, rows, cols)

    def _dynamics(self) -> ca.Function:
        """(q, v, a, tau, lam) -> equations-of-motion residual / (m g), shape (nv,)."""
        q, v, a = self._sym("q", self.nq), self._sym("v", self.nv), self._sym("a", self.nv)
        tau, lam = self._sym("tau", self.nj), self._sym("lam", 3 * self.structure.nc)
        _, jac = self.contacts(q)
        generalized = ca.vertcat(ca.SX.zeros(6), tau) + ca.mtimes(jac.T, lam)
        residual = (self.sym.rnea(q, v, a) - generalized) / self.weight
        return ca.Function("dynamics", [q, v, a, tau, lam], [residual],
                           ["q", "v", "a", "tau", "lam"], ["residual"])

    def _stance(self) -> ca.Function:
        """(q, footholds (3, nc)) -> contact position error [m], shape (3 nc,)."""
        q, target = self._sym("q", self.nq), self._sym("footholds", 3, self.structure.nc)
        positions, _ = self.contacts(q)
        return ca.Function("stance", [q, target], [ca.vec(positions - target)],
                           ["q", "footholds"], ["error"])

    def _friction(self) -> ca.Function:
        """(lam, facets, normals) -> (facet rows (m nc,) <= 0, normal forces (nc,)) / (m g)."""
        nc, m = self.structure.nc, self.structure.facets
        lam = self._sym("lam", 3 * nc)
        facets, normals = self._sym("facets", 3 * m, nc), self._sym("normals", 3, nc)
        rows, pushes = [], []
        for c in range(nc):
            force = lam[3 * c:3 * c + 3]
            rows.append(ca.mtimes(ca.reshape(facets[:, c], 3, m).T, force))
            pushes.append(ca.dot(normals[:, c], force))
        return ca.Function("friction", [lam, facets, normals],
                           [ca.vertcat(*rows) / self.weight, ca.vertcat(*pushes) / self.weight],
                           ["lam", "facets", "normals"], ["facet_rows", "normal_forces"])

    def _step(self) -> ca.Function:
        """(q_k, q_k+1, v_k+1, h) -> q_k+1 - integrate(q_k, h v_k+1): semi-implicit Euler on SE(3)."""
        q0, q1 = self._sym("q0", self.nq), self._sym("q1", self.nq)
        v1, h = self._sym("v1", self.nv), self._sym("h")
        return ca.Function("configuration_step", [q0, q1, v1, h],
                           [q1 - self.sym.integrate(q0, h * v1)], ["q0", "q1", "v1", "h"], ["error"])

    def _robust(self, index: int, slot: DisturbanceSlot) -> ca.Function:
        """Robust rows of disturbance ``index`` in the homogenized gain form (FORMULATION 4).

        Inputs: q, tau, lam, G (3 nc d,), rho, facets, normals, f_min, tau_lower,
        tau_upper, shape (d d,). Outputs:

        - ``balance`` (6 d,): ``Jc_b^T G + rho (W^T Je)_b^T = 0`` / (m g);
        - ``torque`` (2 nj,): ``(tau_max - tau)^2 - |[G_tau]_i|^2 >= 0`` and the
          same towards ``tau_min``, divided by the limit squared;
        - ``facet`` (m nc,): ``(g . lam)^2 - |G_c^T g|^2 >= 0`` / (m g / nc)^2;
        - ``normal`` (nc,): ``(n . lam - f_min)^2 - |G_c^T n|^2 >= 0`` / (m g / nc)^2.

        ``G_tau = -(Jc_j^T G + rho (W^T Je)_j^T)`` is the closed form of the
        joint-torque gains from the joint rows: they are not variables.
        The right sides' signs (slack >= 0) are kept by the plain limits.

        With ``torque_gains="variables"`` (kept for the ablation benchmark)
        ``G_tau`` is one more input (nj d,) and ``balance`` holds all nv rows
        of the balance, base and joints, ``(6 + nj) d`` equalities.
        """
        nc, m, d, nj = self.structure.nc, self.structure.facets, slot.dim, self.nj
        q, tau, lam = self._sym("q", self.nq), self._sym("tau", nj), self._sym("lam", 3 * nc)
        gains, rho = self._sym("G", 3 * nc * d), self._sym("rho")
        facets, normals, f_min = self._sym("facets", 3 * m, nc), self._sym("normals", 3, nc), self._sym("f_min")
        lower, upper, shape = self._sym("tau_lower", nj), self._sym("tau_upper", nj), self._sym("shape", d * d)
        G = ca.reshape(gains, 3 * nc, d)
        _, jc = self.contacts(q)
        je = self._disturbance_jacobian(slot)(q)
        je = ca.mtimes(ca.reshape(shape, d, d).T, je)
        balance = ca.mtimes(jc[:, :6].T, G) + rho * je[:, :6].T
        g_tau = -(ca.mtimes(jc[:, 6:].T, G) + rho * je[:, 6:].T)
        inputs = [q, tau, lam, gains, rho, facets, normals, f_min, lower, upper, shape]
        names = ["q", "tau", "lam", "G", "rho", "facets", "normals", "f_min", "tau_lower", "tau_upper", "shape"]
        if self.torque_gains == "variables":
            torque_gains = self._sym("G_tau", nj * d)
            joint_rows = ca.reshape(torque_gains, nj, d) - g_tau
            balance = ca.vertcat(balance, joint_rows)
            g_tau = ca.reshape(torque_gains, nj, d)
            inputs, names = inputs + [torque_gains], names + ["G_tau"]
        row_sq = ca.sum2(g_tau * g_tau)
        limit_sq = ca.fmax(upper * upper, lower * lower)
        torque = ca.vertcat(((upper - tau) ** 2 - row_sq) / limit_sq, ((tau - lower) ** 2 - row_sq) / limit_sq)
        per_contact = (self.weight / nc) ** 2
        facet_rows, normal_rows = [], []
        for c in range(nc):
            Gc, force = G[3 * c:3 * c + 3, :], lam[3 * c:3 * c + 3]
            rows = ca.reshape(facets[:, c], 3, m).T
            along = ca.mtimes(rows, Gc)
            facet_rows.append((ca.mtimes(rows, force) ** 2 - ca.sum2(along * along)) / per_contact)
            n_gain = ca.mtimes(normals[:, c].T, Gc)
            normal_rows.append(((ca.dot(normals[:, c], force) - f_min) ** 2 - ca.sumsqr(n_gain)) / per_contact)
        return ca.Function(
            f"robust{index}", inputs,
            [ca.vec(balance) / self.weight, torque, ca.vertcat(*facet_rows), ca.vertcat(*normal_rows)],
            names, ["balance", "torque", "facet", "normal"])

    def _disturbance_jacobian(self, slot: DisturbanceSlot) -> ca.Function:
        if slot.kind == "force":
            return self.sym.frame_translation_jacobian(slot.frame)
        return self.sym.frame_jacobian(slot.frame)

    def _hand(self, frame: str) -> ca.Function:
        """(q, position (3,), rotation (9,)) -> (position error [m] (3,), orientation error (3,)).

        The orientation error is the vee of the skew part of ``R_target^T R``,
        zero when the frame's rotation ``R`` equals the target's.
        """
        q, target, rot = self._sym("q", self.nq), self._sym("position", 3), self._sym("rotation", 9)
        position, R = self.sym.frame_placement(frame)(q)
        E = ca.mtimes(ca.reshape(rot, 3, 3).T, R)
        orientation = 0.5 * ca.vertcat(E[2, 1] - E[1, 2], E[0, 2] - E[2, 0], E[1, 0] - E[0, 1])
        return ca.Function(f"hand_{frame}", [q, target, rot], [position - target, orientation],
                           ["q", "position", "rotation"], ["position_error", "orientation_error"])
