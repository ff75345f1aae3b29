"""``brace solve TASK``: plan a whole-body motion and write a plan file.

Before building the NLP, the task's solver options are tried on a tiny
problem and the pre-solve checks run (``optimizer.analysis.presolve``): a
task they prove impossible stops with the findings in plain words.

Prints one progress line per solver iteration (objective, largest
constraint violation, smallest margin so far), then a summary with units.
When the solver fails, the violated constraint groups are listed with
their knots and a hint, and the point where it stopped is saved beside the
plan path as ``<out>.infeasible.npz`` (marked, never loadable as a plan).
Exit codes: 0 plan written, 1 the solver failed (nothing written as a plan),
2 bad input or a task proven impossible, 130 interrupted (nothing written).
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .. import supervisor
from ..analysis.margin_flags import DEFAULT_WARN_FRACTION, plan_shortfalls, unmet
from ..errors import InputError, OutputError, TooLargeForMemory
from ..memory import SIZE_TEXT, available_memory, format_size, parse_size
from ..problem.task import MAX_KNOTS, load_task
from ..transcription.objectives import OBJECTIVES
from ..notices import SAFETY
from .cache import (AUTO, add_cache_option, add_evaluation_option, add_threads_option, apply_cache_option,
                    chosen_evaluation, compiler_note, threads_option)
from .shortfalls import shortfall_lines, use_colour

if TYPE_CHECKING:
    from ..planner import SolveOutcome

HELP = "plan a whole-body motion for a task file and write a plan file"
CLI = "command line"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("task", metavar="TASK.yaml", help="task file")
    parser.add_argument("--objective", choices=list(OBJECTIVES), help="override the task's objective")
    parser.add_argument("--knots", type=int, help=f"override the task's knot count (2 to {MAX_KNOTS})")
    parser.add_argument("--out", metavar="PLAN.npz", help="plan file to write (default: plans/<task>-<objective>.npz)")
    parser.add_argument("--quiet", action="store_true", help="no per-iteration progress lines")
    parser.add_argument("--skip-checks", action="store_true",
                        help="do not run the pre-solve checks (reach, standing still, statics, timing)")
    parser.add_argument("--memory-limit", metavar="SIZE",
                        help="most memory the solve may use, e.g. 8G or 512M (default: the task's "
                             "solver.memory_limit, else what the machine has available)")
    parser.add_argument("--check-only", action="store_true",
                        help="validate the task and run the pre-solve checks, then stop without solving")
    parser.add_argument("--require-margin", type=float, metavar="NEWTON",
                        help="require this certified margin at every knot and disturbance point, N "
                             "(added to the task's 'require' entries)")
    parser.add_argument("--keep-unmet", action="store_true",
                        help="write the plan even when a required margin is not met (marked in its meta)")
    parser.add_argument("--warn-below", type=float, metavar="NEWTON",
                        help="flag knots whose certified margin is below this, N, where nothing is required "
                             f"(default {100 * DEFAULT_WARN_FRACTION:.0f} %% of the robot's weight)")
    add_cache_option(parser)
    add_evaluation_option(parser, auto=True)
    add_threads_option(parser, "$BRACE_THREADS, else 1")


def run(args) -> int:
    supervisor.on_phase(None if args.quiet else _print_phase)
    try:
        return _run(args)
    finally:
        supervisor.on_phase(None)


def _run(args) -> int:
    apply_cache_option(args)
    supervisor.phase("loading the task")
    task = load_task(args.task)
    if args.knots is not None:
        if not 2 <= args.knots <= MAX_KNOTS:
            raise InputError(CLI, "--knots", f"a whole number from 2 to {MAX_KNOTS}", args.knots)
        task = task.with_knots(args.knots)
    task = with_cli_requirement(task, args)
    threads = threads_option(args)
    objective = args.objective or task.objective
    out = output_path(args, objective)
    limit = memory_limit(args, task)
    run_checks(task, args.skip_checks)
    if not args.skip_checks and not requirement_reachable(task):
        return 1
    evaluation = chosen_evaluation(args.evaluation, task.knots)
    check_memory(task, objective, limit, evaluation)
    if args.check_only:
        print(f"brace solve: task '{task.name}' is valid" + ("" if args.skip_checks else "; pre-solve checks passed"))
        return 0
    from ..planner import solve, take_notice

    note = compiler_note() if evaluation == "compiled" else None
    if note:
        print(note)
    log_path = out.with_suffix(".ipopt.log")
    write_log_header(log_path, f"Ipopt logs of brace solve {args.task} --objective {objective}\n")
    print(f"brace solve: task '{task.name}', objective {objective}, {task.knots} knots over {task.duration:.2f} s, "
          f"robot '{task.robot.name}' ({task.robot.mass:.1f} kg), {evaluation} evaluation"
          + (" (auto)" if args.evaluation == AUTO else ""))
    started = time.perf_counter()
    outcome = solve(task, objective, progress=None if args.quiet else _print_progress, log_path=log_path,
                    evaluation=evaluation, threads=threads)
    elapsed = time.perf_counter() - started
    for text in take_notice() if note is None else []:
        print(f"note: {text}")
    if not outcome.success:
        _report_failure(outcome, out, log_path)
        return 1
    from ..planfile import save_plan

    shortfalls = plan_shortfalls(outcome.plan, task.requirements, args.warn_below)
    met = not unmet(shortfalls)
    if task.requirements:
        outcome.plan.meta["requirements"]["met"] = met
    lines = summary_lines(outcome, elapsed, out, log_path)
    if met or args.keep_unmet:
        supervisor.phase("writing the plan")
        save_plan(outcome.plan, out)
        _remove_stale_point(out)
    else:
        lines[0] = f"NO plan written (a required margin is not met; --keep-unmet writes it anyway): {out}"
    print("\n".join(lines))
    for line in shortfall_lines(shortfalls, use_colour(sys.stdout)):
        print(line)
    print(SAFETY)
    return 0 if met else 1


def with_cli_requirement(task, args):
    """The task with ``--require-margin`` added, checked (> 0 N)."""
    for name in ("require_margin", "warn_below"):
        value = getattr(args, name)
        if value is not None and not (np.isfinite(value) and value > 0):
            raise InputError(CLI, "--" + name.replace("_", "-"), "a positive number of newtons", value)
    return task if args.require_margin is None else task.with_required_margin(args.require_margin)


def requirement_reachable(task) -> bool:
    """The required-margin checks: warnings printed; False (after saying why) when proven unreachable."""
    from ..analysis.requirement_checks import requirement_findings

    findings = requirement_findings(task)
    proven = [f for f in findings if f.impossible]
    for finding in findings:
        if not finding.impossible:
            print(f"  warning: {finding.text()}")
    if proven:
        print(f"brace solve: {task.path}: a required margin cannot be met (pre-solve proof); no plan was written:",
              file=sys.stderr)
        for finding in proven:
            print(f"  {finding.text()}", file=sys.stderr)
    return not proven


def output_path(args, objective: str) -> Path:
    """The plan path (``--out`` or the default), checked to be writable as a file."""
    out = Path(args.out) if args.out else Path("plans") / f"{Path(args.task).stem}-{objective}.npz"
    if out.is_dir():
        raise InputError(CLI, "--out", "a file path for the plan", f"{out} is a directory")
    if out.parent.exists() and not out.parent.is_dir():
        raise InputError(CLI, "--out", "a path whose folder is a directory", f"{out.parent} is a file")
    return out


def write_log_header(log_path: Path, text: str) -> None:
    try:
        log_path.parent.mkdir(parents=True, exist_ok=True)
        log_path.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise OutputError(log_path, "", "a writable place for the solver log", exc.strerror or str(exc)) from None


def run_checks(task, skip: bool) -> None:
    """Solver options on a tiny NLP, then the pre-solve checks (raise when the task is impossible)."""
    from ..analysis.presolve import check_solver_options, require_possible

    supervisor.phase("checking the solver options")
    check_solver_options(task)
    if skip:
        return
    supervisor.phase("running the pre-solve checks")
    started = time.perf_counter()
    warnings = require_possible(task)
    print(f"brace solve: pre-solve checks done in {time.perf_counter() - started:.2f} s"
          + (f", {len(warnings)} warning(s):" if warnings else ", nothing found"))
    for finding in warnings:
        print(f"  warning: {finding.text()}")


def memory_limit(args, task) -> int | None:
    """``--memory-limit`` in bytes, else the task's ``solver.memory_limit``, else None."""
    if args.memory_limit is None:
        return task.memory_limit
    size = parse_size(args.memory_limit)
    if size is None:
        raise InputError(CLI, "--memory-limit", SIZE_TEXT, args.memory_limit)
    return size


