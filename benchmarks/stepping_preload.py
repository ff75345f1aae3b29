"""Stepping demos: what a foot preload and a friction reserve do to both plans of landing_pick and wall_brace.

    python benchmarks/stepping_preload.py [--knots 20] [--tasks landing_pick,wall_brace]
                                          [--variants none,all-30,...] [--write benchmarks/RESULTS.md]
                                          [--heading 'Stepping demos preload']

The torque-optimal plans of the stepping demos nearly unload a rear foot
while a front foot swings, and their nominal replay in MuJoCo falls. Each
variant gives some feet of ``tasks/<task>.yaml`` a ``preload`` (the task
file's own preloads removed first) and, if it says so, a
``friction_reserve``, solves the torque and the robust plan,
replays both without a push (``brace simulate`` defaults) and certifies the
robust plan (smallest and mean certified margin over the knots), as
``crawl_preload.py`` does for the crawl space. Prints Markdown; ``--write``
replaces the "## Stepping demos preload" section of the results file.
"""
from __future__ import annotations

import argparse
import copy
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
ROOT = Path(__file__).resolve().parent.parent

import mujoco  # noqa: E402

from crawl_preload import CELLS_NOTE, plan_cells  # noqa: E402
from optimizer.errors import TaskError  # noqa: E402
from optimizer.files import read_yaml_mapping  # noqa: E402
from optimizer.problem.task import task_from_mapping  # noqa: E402
from results_file import publish, simulation_run_line

TASKS = ("landing_pick", "wall_brace")
ALL_FEET = ("foot_fl", "foot_fr", "foot_rl", "foot_rr")
REAR_FEET = ("foot_rl", "foot_rr")
# label -> (feet given the preload, preload [N], friction reserve: the share of friction kept unplanned)
VARIANTS = {
    "none": ((), 0.0, 0.0),
    "all feet 20 N": (ALL_FEET, 20.0, 0.0),
    "all feet 30 N": (ALL_FEET, 30.0, 0.0),
    "all feet 40 N": (ALL_FEET, 40.0, 0.0),
    "rear feet 30 N": (REAR_FEET, 30.0, 0.0),
    "rear feet 40 N": (REAR_FEET, 40.0, 0.0),
    "rear feet 80 N": (REAR_FEET, 80.0, 0.0),
    "rear feet 100 N": (REAR_FEET, 100.0, 0.0),
    "friction reserve 0.15": ((), 0.0, 0.15),
    "friction reserve 0.3": ((), 0.0, 0.3),
    "friction reserve 0.15 + rear feet 40 N": (REAR_FEET, 40.0, 0.15),
    "friction reserve 0.3 + rear feet 40 N": (REAR_FEET, 40.0, 0.3),
}


def variant_task(name: str, label: str, knots: int):
    """Task ``name`` with ``label``'s preloads (its own removed first) and friction reserve, at ``knots`` knots."""
    feet, preload, reserve = VARIANTS[label]
    path = ROOT / "tasks" / f"{name}.yaml"
    data = copy.deepcopy(read_yaml_mapping(path, TaskError))
    table = data["stance"]["feet"]
    for frame, foot in list(table.items()):
        entry = dict(foot) if isinstance(foot, dict) else {"xy": list(foot)}
        entry.pop("preload", None)
        if frame in feet:
            entry["preload"] = preload
        table[frame] = entry
    if reserve:
        data["friction_reserve"] = reserve
    return task_from_mapping(data, path).with_knots(knots)


def row(name: str, label: str, knots: int) -> str:
    cells = [name, label] + plan_cells(variant_task(name, label, knots))
    print(f"{name} {label} done", file=sys.stderr, flush=True)
    return "| " + " | ".join(cells) + " |"


def section(args, rows, elapsed, load_before, load_after) -> str:
    return "\n".join([
        f"## {args.heading}", "",
        simulation_run_line(f"python benchmarks/stepping_preload.py --knots {args.knots} --tasks {args.tasks} "
                            f"--variants '{args.variants}'", elapsed, load_before, load_after) + " "
        "(shared machine; no timing is read from this run).", "",
        f"Each task at {args.knots} knots with a `preload` on the feet of each row (the task's own preloads "
        "removed first) and, where the row says so, a `friction_reserve` (the share of every friction "
        "coefficient the plans leave unused). " + CELLS_NOTE, "",
        "| task | variant | torque plan: feet [mm] | hand [mm] | losses | passes | robust plan: feet [mm] | "
        "hand [mm] | losses | passes | robust margin, smallest / mean [N] |",
        "| --- | --- | ---: | ---: | ---: | --- | ---: | ---: | ---: | --- | ---: |",
        *rows, ""])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--knots", type=int, default=20)
    parser.add_argument("--tasks", default=",".join(TASKS))
    parser.add_argument("--variants", default=",".join(VARIANTS), help="comma-separated labels of VARIANTS")
    parser.add_argument("--write", metavar="RESULTS.md")
    parser.add_argument("--heading", default="Stepping demos preload", help="the results file's section to replace")
    args = parser.parse_args(argv)
    names = [t.strip() for t in args.tasks.split(",") if t.strip()]
    labels = [v.strip() for v in args.variants.split(",") if v.strip()]
    unknown = [v for v in labels if v not in VARIANTS] + [t for t in names if t not in TASKS]
    if unknown:
        parser.error(f"unknown variants or tasks {unknown}; known: {list(VARIANTS)}, {list(TASKS)}")
    started, load_before = time.perf_counter(), os.getloadavg()[0]
    rows = [row(name, label, args.knots) for name in names for label in labels]
    publish(section(args, rows, time.perf_counter() - started, load_before, os.getloadavg()[0]), args.write,
            args.heading)
    return 0


if __name__ == "__main__":
    sys.exit(main())
