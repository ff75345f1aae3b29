"""Checks of a plan's physics, from the plan file alone, before anything vouches for it.

Every check reads only what ``plan/1`` holds and recomputes it with
Pinocchio's own algorithms (``rnea``, ``computeFrameJacobian``,
``framesForwardKinematics``, ``integrate``, ``difference``) and plain NumPy.
Nothing here imports the code that makes plans (the CasADi model, the
transcription, the problem layer's friction pyramids): a bug there cannot
hide itself here, and plans made by other tools are checked on the same
footing.

The checks are a list of named :class:`Check` entries (:data:`CHECKS`). Each
measures the plan's worst *excess* over what the physics allows (0 or
negative: inside, with that much room), says where it occurs (knot, joint or
contact) and compares it with a tolerance in the check's own unit. To add a
check, write a function ``measure(facts) -> Worst`` and append a
:class:`Check` to :data:`CHECKS`; reports, JSON, the command line's
``--check-tol NAME=VALUE`` and the README table pick it up by its name.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pinocchio as pin

from ..planfile import knot_surfaces, min_normal_forces, preloads
from ..problem.geometry import Surface
from .clearance import plan_clearance, plan_self_clearance

WORLD = pin.ReferenceFrame.LOCAL_WORLD_ALIGNED
BASE_ROWS = ("base linear x", "base linear y", "base linear z",
             "base angular x", "base angular y", "base angular z")  # Pinocchio: base frame


@dataclass
class Worst:
    """The largest excess a check found and where.

    ``value`` is in the check's unit; ``knot`` is None when the plan has no
    entry to check (then ``value`` is ``-inf``); ``where`` names the joint,
    contact, facet or row; ``per_knot`` holds the largest excess of every
    knot (shape (K,), ``-inf`` where nothing is checked).
    """

    value: float
    knot: int | None = None
    where: str = ""
    per_knot: np.ndarray | None = None


def worst_entry(excess: np.ndarray, names, first_knot: int = 0) -> Worst:
    """The largest entry of ``excess`` (shape (K, n)) with its knot and name ``names[i]``.

    ``-inf`` marks entries with nothing to check; ``first_knot`` is the knot of row 0.
    """
    excess = np.asarray(excess, float)
    per_knot = np.full(first_knot + excess.shape[0], -np.inf)
    if excess.size == 0:
        return Worst(-math.inf, None, "nothing to check", per_knot)
    flat = np.where(np.isnan(excess), -np.inf, excess.reshape(excess.shape[0], -1))
    if flat.max() == -np.inf:
        return Worst(-math.inf, None, "nothing to check", per_knot)
    per_knot[first_knot:] = flat.max(axis=1)
    k, i = np.unravel_index(int(np.argmax(flat)), flat.shape)
    return Worst(float(flat[k, i]), int(k) + first_knot, str(names[i]), per_knot)


class PlanFacts:
    """A plan with its Pinocchio model, and the per-knot quantities checks share.

    Attributes
    ----------
    plan : Plan
    model, data : pinocchio.Model, pinocchio.Data
        Built from ``meta.urdf`` with a free-flyer root and ``meta.gravity``.
    weight : float
        ``m g`` [N], total mass times the norm of gravity.
    contact_ids : list of int
        Pinocchio frame ids of ``meta.contact_frames``.
    positions : ndarray, shape (K, nc, 3)
        Contact frame origins, world frame [m] (``framesForwardKinematics``).
    jacobians : ndarray, shape (K, nc, 3, nv)
        Translational contact Jacobians, world-aligned (``computeFrameJacobian``).
    """

    def __init__(self, plan):
        meta = plan.meta
        self.plan, self.meta = plan, meta
        self.model = pin.buildModelFromXML(meta["urdf"], pin.JointModelFreeFlyer())
        self.model.gravity.linear = np.asarray(meta["gravity"], float)
        self.data = self.model.createData()
        self.weight = pin.computeTotalMass(self.model) * float(np.linalg.norm(meta["gravity"]))
        self.contact_names = list(meta["contact_frames"])
        self.joint_names = list(meta["joint_names"])
        self.contact_ids = [self.model.getFrameId(name) for name in self.contact_names]
        self.positions, self.jacobians = self._contact_kinematics()

    def _contact_kinematics(self):
        model, data, plan = self.model, self.data, self.plan
        K, nc = plan.q.shape[0], len(self.contact_ids)
        positions = np.zeros((K, nc, 3))
        jacobians = np.zeros((K, nc, 3, model.nv))
        for k in range(K):
            pin.framesForwardKinematics(model, data, plan.q[k])
            for c, fid in enumerate(self.contact_ids):
                positions[k, c] = data.oMf[fid].translation
                jacobians[k, c] = pin.computeFrameJacobian(model, data, plan.q[k], fid, WORLD)[:3]
        return positions, jacobians

    @property
    def steps(self) -> np.ndarray:
        """Knot steps ``h = t[k+1] - t[k]`` [s], shape (K - 1,)."""
        return np.diff(self.plan.t)


# ---------------------------------------------------------------- measures


def measure_dynamics(facts: PlanFacts) -> Worst:
    """``|rnea(q, v, a) - S^T tau - sum_c J_c^T f_c| / (m g)``, every row of every knot."""
    plan, model, data = facts.plan, facts.model, facts.data
    rows = []
    for k in range(plan.q.shape[0]):
        contact = np.einsum("cin,ci->n", facts.jacobians[k], plan.contact_forces[k])
        applied = np.concatenate([np.zeros(6), plan.tau[k]]) + contact
        rows.append(np.abs(pin.rnea(model, data, plan.q[k], plan.v[k], plan.a[k]) - applied))
    return worst_entry(np.array(rows) / facts.weight, list(BASE_ROWS) + facts.joint_names)


def measure_footholds(facts: PlanFacts) -> Worst:
    """Distance [m] of each active contact point from its foothold."""
    plan = facts.plan
    gap = np.linalg.norm(facts.positions - plan.contact_targets, axis=2)
    return worst_entry(np.where(plan.contact_active, gap, -np.inf), facts.contact_names)


def unit_facet_rows(normal, tangents, mu: float, facets: int, inscribed: bool) -> np.ndarray:
    """Unit outward normals ``g_j`` (m, 3) of the friction pyramid ``{f : g_j . f <= 0}``.

    Facet j faces the tangent direction at angle ``2 pi j / m`` from ``t1``.
    Inscribed (edges on the Coulomb cone): ``g_j = d_j - mu cos(pi / m) n``;
    otherwise (facets touching the cone) ``g_j = d_j - mu n``. Coulomb
    friction as in any statics text; the inscribed polygon by plane geometry.
    """
    n = np.asarray(normal, float)
    t1, t2 = np.asarray(tangents, float)
    angles = 2.0 * np.pi * np.arange(facets) / facets
    slope = mu * (math.cos(math.pi / facets) if inscribed else 1.0)
    rows = np.cos(angles)[:, None] * t1 + np.sin(angles)[:, None] * t2 - slope * n
    return rows / np.linalg.norm(rows, axis=1, keepdims=True)


def measure_friction(facts: PlanFacts) -> Worst:
    """Largest distance [N] of an active contact force outside its pyramid's facet planes
    (the pyramid of the surface it presses on at that knot)."""
    meta, plan = facts.meta, facts.plan
    pyramid = meta["friction_pyramid"]
    surfaces = knot_surfaces(meta, plan.q.shape[0])
    facets, inscribed = int(pyramid["facets"]), bool(pyramid.get("inscribed", True))
    excess, names = [], []
    for c, name in enumerate(facts.contact_names):
        g = np.array([unit_facet_rows(surfaces.normals[k, c], surfaces.tangents[k, c], float(surfaces.friction[k, c]),
                                      facets, inscribed) for k in range(plan.q.shape[0])])    # (K, m, 3)
        values = np.einsum("ki,kmi->km", plan.contact_forces[:, c], g)
        excess.append(np.where(plan.contact_active[:, c, None], values, -np.inf))
        names += [f"{name} facet {j}" for j in range(facets)]
    return worst_entry(np.hstack(excess) if excess else np.zeros((plan.q.shape[0], 0)), names)


def measure_normal_force(facts: PlanFacts) -> Worst:
    """Shortfall [N] of an active contact's normal force under its minimum (``meta.min_normal_force``) or,
    when larger, its preload (``meta.contact_preload``)."""
    plan = facts.plan
    normals = knot_surfaces(facts.meta, plan.q.shape[0]).normals
    push = np.einsum("kci,kci->kc", plan.contact_forces, normals)
    shortfall = np.maximum(min_normal_forces(facts.meta), preloads(facts.meta))[None, :] - push
    return worst_entry(np.where(plan.contact_active, shortfall, -np.inf), facts.contact_names)


def measure_surfaces(facts: PlanFacts) -> Worst:
    """Distance [m] of a stance foothold from the nearest terrain face (``meta.clearance.surfaces``)
    whose outward normal is the contact's normal at that knot; infinite when no face has it.
    Only plans whose task placed its feet on a terrain (``meta.task.stance.terrain``) are checked:
    the planes of explicit contacts are drawn from the footholds themselves."""
    plan = facts.plan
    stance = (facts.meta.get("task") or {}).get("stance") or {}
    placed = isinstance(stance, dict) and isinstance(stance.get("terrain"), dict)
    surfaces = [Surface.from_dict(s) for s in (facts.meta.get("clearance") or {}).get("surfaces", [])]
    if not placed or not surfaces:
        return worst_entry(np.zeros((plan.q.shape[0], 0)), [])
    normals = knot_surfaces(facts.meta, plan.q.shape[0]).normals
    gap = np.full(plan.contact_active.shape, -np.inf)
    for k, c in zip(*np.nonzero(plan.contact_active)):
        p, n = plan.contact_targets[k, c], normals[k, c]
        gap[k, c] = min((max(abs(face @ p - d), abs(s.point_distance(p))) for s in surfaces
                         for face, d in s.faces() if face @ n > 1.0 - 1e-6), default=math.inf)
    return worst_entry(gap, facts.contact_names)


def measure_swing_forces(facts: PlanFacts) -> Worst:
    """Size [N] of the force at a contact that is not in stance (must be zero)."""
    plan = facts.plan
    size = np.linalg.norm(plan.contact_forces, axis=2)
    return worst_entry(np.where(plan.contact_active, -np.inf, size), facts.contact_names)


def _touchdowns(active):
    """(knot, contact) of every touchdown: a contact in stance at ``knot`` and not at the knot before."""
    return list(zip(*np.nonzero(active[1:] & ~active[:-1])))


def _last_stance_knot(active, touch: int, c: int) -> int:
    """The last knot before ``touch`` with contact ``c`` in stance (carrying force): the knot before the
    lift-off knot, where the foot stands on its foothold unloaded."""
    return int(np.flatnonzero(active[:touch, c])[-1])


def measure_approach(facts: PlanFacts) -> Worst:
    """Shortfall [m] of a swinging foot's distance off its landing surface: ``n . (p - f)``, with ``f``
    the touchdown knot's foothold and ``n`` its surface normal (``contact_knot_surfaces``), below
    ``meta.approach_clearance`` at swing knots at least ``approach_clearance / touchdown_speed`` s before
    touchdown, and below zero on the final approach (the foot through the surface); both at the knot
    before touchdown and at swing knots a knot step past the middle of the swing (so past its
    mid-swing knot, whichever knot the planner chose).

    A plan without ``approach_clearance`` has nothing to check; one without ``touchdown_speed`` (older
    plans) is checked at the knot before touchdown only.
    """
    plan = facts.plan
    active = np.asarray(plan.contact_active, bool)
    shortfall = np.full(active.shape, -np.inf)
    if "approach_clearance" not in facts.meta:
        return worst_entry(shortfall[:, :0], [])
    clearance, t = float(facts.meta["approach_clearance"]), np.asarray(plan.t, float)
    speed = facts.meta.get("touchdown_speed")
    final = None if speed is None else clearance / float(speed)   # s: the final approach
    normals = knot_surfaces(facts.meta, active.shape[0]).normals
    for k, c in _touchdowns(active):
        touch, n = k + 1, normals[k + 1, c]
        lift = _last_stance_knot(active, touch, c)
        step = t[touch] - t[touch - 1]
        for j in range(lift + 1, touch):
            distance = n @ (facts.positions[j, c] - plan.contact_targets[touch, c])
            if final is None:
                if j == touch - 1:
                    shortfall[j, c] = clearance - distance
            elif j == touch - 1 or t[j] >= 0.5 * (t[lift] + t[touch]) + step:
                shortfall[j, c] = (0.0 if t[touch] - t[j] < final - 1e-12 else clearance) - distance
    return worst_entry(shortfall, facts.contact_names)


def measure_touchdown_speed(facts: PlanFacts) -> Worst:
    """Excess [m/s] of a foot's speed along its landing surface's normal at touchdown over
    ``meta.touchdown_speed`` (the foot's velocity by Pinocchio's frame Jacobian, world-aligned)."""
    plan = facts.plan
    active = np.asarray(plan.contact_active, bool)
    excess = np.full(active.shape, -np.inf)
    if "touchdown_speed" not in facts.meta:
        return worst_entry(excess[:, :0], [])
    limit = float(facts.meta["touchdown_speed"])
    normals = knot_surfaces(facts.meta, active.shape[0]).normals
    for k, c in _touchdowns(active):
        touch = k + 1
        velocity = facts.jacobians[touch, c] @ plan.v[touch]
        excess[touch, c] = abs(normals[touch, c] @ velocity) - limit
    return worst_entry(excess, facts.contact_names)


def _limit_vector(values, sign: float) -> np.ndarray:
    return np.array([sign * np.inf if x is None else x for x in values], float)


def measure_torque(facts: PlanFacts) -> Worst:
    """Excess [N m or N] of a joint torque over ``meta.torque_limits``."""
    limits = facts.meta["torque_limits"]
    lower, upper = _limit_vector(limits["lower"], -1.0), _limit_vector(limits["upper"], 1.0)
    tau = facts.plan.tau
    return worst_entry(np.maximum(tau - upper, lower - tau), facts.joint_names)


def _single_coordinate_joints(model):
    """(velocity index, configuration index, name) of joints with one coordinate each."""
    out = []
    for j in range(2, model.njoints):
        if model.nqs[j] == 1 and model.nvs[j] == 1:
            out.append((model.idx_vs[j], model.idx_qs[j], model.names[j]))
    return out


def measure_joint_positions(facts: PlanFacts) -> Worst:
    """Excess [rad or m] of a joint position over the URDF's limits (Pinocchio's ``PositionLimit``).

    Joints with several coordinates (continuous) and limits that are not
    finite, or not ordered, carry no limit.
    """
    model, q = facts.model, facts.plan.q
    columns, names = [], []
    for _, iq, name in _single_coordinate_joints(model):
        lo, up = model.lowerPositionLimit[iq], model.upperPositionLimit[iq]
        if np.isfinite(lo) and np.isfinite(up) and lo < up:
            columns.append(np.maximum(q[:, iq] - up, lo - q[:, iq]))
            names.append(name)
    return worst_entry(np.array(columns).T if columns else np.zeros((q.shape[0], 0)), names)


def velocity_limits(facts: PlanFacts) -> np.ndarray:
    """Joint speed limits (nv - 6,): ``meta.joint_velocity_limits`` if given, else the URDF's."""
    given = facts.meta.get("joint_velocity_limits")
    limits = np.array(given if given is not None else facts.model.velocityLimit[6:], float)
    return np.where(limits > 0.0, limits, np.inf)  # 0 or absent in a URDF: no limit


