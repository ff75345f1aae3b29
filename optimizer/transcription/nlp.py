"""The direct-transcription NLP of one structure, as plain data.

Blocks read in order: variables, parameters, dynamics and integration,
stance and friction, limits, hand targets, robustness, objective, bounds.
The result is ``{'x', 'p', 'f', 'g'}`` for any NLP solver plus the bounds
and the layouts that turn vectors back into named, physical arrays.

Integration rule (``semi-implicit-euler``, as in the plan file's
``meta.integrator``): ``v[k+1] = v[k] + h a[k]``,
``q[k+1] = integrate(q[k], h v[k+1])``. Because ``integrate`` keeps the base
quaternion on the unit sphere, only knot 0 needs a norm constraint (and
none when the start configuration is fixed).
"""
from __future__ import annotations

import time

import casadi as ca
import numpy as np

from ..problem.limits import FRICTION, NORMAL_FORCE, TORQUE
from .compiled import compile_knot_functions
from .constraints import ConstraintStack, register_family
from .knot_functions import KnotFunctions
from .layout import VectorLayout
from .objectives import POINT_FLOOR, Context
from .parameters import parameter_layout
from .structure import Structure

INTEGRATOR = "semi-implicit-euler"
INF = float("inf")
# Plain limits are tightened by this much (friction and normal-force rows in
# units of m g, torques as a fraction of their limit), more than the solver's
# feasibility tolerance, so a solved plan meets every limit exactly and its
# margin can be certified without any tolerance.
LIMIT_BACKOFF = 1e-6
# A required margin is raised by this much (a fraction of itself) in the bound on
# rho, so the margin certified from the solved gains meets it despite round-off.
REQUIREMENT_BACKOFF = 1e-6

register_family("swing", "swinging feet: touchdown along the surface normal and at most the touchdown speed, "
                "the height at mid-swing and the approach clearance off the lift-off and landing surfaces",
                "give the swing more time (a later touchdown), a lower stance.schedule.swing_height or "
                "approach_clearance, a higher touchdown_speed, or a foothold nearer the body")
register_family("terrain clearance", "clearance: collision shapes kept away from the terrain (link vs surface)",
                "move the hand targets or footholds away from the named surface, or lower clearance.distance")
register_family("self clearance", "self-collision: shapes of the robot kept apart (shape vs shape)",
                "move the hand targets away from the named shapes' links, or lower the pair's distance in the "
                "robot file (collision.self_pairs)")
register_family("self clearance planes", "self-collision: a pair's separating-plane normal within the unit ball "
                "(shape vs shape)", "solve with more iterations; if a pair also keeps too close, see self clearance")


def velocity_names(robot) -> list[str]:
    """What each velocity coordinate (and each equation-of-motion row) is about, length nv."""
    base = ["base (linear x)", "base (linear y)", "base (linear z)",
            "base (angular x)", "base (angular y)", "base (angular z)"]
    return base + list(robot.joint_names)


def configuration_names(robot) -> list[str]:
    """What each configuration coordinate is about, length nq (a joint with several coordinates repeats)."""
    names = ["base position"] * 3 + ["base orientation"] * 4
    model = robot.model
    for j in range(2, model.njoints):
        names += [model.names[j]] * model.nqs[j]
    return names


