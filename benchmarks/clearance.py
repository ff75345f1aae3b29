"""What the terrain-clearance rows cost: every demo task solved with and without them, in one run.

    python benchmarks/clearance.py [--knots 30] [--objective robust] [--rows terrain|self] [--write benchmarks/RESULTS.md]

For each demo task it plans the objective twice: as the task asks (every
collision shape kept clear of the terrain) and with the clearance rows
removed (the same task, no shape-surface pairs; the seed's stance IK then
ignores clearance too). It reports the rows, iterations and solver time of
both stages, the build time, the ratio of the solve totals, the smallest
clearance of each plan (Pinocchio forward kinematics, negative inside a
surface) and the mean margin. Prints Markdown; ``--write`` replaces the
"## Clearance" section of the results file.

``--rows self`` does the same for the robot file's self-collision pairs:
with them and without them (terrain rows kept in both), the rows and
separating-plane variables they add, and the smallest pair distance of
each plan (section "## Self-collision").
"""
from __future__ import annotations

import argparse
import dataclasses
import datetime
import os
import platform
import subprocess
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from optimizer.problem.clearance import smallest_clearance, world_points  # noqa: E402
from optimizer.planner import solve  # noqa: E402
from optimizer.problem.task import load_task  # noqa: E402
from optimizer.transcription.structure import structure_of  # noqa: E402
from results_file import publish

TASKS = ["stair_landing", "steep_ramp", "trench", "crawl_space", "drawer_pull"]
HEADINGS = {"terrain": "Clearance", "self": "Self-collision"}   # the RESULTS.md section of each --rows


def without_clearance(task):
    """The same task with no shape-surface pairs (no clearance rows anywhere)."""
    return dataclasses.replace(task, clearance=dataclasses.replace(task.clearance, pairs=[]))


def without_self_pairs(task):
    """The same task with no self-collision pair (terrain rows kept)."""
    return dataclasses.replace(task, clearance=dataclasses.replace(task.clearance, self_pairs=()))


def terrain_low(reference, robot, plan) -> tuple[float, str]:
    """Smallest terrain clearance of ``plan`` with ``reference``'s pairs (m) and where."""
    low = min((smallest_clearance(reference.clearance, robot, q) for q in plan.q), key=lambda x: x[0])
    return low[0], f"{low[1]} vs {low[2]}"


def self_low(reference, robot, plan) -> tuple[float, str]:
    """Smallest distance of ``reference``'s self pairs over ``plan`` (m) and the pair."""
    spec = reference.clearance
    found = [(d, spec.self_label(i)) for q in plan.q for i, d in enumerate(spec.self_distances(world_points(robot, q)))]
    return min(found, default=(float("nan"), ""))


def row_counts(task, knots, rows: str) -> tuple[int, int]:
    """(constraint rows, added variables) of the ``rows`` kind over all knots."""
    structure = structure_of(task.with_knots(knots))
    count = len(structure.clearance_knots)
    if rows == "terrain":
        return len(structure.clearance_rows) * count, 0
    shapes = task.robot.collision.shapes
    per_knot = sum(len(shapes[a].points) + len(shapes[b].points) + 1 for a, b in structure.self_pairs)
    return per_knot * count, 4 * len(structure.self_pairs) * count


def measure(task, reference, objective, knots, rows: str = "terrain") -> dict:
    """Solve once; smallest clearance (or pair distance) judged with ``reference``'s pairs (the task's own)."""
    outcome = solve(task, objective, knots=knots)
    stages = outcome.stages
    constraint_rows, variables = row_counts(task, knots, rows)
    out = {"rows": constraint_rows, "variables": variables,
           "iterations": "+".join(str(s.iterations) for s in stages),
           "solve": sum(s.solve_time for s in stages), "build": sum(s.build_time for s in stages),
           "status": stages[-1].status, "clearance": float("nan"), "margin": float("nan"), "where": ""}
    if outcome.plan is not None:
        low, where = (terrain_low if rows == "terrain" else self_low)(reference, task.robot, outcome.plan)
        out.update(clearance=low, where=where, margin=float(outcome.plan.margin.mean()))
    return out


