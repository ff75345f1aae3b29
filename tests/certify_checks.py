"""Plans for certification tests and an independent cross-check of the certifier.

``standing_plan`` makes a valid ``plan/1`` plan of a robot standing on flat
ground: forces from a least-squares statics solve on Pinocchio's numeric
``rnea`` and frame Jacobians (Newton: the base rows of the equations of motion
balance the weight), torques from the joint rows.

``check_plan_against_sampled_lps`` brackets the certifier's figure at every
knot with bounds from a second formulation written here from the plan file
alone: SciPy ``linprog`` over the full lifted polytope ``(u, dtau, dlambda)``
with all nv rows of the balance, ``dtau`` kept as variables with its torque
bounds, along many sampled directions. The smallest support value is an upper
bound of rho (docs/formulation.md section 8, the LP reference); the inscribed radius
of the hull of the support points (points of the residual set) a lower bound.
"""
from __future__ import annotations

import copy
import json
from pathlib import Path

import numpy as np
import pinocchio as pin
from scipy.optimize import linprog
from scipy.spatial import ConvexHull

from optimizer.analysis.certify import Settings, certify_plan
from optimizer.planfile import Plan

MODELS = Path(__file__).parent / "models"
DEMO = Path(__file__).parent.parent / "models"
WORLD = pin.ReferenceFrame.LOCAL_WORLD_ALIGNED


def demo_standing(sweep: float = 0.0, knots: int = 1) -> dict:
    """Arguments of :func:`standing_plan` for the demo robot's standing posture.

    ``sweep`` moves the arm's shoulder by up to that angle [rad] across knots.
    """
    import yaml

    robot = yaml.safe_load((DEMO / "stilt.yaml").read_text())
    joints = dict(robot["standing"]["joints"])
    postures = []
    for s in np.linspace(0.0, sweep, knots):
        p = dict(joints)
        p["arm_shoulder"] = joints.get("arm_shoulder", 0.0) + s
        postures.append(p)
    return dict(urdf=(DEMO / robot["urdf"]).read_text(), contacts=robot["contacts"],
                base_height=robot["standing"]["base_height"], postures=postures,
                disturbance_frame=robot["hand"])


def standing_plan(urdf: str, contacts, base_height: float, postures=({},), disturbance_frame="base",
                  kind="force", mu=0.6, min_normal_force=0.0, torque_limits=None, margin=None,
                  active=None, step: float = 0.5) -> Plan:
    """A plan/1 plan of a robot standing on its feet, one knot per posture.

    Consecutive postures are joined by the semi-implicit Euler rule with
    Pinocchio's ``difference``: ``v[k+1] = difference(q[k], q[k+1]) / h``,
    ``a[k] = (v[k+1] - v[k]) / h``, ``v[0] = a[K-1] = 0``; forces balance the
    base rows of ``rnea(q, v, a)`` (least squares) and torques the joint rows,
    so the plan meets its own equations of motion and integrator.

    Parameters
    ----------
    urdf : str
        URDF text (free-flyer root added).
    contacts : list of str
        Foot frames, all active, normals +z, tangents x and y.
    base_height : float
        Root height [m], root level at x = y = 0.
    postures : sequence of dict
        ``{joint name: angle}`` per knot; other joints at 0.
    torque_limits : (lower, upper) or None
        Arrays (nj,) [N m]; None takes +-effort from the URDF.
    margin : array (K,) or None
        The planned margin [N]; None uses :func:`least_squares_margin`.
    active : sequence of bool or None
        Contacts in stance (all by default); the others carry no force.
    step : float
        Time between knots [s].
    """
    model = pin.buildModelFromXML(urdf, pin.JointModelFreeFlyer())
    data = model.createData()
    nj, nc, K = model.nv - 6, len(contacts), len(postures)
    q = np.array([_posture(model, base_height, p) for p in postures])
    stance = np.ones(nc, bool) if active is None else np.asarray(active, bool)
    v, a = _sweep_rates(model, q, step)
    forces, tau = zip(*(_statics(model, data, qk, contacts, stance, vk, ak) for qk, vk, ak in zip(q, v, a)))
    lower, upper = torque_limits if torque_limits is not None else (-model.effortLimit[6:], model.effortLimit[6:])
    meta = {
        "format": "plan/1", "software": {"name": "tests", "version": "0"}, "urdf": urdf,
        "joint_names": list(model.names[2:]), "gravity": [0.0, 0.0, -9.81],
        "integrator": "semi-implicit-euler", "contact_frames": list(contacts),
        "contact_normals": [[0.0, 0.0, 1.0]] * nc, "friction": [mu] * nc,
        "friction_pyramid": {"facets": 4, "inscribed": True, "tangents": [[[1.0, 0, 0], [0, 1.0, 0]]] * nc},
        "min_normal_force": min_normal_force,
        "torque_limits": {"lower": [float(x) for x in lower], "upper": [float(x) for x in upper]},
        "disturbances": [{"frame": disturbance_frame, "kind": kind,
                          "shape": np.eye(3 if kind == "force" else 6).tolist()}],
        "objective": "feasible", "task": {}, "solver": {"status": "statics"},
    }
    meta = json.loads(json.dumps(meta))
    plan = Plan(t=step * np.arange(K), q=q, v=v, a=a,
                tau=np.array(tau).reshape(K, nj), contact_forces=np.array(forces).reshape(K, nc, 3),
                contact_active=np.repeat(stance[None], K, axis=0), contact_targets=np.zeros((K, nc, 3)),
                margin=np.zeros(K), meta=meta)
    plan.contact_targets = np.array([[_frame_position(model, data, qk, c) if on else np.full(3, np.nan)
                                      for c, on in zip(contacts, stance)] for qk in q])
    if margin is None:
        margin = [least_squares_margin(plan, k) for k in range(K)]
    plan.margin = np.asarray(margin, float)
    return plan