def measure_joint_velocities(facts: PlanFacts) -> Worst:
    """Excess [rad/s or m/s] of a joint speed over its limit."""
    speed = np.abs(facts.plan.v[:, 6:])  # a prismatic joint's speed is in m/s
    return worst_entry(speed - velocity_limits(facts)[None, :], facts.joint_names)


def semi_implicit_euler_gaps(facts: PlanFacts) -> np.ndarray:
    """Per step, per velocity coordinate: ``max(|q gap|, h |v gap|)`` [rad or m], shape (K - 1, nv).

    ``v[k+1] = v[k] + h a[k]`` and ``q[k+1] = integrate(q[k], h v[k+1])``; the
    configuration gap is Pinocchio's ``difference`` (a tangent vector), the
    velocity gap is scaled by ``h`` into the distance it moves the robot in a step.
    """
    plan, model = facts.plan, facts.model
    gaps = []
    for k, h in enumerate(facts.steps):
        v_gap = plan.v[k + 1] - plan.v[k] - h * plan.a[k]
        predicted = pin.integrate(model, plan.q[k], h * plan.v[k + 1])
        q_gap = pin.difference(model, predicted, plan.q[k + 1])
        gaps.append(np.maximum(np.abs(q_gap), h * np.abs(v_gap)))
    return np.array(gaps).reshape(-1, model.nv)


