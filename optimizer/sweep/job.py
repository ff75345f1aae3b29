"""What a worker does for one variant: seed once, every objective from it, exact certification.

:func:`run_variant` never raises for a variant that goes wrong: a task the
schema refuses, a task the pre-solve checks prove impossible, a solver
failure, a time-out or an unexpected exception each become a result with a
status and a reason. Built solvers stay cached in the worker process (the
planner keys them by robot, structure and objective), so variants of one
shape share one built NLP per objective. The worker writes nothing: plans
and records travel back to the coordinator, which stores them.
"""
from __future__ import annotations

import os
import socket
import threading
import time
from dataclasses import dataclass, field

import numpy as np

from ..analysis.certify import certify_points
from ..analysis.failure import diagnose, report_lines
from ..analysis.margin_flags import certificate_shortfalls, plan_requirements, unmet
from ..analysis.presolve import run_checks
from ..errors import InputError
from ..planfile import knot_surfaces
from ..planner import DEFAULT_EVALUATION, Planner
from .variant import build_task

SOLVED, FAILED, TIMEOUT, ERROR = "solved", "failed", "timeout", "error"
_ONE_AT_A_TIME = threading.Lock()  # a worker with several threads shares one solver cache: solve in turn


@dataclass
class VariantJob:
    """One variant to solve.

    ``mapping`` is the variant's task mapping (:func:`.variant.variant_mapping`),
    ``task_path`` the base task file it resolves paths against, ``model`` the
    model quantities, ``objectives`` those still to solve, ``time_limit`` [s]
    for all of them, ``warm`` the neighbour's solved arrays per stage (or
    empty), ``warm_from`` that neighbour's id, ``evaluation`` how the
    worker's planner evaluates the NLP (:data:`optimizer.planner.EVALUATIONS`)
    and ``threads`` how many threads it evaluates the knot functions on (1:
    serial, the default, since the pool already runs one worker per core).
    """

    id: str
    values: dict
    mapping: dict
    task_path: str
    model: dict
    objectives: list
    time_limit: float
    warm: dict = field(default_factory=dict)
    warm_from: str = ""
    evaluation: str = DEFAULT_EVALUATION
    threads: int = 1


@dataclass
class ObjectiveResult:
    """One objective of one variant: the summary ``record`` (JSON data) and the plan (or None)."""

    objective: str
    record: dict
    plan: object = None


@dataclass
class VariantResult:
    """What :func:`run_variant` returns: per-objective results and the arrays a neighbour may start from."""

    id: str
    results: list
    arrays: dict = field(default_factory=dict)


def run_variant(job: VariantJob) -> VariantResult:
    """Solve ``job``'s variant for each of its objectives (see the module docstring)."""
    started = time.perf_counter()
    where = f"{socket.gethostname()}:{os.getpid()}"
    base = {"variant": job.id, **job.values, "warm_start_from": job.warm_from, "worker": where}
    try:
        with _ONE_AT_A_TIME:
            return _solve_variant(job, base, started)
    except Exception as exc:  # a bug or an unexpected library error: recorded, the sweep goes on
        text = f"{type(exc).__name__}: {exc}".splitlines()[0][:300]
        return VariantResult(job.id, [_failure(job, base, o, ERROR, text, started) for o in job.objectives])


_PLANNERS: dict[str, Planner] = {}


def worker_planner(evaluation: str = DEFAULT_EVALUATION, threads: int = 1):
    """This worker process's planner (``threads`` per solve): its built solvers serve every variant of one shape."""
    key = (evaluation, threads)
    if key not in _PLANNERS:
        _PLANNERS[key] = Planner(evaluation=evaluation, threads=threads)
    return _PLANNERS[key]


def _solve_variant(job: VariantJob, base: dict, started: float) -> VariantResult:
    try:
        task = build_task(job.mapping, job.task_path, job.model)
    except InputError as exc:
        reason = "task: " + str(exc).split(": ", 1)[-1]
        return VariantResult(job.id, [_failure(job, base, o, FAILED, reason, started) for o in job.objectives])
    proven = [f for f in run_checks(task) if f.impossible]
    if proven:
        reason = "pre-solve: " + proven[0].text()
        return VariantResult(job.id, [_failure(job, base, o, FAILED, reason, started) for o in job.objectives])
    planner = worker_planner(job.evaluation, job.threads)
    seed = planner.seed(task, start=job.warm.get("feasible"))
    out = VariantResult(job.id, [])
    if not seed.success:
        status, reason = _stage_failure(seed.outcome)
        out.results = [_failure(job, base, o, status, "feasibility seed: " + reason, started, seed.outcome)
                       for o in job.objectives]
        return out
    out.arrays["feasible"] = _portable(seed.arrays)
    building = seed.outcome.stages[0].build_time        # building a solver is not the variant's time
    for objective in job.objectives:
        if time.perf_counter() - started - building > job.time_limit:
            out.results.append(_failure(job, base, objective, TIMEOUT,
                                        f"the variant's time limit of {job.time_limit:g} s ran out before this objective",
                                        started, seed.outcome))
            continue
        outcome = planner.solve_from_seed(seed, objective, start=job.warm.get(objective))
        building += sum(s.build_time for s in outcome.stages[1:])
        result = _objective_result(job, base, objective, outcome, started, out.arrays)
        if out.results:  # the seed's build is counted once, with the variant's first result
            result.record["build_time_s"] -= seed.outcome.stages[0].build_time
        out.results.append(result)
    return out


