"""A plan resampled for a tracking controller.

Between knots ``k`` and ``k + 1`` (step ``h``), at ``s = t_k + dt``, the
samples follow the plan's own integrator (``semi-implicit-euler``):

- ``q(s) = integrate(q_k, dt v_{k+1})``: the SE(3) exponential on the base
  (its quaternion moves along a great circle and stays unit) and straight
  lines in the joints; it reaches ``q_{k+1}`` at ``dt = h``;
- ``v(s) = v_k + dt a_k``, ``a(s) = a_k`` (constant over the step);
- feed-forward torques, contact forces and response gains: straight lines
  between the knots' values (a choice for smooth commands; the plan's limits
  hold at knots, and between knots on every limit that is convex in them);
- stance flags, footholds and contact normals: those of knot ``k`` (held
  until the next knot);
  a contact flagged out of stance has zero force and zero force gains in
  the sample (on the step into a touchdown the straight line would
  otherwise start the force before the foot is down).

At a knot's time every sample equals the plan's values exactly. Response
gains are the plan's certifying gains (:func:`optimizer.planfile.response_gains`)
or, for plans that do not carry them, the best linear response at each knot:
``dlambda = K_lambda u`` and ``dtau = K_tau u`` with
``K_tau = -(J_C,j^T K_lambda + J_e,j^T W)`` from the joint rows of the
equations of motion with the motion held, ``u`` the disturbance coordinate
(the push is ``W u``; with the default ``W = I``, ``u`` is the push itself [N]).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pinocchio as pin

from ..planfile import knot_surfaces, response_gains
from .knot_response import knot_responses
from .linear_margin import plan_margin

KNOT_TIME_TOL = 1e-9   # s: a sample this close to a knot's time takes the knot's values


@dataclass
class Trajectory:
    """Samples of a plan at a fixed rate.

    Attributes
    ----------
    t : (N,) s.  q : (N, nq).  v, a : (N, nv) (Pinocchio's conventions).
    tau : (N, nj) feed-forward joint torques [N m or N].
    contact_forces : (N, nc, 3) force of the surface on the robot, world frame [N].
    contact_active : (N, nc) bool.  contact_targets : (N, nc, 3) footholds [m].
    contact_normals : (N, nc, 3) unit normals of the surfaces pressed on, world frame, into the robot.
    gain_tau : (N, nj, d) joint-torque change per unit disturbance coordinate.
    gain_force : (N, nc, 3, d) contact-force change per unit disturbance coordinate, world frame.
    margin : (N,) the certified margin of the knot at or before the sample [N].
    info : dict, names, units, frames and how the samples were made.
    """

    t: np.ndarray
    q: np.ndarray
    v: np.ndarray
    a: np.ndarray
    tau: np.ndarray
    contact_forces: np.ndarray
    contact_active: np.ndarray
    contact_targets: np.ndarray
    contact_normals: np.ndarray
    gain_tau: np.ndarray
    gain_force: np.ndarray
    margin: np.ndarray
    info: dict = field(default_factory=dict)


def sample_times(duration: float, rate: float) -> np.ndarray:
    """``i / rate`` for i = 0 .. floor(duration * rate) (s); the last knot's time too if it falls between."""
    count = int(np.floor(duration * rate + 1e-9)) + 1
    times = np.arange(count) / rate
    return times if duration - times[-1] <= KNOT_TIME_TOL else np.append(times, duration)


def knot_gains(plan, point: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per knot: force gains (K, nc, 3, d), torque gains (K, nj, d) and the margin they certify (K,) [N]."""
    stored = response_gains(plan, point)
    force, torque, margin = [], [], []
    for k, response in knot_responses(plan, disturbance=point):
        rows = response.limit_rows()
        linear = plan_margin(rows, None if stored is None else response.active_gains(stored[k]))
        _, jc_j, _, je_j = response.split()
        active = np.flatnonzero(response.active)
        full = np.zeros((response.nc, 3, response.dim))
        full[active] = linear.gains.reshape(len(active), 3, response.dim)
        force.append(full)
        torque.append(-(jc_j[np.repeat(3 * active, 3) + np.tile(np.arange(3), len(active))].T @ linear.gains + je_j.T))
        margin.append(linear.rho)
    return np.array(force), np.array(torque), np.array(margin)


def resample(plan, rate: float, point: int = 0) -> Trajectory:
    """``plan`` sampled at ``rate`` [Hz] (see the module text for the rules)."""
    model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
    force_gains, torque_gains, margins = knot_gains(plan, point)
    times = sample_times(float(plan.t[-1] - plan.t[0]), rate) + float(plan.t[0])
    normals = knot_surfaces(plan.meta, plan.q.shape[0]).normals
    rows = [_sample(plan, model, s, force_gains, torque_gains, margins, normals) for s in times]
    columns = {name: np.array([r[name] for r in rows]) for name in rows[0]}
    entry = plan.meta["disturbances"][point]
    info = {"rate_hz": float(rate), "samples": len(times), "disturbance": dict(entry, index=point),
            "joint_names": list(plan.meta["joint_names"]), "joint_prismatic": _prismatic(model, plan.meta["joint_names"]),
            "contact_frames": list(plan.meta["contact_frames"]),
            "integrator": plan.meta.get("integrator", ""), "source_objective": plan.meta.get("objective", "")}
    return Trajectory(t=times, info=info, **columns)


def _prismatic(model, names) -> list[bool]:
    """Per joint: True for a prismatic joint (m, N), False for a rotation (rad, N m)."""
    return [model.joints[model.getJointId(n)].shortname().startswith("JointModelP") for n in names]


def _sample(plan, model, s, force_gains, torque_gains, margins, normals) -> dict:
    t = plan.t
    at_knot = np.flatnonzero(np.abs(t - s) <= KNOT_TIME_TOL)
    if at_knot.size:
        k = int(at_knot[0])
        return dict(q=plan.q[k], v=plan.v[k], a=plan.a[k], tau=plan.tau[k], contact_forces=plan.contact_forces[k],
                    contact_active=plan.contact_active[k], contact_targets=plan.contact_targets[k],
                    contact_normals=normals[k], gain_tau=torque_gains[k], gain_force=force_gains[k], margin=margins[k])
    k = int(np.clip(np.searchsorted(t, s, side="right") - 1, 0, len(t) - 2))
    dt, h = s - t[k], t[k + 1] - t[k]
    w = dt / h

    def line(x):
        return (1.0 - w) * x[k] + w * x[k + 1]

    stance = np.asarray(plan.contact_active[k], bool)
    return dict(q=pin.integrate(model, plan.q[k], dt * plan.v[k + 1]), v=plan.v[k] + dt * plan.a[k], a=plan.a[k],
                tau=line(plan.tau), contact_forces=line(plan.contact_forces) * stance[:, None],
                contact_active=stance, contact_targets=plan.contact_targets[k], contact_normals=normals[k],
                gain_tau=line(torque_gains),
                gain_force=line(force_gains) * stance[:, None, None], margin=margins[k])


# ---------------------------------------------------------------- tables


def csv_columns(trajectory: Trajectory) -> list[tuple[str, str]]:
    """``(name, unit)`` of every CSV column, in order."""
    info = trajectory.info
    joints, contacts = info["joint_names"], info["contact_frames"]
    slide = dict(zip(joints, info["joint_prismatic"]))
    d = trajectory.gain_tau.shape[2]

    def unit(j, rotation, prismatic):
        return prismatic if slide[j] else rotation

    cols = [("t", "s")]
    cols += [(f"base_{a}", "m") for a in "xyz"] + [(f"base_q{a}", "1") for a in ("x", "y", "z", "w")]
    cols += [(f"q_{j}", unit(j, "rad", "m")) for j in joints]
    cols += [(f"base_v{a}", "m/s") for a in "xyz"] + [(f"base_w{a}", "rad/s") for a in "xyz"]
    cols += [(f"v_{j}", unit(j, "rad/s", "m/s")) for j in joints]
    cols += [(f"base_a{a}", "m/s^2") for a in "xyz"] + [(f"base_dw{a}", "rad/s^2") for a in "xyz"]
    cols += [(f"a_{j}", unit(j, "rad/s^2", "m/s^2")) for j in joints]
    cols += [(f"tau_{j}", unit(j, "N m", "N")) for j in joints]
    cols += [(f"f_{c}_{axis}", "N") for c in contacts for axis in "xyz"]
    cols += [(f"stance_{c}", "0/1") for c in contacts]
    cols += [(f"foothold_{c}_{axis}", "m") for c in contacts for axis in "xyz"]
    cols += [(f"normal_{c}_{axis}", "1") for c in contacts for axis in "xyz"]
    cols += [(f"dtau_{j}_du{i}", unit(j, "N m/N", "N/N")) for j in joints for i in range(d)]
    cols += [(f"df_{c}_{axis}_du{i}", "N/N") for c in contacts for axis in "xyz" for i in range(d)]
    cols += [("margin", "N")]
    return cols


def csv_rows(trajectory: Trajectory) -> np.ndarray:
    """One row per sample, columns as :func:`csv_columns`, shape (N, columns)."""
    tr = trajectory
    n = tr.t.shape[0]
    return np.hstack([tr.t[:, None], tr.q, tr.v, tr.a, tr.tau, tr.contact_forces.reshape(n, -1),
                      tr.contact_active.astype(float), tr.contact_targets.reshape(n, -1),
                      tr.contact_normals.reshape(n, -1),
                      tr.gain_tau.reshape(n, -1), tr.gain_force.reshape(n, -1), tr.margin[:, None]])