INTEGRATORS: dict[str, Callable[[PlanFacts], np.ndarray]] = {"semi-implicit-euler": semi_implicit_euler_gaps}


def measure_integrator(facts: PlanFacts) -> Worst:
    """Largest gap [rad or m] between knot k + 1 and what ``meta.integrator`` makes of knot k.

    The knot reported is k + 1. An integrator this module does not know fails
    with an infinite gap and its name.
    """
    name = facts.meta.get("integrator")
    if name not in INTEGRATORS:
        return Worst(math.inf, None, f"unknown integrator {name!r} (known: {', '.join(INTEGRATORS)})")
    return worst_entry(INTEGRATORS[name](facts), list(BASE_ROWS) + facts.joint_names, first_knot=1)


def measure_quaternion(facts: PlanFacts) -> Worst:
    """``| |q_base quaternion| - 1 |`` (no unit), every knot."""
    norms = np.linalg.norm(facts.plan.q[:, 3:7], axis=1)
    return worst_entry(np.abs(norms - 1.0)[:, None], ["base orientation"])


# ---------------------------------------------------------------- registry


def measure_clearance(facts: PlanFacts) -> Worst:
    """Required clearance minus the smallest distance [m] of the collision shapes from the terrain,
    per knot (``meta.clearance``; nothing to check in plans without it)."""
    found = plan_clearance(facts.plan)
    if found is None:
        return worst_entry(np.zeros((facts.plan.q.shape[0], 0)), [])
    excess = np.array([[found.required - k.distance] for k in found.knots])
    worst = worst_entry(excess, ["clearance"])
    k = found.knots[worst.knot]
    where = f"{k.link} {'inside' if k.distance < 0 else 'vs'} {k.surface} ({100 * k.distance:.1f} cm)"
    return Worst(worst.value, worst.knot, where, worst.per_knot)


