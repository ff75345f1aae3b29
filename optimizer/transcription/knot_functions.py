"""One knot's constraints as CasADi functions (SX inside), mapped over knots.

Every function here is built once per (robot, structure) and evaluated on all
knots at once with ``Function.map``, so the expression graph stays the size
of one knot and the NLP stays sparse.

Notation (docs/formulation.md): ``q`` (nq,), ``v``, ``a`` (nv,), ``tau`` (nj,),
``lam`` (3 nc,) contact forces stacked per contact, world frame [N];
``G`` the homogenized contact-force gains ``rho * K_lambda``, shape (3 nc, d)
stored column-major as (3 nc d,); ``rho`` the margin [N].
"""
from __future__ import annotations

import casadi as ca

from ..problem.limits import ArrayOps, KnotLimits, LimitValues
from ..robot.symbolic import body_points_function
from .structure import DisturbanceSlot, Structure

# CasADi's versions of the few array operations the limit rows use
CASADI_OPS = ArrayOps(stack=lambda parts: ca.vertcat(*parts), dot=ca.dot, maximum=ca.fmax, absolute=ca.fabs,
                      ones=ca.DM.ones)


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

    def __init__(self, symbolic, structure: Structure, weight: float, torque_gains: str = "eliminated",
                 joint_names=None, shapes=()):
        self.torque_gains = torque_gains
        self.sym = symbolic
        self.structure = structure
        self.weight = float(weight)
        self.nq, self.nv, self.nj = symbolic.nq, symbolic.nv, symbolic.nj
        self.contacts = symbolic.point_kinematics(list(structure.contact_frames))
        joints = tuple(joint_names) if joint_names is not None else tuple(f"joint {i}" for i in range(self.nj))
        self.limits = KnotLimits(joints, tuple(structure.contact_frames), structure.facets)
        self.dynamics = self._dynamics()
        self.stance = self._stance()
        self.foot_motion = self._foot_motion()
        self.friction = self._friction()
        self.rooms = self._rooms()
        self.step = self._step()
        self.robust = [self._robust(p, slot) for p, slot in enumerate(structure.disturbances)]
        self.hand = {frame: self._hand(frame) for frame in {s.frame for s in structure.targets}}
        self.clearance = self._clearance(shapes)
        self.self_clearance = self._self_clearance(shapes)

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

    def _foot_motion(self) -> ca.Function:
        """(q, v) -> contact positions (3, nc) [m] and velocities ``J_c v`` (3 nc,) [m/s], world frame."""
        q, v = self._sym("q", self.nq), self._sym("v", self.nv)
        positions, jac = self.contacts(q)
        return ca.Function("foot_motion", [q, v], [positions, ca.mtimes(jac, v)], ["q", "v"],
                           ["positions", "velocities"])

    def _friction(self) -> ca.Function:
        """(lam, facets, normals, f_min) -> rooms of the contacts' limits / (m g): facets (m nc,), normal forces (nc,).

        The rows of :mod:`optimizer.problem.limits` (``-g . lam`` per facet,
        ``n . lam - f_min`` per contact); each is >= 0 when its limit holds.
        """
        nc, m, nj = self.structure.nc, self.structure.facets, self.nj
        lam, f_min = self._sym("lam", 3 * nc), self._sym("f_min", nc)
        facets, normals = self._sym("facets", 3 * m, nc), self._sym("normals", 3, nc)
        zero = ca.SX.zeros(nj)
        rooms = self.limits.rooms(zero, lam, self._limit_values(facets, normals, f_min, zero, zero), CASADI_OPS)
        contact = rooms[2 * nj:] / self.weight
        return ca.Function("friction", [lam, facets, normals, f_min], [contact[:nc * m], contact[nc * m:]],
                           ["lam", "facets", "normals", "f_min"], ["facet_rooms", "normal_rooms"])

    def _limit_values(self, facets, normals, f_min, lower, upper) -> LimitValues:
        """CasADi parameters as :class:`LimitValues`: pyramid rows (3 m, nc) -> one (m, 3) matrix per contact."""
        nc, m = self.structure.nc, self.structure.facets
        return LimitValues(lower, upper, [ca.reshape(facets[:, c], 3, m).T for c in range(nc)],
                           [normals[:, c] for c in range(nc)], f_min, self.weight)

    def _step(self) -> ca.Function:
        """(q_k, q_k+1, v_k+1, h) -> q_k+1 - integrate(q_k, h v_k+1): semi-implicit Euler on SE(3)."""
        q0, q1 = self._sym("q0", self.nq), self._sym("q1", self.nq)
        v1, h = self._sym("v1", self.nv), self._sym("h")
        return ca.Function("configuration_step", [q0, q1, v1, h],
                           [q1 - self.sym.integrate(q0, h * v1)], ["q0", "q1", "v1", "h"], ["error"])

    def _rooms(self) -> ca.Function:
        """(tau, lam, facets, normals, f_min, tau_lower, tau_upper) -> room left at every limit.

        The rows of :mod:`optimizer.problem.limits` in its order (2 nj + nc m +
        nc,): ``tau_upper - tau``, ``tau - tau_lower`` [N m], then per
        contact ``-g . lam`` for each facet, then ``n . lam - f_min`` [N], ``f_min`` (nc,) each contact's
        minimum normal force.
        Every entry is >= 0 exactly when the plain limits hold.
        """
        nc, m, nj = self.structure.nc, self.structure.facets, self.nj
        tau, lam = self._sym("tau", nj), self._sym("lam", 3 * nc)
        facets, normals, f_min = self._sym("facets", 3 * m, nc), self._sym("normals", 3, nc), self._sym("f_min", nc)
        lower, upper = self._sym("tau_lower", nj), self._sym("tau_upper", nj)
        rooms = self.limits.rooms(tau, lam, self._limit_values(facets, normals, f_min, lower, upper), CASADI_OPS)
        return ca.Function("limit_rooms", [tau, lam, facets, normals, f_min, lower, upper], [rooms],
                           ["tau", "lam", "facets", "normals", "f_min", "tau_lower", "tau_upper"], ["rooms"])

    def room_scales(self, tau_lower, tau_upper):
        """Scale of each room row (:meth:`KnotLimits.scales`), on CasADi symbols or numbers; a column."""
        values = LimitValues(ca.DM(tau_lower) if not isinstance(tau_lower, (ca.SX, ca.MX)) else tau_lower,
                             ca.DM(tau_upper) if not isinstance(tau_upper, (ca.SX, ca.MX)) else tau_upper,
                             [], [], 0.0, self.weight)
        return self.limits.scales(values, CASADI_OPS)

    def _robust(self, index: int, slot: DisturbanceSlot) -> ca.Function:
        """Robust rows of disturbance ``index`` in the homogenized gain form (docs/formulation.md section 5).

        Inputs: q, G (3 nc d,), rho, rooms (the limit rooms, kept as variables,
        see :meth:`_rooms`), facets, normals, shape (d d,), scales (the rooms'
        scales). Outputs:

        - ``balance`` (6 d,): ``Jc_b^T G + rho (W^T Je)_b^T = 0`` / (m g);
        - ``cone`` (2 nj + nc m + nc,): for every limit row with room ``s`` and
          reach ``r`` (the row's gain, ``|[G_tau]_i|``, ``|G_c^T g|`` or
          ``|G_c^T n|``), ``s - r^2 / s >= 0`` divided by the row's scale.
          This is ``r <= s`` written so its gradient never vanishes and never
          nearly does: the rooms are variables kept strictly positive by the
          interior-point method, so a limit with almost no room left stays a
          well-scaled constraint (a squared row ``s^2 - r^2`` would have a
          gradient of size ``s`` there).

        ``G_tau = -(Jc_j^T G + rho (W^T Je)_j^T)`` is the closed form of the
        joint-torque gains from the joint rows: they are not variables.

        With ``torque_gains="variables"`` (kept for the ablation benchmark)
        ``G_tau`` is one more input (nj d,) and ``balance`` holds all nv rows
        of the balance, base and joints, ``(6 + nj) d`` equalities.
        """
        nc, m, d, nj = self.structure.nc, self.structure.facets, slot.dim, self.nj
        n_rooms = 2 * nj + nc * (m + 1)
        q, gains, rho = self._sym("q", self.nq), self._sym("G", 3 * nc * d), self._sym("rho")
        rooms, scales = self._sym("rooms", n_rooms), self._sym("scales", n_rooms)
        facets, normals, shape = self._sym("facets", 3 * m, nc), self._sym("normals", 3, nc), self._sym("shape", d * d)
        G = ca.reshape(gains, 3 * nc, d)
        _, jc = self.contacts(q)
        je = self._disturbance_jacobian(slot)(q)
        je = ca.mtimes(ca.reshape(shape, d, d).T, je)
        balance = ca.mtimes(jc[:, :6].T, G) + rho * je[:, :6].T
        g_tau = -(ca.mtimes(jc[:, 6:].T, G) + rho * je[:, 6:].T)
        inputs = [q, gains, rho, rooms, facets, normals, shape, scales]
        names = ["q", "G", "rho", "rooms", "facets", "normals", "shape", "scales"]
        if self.torque_gains == "variables":
            torque_gains = self._sym("G_tau", nj * d)
            balance = ca.vertcat(balance, ca.reshape(torque_gains, nj, d) - g_tau)
            g_tau = ca.reshape(torque_gains, nj, d)
            inputs, names = inputs + [torque_gains], names + ["G_tau"]
        torque_reach = ca.sum2(g_tau * g_tau)
        facet_reach, normal_reach = [], []
        for c in range(nc):
            Gc = G[3 * c:3 * c + 3, :]
            along = ca.mtimes(ca.reshape(facets[:, c], 3, m).T, Gc)
            facet_reach.append(ca.sum2(along * along))
            normal_reach.append(ca.sumsqr(ca.mtimes(normals[:, c].T, Gc)))
        reach_sq = ca.vertcat(torque_reach, torque_reach, *facet_reach, *normal_reach)
        cone = (rooms - reach_sq / rooms) / scales
        return ca.Function(f"robust{index}", inputs, [ca.vec(balance) / self.weight, cone],
                           names, ["balance", "cone"])

    def _disturbance_jacobian(self, slot: DisturbanceSlot) -> ca.Function:
        if slot.kind == "force":
            return self.sym.frame_translation_jacobian(slot.frame)
        return self.sym.frame_jacobian(slot.frame)

    def _clearance(self, shapes) -> ca.Function | None:
        """(q, planes (4, rows)) -> ``n . p - offset`` per clearance row [m], >= 0 when clear.

        ``p`` is the row's shape point (``structure.clearance_rows``) in the
        world; ``(n, offset)`` the row's plane with the shape's radius and the
        required clearance already in the offset (``parameters.clearance_planes``).
        """
        rows = self.structure.clearance_rows
        if not rows:
            return None
        points = body_points_function(self.sym, [(shapes[s].joint, shapes[s].joint_points[p]) for s, p in rows])
        q, planes = self._sym("q", self.nq), self._sym("planes", 4, len(rows))
        world = points(q)
        values = ca.sum1(planes[:3, :] * world) - planes[3, :]
        return ca.Function("clearance", [q, planes], [values.T], ["q", "planes"], ["clearance"])

    def _self_clearance(self, shapes) -> ca.Function | None:
        """(q, planes (4, pairs), distances (pairs,)) -> (distance rows [m], norm rows (pairs,)), >= 0 when they hold.

        Per pair ``(first, second)`` with separating plane ``(n, d)``
        (:mod:`optimizer.problem.clearance`): ``n . a_i - d - r_a - distance``
        for the first shape's points, then ``d - n . b_j - r_b`` for the
        second's, pairs one after the other; and per pair ``1 - n . n``.
        """
        pairs = self.structure.self_pairs
        if not pairs:
            return None
        used = sorted({s for pair in pairs for s in pair})
        spans, points = {}, []
        for s in used:
            spans[s] = range(len(points), len(points) + len(shapes[s].points))
            points += [(shapes[s].joint, p) for p in shapes[s].joint_points]
        world = body_points_function(self.sym, points)
        q, planes, distances = self._sym("q", self.nq), self._sym("planes", 4, len(pairs)), self._sym("distances", len(pairs))
        at = world(q)
        rows = []
        for i, (a, b) in enumerate(pairs):
            n, d = planes[:3, i], planes[3, i]
            rows.append(ca.mtimes(n.T, at[:, spans[a].start:spans[a].stop]).T - d - shapes[a].radius - distances[i])
            rows.append(d - ca.mtimes(n.T, at[:, spans[b].start:spans[b].stop]).T - shapes[b].radius)
        norms = 1.0 - ca.sum1(planes[:3, :] * planes[:3, :]).T
        return ca.Function("self_clearance", [q, planes, distances], [ca.vertcat(*rows), norms],
                           ["q", "planes", "distances"], ["rows", "norms"])

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
