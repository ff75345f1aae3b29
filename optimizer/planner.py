"""Plan a task: feasibility seed, then the chosen objective, then the margin.

This is the orchestration layer and the Python API::

    from optimizer import Planner, load_task
    task = load_task("tasks/steep_ramp.yaml")
    with Planner(objective="robust", knots=20) as planner:
        outcome = planner.solve(task)
        outcome.plan.margin                        # N, per knot
        seed = planner.seed(task)                  # one feasibility solve ...
        plans = {name: planner.solve_from_seed(seed, name) for name in ("robust", "torque")}

``optimizer.solve(task, objective=..., knots=...)`` is a thin wrapper around
a shared planner. A :class:`Planner` owns the symbolic robots and built
solvers it makes, keyed by everything the built NLP reads that is not a
parameter (:meth:`Planner.build_key`), so tasks of one shape (terrain
variants) build each NLP once; it removes its temporary files on
:meth:`Planner.close` (or when it is garbage-collected).
"""
from __future__ import annotations

import hashlib
import os
import shutil
import threading
import weakref
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import __version__, supervisor
from .analysis.clearance import clearance_meta
from .analysis.knot_response import knot_responses
from .analysis.linear_margin import best_linear_margin, certify_gains
from .errors import InputError, SolveFailed
from .planfile import Plan, min_normal_force_meta, preload_meta, response_gains_key
from .problem.point_weights import combined_margin
from .problem.requirement import as_json as requirements_json
from .problem.requirement import required_margins
from .problem.reserve import reserves_meta
from .robot.symbolic import SymbolicRobot
from .solver.backend import SolverResult
from .solver.registry import DEFAULT_BACKEND, backend_named
from .transcription.guess import initial_guess
from .transcription.nlp import INTEGRATOR, Transcription
from .transcription.objectives import OBJECTIVES, POINT_FLOOR, objective_named
from .transcription.parameters import parameter_values, separating_planes
from .transcription.resample import resampled, resampled_multipliers
from .transcription.structure import structure_of


# How a planner evaluates the NLP (see Planner); compiled falls back to mapped without a C compiler.
EVALUATIONS = ("compiled", "expanded", "mapped")
DEFAULT_EVALUATION = "expanded"
# Threads evaluating the mapped knot functions (compiled and mapped evaluations) when the planner is
# not told: this environment variable, else one (serial). Two threads made the 60-knot robust stage
# only 0.94 times as long on an idle 2-core machine and the whole plan from a fresh process slower
# (its build longer), and on a busy one every stage slower; benchmarks/RESULTS.md, "Threaded knot
# functions" and "..., idle machine".
THREADS_ENVIRONMENT = "BRACE_THREADS"
_NOTICES: list[str] = []
_SAID: set[str] = set()


def _notice(text: str) -> None:
    """Keep ``text`` for :func:`take_notice`, once per process."""
    if text not in _SAID:
        _SAID.add(text)
        _NOTICES.append(text)


def evaluation_threads(threads: int | None = None) -> int:
    """Threads for the mapped knot functions: ``threads``, else ``$BRACE_THREADS``, else 1 (serial).

    A bad ``$BRACE_THREADS`` is an :class:`InputError`; a bad ``threads`` a ValueError.
    """
    if threads is None:
        text = os.environ.get(THREADS_ENVIRONMENT, "").strip()
        if not text:
            return 1
        if not text.isdigit() or int(text) < 1:
            raise InputError(f"${THREADS_ENVIRONMENT}", "", "a whole number >= 1 (threads per solve)", text)
        return int(text)
    if isinstance(threads, bool) or not isinstance(threads, int) or threads < 1:
        raise ValueError(f"threads must be a whole number >= 1 or None, not {threads!r}")
    return threads


def take_notice() -> list[str]:
    """What the planners of this process had to say (a compiler fallback), each only once; then forgotten."""
    taken = list(_NOTICES)
    _NOTICES.clear()
    return taken


@dataclass
class StageReport:
    """One solver run: objective, neutral status, iterations, times [s], violation, knot count.

    ``eval_time`` is the part of ``solve_time`` spent evaluating the NLP's
    functions and derivatives, ``eval_split`` that time per function [s]
    (:attr:`optimizer.solver.backend.SolverResult.eval_split`).
    """

    objective: str
    status: str
    success: bool
    iterations: int
    solve_time: float
    build_time: float
    max_violation: float
    message: str
    eval_time: float = 0.0
    knots: int = 0
    eval_split: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass
