"""``brace compare TASK``: plan a task with several objectives and compare the plans.

The feasibility seed is solved once and each objective from it (the
planner's shared seed); every plan is written and certified (exactly, or by a bound pair), and DIR
receives the plan files (``<objective>.npz``), ``summary.csv``, the figures
(PNG and SVG), the key-frame strip, the animation and ``report.html``; the
table is also printed. An objective whose
solve fails is a row with its reason; the others go on. Everything is staged
and moved into DIR at the end (an interrupted run writes nothing). Exit codes:
0 every objective planned and certified, 1 some objective failed or is not
certified (the rest is still written), 2 bad input, 130 interrupted.
"""
from __future__ import annotations

import sys
import time

from ..errors import InputError
from ..problem.task import MAX_KNOTS, OBJECTIVES, load_task
from .report import (StatusLine, add_drawing_arguments, certified_entries, check_frames, output_folder,
                     print_summary, staged, write_outputs)

HELP = "plan a task with several objectives and compare them: table, figures, motion preview, HTML page"
CLI = "command line"
DEFAULT_OBJECTIVES = ",".join(OBJECTIVES)


def add_arguments(parser) -> None:
    parser.add_argument("task", metavar="TASK.yaml", help="task file")
    parser.add_argument("--objectives", default=DEFAULT_OBJECTIVES, metavar="LIST",
                        help=f"comma-separated objectives to compare (default {DEFAULT_OBJECTIVES})")
    parser.add_argument("--knots", type=int, help=f"override the task's knot count (2 to {MAX_KNOTS})")
    parser.add_argument("--out", metavar="DIR", help="output folder (default: comparisons/<task>)")
    parser.add_argument("--skip-checks", action="store_true", help="do not run the pre-solve checks")
    add_drawing_arguments(parser)


def parse_objectives(text: str) -> list[str]:
    chosen = [name.strip() for name in text.split(",") if name.strip()]
    unknown = [name for name in chosen if name not in OBJECTIVES]
    if not chosen or unknown:
        raise InputError(CLI, "--objectives", f"a comma-separated list of {', '.join(OBJECTIVES)}",
                         text if not unknown else ", ".join(unknown))
    return list(dict.fromkeys(chosen))


def run(args) -> int:
    from .solve import run_checks

    objectives = parse_objectives(args.objectives)
    check_frames(args.frames)
    task = load_task(args.task)
    if args.knots is not None:
        if not 2 <= args.knots <= MAX_KNOTS:
            raise InputError(CLI, "--knots", f"a whole number from 2 to {MAX_KNOTS}", args.knots)
        task = task.with_knots(args.knots)
    out = output_folder(args.out or f"comparisons/{task.name}")
    run_checks(task, args.skip_checks)
    print(f"brace compare: task '{task.name}', {task.knots} knots over {task.duration:.2f} s, "
          f"objectives {', '.join(objectives)}", flush=True)
    status = StatusLine(sys.stderr)
    with staged(out) as stage:
        plans, failures = solve_objectives(task, objectives, stage)
        comparison = comparison_of(task, objectives, plans, failures, status)
        write_outputs([comparison], stage, status, args.frames, f"brace compare {args.task}")
    status.clear()
    print_summary([comparison], out)
    good = all(e.ok and not e.problems() for e in comparison.entries)
    return 0 if good else 1


def planned(task, objectives):
    """Yield ``(objective, SolveOutcome, seconds)``: one feasibility seed, then each objective from it.

    The seed's time is counted in the first objective's seconds.
    """
    from ..planner import shared_planner

    planner = shared_planner()
    started = time.perf_counter()
    seed = planner.seed(task)
    for objective in objectives:
        outcome = planner.solve_from_seed(seed, objective)
        yield objective, outcome, time.perf_counter() - started
        started = time.perf_counter()


def solve_objectives(task, objectives, folder):
    """Plan every objective; write each plan to ``folder/<objective>.npz``.

    Returns ``({objective: plan}, {objective: reason})``.
    """
    from ..planfile import save_plan

    plans, failures = {}, {}
    for objective, outcome, elapsed in planned(task, objectives):
        if outcome.success:
            save_plan(outcome.plan, folder / f"{objective}.npz")
            plans[objective] = outcome.plan
            iterations = sum(s.iterations for s in outcome.stages)
            print(f"  {objective:<10} planned in {elapsed:.1f} s ({iterations} iterations with the seed's), "
                  f"smallest margin {smallest_margins(outcome.plan)}", flush=True)
        else:
            stage = outcome.stages[-1]
            failures[objective] = (f"the {stage.objective} stage ended with status '{stage.status}' "
                                   f"after {stage.iterations} iterations")
            print(f"  {objective:<10} FAILED after {elapsed:.1f} s: {failures[objective]}", flush=True)
    return plans, failures


def comparison_of(task, objectives, plans, failures, status):
    """The comparison of the planned objectives (certified) and the failed ones (with reasons)."""
    from ..planner import plan_meta
    from ..report.build import Comparison
    from ..report.table import Entry

    certified = {e.name: e for e in certified_entries([(o, plans[o], f"{o}.npz") for o in objectives if o in plans],
                                                      status)}
    entries = [certified.get(o) or Entry(o, failure=failures[o]) for o in objectives]
    meta = next((p.meta for p in plans.values()), None) or plan_meta(task, objectives[0], {})
    return Comparison(task.name, meta, entries, "", tuple(f"{o}.npz" for o in objectives if o in plans))


def smallest_margins(plan) -> str:
    """``"128.85 N"``, or per disturbance point ``"grip_point 128.85 N, body 140.10 N"``."""
    margins = plan.margin[:, None] if plan.margins is None else plan.margins
    if margins.shape[1] == 1:
        return f"{margins.min():.2f} N"
    frames = [d["frame"] for d in plan.meta["disturbances"]]
    return ", ".join(f"{frame} {column.min():.2f} N" for frame, column in zip(frames, margins.T))