def rows_for(names, objective, knots, rows: str = "terrain") -> list[str]:
    """The Markdown table: per task the ``rows`` kind's count and cost, solved with and without them."""
    count, distance = (("self rows / variables", "smallest pair distance") if rows == "self"
                       else ("clearance rows", "smallest clearance"))
    drop = without_self_pairs if rows == "self" else without_clearance
    table = [f"| task | {count} | iterations (seed+objective) with / without | solve [s] with / without | "
             f"ratio | build [s] with / without | {distance} with / without [cm] | mean margin with / without [N] |",
             "| --- | ---: | --- | --- | ---: | --- | --- | --- |"]
    for name in names:
        task = load_task(ROOT / "tasks" / f"{name}.yaml")
        on = measure(task, task, objective, knots, rows)
        off = measure(drop(task), task, objective, knots, rows)
        size = f"{on['rows']} / {on['variables']}" if rows == "self" else f"{on['rows']}"
        table.append(
            f"| {name} | {size} | {on['iterations']} / {off['iterations']} | {on['solve']:.1f} / {off['solve']:.1f} | "
            f"{on['solve'] / off['solve']:.2f} | {on['build']:.1f} / {off['build']:.1f} | "
            f"{100 * on['clearance']:.1f} ({on['where']}) / {100 * off['clearance']:.1f} ({off['where']}) | "
            f"{on['margin']:.1f} / {off['margin']:.1f} |")
        print(table[-1], flush=True)
    return table


def machine_line(args, elapsed, load_before, load_after) -> str:
    cpu = platform.processor() or platform.machine()
    rows = "" if args.rows == "terrain" else f" --rows {args.rows}"
    return (f"Script: `python benchmarks/clearance.py --knots {args.knots} --objective {args.objective}{rows}` "
            f"({datetime.date.today().isoformat()}, {os.cpu_count()} cores, {cpu}, Python {platform.python_version()}, "
            f"`OPENBLAS_NUM_THREADS=1`); whole run {elapsed / 60:.1f} min. The machine was shared with other "
            f"work during this run (`uptime` load averages before: {load_before}; after: {load_after}), so "
            "read the times as ratios within one row, not as absolute figures.")


def description(args) -> str:
    """What the table compares, for ``args.rows``."""
    if args.rows == "self":
        return (f"Every demo task at {args.knots} knots, objective `{args.objective}`, solved with the demo robot's "
                "self-collision pairs (forearm and gripper 2 cm from the body and the front thighs and shanks, "
                "`models/stilt.yaml`) and without them, terrain clearance rows in both, one after the other. "
                "\"self rows / variables\" counts the pairs' rows and separating-plane variables over all knots; "
                "\"ratio\" divides the solve time with the pairs by the time without; the smallest pair distance "
                "of the plan without the rows is measured with the same pairs (negative: overlapping shapes).")
    return (f"Every demo task at {args.knots} knots, objective `{args.objective}`, solved as the task asks "
            "(every collision shape at least 3 cm from every terrain surface) and with the clearance rows "
            "removed, one after the other (the robot file's self-collision pairs kept in both). \"clearance rows\" "
            "counts rows over all knots; \"ratio\" divides the solve time with clearance by the time without; "
            "the smallest clearance of the plan without rows is measured with the same shapes (negative: a shape "
            "inside a surface).")


def section(args, table, elapsed, load_before, load_after) -> str:
    return "\n".join([f"## {HEADINGS[args.rows]}", "", machine_line(args, elapsed, load_before, load_after), "",
                      description(args), "", *table, ""])


def load() -> str:
    text = subprocess.run(["uptime"], capture_output=True, text=True).stdout
    return text.split("load average:")[-1].strip() if "load average" in text else "unknown"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--knots", type=int, default=30)
    parser.add_argument("--objective", default="robust")
    parser.add_argument("--tasks", default=",".join(TASKS))
    parser.add_argument("--rows", choices=("terrain", "self"), default="terrain",
                        help="which rows to compare: terrain clearance, or the robot file's self-collision pairs")
    parser.add_argument("--write", metavar="RESULTS.md")
    args = parser.parse_args(argv)
    before, started = load(), time.perf_counter()
    table = rows_for(args.tasks.split(","), args.objective, args.knots, args.rows)
    text = section(args, table, time.perf_counter() - started, before, load())
    publish(text, args.write, HEADINGS[args.rows])
    return 0


if __name__ == "__main__":
    sys.exit(main())