def _posture(model, base_height: float, joints: dict) -> np.ndarray:
    q = pin.neutral(model)
    q[2] = base_height
    for name, value in joints.items():
        q[model.joints[model.getJointId(name)].idx_q] = value
    return q


def _frame_position(model, data, q, frame: str) -> np.ndarray:
    pin.framesForwardKinematics(model, data, q)
    return data.oMf[model.getFrameId(frame)].translation.copy()


def frame_jacobians(model, data, q, frames) -> np.ndarray:
    """Stacked translational Jacobians (3 n, nv), world-aligned, from Pinocchio."""
    return np.vstack([pin.computeFrameJacobian(model, data, q, model.getFrameId(f), WORLD)[:3] for f in frames])


def _sweep_rates(model, q, step: float):
    """Velocities and accelerations (K, nv) joining postures ``q`` by semi-implicit Euler."""
    K = q.shape[0]
    v, a = np.zeros((K, model.nv)), np.zeros((K, model.nv))
    for k in range(K - 1):
        v[k + 1] = pin.difference(model, q[k], q[k + 1]) / step
        a[k] = (v[k + 1] - v[k]) / step
    return v, a


def _statics(model, data, q, contacts, stance, v=None, a=None):
    """Least-squares forces (nc, 3) of the stance contacts and joint torques (nj,) for q, v, a (default rest)."""
    zero = np.zeros(model.nv)
    g = pin.rnea(model, data, q, zero if v is None else v, zero if a is None else a)
    jc = frame_jacobians(model, data, q, contacts)
    on = np.repeat(stance, 3)
    lam = np.zeros(3 * len(contacts))
    lam[on] = np.linalg.lstsq(jc[on, :6].T, g[:6], rcond=None)[0]
    tau = g[6:] - jc[:, 6:].T @ lam
    return lam.reshape(-1, 3), tau


def _pyramid_rows(normal, tangents, mu, m):
    """Facets of the pyramid whose edges lie on the Coulomb cone (common practice)."""
    n, (t1, t2) = np.asarray(normal, float), np.asarray(tangents, float)
    a = 2 * np.pi * np.arange(m) / m
    return np.cos(a)[:, None] * t1 + np.sin(a)[:, None] * t2 - mu * np.cos(np.pi / m) * n


