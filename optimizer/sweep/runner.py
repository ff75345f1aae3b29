"""The coordinator: which variants still need solving, in what order, from which start.

:func:`run_sweep` expands the sweep, skips every variant and objective whose
stored record was made from the same inputs, and keeps a few jobs per worker
in flight. With ``warm_start: neighbour`` each job starts from the arrays of
the solved variant nearest in parameter space (each axis measured in units
of its range) among those solved so far in this run; the first jobs start
cold. Every finished result is stored at once, so an interrupted or killed
sweep loses at most the variants that were running. Ctrl-C (or SIGTERM)
stops the workers and still writes the summary of what finished.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import SweepError
from ..files import read_text, read_yaml_mapping
from ..planner import DEFAULT_EVALUATION
from ..problem.task import load_task
from . import store
from .job import ERROR, SOLVED, ObjectiveResult, VariantJob, VariantResult
from .spec import axis_spans, nearest
from .variant import inputs_digest, model_values, variant_mapping

IN_FLIGHT_PER_WORKER = 2


@dataclass
class Progress:
    """Counts of results (one per variant and objective) for the progress line."""

    total: int
    reused: int = 0
    reused_solved: int = 0
    solved: int = 0
    failed: int = 0
    started: float = field(default_factory=time.perf_counter)
    finished_here: int = 0

    @property
    def done(self) -> int:
        return self.reused + self.solved + self.failed

    @property
    def remaining(self) -> int:
        return self.total - self.done

    def seconds_left(self) -> float | None:
        """Estimate from this run's pace [s]; None before the first result."""
        if not self.finished_here:
            return None
        return (time.perf_counter() - self.started) / self.finished_here * self.remaining


@dataclass
class SweepOutcome:
    """What a run of a sweep did: counts, whether it was interrupted, the summary files."""

    progress: Progress
    interrupted: bool
    elapsed: float
    rows: list
    written: list
    engine: str


def run_sweep(sweep, out, engine, report=None, evaluation: str = DEFAULT_EVALUATION,
              threads: int = 1) -> SweepOutcome:
    """Solve every variant of ``sweep`` not yet stored in ``out`` on ``engine``.

    ``report(progress)`` is called after every stored result; ``evaluation``
    is how the workers evaluate the NLP and ``threads`` on how many threads
    each worker evaluates its knot functions (:class:`optimizer.planner.Planner`;
    default 1: the workers already share the cores). Returns a
    :class:`SweepOutcome`; the summary is written even when interrupted.
    """
    out = Path(out)
    base_task = load_task(sweep.task_path)   # a bad base task stops here, with its own one-line error
    base = read_yaml_mapping(sweep.task_path, SweepError)
    texts = read_text(base_task.robot_path) + base_task.robot.urdf_text
    manifest = store.open_results(out, sweep)
    jobs, progress = [], Progress(total=len(sweep.variants) * len(sweep.objectives))
    current = {}
    for variant in sweep.variants:
        mapping = variant_mapping(base, sweep.axes, variant.values, sweep.knots, sweep.time_limit)
        model = model_values(sweep.axes, variant.values)
        digests = {o: inputs_digest(mapping, model, o, texts) for o in sweep.objectives}
        current.update({(variant.id, o): d for o, d in digests.items()})
        todo = []
        for objective in sweep.objectives:
            record = store.stored(out, variant.id, objective, digests[objective])
            if record is None:
                todo.append(objective)
            else:
                progress.reused += 1
                progress.reused_solved += record.get("status") == SOLVED
        if todo:
            jobs.append((variant, VariantJob(variant.id, variant.values, mapping, str(sweep.task_path), model, todo,
                                             sweep.time_limit, evaluation=evaluation, threads=threads), digests))
    interrupted = False
    try:
        _schedule(sweep, out, engine, jobs, progress, report)
        engine.close()
    except KeyboardInterrupt:
        interrupted = True
    rows = store.records(out, manifest, current)
    written = store.write_summary(out, manifest, rows)
    return SweepOutcome(progress, interrupted, time.perf_counter() - progress.started, rows, written,
                        engine.describe())


def _schedule(sweep, out, engine, jobs, progress, report) -> None:
    spans = axis_spans(sweep)
    solved: dict[str, tuple] = {}           # variant id -> (Variant, arrays per stage)
    queue = list(jobs)
    running: dict = {}                      # future -> (variant, job, digests)
    limit = max(1, engine.workers * IN_FLIGHT_PER_WORKER)
    try:
        while queue or running:
            while queue and len(running) < limit:
                variant, job, digests = queue.pop(0)
                if sweep.warm_start == "neighbour":
                    _attach_neighbour(job, variant, solved, sweep.axes, spans)
                running[engine.submit(job)] = (variant, job, digests)
            for future in engine.wait(set(running), timeout=1.0):
                variant, job, digests = running.pop(future)
                result = _collect(engine, future, job)
                for item in result.results:
                    record = store.save_result(out, item, digests[item.objective])
                    progress.finished_here += 1
                    if record["status"] == SOLVED:
                        progress.solved += 1
                    else:
                        progress.failed += 1
                    if report is not None:
                        report(progress)
                if result.arrays:
                    solved[variant.id] = (variant, result.arrays)
    except KeyboardInterrupt:
        engine.stop(set(running))
        raise


def _attach_neighbour(job, variant, solved, axes, spans) -> None:
    near = nearest(variant, [v for v, _ in solved.values()], axes, spans)
    if near is not None:
        job.warm, job.warm_from = solved[near.id][1], near.id


def _collect(engine, future, job):
    """The job's result; a job whose worker died or raised becomes error records."""
    try:
        return engine.result(future)
    except Exception as exc:  # e.g. a worker process killed by the system
        engine.recover()
        reason = f"worker lost: {type(exc).__name__}: {exc}".splitlines()[0][:300]
        base = {"variant": job.id, **job.values, "warm_start_from": job.warm_from, "worker": ""}
        return VariantResult(job.id, [ObjectiveResult(o, dict(base, objective=o, status=ERROR, reason=reason))
                                      for o in job.objectives])