CLOSE = 0.8  # warn when the estimate takes more than this share of the ceiling


def check_memory(task, objective: str, limit: int | None, evaluation: str | None = None) -> None:
    """Refuse, before building anything, a solve whose estimated memory exceeds the ceiling; warn when close.

    The estimate is for the solvers ``evaluation`` builds (default: the
    planner's default evaluation).

    The ceiling is ``limit`` when given (the most the whole process may
    hold), else the memory available now plus what the process holds already
    (the available figure leaves out the process's own memory, which the
    estimate counts).
    """
    from ..footprint import estimate_memory
    from ..planner import DEFAULT_EVALUATION, shared_planner

    supervisor.phase("estimating the memory the solve needs")
    planner = shared_planner(evaluation or DEFAULT_EVALUATION)
    estimate = estimate_memory(task, objective, planner)
    available = available_memory()
    if limit is not None:
        ceiling, what = limit, "set as the memory limit"
    elif available is not None:
        ceiling = available.size + estimate.baseline
        what = f"(the {format_size(available.size)} {available.source} and the {format_size(estimate.baseline)} held)"
    else:
        print(f"brace solve: memory: {estimate.describe()} (the system does not say how much is available)")
        return
    if estimate.total > ceiling:
        fits = estimate.largest_knots(ceiling)
        advice = (f"the largest knot count that fits is {fits} (--knots {fits})" if fits >= 2
                  else "not even 2 knots fit")
        raise TooLargeForMemory(f"the solve needs {estimate.describe()}, more than the {format_size(ceiling)} {what}; "
                                f"{advice}{leaner_advice(estimate, ceiling, planner)}; nothing was built "
                                "(a higher --memory-limit overrides the estimate)")
    print(f"brace solve: memory: {estimate.describe()}; {format_size(ceiling)} {what}")
    if estimate.total > CLOSE * ceiling:
        print(f"  warning: the estimate is {100 * estimate.total / ceiling:.0f} % of the {format_size(ceiling)} "
              f"{what}; the solve may run out of memory (fewer knots need less"
              + (", and so does --evaluation compiled)" if planner.expands else ")"))
    if limit is not None and available is not None and estimate.total - estimate.baseline > available.size:
        print(f"  warning: only {format_size(available.size)} is {available.source}, less than the estimate")