def measure_self_clearance(facts: PlanFacts) -> Worst:
    """Per knot the largest shortfall [m] of a self-collision pair below its distance
    (``meta.clearance.self_pairs``; nothing to check in plans without them)."""
    found = plan_self_clearance(facts.plan)
    if found is None:
        return worst_entry(np.zeros((facts.plan.q.shape[0], 0)), [])
    worst = worst_entry(np.array([[-k.room] for k in found.knots]), ["self clearance"])
    k = found.knots[worst.knot]
    where = f"{k.pair} ({100 * k.distance:.1f} cm apart, {100 * k.required:.1f} cm required)"
    return Worst(worst.value, worst.knot, where, worst.per_knot)


@dataclass(frozen=True)
class Check:
    """One named physics check.

    Attributes
    ----------
    name : str
        Key in reports, JSON and ``--check-tol NAME=VALUE``.
    title : str
        What is checked, in a few words.
    unit : str
        Unit of the measured excess and of the tolerance (for prismatic
        joints read m for rad, N for N m).
    tolerance : float
        Default tolerance: the check passes when the worst excess is at most this.
    measure : callable(PlanFacts) -> Worst
    """

    name: str
    title: str
    unit: str
    tolerance: float
    measure: Callable[[PlanFacts], Worst]


CHECKS: list[Check] = [
    Check("dynamics", "equations of motion (Pinocchio RNEA with the contact forces)", "m g", 1e-6,
          measure_dynamics),
    Check("footholds", "stance contacts on their footholds", "m", 1e-5, measure_footholds),
    Check("surfaces", "stance footholds on a terrain face along their normal", "m", 1e-6, measure_surfaces),
    Check("friction", "stance forces inside their friction pyramids", "N", 1e-6, measure_friction),
    Check("normal-force", "stance normal forces at or above the minimum (and preload)", "N", 1e-6, measure_normal_force),
    Check("swing-forces", "no force at contacts out of stance", "N", 1e-9, measure_swing_forces),
    Check("approach", "swinging feet at least meta.approach_clearance off the landing surface until the "
          "final approach, and never through it", "m", 1e-9, measure_approach),
    Check("touchdown-speed", "feet land at most meta.touchdown_speed along the surface normal", "m/s", 1e-6,
          measure_touchdown_speed),
    Check("torque", "joint torques within their limits", "N m", 1e-6, measure_torque),
    Check("joint-position", "joint positions within the URDF limits", "rad", 1e-6, measure_joint_positions),
    Check("joint-velocity", "joint speeds within their limits", "rad/s", 1e-6, measure_joint_velocities),
    Check("integrator", "knot k+1 follows from knot k by the plan's integrator", "rad", 1e-6,
          measure_integrator),
    Check("quaternion", "unit base quaternion", "", 1e-6, measure_quaternion),
    Check("clearance", "collision shapes at least the task's clearance from the terrain", "m", 1e-9,
          measure_clearance),
    Check("self-clearance", "self-collision pairs of the robot file at least their distance apart", "m", 1e-9,
          measure_self_clearance),
]


