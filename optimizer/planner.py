"""Plan a task: feasibility seed, then the chosen objective, then the margin.

This is the orchestration layer and the Python API::

    from optimizer import load_task, solve
    outcome = solve(load_task("tasks/steep_ramp.yaml"), objective="robust", knots=20)
    outcome.plan.margin        # N, per knot

Built solvers are cached by (robot, structure, objective), so solving many
tasks of one shape (terrain variants) builds each NLP once.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import __version__, supervisor
from .analysis.knot_response import knot_responses
from .analysis.linear_margin import best_linear_margin, certify_gains
from .errors import SolveFailed
from .planfile import Plan
from .robot.symbolic import SymbolicRobot
from .solver.ipopt import IpoptSolver, SolverResult
from .transcription.guess import initial_guess
from .transcription.nlp import INTEGRATOR, Transcription
from .transcription.objectives import OBJECTIVES, objective_named
from .transcription.parameters import parameter_values
from .transcription.structure import structure_of

_SYMBOLIC: dict[str, SymbolicRobot] = {}
_BUILT: dict[tuple, tuple] = {}


@dataclass
class StageReport:
    """One solver run: objective, neutral status, iterations, times [s], violation."""

    objective: str
    status: str
    success: bool
    iterations: int
    solve_time: float
    build_time: float
    max_violation: float
    message: str

    def as_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass
class SolveOutcome:
    """What :func:`solve` reached.

    ``plan`` is the finished plan (None when a stage failed); ``last`` the
    physical arrays where the last solver run stopped, ``violations`` its
    largest violation per constraint group and knot (for diagnosis).
    """

    task: object
    objective: str
    plan: Plan | None
    stages: list = field(default_factory=list)
    last: dict = field(default_factory=dict)
    violations: dict = field(default_factory=dict)

    @property
    def success(self) -> bool:
        return self.plan is not None


def symbolic_robot(robot) -> SymbolicRobot:
    """The robot's CasADi twin, built once per URDF text."""
    key = hashlib.sha1(robot.urdf_text.encode()).hexdigest()
    if key not in _SYMBOLIC:
        _SYMBOLIC[key] = SymbolicRobot(robot.model)
    return _SYMBOLIC[key]


def built_solver(task, objective: str, expand: bool = True, torque_gains: str = "eliminated"):
    """(Transcription, IpoptSolver, log path) for the task's shape, built once and cached."""
    structure = structure_of(task)
    robot = task.robot
    key = (hashlib.sha1(robot.urdf_text.encode()).hexdigest(), tuple(robot.torque_upper), structure,
           objective, expand, torque_gains, tuple(sorted(task.solver_options.items())))
    if key not in _BUILT:
        supervisor.phase(f"building the {objective} solver")
        transcription = Transcription(robot, symbolic_robot(robot), structure, objective_named(objective),
                                      torque_gains=torque_gains)
        log = supervisor.scratch_dir("ipopt") / "ipopt.log"
        solver = IpoptSolver(transcription.nlp, task.solver_options, expand=expand, log_file=log,
                             progress=_ProgressRelay.instance)
        _BUILT[key] = (transcription, solver, log)
    return _BUILT[key]


class _ProgressRelay:
    """Forwards Ipopt iterations to whichever listener the current solve set."""

    listener = None

    @classmethod
    def instance(cls, iteration, x, f, g):
        if cls.listener is not None:
            cls.listener(iteration, x, f, g)


