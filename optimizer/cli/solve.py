"""``brace solve TASK``: plan a whole-body motion and write a plan file.

Prints one progress line per solver iteration (objective, largest
constraint violation, smallest margin so far), then a summary with units.
Exit codes: 0 plan written, 1 the solver failed (nothing written as a plan),
2 bad input.
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

from ..planfile import save_plan
from ..planner import SolveOutcome, solve
from ..problem.task import load_task
from ..transcription.objectives import OBJECTIVES

HELP = "plan a whole-body motion for a task file and write a plan file"
SAFETY = ("Safety: this plan is not validated on hardware. Check it in simulation first, run it at "
          "reduced speed and torque limits in a cleared area with an emergency stop at hand, and "
          "follow your local robot-safety rules and qualified staff.")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("task", metavar="TASK.yaml", help="task file")
    parser.add_argument("--objective", choices=list(OBJECTIVES), help="override the task's objective")
    parser.add_argument("--knots", type=int, help="override the task's knot count (>= 2)")
    parser.add_argument("--out", metavar="PLAN.npz", help="plan file to write (default: plans/<task>-<objective>.npz)")
    parser.add_argument("--quiet", action="store_true", help="no per-iteration progress lines")


def run(args) -> int:
    task = load_task(args.task)
    objective = args.objective or task.objective
    out = Path(args.out) if args.out else Path("plans") / f"{Path(args.task).stem}-{objective}.npz"
    log_path = out.with_suffix(".ipopt.log")
    out.parent.mkdir(parents=True, exist_ok=True)
    log_path.write_text(f"Ipopt logs of brace solve {args.task} --objective {objective}\n", encoding="utf-8")
    knots = args.knots if args.knots is not None else task.knots
    print(f"brace solve: task '{task.name}', objective {objective}, {knots} knots over {task.duration:.2f} s, "
          f"robot '{task.robot.name}' ({task.robot.mass:.1f} kg)")
    started = time.perf_counter()
    outcome = solve(task, objective, knots=args.knots, progress=None if args.quiet else _print_progress,
                    log_path=log_path)
    elapsed = time.perf_counter() - started
    if not outcome.success:
        _print_failure(outcome, log_path)
        return 1
    save_plan(outcome.plan, out)
    print("\n".join(summary_lines(outcome, elapsed, out, log_path)))
    print(SAFETY)
    return 0


def _print_progress(stage, iteration, cost, violation, smallest_margin):
    margin = "" if np.isnan(smallest_margin) else f"  smallest margin {smallest_margin:8.2f} N"
    print(f"  [{stage:>10}] iter {iteration:4d}  cost {cost: .4e}  violation {violation:.1e}{margin}", flush=True)


def summary_lines(outcome: SolveOutcome, elapsed: float, out: Path, log_path: Path) -> list[str]:
    plan = outcome.plan
    robot = outcome.task.robot
    k_min = int(np.argmin(plan.margin))
    use = np.maximum(plan.tau / np.where(plan.tau >= 0, robot.torque_upper, -robot.torque_lower), 0.0)
    k_use, j_use = np.unravel_index(np.argmax(use), use.shape)
    stages = ", ".join(f"{s.objective} {s.status} in {s.iterations} it / {s.solve_time:.1f} s"
                       + (f" (+{s.build_time:.1f} s build)" if s.build_time else "") for s in outcome.stages)
    return [
        f"plan written: {out}",
        f"  Ipopt log            {log_path}",
        f"  stages               {stages}",
        f"  total time           {elapsed:.1f} s",
        f"  margin (certified)   min {plan.margin[k_min]:.2f} N at t = {plan.t[k_min]:.2f} s, "
        f"mean {np.mean(plan.margin):.2f} N",
        f"  peak torque use      {100 * use[k_use, j_use]:.0f} % ({robot.joint_names[j_use]} at t = {plan.t[k_use]:.2f} s)",
        f"  largest violation    {outcome.stages[-1].max_violation:.1e} (scaled NLP units)",
    ]


def _print_failure(outcome: SolveOutcome, log_path: Path) -> None:
    stage = outcome.stages[-1]
    print(f"brace solve: the {stage.objective} stage failed: {stage.status} ({stage.message}) "
          f"after {stage.iterations} iterations; no plan was written.", file=sys.stderr)
    worst = sorted(((float(v.max(initial=0.0)), name, v) for name, v in outcome.violations.items()), reverse=True)
    for value, name, per_knot in worst[:5]:
        if value <= 1e-6:
            break
        knots = np.flatnonzero(per_knot > 0.1 * value)
        print(f"  largest violation {value:.2e} in '{name}' at knots {knots.tolist()[:10]}", file=sys.stderr)
    print(f"  Ipopt log: {log_path}", file=sys.stderr)