def check_named(name: str) -> Check:
    """The check called ``name``; KeyError listing the known names otherwise."""
    for check in CHECKS:
        if check.name == name:
            return check
    raise KeyError(f"unknown check '{name}'; known: {', '.join(c.name for c in CHECKS)}")


@dataclass
class CheckResult:
    """Outcome of one check on one plan (worst excess, where, tolerance, verdict)."""

    name: str
    title: str
    unit: str
    tolerance: float
    worst: float
    knot: int | None
    where: str
    failing_knots: list = field(default_factory=list)

    @property
    def passed(self) -> bool:
        return bool(self.worst <= self.tolerance)

    def reason(self) -> str:
        """One line saying what failed and where."""
        unit = f" {self.unit}" if self.unit else ""
        place = f"knot {self.knot}, {self.where}" if self.knot is not None else self.where
        count = len(self.failing_knots)
        more = f" ({count} knots over the tolerance: {_knot_list(self.failing_knots)})" if count > 1 else ""
        return (f"{self.name} check failed at {place}: {self.title}; worst {self.worst:.3g}{unit} "
                f"over the tolerance {self.tolerance:g}{unit}{more}")

    def to_json(self) -> dict:
        return {"name": self.name, "title": self.title, "unit": self.unit, "tolerance": self.tolerance,
                "worst": self.worst if math.isfinite(self.worst) else None, "knot": self.knot,
                "where": self.where, "passed": self.passed, "failing_knots": list(self.failing_knots)}