class LiftedLP:
    """The lifted response LP of one knot in ``(u, dtau, dlambda)``, built from the plan file."""

    def __init__(self, plan: Plan, k: int, cap: float = 1e6, disturbance: int = 0):
        meta = plan.meta
        model = pin.buildModelFromXML(meta["urdf"], pin.JointModelFreeFlyer())
        data = model.createData()
        q, nv, nj = plan.q[k], model.nv, model.nv - 6
        entry = meta["disturbances"][disturbance]
        d = 3 if entry["kind"] == "force" else 6
        je = pin.computeFrameJacobian(model, data, q, model.getFrameId(entry["frame"]), WORLD)[:d]
        w = np.array(entry["shape"], float)
        contacts = meta["contact_frames"]
        jc = frame_jacobians(model, data, q, contacts) if contacts else np.zeros((0, nv))
        nc = len(contacts)
        self.dim, self.width = d, d + nj + 3 * nc
        s_t = np.vstack([np.zeros((6, nj)), np.eye(nj)])
        self.a_eq = np.hstack([je.T @ w, s_t, jc.T])
        rows, rhs = [], []
        pyr = meta["friction_pyramid"]
        # the plan-file contract (docs/plan-files.md): per-knot surfaces when the plan has them
        per_knot = meta.get("contact_knot_surfaces")
        normals = per_knot["normals"][k] if per_knot else meta["contact_normals"]
        tangents = per_knot["tangents"][k] if per_knot else pyr["tangents"]
        friction = per_knot["friction"][k] if per_knot else meta["friction"]
        # plan/1: one minimum normal force for every contact, or a list of one per contact
        least = np.broadcast_to(np.asarray(meta["min_normal_force"], float), (nc,))
        for c in range(nc):
            if not plan.contact_active[k, c]:
                continue
            lam = plan.contact_forces[k, c]
            g = _pyramid_rows(normals[c], tangents[c], friction[c], pyr["facets"])
            n = np.asarray(normals[c], float)
            for row, b in [(gj, -gj @ lam) for gj in g] + [(-n, n @ lam - least[c])]:
                full = np.zeros(self.width)
                full[d + nj + 3 * c: d + nj + 3 * c + 3] = row
                rows.append(full)
                rhs.append(b)
        self.a_ub = np.array(rows).reshape(-1, self.width)
        self.b_ub = np.array(rhs)
        lower = [-np.inf if x is None else x for x in meta["torque_limits"]["lower"]]
        upper = [np.inf if x is None else x for x in meta["torque_limits"]["upper"]]
        tau = plan.tau[k]
        self.bounds = ([(-cap, cap)] * d
                       + [(_fin(lo - t), _fin(up - t)) for lo, up, t in zip(lower, upper, tau)]
                       + [(None, None) if plan.contact_active[k, c] else (0.0, 0.0)
                          for c in range(nc) for _ in range(3)])

    def support(self, direction):
        """``(h(d), u*)`` by ``scipy.optimize.linprog`` (HiGHS)."""
        cost = np.zeros(self.width)
        cost[: self.dim] = -np.asarray(direction, float)
        res = linprog(cost, A_ub=self.a_ub if self.a_ub.size else None, b_ub=self.b_ub if self.a_ub.size else None,
                      A_eq=self.a_eq, b_eq=np.zeros(self.a_eq.shape[0]), bounds=self.bounds, method="highs")
        assert res.status == 0, res.message
        return -res.fun, res.x[: self.dim]

    def contains(self, u) -> bool:
        bounds = [(x, x) for x in u] + self.bounds[self.dim:]
        res = linprog(np.zeros(self.width), A_ub=self.a_ub if self.a_ub.size else None,
                      b_ub=self.b_ub if self.a_ub.size else None, A_eq=self.a_eq,
                      b_eq=np.zeros(self.a_eq.shape[0]), bounds=bounds, method="highs")
        return res.status == 0


def _fin(x):
    return None if not np.isfinite(x) else float(x)