def leaner_advice(estimate, ceiling: float, planner) -> str:
    """For a refused expanded solve: what ``--evaluation compiled`` would need (its solvers keep the knot
    functions mapped, several times less memory per node), as '; with ...' text, or '' when the planner
    does not expand or the compiled build would not fit 2 knots either."""
    if not planner.expands:
        return ""
    leaner = estimate.built_at(planner.backend.build_bytes_per_node(False))
    if leaner.total <= ceiling:
        return f"; with --evaluation compiled it needs about {format_size(leaner.total)} and fits"
    fits = leaner.largest_knots(ceiling)
    return f"; with --evaluation compiled up to {fits} knots fit" if fits >= 2 else ""


def _print_phase(text: str) -> None:
    print(f"  ... {text}", flush=True)


def _print_progress(stage, iteration, cost, violation, smallest_margin):
    margin = "" if np.isnan(smallest_margin) else f"  smallest margin {smallest_margin:8.2f} N"
    print(f"  [{stage:>10}] iter {iteration:4d}  cost {cost: .4e}  violation {violation:.1e}{margin}", flush=True)


def summary_lines(outcome: SolveOutcome, elapsed: float, out: Path, log_path: Path) -> list[str]:
    plan = outcome.plan
    robot = outcome.task.robot
    use = np.maximum(plan.tau / np.where(plan.tau >= 0, robot.torque_upper, -robot.torque_lower), 0.0)
    k_use, j_use = np.unravel_index(np.argmax(use), use.shape)
    stages = ", ".join(f"{s.objective} {s.status} in {s.iterations} it / {s.solve_time:.1f} s"
                       + (f" (+{s.build_time:.1f} s build)" if s.build_time else "") for s in outcome.stages)
    return [
        f"plan written: {out}",
        f"  Ipopt log            {log_path}",
        f"  stages               {stages}",
        f"  total time           {elapsed:.1f} s",
        *margin_lines(plan),
        f"  peak torque use      {100 * use[k_use, j_use]:.0f} % ({robot.joint_names[j_use]} at t = {plan.t[k_use]:.2f} s)",
        f"  largest violation    {outcome.stages[-1].max_violation:.1e} (scaled NLP units)",
    ]