class SolveOutcome:
    """What a solve reached.

    ``plan`` is the finished plan (None when a stage failed); ``last`` the
    physical arrays where the last solver run stopped, ``violations`` its
    largest violation per constraint group and knot, ``transcription`` the
    NLP of that run, ``parameters`` its parameter vector and ``multipliers`` the solver's
    constraint multipliers there, one per row of g (for diagnosis); ``bound_multipliers``
    those of the variable bounds, one per entry of x.
    """

    task: object
    objective: str
    plan: Plan | None
    stages: list = field(default_factory=list)
    last: dict = field(default_factory=dict)
    violations: dict = field(default_factory=dict)
    transcription: object = field(default=None, repr=False)
    multipliers: np.ndarray | None = field(default=None, repr=False)
    parameters: np.ndarray | None = field(default=None, repr=False)
    bound_multipliers: np.ndarray | None = field(default=None, repr=False)

    @property
    def success(self) -> bool:
        return self.plan is not None


def robot_key(robot) -> str:
    """Digest of everything a built NLP reads from ``robot``: URDF text, limits, mass, gravity, joint names,
    collision shapes (their points and radii are numbers of the clearance rows)."""
    digest = hashlib.sha1(robot.urdf_text.encode())
    shapes = robot.collision.shapes
    for values in (robot.torque_lower, robot.torque_upper, robot.velocity_limit, robot.joint_lower,
                   robot.joint_upper, robot.gravity, [robot.mass], *[s.joint_points for s in shapes],
                   [s.radius for s in shapes], [s.joint for s in shapes]):
        digest.update(np.ascontiguousarray(values, dtype=float).tobytes())
    digest.update("\n".join(robot.joint_names).encode())
    return digest.hexdigest()


@dataclass
class Seed:
    """A task's feasibility solve, the common start of every objective (:meth:`Planner.seed`).

    ``task`` has the planner's knot count; ``arrays`` are the physical
    arrays of the feasible point (empty when the solve failed); ``outcome``
    the feasibility stage's :class:`SolveOutcome`.
    """

    task: object
    arrays: dict
    outcome: SolveOutcome

    @property
    def success(self) -> bool:
        return bool(self.outcome.stages) and self.outcome.stages[-1].success


@dataclass
class BuiltNLP:
    """One transcription with its built solver and the solver's log file."""

    transcription: Transcription
    solver: object
    log: Path
    unreported_build_time: float = 0.0