def sampled_bounds(plan: Plan, k: int, n_dirs: int = 200, seed: int = 0, disturbance: int = 0):
    """``(lower, upper)`` bounds on rho at knot k from ``n_dirs`` + 2d sampled support LPs."""
    lp = LiftedLP(plan, k, disturbance=disturbance)
    dirs = np.random.default_rng(seed).normal(size=(n_dirs, lp.dim))
    dirs = np.vstack([np.eye(lp.dim), -np.eye(lp.dim), dirs / np.linalg.norm(dirs, axis=1, keepdims=True)])
    values, points = zip(*(lp.support(d) for d in dirs))
    offsets = -ConvexHull(np.array(points)).equations[:, -1]
    return float(offsets.min()), float(min(values))


def least_squares_margin(plan: Plan, k: int, disturbance: int = 0) -> float:
    """A linear-gain lower bound of rho: the min-norm response that balances the base.

    ``dlambda = K u`` with ``K`` the least-squares solution of the base rows,
    ``dtau`` from the joint rows; a linear response is one admissible
    response, so ``min_i room_i / |row_i|`` is a lower bound of the exact
    figure (docs/formulation.md section 7).
    """
    lp = LiftedLP(plan, k, disturbance=disturbance)
    d, nj = lp.dim, plan.tau.shape[1]
    e_u, e_lam = lp.a_eq[:, :d], lp.a_eq[:, d + nj:]
    base = slice(0, 6)
    gain_lam = -np.linalg.pinv(e_lam[base]) @ e_u[base]
    gain_tau = -(e_u[6:] + e_lam[6:] @ gain_lam)
    rooms, norms = [], []
    for (lo, up), g in zip(lp.bounds[d:d + nj], gain_tau):
        for room in (up, None if lo is None else -lo):
            if room is not None:
                rooms.append(room)
                norms.append(np.linalg.norm(g))
    for row, b in zip(lp.a_ub, lp.b_ub):
        rooms.append(b)
        norms.append(np.linalg.norm(row[d + nj:] @ gain_lam))
    ratios = [r / n if n > 1e-12 else (np.inf if r >= 0 else -np.inf) for r, n in zip(rooms, norms)]
    return float(min(ratios))


def check_plan_against_sampled_lps(plan: Plan, n_dirs: int = 200, knots=None, rtol: float = 1e-6,
                                   disturbance: int = 0) -> list:
    """Assert lower <= rho_exact <= upper at every knot; return one row per knot.

    Rows are dicts with ``knot``, ``rho``, ``lower``, ``upper``, ``facets``
    (the projection's facet count) and ``planned``.
    """
    cert = certify_plan(plan, knots, disturbance, Settings(full=True))
    rows = []
    for c in cert.knots:
        lower, upper = sampled_bounds(plan, c.knot, n_dirs, disturbance=disturbance)
        slack = rtol * max(abs(upper), 1e-9)
        assert lower - slack <= c.rho <= upper + slack, (c.knot, lower, c.rho, upper)
        assert c.facets >= 4, f"knot {c.knot}: a bounded 3-D polytope has at least 4 facets, got {c.facets}"
        rows.append({"knot": c.knot, "rho": c.rho, "lower": lower, "upper": upper,
                     "facets": c.facets, "planned": c.planned})
    return rows


def internal_push(plan, k: int, a: int, b: int, size: float):
    """Push contact ``a``'s force by ``size`` N towards contact ``b`` and ``b``'s by the opposite.

    Statics (Newton): two equal, opposite forces along the line through both points add no
    net force and no net moment, so the floating base stays balanced; the joint torques are
    corrected by the contact Jacobians' joint columns (Pinocchio), so the equations of
    motion keep holding and only the friction check may notice.
    """
    meta = plan.meta
    model = pin.buildModelFromXML(meta["urdf"], pin.JointModelFreeFlyer())
    data = model.createData()
    ids = [model.getFrameId(meta["contact_frames"][c]) for c in (a, b)]
    pin.framesForwardKinematics(model, data, plan.q[k])
    line = data.oMf[ids[1]].translation - data.oMf[ids[0]].translation
    push = size * line / np.linalg.norm(line)
    jac = [pin.computeFrameJacobian(model, data, plan.q[k], i, WORLD)[:3] for i in ids]
    out = copy.deepcopy(plan)
    out.contact_forces[k, a] += push
    out.contact_forces[k, b] -= push
    out.tau[k] -= jac[0][:, 6:].T @ push - jac[1][:, 6:].T @ push
    return out