def margin_lines(plan) -> list[str]:
    """The certified margin's smallest and mean value: one line, or one per disturbance point."""
    margins = plan.margin[:, None] if plan.margins is None else plan.margins
    points = plan.meta["disturbances"]
    lines = []
    for p in range(margins.shape[1]):
        column = margins[:, p]
        k = int(np.argmin(column))
        label = "  margin (certified)   " if p == 0 else " " * 23
        where = f"point {p} ({points[p]['frame']}): " if margins.shape[1] > 1 else ""
        lines.append(f"{label}{where}min {column[k]:.2f} N at t = {plan.t[k]:.2f} s, mean {np.mean(column):.2f} N")
    return lines


def _report_failure(outcome: SolveOutcome, out: Path, log_path: Path) -> None:
    """Status, diagnosis and the saved stopping point, on standard error."""
    from ..analysis.failure import diagnose, report_lines
    from ..planfile import infeasible_path, save_infeasible_point
    from ..planner import infeasible_point

    err = sys.stderr
    stage = outcome.stages[-1]
    print(f"brace solve: the {stage.objective} stage failed: {stage.status} ({stage.message}) "
          f"after {stage.iterations} iterations; no plan was written.", file=err)
    if stage.status in ("iteration-limit", "time-limit"):
        print(f"  the solver ran out of {'iterations' if stage.status == 'iteration-limit' else 'time'}: the "
              "violations below may only mean it needed longer (raise solver.max_iter or max_wall_time)", file=err)
    violations = diagnose(outcome)
    print("diagnosis at the point where the solver stopped (largest violation first):", file=err)
    print("\n".join("  " + line for line in report_lines(violations)), file=err)
    point = infeasible_path(out)
    stopped = infeasible_point(outcome, violations)
    for line in requirement_failure_lines(outcome.task, stopped):
        print(line, file=err)
    save_infeasible_point(stopped, point)
    print(f"  stopping point saved for inspection (NOT a plan, brace certify refuses it): {point}", file=err)
    if out.exists():
        print(f"  note: {out} is from an earlier run, not from this solve", file=err)
    print(f"  Ipopt log: {log_path}", file=err)


def requirement_failure_lines(task, stopped) -> list[str]:
    """Where the stopping point falls short of the task's required margins, in plain words."""
    from ..analysis.margin_flags import stopping_point_shortfalls

    if not task.requirements:
        return []
    short = stopping_point_shortfalls(stopped, task.requirements)
    if not short:
        return []
    return (["required margin: at the point where the solver stopped, the margin a linear response certifies "
             "falls short of the requirement:"]
            + [f"  {s.text()}" for s in short]
            + ["  hint: lower the requirement or narrow its window there, or relieve the limit named "
               "(footholds, friction, posture, torque limits)"])


def _remove_stale_point(out: Path) -> None:
    """A stopping point left by an earlier failed solve of the same output no longer applies."""
    from ..planfile import infeasible_path

    stale = infeasible_path(out)
    if stale.exists():
        stale.unlink()