class Planner:
    """Plans tasks with fixed settings; owns the symbolic robots and built solvers it makes.

    Parameters
    ----------
    objective : str, optional
        Default objective (``feasible``, ``robust``, ``robust-min``,
        ``robust-sum``, ``torque``); None uses each task's own.
    knots : int, optional
        Knot count overriding the tasks' own.
    backend : str
        Name of the solver backend (:mod:`optimizer.solver.registry`).
    options : dict, optional
        Solver options over the task's ``solver`` options.
    evaluation : str
        How the NLP is evaluated (:data:`EVALUATIONS`): ``compiled`` (the
        knot functions and their derivatives as compiled C, cached on disk,
        mapped over the knots: the fastest plan from a fresh process),
        ``expanded`` (one scalar graph: fast iterations, slow build, nothing
        on disk; the default) or ``mapped`` (the knot
        functions interpreted, mapped over the knots: fast build, slow
        iterations). ``compiled`` falls back to ``mapped`` when no C
        compiler works (:func:`take_notice` says so once).
    torque_gains : str
        ``"eliminated"`` (the closed form, default) or ``"variables"`` (joint
        torque gains as decision variables with the full balance; ablation).
    continuation : int, optional
        Coarse-to-fine continuation for robust objectives in :meth:`solve`:
        the seed and the objective are first solved on about
        ``1/continuation`` of the knots (:func:`coarse_knots`), that plan is
        moved onto the full grid (:mod:`optimizer.transcription.resample`)
        and the objective solved there from it, without a full-grid seed.
        None (default) solves directly on the full grid.
    warm_start : bool
        A robust objective's stage starts from the multipliers of the stage
        before it, with the backend's warm-start settings
        (:data:`optimizer.solver.ipopt.WARM_START_OPTIONS`): directly, the
        seed's (those of the constraints and variable bounds both NLPs have;
        zero for the robustness rows); with ``continuation``, the full-grid
        stage from the coarse robust stage's whole primal-dual point moved
        onto the full grid (:meth:`coarse_to_fine`). Off by default.
    threads : int, optional
        Threads evaluating the knot functions of the ``compiled`` and
        ``mapped`` evaluations (the knots split into that many blocks, never
        more blocks than knots; plans do not depend on it); 1 is serial. None
        (default): ``$BRACE_THREADS``, else 1 (:func:`evaluation_threads`,
        :meth:`threads_for`). The ``expanded`` evaluation is one scalar graph
        and always serial.

    A planner serializes its own solves (one lock per planner): use one
    planner per thread to solve in parallel.
    """

    def __init__(self, objective: str | None = None, knots: int | None = None, backend: str = DEFAULT_BACKEND,
                 options: dict | None = None, *, evaluation: str = DEFAULT_EVALUATION,
                 torque_gains: str = "eliminated", continuation: int | None = None, warm_start: bool = False,
                 threads: int | None = None):
        if objective is not None:
            objective_named(objective)
        if evaluation not in EVALUATIONS:
            raise KeyError(f"unknown evaluation '{evaluation}'; known: {', '.join(EVALUATIONS)}")
        self.objective, self.knots = objective, knots
        self.backend = backend_named(backend)
        self.options = dict(options or {})
        self.evaluation, self.torque_gains = evaluation, torque_gains
        if continuation is not None and (isinstance(continuation, bool) or not isinstance(continuation, int)
                                         or continuation < 2):
            raise ValueError(f"continuation must be a whole number >= 2 or None, not {continuation!r}")
        self.continuation, self.warm_start = continuation, bool(warm_start)
        if threads is not None or evaluation != "expanded":
            evaluation_threads(threads)   # a bad setting (or $BRACE_THREADS) stops here
        self.threads = threads
        self._symbolic: dict[str, SymbolicRobot] = {}
        self._transcriptions: dict[tuple, Transcription] = {}
        self._built: dict[tuple, BuiltNLP] = {}
        self._lock = threading.RLock()
        self._listener = None
        self._folder = supervisor.scratch_dir("planner")
        self._cleanup = weakref.finalize(self, shutil.rmtree, str(self._folder), True)

    @property
    def expands(self) -> bool:
        """Whether solvers are built on the NLP expanded into one scalar graph (the ``expanded`` evaluation)."""
        return self.evaluation == "expanded"

    # -- lifetime --------------------------------------------------------------
    @property
    def folder(self) -> Path:
        """The planner's temporary folder (solver logs); removed by :meth:`close`."""
        return self._folder

    def close(self) -> None:
        """Forget the built solvers and remove the planner's temporary files."""
        with self._lock:
            self._built.clear()
            self._transcriptions.clear()
            self._cleanup()

    def __enter__(self) -> Planner:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # -- what a task needs -----------------------------------------------------
    def prepared(self, task):
        """``task`` with the planner's knot count."""
        return task if self.knots is None else task.with_knots(self.knots)

    def objective_for(self, task, objective: str | None = None) -> str:
        """The objective to use: the argument, else the planner's, else the task's own."""
        name = objective or self.objective or task.objective
        objective_named(name)
        return name

    def solver_options(self, task) -> dict:
        """The task's solver options with the planner's on top."""
        return dict(task.solver_options, **self.options)

    def transcription_key(self, task, objective: str) -> tuple:
        """Everything a transcription reads that is not a parameter: robot, structure, objective, gain form,
        evaluation, threads (:meth:`threads_for`)."""
        return (robot_key(task.robot), structure_of(task), objective, self.torque_gains, self.evaluation,
                self.threads_for(task))

    def threads_for(self, task) -> int:
        """Threads evaluating the knot functions of ``task``'s NLP; 1 when expanded."""
        return 1 if self.expands else evaluation_threads(self.threads)

    def build_key(self, task, objective: str, warm: bool = False) -> tuple:
        """:meth:`transcription_key` plus what the built solver reads: backend, expansion, options, warm start."""
        options = tuple(sorted((k, repr(v)) for k, v in self.solver_options(task).items()))
        return self.transcription_key(task, objective) + (self.backend.name, options, warm)

    def symbolic_robot(self, robot) -> SymbolicRobot:
        """The robot's CasADi twin, built once per URDF text."""
        key = hashlib.sha1(robot.urdf_text.encode()).hexdigest()
        with self._lock:
            if key not in self._symbolic:
                self._symbolic[key] = SymbolicRobot(robot.model)
            return self._symbolic[key]

    def transcription(self, task, objective: str) -> Transcription:
        """The NLP of ``task`` (at its own knot count) for ``objective``, built once per key."""
        key = self.transcription_key(task, objective)
        with self._lock:
            if key not in self._transcriptions:
                transcription = Transcription(task.robot, self.symbolic_robot(task.robot), structure_of(task),
                                              objective_named(objective), torque_gains=self.torque_gains,
                                              compiled=self.evaluation == "compiled",
                                              threads=self.threads_for(task))
                if transcription.compile_failure is not None:
                    _notice(f"knot functions not compiled: {transcription.compile_failure}; "
                            "evaluating them uncompiled (slower iterations)")
                self._transcriptions[key] = transcription
            return self._transcriptions[key]

    def built(self, task, objective: str, warm: bool = False) -> BuiltNLP:
        """The transcription with its built solver (``warm``: one that starts from given multipliers),
        built once per :meth:`build_key`."""
        key = self.build_key(task, objective, warm)
        with self._lock:
            if key not in self._built:
                supervisor.phase(f"building the {objective} solver")
                transcription = self.transcription(task, objective)
                log = self._folder / f"solver-{len(self._built)}.log"
                solver = self.backend.build(transcription.nlp, self.solver_options(task),
                                            expand=self.expands,
                                            log_file=log, progress=self._relay, warm_start=warm)
                paid = solver.build_time + transcription.compile_time
                transcription.compile_time = 0.0  # counted once, with the first solver built on it
                self._built[key] = BuiltNLP(transcription, solver, log, paid)
            return self._built[key]

    def _relay(self, iteration, x, f, g):
        if self._listener is not None:
            self._listener(iteration, x, f, g)

    # -- solving -----------------------------------------------------------------
    def seed(self, task, *, progress=None, log_path=None, start: dict | None = None) -> Seed:
        """The feasibility solve of ``task`` from its initial guess: the start of every objective.

        ``start`` (physical arrays by block name, e.g. a solved neighbouring
        task's) replaces the initial guess; limit rooms are recomputed.
        """
        with self._lock:
            return self._seed(self.prepared(task), progress, log_path, start)

    def _seed(self, task, progress, log_path, start) -> Seed:
        outcome = SolveOutcome(task, "feasible", None)
        supervisor.phase("computing the starting point")
        first = initial_guess(task) if start is None else _without_rooms(start)
        arrays, result = self._run_stage(task, "feasible", first, outcome, progress, log_path)
        return Seed(task, arrays if result.success else {}, outcome)

    def solve_from_seed(self, seed: Seed, objective: str | None = None, *, progress=None,
                        log_path=None, start: dict | None = None) -> SolveOutcome:
        """Solve ``objective`` starting from ``seed``; the outcome's stages begin with the seed's.

        ``start`` (physical arrays, e.g. a neighbouring task's solution of the
        same objective) replaces the seed's point as the objective's start.
        """
        task = seed.task
        objective = self.objective_for(task, objective)
        with self._lock:
            outcome = _outcome_after(seed, task, objective)
            if not seed.success:
                return outcome
            arrays = seed.arrays
            if objective != "feasible":
                arrays, result = self._objective_stage(seed, objective, outcome, progress, log_path, start)
                if not result.success:
                    return outcome
            outcome.plan = _finished_plan(task, objective, arrays, outcome, self.backend.name)
            return outcome

    def _objective_stage(self, seed: Seed, objective, outcome, progress, log_path, start, carry: bool = True):
        """The objective's stage from ``start`` or, without it, from the seed (robust: with its starting gains;
        with :attr:`warm_start` and ``carry``, with the seed's multipliers)."""
        if start is not None:
            arrays = _without_rooms(start)
        elif objective_named(objective).robust:
            supervisor.phase("computing the starting gains")
            arrays = dict(seed.arrays, **_initial_gains(seed.task, seed.arrays))
        else:
            arrays = seed.arrays
        carried = None
        if carry and self.warm_start and start is None and objective_named(objective).robust:
            carried = carried_multipliers(seed.outcome, self.transcription(seed.task, objective))
        return self._run_stage(seed.task, objective, arrays, outcome, progress, log_path, carried)

    def solve(self, task, objective: str | None = None, *, progress=None, log_path=None) -> SolveOutcome:
        """Plan ``task``: its feasibility seed, then ``objective`` (see :func:`solve`).

        With :attr:`continuation`, a robust objective is planned coarse to
        fine (:meth:`coarse_to_fine`).
        """
        with self._lock:
            task = self.prepared(task)
            name = self.objective_for(task, objective)
            if self.continuation is not None and objective_named(name).robust:
                return self.coarse_to_fine(task, name, coarse_knots(task.knots, self.continuation),
                                           progress=progress, log_path=log_path)
            seed = self._seed(task, progress, log_path, None)
            return self.solve_from_seed(seed, name, progress=progress, log_path=log_path)

    def coarse_to_fine(self, task, objective: str, knots: int, *, progress=None, log_path=None) -> SolveOutcome:
        """Plan ``task`` (at its own knot count) with robust ``objective``, first on ``knots`` knots.

        The seed and the objective are solved on ``knots`` knots; that plan,
        moved onto the task's grid (:func:`~optimizer.transcription.resample.resampled`),
        starts the objective's stage there, without a seed on the task's grid.
        With :attr:`warm_start`, that stage also starts from the coarse
        stage's multipliers, moved onto the task's grid
        (:func:`~optimizer.transcription.resample.resampled_multipliers`), and
        the moved plan's velocities and accelerations meet the integration
        rule (``resampled(..., integrated=True)``); the coarse stage itself
        starts cold (from the seed's multipliers it took more iterations: 55
        against 23 and 83 against 60 at 11 knots).
        The outcome's stages are the coarse ones and the full one (each with
        its knot count). When a coarse stage fails, the task is planned
        directly from its own seed after them.
        """
        with self._lock:
            coarse_seed = self._seed(task.with_knots(knots), progress, log_path, None)
            outcome = _outcome_after(coarse_seed, task, objective)
            result = None
            if coarse_seed.success:
                coarse, result = self._objective_stage(coarse_seed, objective, outcome, progress, log_path, None,
                                                       carry=False)
            if result is not None and result.success:
                start = resampled(task.robot.model, coarse, coarse_seed.task.times, task.times,
                                  integrated=self.warm_start)
                carried = None
                if self.warm_start:
                    carried = resampled_multipliers(outcome.transcription, outcome.bound_multipliers,
                                                    outcome.multipliers, self.transcription(task, objective),
                                                    coarse_seed.task.times, task.times)
                arrays, result = self._run_stage(task, objective, start, outcome, progress, log_path, carried)
            else:
                seed = self._seed(task, progress, log_path, None)
                outcome.stages += seed.outcome.stages
                outcome.last, outcome.violations = seed.outcome.last, seed.outcome.violations
                if not seed.success:
                    return outcome
                arrays, result = self._objective_stage(seed, objective, outcome, progress, log_path, None)
            if result.success:
                outcome.plan = _finished_plan(task, objective, arrays, outcome, self.backend.name)
            return outcome

    def solve_objectives(self, task, objectives, *, progress=None, log_path=None) -> dict:
        """Several objectives for one task from one feasibility seed: ``{objective: SolveOutcome}``."""
        with self._lock:
            seed = self.seed(task, progress=progress, log_path=log_path)
            return {name: self.solve_from_seed(seed, name, progress=progress, log_path=log_path)
                    for name in objectives}

    def _run_stage(self, task, objective, start, outcome, progress, log_path, carried: tuple | None = None):
        """One solver run from the physical arrays ``start`` (and the multipliers ``carried``,
        ``(lam_x, lam_g)`` in the solver's units, when given: a warm-started solver)."""
        built = self.built(task, objective, warm=carried is not None)
        transcription = built.transcription
        layout = transcription.variables
        x0 = layout.pack(start)
        p = parameter_values(task, transcription.structure, transcription.parameters, motion=start["q"])
        if "rooms" in layout and "rooms" not in start:
            layout.set(x0, "rooms", transcription.rooms_at(start, p))
        if "separation" in layout and "separation" not in start:
            layout.set(x0, "separation", separating_planes(task, transcription.structure, start["q"]))
        lbx, ubx = transcription.bounds(task.initial_posture,
                                        required_margins(task.requirements, task.times, len(task.disturbances)))
        self._listener = None if progress is None else _listener(progress, objective, transcription)
        supervisor.phase(f"solving the {objective} stage")
        log_start = built.log.stat().st_size if built.log.exists() else 0
        multipliers = () if carried is None else carried
        try:
            result: SolverResult = built.solver.solve(np.clip(x0, lbx, ubx), p, lbx, ubx, transcription.lbg,
                                                      transcription.ubg, *multipliers)
        finally:
            self._listener = None
            _append_log(built.log, log_start, log_path, objective)
        outcome.stages.append(StageReport(objective, result.status, result.success, result.iterations,
                                          result.wall_time, built.unreported_build_time, result.max_violation,
                                          result.message, result.eval_time, task.knots,
                                          dict(result.eval_split)))
        built.unreported_build_time = 0.0  # reported once, with the first solve that paid for it
        outcome.last = layout.unpack(result.x)
        outcome.violations = transcription.constraints.violations(result.g, transcription.lbg, transcription.ubg)
        outcome.transcription, outcome.parameters = transcription, p
        outcome.multipliers, outcome.bound_multipliers = result.lam_g, result.lam_x
        return outcome.last, result