def solve(task, objective: str | None = None, *, knots: int | None = None, progress=None,
          log_path=None, expand: bool = True, torque_gains: str = "eliminated") -> SolveOutcome:
    """Plan ``task`` with ``objective`` (default: the task's own).

    Parameters
    ----------
    task : Task
        A loaded task (:func:`optimizer.problem.task.load_task`).
    objective : str, optional
        One of ``feasible``, ``robust``, ``robust-min``, ``torque``.
    knots : int, optional
        Override the task's knot count.
    progress : callable(stage, iteration, objective, violation, min_margin), optional
        Called at every solver iteration; ``min_margin`` [N] is NaN when the
        stage has no margin variables.
    log_path : path, optional
        Ipopt's logs of every stage are appended to this file.
    expand : bool
        Evaluate the NLP as one SX graph (faster iterations, slower build).
    torque_gains : str
        ``"eliminated"`` (the closed form, default) or ``"variables"`` (joint
        torque gains as decision variables with the full balance; ablation).

    Returns
    -------
    SolveOutcome
        ``plan`` is None when a stage failed; nothing raises on solver failure.
    """
    objective = objective or task.objective
    if objective not in OBJECTIVES:
        raise KeyError(f"unknown objective '{objective}'; known: {', '.join(OBJECTIVES)}")
    if knots is not None:
        task = task.with_knots(knots)
    outcome = SolveOutcome(task, objective, None)
    supervisor.phase("computing the starting point")
    seed = initial_guess(task)
    stage = dict(progress=progress, log_path=log_path, expand=expand, torque_gains=torque_gains)
    arrays, result = _run_stage(task, "feasible", seed, outcome, **stage)
    if not result.success:
        return outcome
    if objective != "feasible":
        if objective_named(objective).robust:
            supervisor.phase("computing the starting gains")
            arrays = dict(arrays, **_initial_gains(task, arrays))
        arrays, result = _run_stage(task, objective, arrays, outcome, **stage)
        if not result.success:
            return outcome
    outcome.plan = _finished_plan(task, objective, arrays, outcome)
    return outcome


def _run_stage(task, objective, start, outcome, progress, log_path, expand, torque_gains):
    transcription, solver, log = built_solver(task, objective, expand, torque_gains)
    layout = transcription.variables
    x0 = layout.pack(start)
    p = parameter_values(task, transcription.structure, transcription.parameters)
    if "rooms" in layout and "rooms" not in start:
        layout.set(x0, "rooms", transcription.rooms_at(start, p))
    lbx, ubx = transcription.bounds(task.initial_posture)
    _ProgressRelay.listener = None if progress is None else _listener(progress, objective, transcription)
    supervisor.phase(f"solving the {objective} stage")
    try:
        result: SolverResult = solver.solve(np.clip(x0, lbx, ubx), p, lbx, ubx, transcription.lbg, transcription.ubg)
    finally:
        _ProgressRelay.listener = None
        _append_log(log, log_path, objective)
    outcome.stages.append(StageReport(objective, result.status, result.success, result.iterations,
                                      result.wall_time, solver.build_time, result.max_violation, result.message))
    solver.build_time = 0.0  # reported once, with the first solve that paid for it
    outcome.last = layout.unpack(result.x)
    outcome.violations = transcription.constraints.violations(result.g, transcription.lbg, transcription.ubg)
    return outcome.last, result


def _listener(progress, objective, transcription):
    layout, lbg, ubg = transcription.variables, transcription.lbg, transcription.ubg
    margins = [b.name for b in layout.blocks if b.name.startswith("rho")]

    def listen(iteration, x, f, g):
        violation = float(np.maximum(np.maximum(lbg - g, g - ubg), 0.0).max(initial=0.0))
        smallest = min((float(layout.get(x, m).min()) for m in margins), default=float("nan"))
        progress(objective, iteration, f, violation, smallest)
    return listen


def _append_log(source: Path, target, title: str) -> None:
    if target is None or not source.exists():
        return
    with open(target, "a", encoding="utf-8") as out:
        out.write(f"\n===== brace stage: {title} =====\n")
        out.write(source.read_text(encoding="utf-8", errors="replace"))


def _initial_gains(task, arrays) -> dict:
    """Per-knot gains and margins at a fixed point: the best linear response (FORMULATION 4)."""
    plan = _plan_arrays(task, "feasible", arrays, np.zeros(task.knots), {})
    out = {}
    for p in range(len(task.disturbances)):
        gains, rho, torque_gains = [], [], []
        for _, response in knot_responses(plan, disturbance=p):
            margin = best_linear_margin(response.limit_rows())
            r = max(margin.rho, 0.0) if np.isfinite(margin.rho) else 0.0
            _, jc_j, _, je_j = response.split()
            gains.append((r * margin.gains).reshape(-1, order="F"))
            torque_gains.append((-(jc_j.T @ (r * margin.gains) + r * je_j.T)).reshape(-1, order="F"))
            rho.append(r)
        out[f"G{p}"], out[f"rho{p}"] = np.array(gains).T, np.array(rho)[None, :]
        out[f"G_tau{p}"] = np.array(torque_gains).T
    return out


