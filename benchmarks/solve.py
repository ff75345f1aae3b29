"""Full-size solves of every demo task, and the ablation of the eliminated torque gains.

    python benchmarks/solve.py [--knots 60] [--tasks stair_landing,steep_ramp,...]
                               [--ablation-task steep_ramp] [--write benchmarks/RESULTS.md]

For each demo task it plans with ``feasible``, ``robust``, ``robust-min`` and ``torque`` (each
run repeats the feasibility seed, as ``brace solve`` does) and reports wall
time and iterations per stage, the solver build time (paid once per NLP
shape, shared by every task of that shape) and the ratio of the robust plan's
solve time (seed included) to the feasibility solve's. The ablation solves one
task with the joint-torque gains kept as decision variables and the full
nv x 3 balance, against the transcription with the gains eliminated, in the
same run. Prints Markdown; ``--write`` replaces the "## Solve" section of the
results file.
"""
from __future__ import annotations

import argparse
import datetime
import os
import platform
import re
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
ROOT = Path(__file__).resolve().parent.parent

from optimizer.planner import solve  # noqa: E402
from optimizer.problem.task import load_task  # noqa: E402

TASKS = ["stair_landing", "steep_ramp", "trench", "crawl_space"]


def run(task, objective, knots, **options):
    started = time.perf_counter()
    outcome = solve(task, objective, knots=knots, **options)
    wall = time.perf_counter() - started
    stages = {s.objective: s for s in outcome.stages}
    margin = outcome.plan.margin if outcome.plan is not None else None
    return outcome, stages, wall, margin


def stage_text(stage) -> str:
    return f"{stage.solve_time:.1f} s / {stage.iterations} it ({stage.status})"


def task_rows(names, knots):
    rows = ["| task | objective | seed (feasible) | objective stage | solve total [s] | build [s] | "
            "robust / feasible | margin min / mean [N] |",
            "| --- | --- | --- | --- | ---: | ---: | ---: | --- |"]
    for name in names:
        task = load_task(ROOT / "tasks" / f"{name}.yaml")
        feasible_time = None
        for objective in ("feasible", "robust", "robust-min", "torque"):
            outcome, stages, wall, margin = run(task, objective, knots)
            solve_time = sum(s.solve_time for s in stages.values())
            build = sum(s.build_time for s in stages.values())
            seed = stages["feasible"]
            if objective == "feasible":
                feasible_time = seed.solve_time
            main = stages.get(objective) if objective != "feasible" else None
            ratio = f"{solve_time / feasible_time:.2f}" if objective == "robust" and feasible_time else ""
            figures = "failed" if margin is None else f"{margin.min():.3g} / {margin.mean():.3g}"
            rows.append(f"| {name} | {objective} | {stage_text(seed)} | {stage_text(main) if main else '-'} | "
                        f"{solve_time:.1f} | {build:.1f} | {ratio} | {figures} |")
            print(rows[-1], flush=True)
    return rows


def ablation_rows(name, knots):
    task = load_task(ROOT / "tasks" / f"{name}.yaml")
    rows = ["| torque gains | robust stage | build [s] | status | margin min / mean [N] |",
            "| --- | --- | ---: | --- | --- |"]
    for form, label in (("eliminated", "eliminated (closed form, 6 x 3 base rows)"),
                        ("variables", "decision variables (full nv x 3 balance)")):
        outcome, stages, wall, margin = run(task, "robust", knots, torque_gains=form)
        stage = stages["robust"]
        figures = "failed" if margin is None else f"{margin.min():.3g} / {margin.mean():.3g}"
        rows.append(f"| {label} | {stage.solve_time:.1f} s / {stage.iterations} it | "
                    f"{stage.build_time:.1f} | {stage.status} | {figures} |")
        print(rows[-1], flush=True)
    return rows


def section(args, task_table, ablation_table, elapsed) -> str:
    cpu = platform.processor() or platform.machine()
    return "\n".join([
        "## Solve", "",
        f"Script: `python benchmarks/solve.py --knots {args.knots}` "
        f"({datetime.date.today().isoformat()}, {os.cpu_count()} cores, {cpu}, Python "
        f"{platform.python_version()}, `OPENBLAS_NUM_THREADS=1`, Ipopt + MUMPS through CasADi, "
        f"`expand=True`); whole run {elapsed / 60:.1f} min.", "",
        f"Every demo task at {args.knots} knots. Each row is one `solve()` call: the feasibility "
        "seed, then the objective. \"solve total\" is the solver time of both stages; \"build\" "
        "is the time to create the solver, paid once per NLP shape and objective (the first "
        "task of a shape pays it, the others reuse the solver). \"robust / feasible\" divides "
        "the robust plan's solve total by the feasibility plan's.", "",
        *task_table, "",
        f"Ablation on `{args.ablation_task}` at {args.knots} knots, same run: joint-torque gains "
        "eliminated (ours) against kept as decision variables with the full balance.", "",
        *ablation_table, ""])


def write_section(path: Path, text: str) -> None:
    old = path.read_text(encoding="utf-8") if path.exists() else "# Benchmark results\n"
    pattern = re.compile(r"## Solve\n.*?(?=\n## |\Z)", re.S)
    new = pattern.sub(lambda _: text.rstrip("\n"), old) if pattern.search(old) else old.rstrip("\n") + "\n\n" + text
    path.write_text(new if new.endswith("\n") else new + "\n", encoding="utf-8")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--knots", type=int, default=60)
    parser.add_argument("--tasks", default=",".join(TASKS))
    parser.add_argument("--ablation-task", default="steep_ramp")
    parser.add_argument("--write", metavar="RESULTS.md")
    args = parser.parse_args(argv)
    started = time.perf_counter()
    task_table = task_rows(args.tasks.split(","), args.knots)
    ablation_table = ablation_rows(args.ablation_task, args.knots)
    text = section(args, task_table, ablation_table, time.perf_counter() - started)
    print(text)
    if args.write:
        write_section(Path(args.write), text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