class Transcription:
    """The NLP for ``structure`` on ``robot`` with ``objective``.

    Attributes
    ----------
    nlp : dict
        ``{'x', 'p', 'f', 'g'}`` with CasADi MX expressions.
    variables, parameters : VectorLayout
        Layouts of x (scaled) and p (physical).
    constraints : ConstraintStack
        Named groups of g with their bounds.
    compile_failure : str or None
        With ``compiled=True``: None when the knot functions are compiled
        libraries (:mod:`optimizer.transcription.compiled`), else why they
        stayed uncompiled; ``compile_time`` [s] is what compiling (or
        loading the cached libraries) took.
    threads : int
        Threads evaluating each mapped knot function (CasADi
        ``map(n, "thread", threads)``: the knots split into ``threads``
        blocks evaluated at once, each block in knot order); 1 evaluates
        the knots one after another. The NLP's values do not depend on it.
    """

    def __init__(self, robot, symbolic, structure: Structure, objective, torque_gains: str = "eliminated",
                 compiled: bool = False, threads: int = 1):
        self.robot, self.structure, self.objective = robot, structure, objective
        self.torque_gains = torque_gains
        self.weight = robot.mass * float(np.linalg.norm(robot.gravity))
        self.context = Context(self.weight, float(np.mean(np.maximum(abs(robot.torque_lower), abs(robot.torque_upper)))),
                               structure.knots, len(structure.disturbances) if objective.robust else 0,
                               structure.combine_points)
        self.functions = KnotFunctions(symbolic, structure, self.weight, torque_gains, robot.joint_names,
                                       robot.collision.shapes)
        self.compiled = compiled
        started = time.perf_counter()
        self.compile_failure = compile_knot_functions(self.functions) if compiled else None
        self.compile_time = time.perf_counter() - started  # [s] generating, compiling or loading the libraries
        if isinstance(threads, bool) or not isinstance(threads, int) or threads < 1:
            raise ValueError(f"threads must be a whole number >= 1, not {threads!r}")
        self.threads = threads
        self.variables = self._variable_layout()
        self.parameters = parameter_layout(structure, robot)
        self.constraints = ConstraintStack()
        x = ca.MX.sym("x", self.variables.size)
        p = ca.MX.sym("p", self.parameters.size)
        V, P = self.variables.split_symbolic(x), self.parameters.split_symbolic(p)
        self._dynamics(V, P)
        self._contacts(V, P)
        self._hand_targets(V, P)
        self._swings(V, P)
        self._clearance(V, P)
        self._self_clearance(V, P)
        if objective.robust:
            self._robustness(V, P)
        objective.add_constraints(V, P, self.constraints, self.context)
        cost = objective.cost(V, P, self.context)
        self.nlp = {"x": x, "p": p, "f": cost, "g": self.constraints.expression()}
        self.lbg, self.ubg = self.constraints.bounds()

    # -- layout ------------------------------------------------------------
    @property
    def disturbance_count(self) -> int:
        return len(self.structure.disturbances) if self.objective.robust else 0

    def _variable_layout(self) -> VectorLayout:
        s, r, K = self.structure, self.robot, self.structure.knots
        per_contact = self.weight / s.nc
        layout = VectorLayout()
        layout.add("q", r.nq, K)
        layout.add("v", r.nv, K)
        layout.add("a", r.nv, K, scale=10.0)
        layout.add("tau", r.nj, K, scale=self.context.torque_scale)
        layout.add("lam", 3 * s.nc, K, scale=per_contact)
        if s.self_pairs:
            layout.add("separation", 4 * len(s.self_pairs), len(s.clearance_knots))
        if self.objective.robust:
            for p, slot in enumerate(s.disturbances):
                layout.add(f"G{p}", 3 * s.nc * slot.dim, K, scale=per_contact)
                layout.add(f"rho{p}", 1, K, scale=per_contact)
                if self.torque_gains == "variables":
                    layout.add(f"G_tau{p}", r.nj * slot.dim, K, scale=per_contact)
            layout.add("rooms", 2 * r.nj + s.nc * (s.facets + 1), K, scale=per_contact)
        self.objective.add_variables(layout, self.context)
        return layout

    def _map(self, function, count):
        """``function`` mapped over ``count`` knots, on up to :attr:`threads` threads (never more than knots)."""
        threads = min(self.threads, count)
        return function.map(count, "thread", threads) if threads > 1 else function.map(count, "serial")

    # -- constraint groups -------------------------------------------------
    def _dynamics(self, V, P):
        K, f = self.structure.knots, self.functions
        every, steps = range(K), range(1, K)
        eom = self._map(f.dynamics, K)(V["q"], V["v"], V["a"], V["tau"], V["lam"])
        self.constraints.add("equations of motion", eom, every, unit="m g", who=velocity_names(self.robot))
        h = P["step"]
        self.constraints.add("velocity integration", V["v"][:, 1:] - V["v"][:, :-1] - h * V["a"][:, :-1],
                             steps, unit="rad/s", who=velocity_names(self.robot))
        step = self._map(f.step, K - 1)(V["q"][:, :-1], V["q"][:, 1:], self._step_velocities(V, P), h)
        self.constraints.add("configuration integration", step, steps, unit="rad or m",
                             who=configuration_names(self.robot))
        if not self.structure.fixed_start:
            quat = V["q"][3:7, 0]
            self.constraints.add("unit quaternion", ca.dot(quat, quat) - 1.0, [0], who=["base orientation"])

    def _step_velocities(self, V, P):
        """The velocity each configuration step integrates, (nv, K-1): ``v[k+1]`` (semi-implicit Euler)."""
        return V["v"][:, 1:]

    def _by_pattern(self, name, expr, knots, rows_of, lower=0.0, upper=0.0, unit="", who=()):
        """Add ``expr`` (rows, len(knots)) once per stance pattern, keeping at each knot the rows
        ``rows_of(pattern)`` of the contacts in stance there (all rows when every contact is).

        One group per pattern; a pattern with swinging contacts is named after them.
        """
        knots = list(knots)
        frames = self.structure.contact_frames
        for pattern, members in self.structure.patterns(knots):
            rows = rows_of(pattern)
            if not rows or not members:
                continue
            columns = [knots.index(k) for k in members]
            swinging = [f for f, on in zip(frames, pattern) if not on]
            label = f"{name} ({', '.join(swinging)} swinging)" if swinging else name
            part = expr[rows, columns] if len(rows) < expr.shape[0] or len(columns) < len(knots) else expr
            self.constraints.add(label, part, members, lower, upper, unit=unit, family=name,
                                 who=[who[r] for r in rows])

    def _contact_rows(self, per_contact: int):
        """``pattern -> rows`` for a block of ``per_contact`` rows per contact, contacts stacked."""
        return lambda pattern: [per_contact * c + i for c, on in enumerate(pattern) if on for i in range(per_contact)]

    def _limit_rows(self, pattern) -> list[int]:
        """Limit rows (in :class:`KnotLimits` order) of joints and of the contacts in stance."""
        frames = dict(zip(self.structure.contact_frames, pattern))
        return [i for i, n in enumerate(self.functions.limits.names) if n.kind == TORQUE or frames.get(n.owner, True)]

    def _contacts(self, V, P):
        K, f, nc = self.structure.knots, self.functions, self.structure.nc
        # Knot 0 is skipped when the start is fixed (the posture meets it already) and the
        # last knot always: at rest, q[K-1] = integrate(q[K-2], 0) = q[K-2], so its
        # contact positions repeat knot K-2's and Ipopt would see dependent equalities.
        first = 1 if self.structure.fixed_start else 0
        knots = range(first, K - 1)
        stance = self._map(f.stance, len(knots))(V["q"][:, first:K - 1], P["footholds"][:, first * nc:(K - 1) * nc])
        frames = self.structure.contact_frames
        self._by_pattern("stance contacts", stance, knots, self._contact_rows(3), unit="m",
                         who=[c for c in frames for _ in range(3)])
        names = f.limits.names
        self._preloads(V, P)
        self._load_caps(V, P)
        if self.objective.robust:
            scales = ca.repmat(f.room_scales(P["tau_lower"], P["tau_upper"]), 1, K)
            self._by_pattern("limit rooms", (self._rooms(V["tau"], V["lam"], P) - V["rooms"]) / scales, range(K),
                             self._limit_rows, unit="limit or m g/nc", who=names)
            return  # the rooms' bounds carry the plain limits
        facet_rooms, normal_rooms = self._map(f.friction, K)(V["lam"], P["facets"], P["normals"],
                                                             P["min_normal_force"])
        contact_limits = [n for n in names if n.kind != TORQUE]
        self._by_pattern("friction pyramid", facet_rooms, range(K), self._contact_rows(self.structure.facets),
                         LIMIT_BACKOFF, INF, unit="m g", who=[n.owner for n in contact_limits if n.kind == FRICTION])
        self._by_pattern("minimum normal force", normal_rooms, range(K), self._contact_rows(1), LIMIT_BACKOFF, INF,
                         unit="m g", who=[n.owner for n in contact_limits if n.kind == NORMAL_FORCE])

    def _preloads(self, V, P):
        """The plan's own normal force at least each preloaded contact's preload (``n . lam >= preload``),
        at its stance knots; plain rows only: the certified response keeps the minimum normal force."""
        preloaded = self.structure.preloaded
        if not preloaded:
            return
        K = self.structure.knots
        _, rooms = self._map(self.functions.friction, K)(V["lam"], P["facets"], P["normals"], P["preload"])
        self._by_pattern("preload", rooms, range(K), lambda pattern: [c for c in preloaded if pattern[c]],
                         LIMIT_BACKOFF, INF, unit="m g", who=list(self.structure.contact_frames))

    def _load_caps(self, V, P):
        """Each load-ramp row (``Structure.load_caps``): the plan's own normal force of a stepping foot at
        most its floor (its minimum normal force, or its preload when larger) plus the robot's weight
        times ``steps h / load_ramp``; plain rows on the planned force, like the preload's."""
        s = self.structure
        for c, k, steps in s.load_caps:
            floor = P["min_normal_force"][c]
            if c in s.preloaded:
                floor = ca.fmax(floor, P["preload"][c])
            force = ca.dot(P["normals"][:, k * s.nc + c], V["lam"][3 * c:3 * c + 3, k])
            cap = floor + self.weight * steps * P["step"] / s.load_ramp
            frame = s.contact_frames[c]
            self.constraints.add(f"load ramp {frame}@{k}", (cap - force) / self.weight, [k], 0.0, INF,
                                 unit="m g", family="load ramp", who=[f"{frame} normal force within its load ramp"])

    def _swings(self, V, P):
        """Per swing: the foot on its foothold at the lift-off knot (3 rows; it carries no force there, so
        the stance rows leave it out); the foot at touchdown without velocity along the landing surface
        (``t_i . J_c v = 0``, 2 rows) and along its normal at most the touchdown speed
        (``|n . J_c v| <= s``, 2 rows); at mid-swing its height (world z) at least the swing's parameter
        (terrain top under the path plus the swing height); at every approach row its distance off the
        row's surface plane at least the row's offset (the approach clearance, none on the final
        approach)."""
        frames = self.structure.contact_frames
        nc = self.structure.nc
        for i, swing in enumerate(self.structure.swings):
            frame = frames[swing.contact]
            rows = slice(3 * swing.contact, 3 * swing.contact + 3)
            if swing.lift > 0 or not self.structure.fixed_start:  # a fixed start meets its footholds already
                lift = swing.lift
                error = self.functions.stance(V["q"][:, lift], P["footholds"][:, lift * nc:(lift + 1) * nc])
                self.constraints.add(f"lift-off {frame}@{lift}", error[rows], [lift], unit="m", family="swing",
                                     who=[f"{frame} on its foothold at lift-off ({axis})" for axis in "xyz"])
            if swing.touch < self.structure.knots - 1:  # the last knot is at rest by its bounds
                _, velocity = self.functions.foot_motion(V["q"][:, swing.touch], V["v"][:, swing.touch])
                tangents = P["touchdown_tangents"][:, i]
                along = ca.vertcat(ca.dot(tangents[:3], velocity[rows]), ca.dot(tangents[3:], velocity[rows]))
                self.constraints.add(f"touchdown {frame}@{swing.touch}", along, [swing.touch], unit="m/s",
                                     family="swing", who=[f"{frame} touchdown velocity along t{j}" for j in (1, 2)])
                normal = ca.dot(P["touchdown_normals"][:, i], velocity[rows])
                speed = P["touchdown_speed"]
                self.constraints.add(f"touchdown speed {frame}@{swing.touch}", ca.vertcat(speed + normal, speed - normal),
                                     [swing.touch], 0.0, INF, unit="m/s", family="swing",
                                     who=[f"{frame} touchdown speed into the surface",
                                          f"{frame} touchdown speed away from the surface"])
            positions, _ = self.functions.foot_motion(V["q"][:, swing.mid], V["v"][:, swing.mid])
            self.constraints.add(f"mid-swing {frame}@{swing.mid}", positions[2, swing.contact] - P["swing_heights"][i],
                                 [swing.mid], 0.0, INF, unit="m", family="swing", who=[f"{frame} mid-swing height"])
        for r, row in enumerate(self.structure.swing_rows):
            swing = self.structure.swings[row.swing]
            frame = frames[swing.contact]
            positions, _ = self.functions.foot_motion(V["q"][:, row.knot], V["v"][:, row.knot])
            plane = P["swing_planes"][:, r]
            distance = ca.dot(plane[:3], positions[:, swing.contact]) - plane[3]
            where = "through the landing surface" if row.side == "final" else f"off the {row.side} surface"
            self.constraints.add(f"approach {frame}@{row.knot}", distance, [row.knot], 0.0, INF, unit="m",
                                 family="swing", who=[f"{frame} {'not ' if row.side == 'final' else ''}{where}"])

    def _hand_targets(self, V, P):
        for i, slot in enumerate(self.structure.targets):
            position, orientation = self.functions.hand[slot.frame](
                V["q"][:, slot.knot], P["target_position"][:, i], P["target_rotation"][:, i])
            residual = ca.vertcat(position, orientation) if slot.orientation else position
            where = f"{slot.frame}@{slot.knot}"
            self.constraints.add(f"hand target {where}", residual, [slot.knot], unit="m or rad", family="hand target",
                                 who=[f"{where} position"] * 3 + [f"{where} orientation"] * (3 if slot.orientation else 0))

    def _clearance(self, V, P):
        """Every collision shape at least the required clearance from every terrain surface it is paired with."""
        knots = self.structure.clearance_knots
        if self.functions.clearance is None or not len(knots):
            return
        rows = len(self.structure.clearance_rows)
        planes = ca.reshape(P["clearance_planes"][:, knots.start:knots.stop], 4, rows * len(knots))
        values = self._map(self.functions.clearance, len(knots))(
            V["q"][:, knots.start:knots.stop], planes)
        self.constraints.add("terrain clearance", values, knots, 0.0, INF, unit="m",
                             who=list(self.structure.clearance_labels))

    def _self_clearance(self, V, P):
        """Every self-collision pair at least its distance apart, through its separating plane per knot."""
        knots = self.structure.clearance_knots
        if self.functions.self_clearance is None or not len(knots):
            return
        shapes, pairs = self.robot.collision.shapes, self.structure.self_pairs
        planes = ca.reshape(V["separation"], 4, len(pairs) * len(knots))
        values, norms = self._map(self.functions.self_clearance, len(knots))(
            V["q"][:, knots.start:knots.stop], planes, ca.repmat(P["self_distances"], 1, len(knots)))
        who = [label for (a, b), label in zip(pairs, self.structure.self_labels)
               for _ in range(len(shapes[a].points) + len(shapes[b].points))]
        self.constraints.add("self clearance", values, knots, 0.0, INF, unit="m", who=who)
        self.constraints.add("self clearance planes", norms, knots, 0.0, INF, who=self.structure.self_labels)

    def _rooms(self, tau, lam, P):
        """Room left at every limit, (rows, K), for symbolic or numeric ``tau``, ``lam`` and parameters."""
        return self._map(self.functions.rooms, self.structure.knots)(
            tau, lam, P["facets"], P["normals"], P["min_normal_force"], P["tau_lower"], P["tau_upper"])

    def _robustness(self, V, P):
        K = self.structure.knots
        scales = self.functions.room_scales(P["tau_lower"], P["tau_upper"])
        for p, function in enumerate(self.functions.robust):
            extra = [V[f"G_tau{p}"]] if self.torque_gains == "variables" else []
            balance, cone = self._map(function, K)(V["q"], V[f"G{p}"], V[f"rho{p}"], V["rooms"], P["facets"],
                                                   P["normals"], P[f"shape{p}"], scales, *extra)
            tag = f" (disturbance {p})" if len(self.functions.robust) > 1 else ""
            # balance is vec of a (rows, d) matrix, column-major: one block of rows per disturbance direction
            per_direction = velocity_names(self.robot) if self.torque_gains == "variables" else velocity_names(self.robot)[:6]
            self.constraints.add("robust balance" + tag, balance, range(K), unit="m g", family="robust balance",
                                 who=per_direction * self.structure.disturbances[p].dim)
            self._by_pattern("robust limits" + tag, cone, range(K), self._limit_rows, 0.0, INF,
                             unit="limit or m g/nc", who=self.functions.limits.names)

    def rooms_at(self, arrays, p) -> np.ndarray:
        """Room left at every limit, shape (rows, K), for physical ``tau`` and ``lam`` arrays."""
        P = {name: self.parameters.get(p, name) for name in
             ("facets", "normals", "min_normal_force", "tau_lower", "tau_upper")}
        return np.array(self._rooms(arrays["tau"], arrays["lam"], P))

    # -- bounds ------------------------------------------------------------
    def _swing_bounds(self, lo, hi) -> None:
        """Swinging contacts: force and gains fixed at zero; their limit rooms fixed (no row uses them)."""
        L, s = self.variables, self.structure
        if not s.activity:
            return
        swing = ~np.array(s.activity, dtype=bool).T          # (nc, K)
        force = np.repeat(swing, 3, axis=0)                  # (3 nc, K)
        for name in ["lam"] + [f"G{p}" for p in range(self.disturbance_count)]:
            rows = L[name].rows
            mask = np.tile(force, (rows // force.shape[0], 1))
            for bound in (lo, hi):
                value = L.get(bound, name)
                value[mask] = 0.0
                L.set(bound, name, value)
        if "rooms" in L:
            names = self.functions.limits.names
            index = {f: c for c, f in enumerate(s.contact_frames)}
            mask = np.array([[n.kind != TORQUE and swing[index[n.owner], k] for k in range(s.knots)] for n in names])
            scales = np.repeat(np.array(self.functions.room_scales(self.robot.torque_lower, self.robot.torque_upper)),
                               s.knots, axis=1)
            for bound in (lo, hi):
                value = L.get(bound, "rooms")
                value[mask] = scales[mask]
                L.set(bound, "rooms", value)

    def bounds(self, initial_posture=None, required=None) -> tuple[np.ndarray, np.ndarray]:
        """Variable bounds ``(lbx, ubx)`` in the solver's scaled units.

        Joint positions, velocities and torques within the robot's limits;
        rest (zero velocity) at both ends and zero acceleration at the last
        knot; margins non-negative, and at least ``required`` (N, shape (K, P),
        0 where nothing is required) in robust objectives; the start
        configuration fixed when given.
        """
        r, L, K = self.robot, self.variables, self.structure.knots
        lo, hi = np.full(L.size, -INF), np.full(L.size, INF)
        q_lo = np.concatenate([np.full(3, -INF), -np.ones(4), r.joint_lower])
        q_hi = np.concatenate([np.full(3, INF), np.ones(4), r.joint_upper])
        L.set(lo, "q", q_lo[:, None]), L.set(hi, "q", q_hi[:, None])
        v_lim = np.concatenate([np.full(6, INF), r.velocity_limit])[:, None]
        v_lo, v_hi = np.repeat(-v_lim, K, axis=1), np.repeat(v_lim, K, axis=1)
        v_lo[:, [0, -1]] = v_hi[:, [0, -1]] = 0.0
        L.set(lo, "v", v_lo), L.set(hi, "v", v_hi)
        a_lo, a_hi = np.full((r.nv, K), -INF), np.full((r.nv, K), INF)
        a_lo[:, -1] = a_hi[:, -1] = 0.0
        L.set(lo, "a", a_lo), L.set(hi, "a", a_hi)
        limit = np.maximum(abs(r.torque_lower), abs(r.torque_upper))
        if "rooms" in L:  # the rooms carry the backed-off torque limits; plain bounds stay loose
            L.set(lo, "tau", r.torque_lower[:, None]), L.set(hi, "tau", r.torque_upper[:, None])
            scales = np.array(self.functions.room_scales(r.torque_lower, r.torque_upper))
            L.set(lo, "rooms", LIMIT_BACKOFF * scales)
        else:
            backoff = LIMIT_BACKOFF * limit
            L.set(lo, "tau", (r.torque_lower + backoff)[:, None]), L.set(hi, "tau", (r.torque_upper - backoff)[:, None])
        for p in range(self.disturbance_count):
            floor = 0.0 if required is None else np.asarray(required, float)[:, p] * (1.0 + REQUIREMENT_BACKOFF)
            L.set(lo, f"rho{p}", np.broadcast_to(floor, (K,))[None, :])
        for name in ("floor", POINT_FLOOR):
            if name in L:
                L.set(lo, name, 0.0)
        self._swing_bounds(lo, hi)
        if "separation" in L:  # each separating plane's normal within the unit ball (its row) and box (here)
            planes = L["separation"]
            box = np.tile([1.0, 1.0, 1.0, INF], planes.rows // 4)[:, None]
            L.set(lo, "separation", -box), L.set(hi, "separation", box)
        if initial_posture is not None:
            q_lo_k, q_hi_k = L.get(lo, "q"), L.get(hi, "q")
            q_lo_k[:, 0] = q_hi_k[:, 0] = initial_posture
            L.set(lo, "q", q_lo_k), L.set(hi, "q", q_hi_k)
        return lo, hi