def _objective_result(job, base, objective, outcome, started, keep) -> ObjectiveResult:
    if outcome.plan is None:
        status, reason = _stage_failure(outcome)
        return _failure(job, base, objective, status, f"{objective} stage: {reason}", started, outcome)
    if objective != "feasible":
        keep[objective] = _portable(outcome.last)
    plan = outcome.plan
    record = dict(base, objective=objective, status=SOLVED, reason="")
    record.update(_stage_figures(outcome))
    record.update(plan_figures(plan))
    record.update(_exact_figures(plan))
    record["wall_time_s"] = time.perf_counter() - started
    return ObjectiveResult(objective, record, plan)


def _portable(arrays: dict) -> dict:
    return {k: np.array(v, copy=True) for k, v in arrays.items()}


def _stage_failure(outcome) -> tuple[str, str]:
    """(status, reason) of a failed stage, the reason from the failure diagnosis."""
    stage = outcome.stages[-1]
    status = TIMEOUT if stage.status == "time-limit" else FAILED
    head = f"{stage.status} after {stage.iterations} iterations"
    try:
        first = report_lines(diagnose(outcome), shown=1)[0]
    except Exception as exc:  # the diagnosis is a courtesy; its failure must not hide the status
        first = f"no diagnosis ({type(exc).__name__})"
    return status, f"{head}; {first.removeprefix('1. ')}"


def _failure(job, base, objective, status, reason, started, outcome=None) -> ObjectiveResult:
    record = dict(base, objective=objective, status=status, reason=reason)
    if outcome is not None:
        record.update(_stage_figures(outcome))
    record["wall_time_s"] = time.perf_counter() - started
    return ObjectiveResult(objective, record, None)


def _stage_figures(outcome) -> dict:
    """Iterations and times of the seed and the objective stage [s]."""
    seed, last = outcome.stages[0], outcome.stages[-1]
    own = last if len(outcome.stages) > 1 else None
    return {"seed_iterations": seed.iterations, "seed_time_s": seed.solve_time,
            "iterations": own.iterations if own else 0, "solve_time_s": own.solve_time if own else 0.0,
            "build_time_s": sum(s.build_time for s in outcome.stages)}


def plan_figures(plan) -> dict:
    """Planned margins [N], peak torque use and peak friction use (fractions) of a plan."""
    meta = plan.meta
    upper = np.asarray(meta["torque_limits"]["upper"], float)
    lower = np.asarray(meta["torque_limits"]["lower"], float)
    tau = np.asarray(plan.tau)
    torque_use = np.where(tau >= 0, tau / np.where(upper != 0, upper, np.inf),
                          tau / np.where(lower != 0, lower, -np.inf))
    forces = np.asarray(plan.contact_forces)                      # (K, nc, 3)
    surfaces = knot_surfaces(meta, forces.shape[0])               # normals (K, nc, 3), friction (K, nc)
    normal = np.einsum("knj,knj->kn", forces, surfaces.normals)
    tangential = np.linalg.norm(forces - normal[..., None] * surfaces.normals, axis=-1)
    friction_use = tangential / np.maximum(surfaces.friction * normal, 1e-12)
    return {"margin_min_planned_N": float(np.min(plan.margin)), "margin_mean_planned_N": float(np.mean(plan.margin)),
            "peak_torque_use": float(np.max(torque_use)), "peak_friction_use": float(np.max(friction_use))}


def _exact_figures(plan) -> dict:
    """The exact smallest unrejectable force (``brace certify``'s figure) [N] and its time [s].

    ``margin_min_exact_N`` and ``margin_mean_exact_N`` are disturbance point
    0's; ``margin_min_exact_all_points_N`` the smallest over every point and
    ``weakest_point`` the point where it is; low-margin knots and the
    requirement cover every point.
    """
    started = time.perf_counter()
    certificate = certify_points(plan)
    rho = [np.array([c.rho for c in point.knots], float) for point in certificate.points]
    needed = plan_requirements(plan.meta)
    shortfalls = [s for point in certificate.points for s in certificate_shortfalls(point, plan, needed)]
    weakest = int(np.argmin([np.min(r) for r in rho]))
    return {"margin_min_exact_N": float(np.min(rho[0])), "margin_mean_exact_N": float(np.mean(rho[0])),
            "margin_min_exact_all_points_N": float(np.min(rho[weakest])), "weakest_point": weakest,
            "margin_figure": certificate.points[0].figure,
            "low_margin_knots": sum(s.last - s.first + 1 for s in shortfalls if not s.required),
            "requirement_met": not unmet(shortfalls),
            "certify_time_s": time.perf_counter() - started}