def certified_margins(task, plan: Plan, arrays) -> np.ndarray:
    """Sound linear-gain margins [N], shape (K, P): the plan's own gains when it has them, else the best."""
    columns = []
    for p in range(len(task.disturbances)):
        column = []
        for k, response in knot_responses(plan, disturbance=p):
            rows = response.limit_rows()
            best = best_linear_margin(rows)
            if f"G{p}" in arrays and arrays[f"rho{p}"][0, k] > 1e-9:
                d = response.dim
                own = certify_gains(rows, arrays[f"G{p}"][:, k].reshape((-1, d), order="F") / arrays[f"rho{p}"][0, k])
                best = own if own.rho >= best.rho else best
            column.append(best.rho)
        columns.append(column)
    return np.array(columns).T


def _finished_plan(task, objective, arrays, outcome) -> Plan:
    solver_meta = {"stages": [s.as_dict() for s in outcome.stages]}
    final = outcome.stages[-1]
    solver_meta.update(status=final.status, iterations=sum(s.iterations for s in outcome.stages),
                       wall_time=sum(s.solve_time + s.build_time for s in outcome.stages),
                       max_violation=final.max_violation, name="ipopt")
    plan = _plan_arrays(task, objective, arrays, np.zeros(task.knots), solver_meta)
    supervisor.phase("certifying the plan's margins")
    margins = certified_margins(task, plan, arrays)
    plan.margin = margins[:, 0].copy()
    plan.margins = margins
    if "rho0" in arrays:
        plan.extras["margin_optimized"] = arrays["rho0"][0].copy()
    return plan


def _plan_arrays(task, objective, arrays, margin, solver_meta) -> Plan:
    K, nc = task.knots, len(task.contacts)
    footholds = np.array([c.foothold for c in task.contacts])
    return Plan(
        t=task.times.copy(), q=arrays["q"].T.copy(), v=arrays["v"].T.copy(), a=arrays["a"].T.copy(),
        tau=arrays["tau"].T.copy(),
        contact_forces=arrays["lam"].T.reshape(K, nc, 3).copy(),
        contact_active=np.ones((K, nc), dtype=bool),
        contact_targets=np.repeat(footholds[None], K, axis=0),
        margin=np.asarray(margin, float), meta=plan_meta(task, objective, solver_meta))


def plan_meta(task, objective: str, solver_meta: dict) -> dict:
    """The ``meta`` mapping of the plan/1 contract for ``task``."""
    robot = task.robot
    return {
        "format": "plan/1",
        "software": {"name": "brace", "version": __version__},
        "urdf": robot.urdf_text,
        "joint_names": list(robot.joint_names),
        "gravity": [float(g) for g in robot.gravity],
        "integrator": INTEGRATOR,
        "contact_frames": [c.frame for c in task.contacts],
        "contact_normals": [np.asarray(c.normal, float).tolist() for c in task.contacts],
        "friction": [float(c.friction) for c in task.contacts],
        "friction_pyramid": {"facets": int(task.facets), "inscribed": True,
                             "tangents": [np.asarray(c.tangents, float).tolist() for c in task.contacts]},
        "min_normal_force": float(task.min_normal_force),
        "torque_limits": {"lower": robot.torque_lower.tolist(), "upper": robot.torque_upper.tolist()},
        "disturbances": [{"frame": d.frame, "kind": d.kind, "shape": np.asarray(d.shape, float).tolist()}
                         for d in task.disturbances],
        "objective": objective,
        "task": task.raw,
        "solver": solver_meta,
    }


def require_plan(outcome: SolveOutcome) -> Plan:
    """The outcome's plan, or :class:`SolveFailed` describing the failed stage."""
    if outcome.plan is None:
        stage = outcome.stages[-1]
        raise SolveFailed(f"the {stage.objective} stage ended with status '{stage.status}' "
                          f"({stage.message}) after {stage.iterations} iterations")
    return outcome.plan
