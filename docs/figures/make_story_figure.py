"""Draw the README's story figure: margin over time, robust against torque, on one demo task.

Solves the task with both objectives from one feasibility seed, certifies
both plans exactly and draws the comparison's margin figure with the report's
own code, so the picture is the one `brace compare` makes.

    python docs/figures/make_story_figure.py [--task tasks/crawl_space.yaml] [--knots 20]

Writes docs/figures/margin_story.png (and .svg). Takes a few minutes on 2 cores.
"""
from __future__ import annotations

import argparse
from pathlib import Path

from optimizer.analysis.certify import certify_plan
from optimizer.planner import require_plan, shared_planner
from optimizer.problem.task import load_task
from optimizer.report import palette
from optimizer.report.figures import margin_figure, save
from optimizer.report.table import Entry

HERE = Path(__file__).resolve().parent


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--task", default=str(HERE.parents[1] / "tasks" / "crawl_space.yaml"))
    parser.add_argument("--knots", type=int, default=20)
    parser.add_argument("--out", default=str(HERE))
    args = parser.parse_args()
    task = load_task(args.task).with_knots(args.knots)
    planner = shared_planner()
    seed = planner.seed(task)
    entries = []
    for objective in ("robust", "torque"):
        plan = require_plan(planner.solve_from_seed(seed, objective))
        entries.append(Entry(objective, plan, certify_plan(plan)))
        print(f"{objective}: smallest exact margin {entries[-1].smallest.rho:.2f} N")
    with palette.figure_style():
        fig = margin_figure(entries)
        fig.axes[0].set_title(f"{task.name}, {task.knots} knots: robust against torque-minimizing plan")
        for path in save(fig, args.out, "margin_story"):
            print(f"written: {path}")


if __name__ == "__main__":
    main()