def coarse_knots(knots: int, ratio: int) -> int:
    """Knots of the coarse solve of a coarse-to-fine continuation: about ``knots / ratio``, at least 4."""
    return max(4, min(knots, round((knots - 1) / ratio) + 1))


def _outcome_after(seed: Seed, task, objective: str) -> SolveOutcome:
    """A new outcome for ``task`` and ``objective`` whose stages and last point so far are the seed's."""
    seed_outcome = seed.outcome
    return SolveOutcome(task, objective, None, stages=list(seed_outcome.stages), last=seed_outcome.last,
                        violations=seed_outcome.violations, transcription=seed_outcome.transcription,
                        multipliers=seed_outcome.multipliers, parameters=seed_outcome.parameters,
                        bound_multipliers=seed_outcome.bound_multipliers)


def carried_multipliers(previous: SolveOutcome, transcription) -> tuple[np.ndarray, np.ndarray]:
    """``(lam_x, lam_g)`` for ``transcription`` from where ``previous`` stopped (scaled NLP units).

    Variable blocks and constraint groups of one name and size take the
    previous run's multipliers; the others (gains, margins, rooms, the
    robustness rows) start at zero.
    """
    before = previous.transcription
    lam_x, lam_g = np.zeros(transcription.variables.size), np.zeros(len(transcription.lbg))
    for block in transcription.variables.blocks:
        if block.name in before.variables and before.variables[block.name].size == block.size:
            old = before.variables[block.name]
            lam_x[block.offset:block.stop] = previous.bound_multipliers[old.offset:old.stop]
    groups = {group.name: group for group in before.constraints.groups}
    for group in transcription.constraints.groups:
        old = groups.get(group.name)
        if old is not None and old.size == group.size:
            lam_g[group.slice()] = previous.multipliers[old.slice()]
    return lam_x, lam_g