def _knot_list(knots, shown: int = 8) -> str:
    text = ", ".join(str(k) for k in knots[:shown])
    return text + (", ..." if len(knots) > shown else "")


@dataclass
class CheckReport:
    """Every check's result on one plan."""

    results: list = field(default_factory=list)

    @property
    def passed(self) -> bool:
        return all(r.passed for r in self.results)

    def failures(self) -> list:
        return [r for r in self.results if not r.passed]

    def to_json(self) -> dict:
        return {"run": True, "passed": self.passed, "checks": [r.to_json() for r in self.results]}


def check_plan(plan, tolerances: dict | None = None) -> CheckReport:
    """Run every check of :data:`CHECKS` on ``plan`` (all knots).

    Parameters
    ----------
    plan : optimizer.planfile.Plan
    tolerances : dict of str to float, optional
        Tolerances by check name, overriding the defaults.
    """
    tolerances = dict(tolerances or {})
    for name in tolerances:
        check_named(name)
    facts = PlanFacts(plan)
    results = []
    for check in CHECKS:
        worst = check.measure(facts)
        tol = float(tolerances.get(check.name, check.tolerance))
        failing = [] if worst.per_knot is None else [int(k) for k in np.flatnonzero(worst.per_knot > tol)]
        if worst.value > tol and not failing and worst.knot is not None:
            failing = [worst.knot]
        results.append(CheckResult(check.name, check.title, check.unit, tol, float(worst.value),
                                   worst.knot, worst.where, failing))
    return CheckReport(results)