def _without_rooms(arrays: dict) -> dict:
    """``arrays`` less the limit rooms, which depend on the task's numbers and are recomputed."""
    return {name: value for name, value in arrays.items() if name != "rooms"}


_SHARED: dict[tuple, Planner] = {}
_SHARED_LOCK = threading.Lock()


def shared_planner(evaluation: str = DEFAULT_EVALUATION, torque_gains: str = "eliminated",
                   threads: int | None = None) -> Planner:
    """The planner :func:`solve` uses, one per setting (its files go when the interpreter exits)."""
    with _SHARED_LOCK:
        key = (evaluation, torque_gains, threads)
        if key not in _SHARED:
            _SHARED[key] = Planner(evaluation=evaluation, torque_gains=torque_gains, threads=threads)
        return _SHARED[key]


def solve(task, objective: str | None = None, *, knots: int | None = None, progress=None,
          log_path=None, evaluation: str = DEFAULT_EVALUATION, torque_gains: str = "eliminated",
          threads: int | None = None) -> SolveOutcome:
    """Plan ``task`` with ``objective`` (default: the task's own); a thin wrapper around :class:`Planner`.

    Parameters
    ----------
    task : Task
        A loaded task (:func:`optimizer.problem.task.load_task`).
    objective : str, optional
        One of ``feasible``, ``robust``, ``robust-min``, ``robust-sum``, ``torque``.
    knots : int, optional
        Override the task's knot count.
    progress : callable(stage, iteration, objective, violation, min_margin), optional
        Called at every solver iteration; ``min_margin`` [N] is NaN when the
        stage has no margin variables.
    log_path : path, optional
        The solver's logs of every stage are appended to this file.
    evaluation, torque_gains, threads
        As for :class:`Planner`.

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
    return shared_planner(evaluation, torque_gains, threads).solve(task, objective, progress=progress,
                                                                   log_path=log_path)


def _listener(progress, objective, transcription):
    layout, lbg, ubg = transcription.variables, transcription.lbg, transcription.ubg
    margins = [b.name for b in layout.blocks if b.name.startswith("rho")]

    def listen(iteration, x, f, g):
        violation = float(np.maximum(np.maximum(lbg - g, g - ubg), 0.0).max(initial=0.0))
        smallest = min((float(layout.get(x, m).min()) for m in margins), default=float("nan"))
        progress(objective, iteration, f, violation, smallest)
    return listen


def _append_log(source: Path, start: int, target, title: str) -> None:
    """Append to ``target`` what this solve wrote to ``source`` (from byte ``start`` on).

    A built solver's log file keeps growing with every solve it runs; only
    the part after ``start`` belongs to this one.
    """
    if target is None or not source.exists():
        return
    with open(source, "rb") as log:
        log.seek(start)
        text = log.read().decode("utf-8", errors="replace")
    with open(target, "a", encoding="utf-8") as out:
        out.write(f"\n===== brace stage: {title} =====\n")
        out.write(text)


def _initial_gains(task, arrays) -> dict:
    """Per-knot gains and margins at a fixed point: the best linear response (docs/formulation.md)."""
    plan = _plan_arrays(task, "feasible", arrays, np.zeros(task.knots), {})
    out = {}
    for p in range(len(task.disturbances)):
        gains, rho, torque_gains = [], [], []
        for _, response in knot_responses(plan, disturbance=p):
            margin = best_linear_margin(response.limit_rows())
            r = max(margin.rho, 0.0) if np.isfinite(margin.rho) else 0.0
            _, jc_j, _, je_j = response.split()
            full = response.all_gains(margin.gains)
            gains.append((r * full).reshape(-1, order="F"))
            torque_gains.append((-(jc_j.T @ (r * full) + r * je_j.T)).reshape(-1, order="F"))
            rho.append(r)
        out[f"G{p}"], out[f"rho{p}"] = np.array(gains).T, np.array(rho)[None, :]
        out[f"G_tau{p}"] = np.array(torque_gains).T
    rho = np.vstack([out[f"rho{p}"] for p in range(len(task.disturbances))]).T
    out[POINT_FLOOR] = combined_margin(rho, [d.objective_weight for d in task.disturbances], "smallest")[None, :]
    return out


def certified_margins(task, plan: Plan, arrays) -> tuple[np.ndarray, list]:
    """Sound linear-gain margins [N], shape (K, P), and the gains that certify them.

    Per point, the plan's own gains when they certify more, else the best
    linear response at the plan's point. The gains of point ``p`` have shape
    (K, 3 nc, d): contact-force change per unit disturbance [N/N or N/(N m)],
    world frame, contacts stacked, projected to balance the base exactly.
    """
    columns, gains = [], []
    for p in range(len(task.disturbances)):
        column, chosen = [], []
        for k, response in knot_responses(plan, disturbance=p):
            rows = response.limit_rows()
            best = best_linear_margin(rows)
            if f"G{p}" in arrays and arrays[f"rho{p}"][0, k] > 1e-9:
                d = response.dim
                own_gains = arrays[f"G{p}"][:, k].reshape((-1, d), order="F") / arrays[f"rho{p}"][0, k]
                own = certify_gains(rows, response.active_gains(own_gains))
                best = own if own.rho >= best.rho else best
            column.append(best.rho)
            chosen.append(response.all_gains(best.gains))
        columns.append(column)
        gains.append(np.array(chosen))
    return np.array(columns).T, gains


def _finished_plan(task, objective, arrays, outcome, backend: str) -> Plan:
    solver_meta = {"stages": [s.as_dict() for s in outcome.stages]}
    final = outcome.stages[-1]
    solver_meta.update(status=final.status, iterations=sum(s.iterations for s in outcome.stages),
                       wall_time=sum(s.solve_time + s.build_time for s in outcome.stages),
                       max_violation=final.max_violation, name=backend)
    plan = _plan_arrays(task, objective, arrays, np.zeros(task.knots), solver_meta)
    supervisor.phase("certifying the plan's margins")
    margins, gains = certified_margins(task, plan, arrays)
    plan.margin = margins[:, 0].copy()
    plan.margins = margins
    for p, point_gains in enumerate(gains):
        plan.extras[response_gains_key(p)] = point_gains
    if "rho0" in arrays:
        plan.extras["margin_optimized"] = arrays["rho0"][0].copy()
    return plan


def _plan_arrays(task, objective, arrays, margin, solver_meta) -> Plan:
    K, nc = task.knots, len(task.contacts)
    active = task.schedule.loaded(task.times)
    forces = arrays["lam"].T.reshape(K, nc, 3).copy()
    forces[~active] = 0.0   # fixed at zero by their bounds; exact zeros, as the plan contract says
    return Plan(
        t=task.times.copy(), q=arrays["q"].T.copy(), v=arrays["v"].T.copy(), a=arrays["a"].T.copy(),
        tau=arrays["tau"].T.copy(),
        contact_forces=forces,
        contact_active=active,
        contact_targets=task.schedule.targets(task.times),
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
        "hand_frame": robot.hand_frame,
        "contact_normals": [np.asarray(c.normal, float).tolist() for c in task.contacts],
        "friction": [float(c.friction) for c in task.contacts],
        "friction_pyramid": {"facets": int(task.facets), "inscribed": True,
                             "tangents": [np.asarray(c.tangents, float).tolist() for c in task.contacts]},
        "min_normal_force": min_normal_force_meta(task.min_normal_forces()),
        **preload_meta(task),
        **({"approach_clearance": float(task.schedule.approach_clearance),
            "touchdown_speed": float(task.schedule.touchdown_speed),
            "load_ramp": float(task.schedule.load_ramp)} if task.schedule.steps else {}),
        "torque_limits": {"lower": robot.torque_lower.tolist(), "upper": robot.torque_upper.tolist()},
        **reserves_meta(task),
        "joint_velocity_limits": robot.velocity_limit.tolist(),
        "disturbances": [{"frame": d.frame, "kind": d.kind, "shape": np.asarray(d.shape, float).tolist(),
                          "objective_weight": float(d.objective_weight)} for d in task.disturbances],
        "combine_points": task.combine_points,
        "objective": objective,
        "clearance": clearance_meta(task.clearance),
        "task": task.raw,
        "solver": solver_meta,
        **({"requirements": {"items": requirements_json(task.requirements)}} if task.requirements else {}),
        **({"contact_knot_surfaces": knot_surfaces_json(task)} if task.schedule.varies() else {}),
    }


def knot_surfaces_json(task) -> dict:
    """``meta.contact_knot_surfaces``: per knot the normal, tangents and friction each contact presses on."""
    normals, tangents, friction = task.schedule.surfaces(task.contacts, task.times)
    return {"normals": normals.tolist(), "tangents": tangents.tolist(), "friction": friction.tolist()}


def require_plan(outcome: SolveOutcome) -> Plan:
    """The outcome's plan, or :class:`SolveFailed` describing the failed stage."""
    if outcome.plan is None:
        stage = outcome.stages[-1]
        raise SolveFailed(f"the {stage.objective} stage ended with status '{stage.status}' "
                          f"({stage.message}) after {stage.iterations} iterations")
    return outcome.plan


def infeasible_point(outcome, violations) -> Plan:
    """Where ``outcome``'s last stage stopped, in the plan layout, with the diagnosis in ``meta``.

    :func:`optimizer.planfile.save_infeasible_point` marks it so no reader
    mistakes it for a plan.
    """
    last = outcome.last
    margin = last["rho0"][0].copy() if "rho0" in last else np.full(outcome.task.knots, np.nan)
    solver = {"stages": [s.as_dict() for s in outcome.stages], "status": outcome.stages[-1].status}
    point = _plan_arrays(outcome.task, outcome.objective, last, margin, solver)
    point.meta["diagnosis"] = [v.as_dict() for v in violations]
    return point
