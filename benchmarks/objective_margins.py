"""Certified margins of several objectives from one seed per task: for before-and-after comparisons of the planner.

    python benchmarks/objective_margins.py solve --tasks-dir tasks --tasks steep_ramp,crawl_space --knots 60
                                           --objectives torque,robust-min,robust-sum --out AFTER.json
                                           [--evaluation compiled] [--options '{"tol": 1e-6}']
    python benchmarks/objective_margins.py compare BEFORE.json AFTER.json [--names robust=robust-sum]
                                           [--write benchmarks/RESULTS.md]

``solve`` plans each task of ``--tasks-dir`` at ``--knots`` with the planner's defaults (one feasibility
seed, then every objective of ``--objectives`` from it) and writes, per task and objective, the smallest
and mean certified margin over the knots (N, the plan's ``margin``), the seed's and the objective
stage's iterations and whether it succeeded. ``--evaluation`` and ``--options`` (a JSON object of Ipopt
options over brace's defaults) are handed to the planner when given, so one checkout can compare two
solver settings. It uses only ``Planner``, ``seed``, ``solve_from_seed`` and ``load_task``, so
the same file runs on an older checkout of brace (``PYTHONPATH=OLD python benchmarks/objective_margins.py
solve ...``): the "before" of a comparison, on the task files of that checkout.

``compare`` tables two such files side by side with the ratio after / before of each figure;
``--names OLD=NEW`` pairs an objective renamed in between. Prints Markdown; ``--write`` replaces the
section "Other objectives before and after the speed work".
"""
from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
SECTION = "Other objectives before and after the speed work"


def solve(args) -> None:
    from optimizer.planner import Planner
    from optimizer.problem.task import load_task
    rows = []
    for name in args.tasks.split(","):
        task = load_task(Path(args.tasks_dir) / f"{name}.yaml").with_knots(args.knots)
        settings = {"evaluation": args.evaluation} if args.evaluation else {}
        with Planner(options=json.loads(args.options) if args.options else None, **settings) as planner:
            seed = planner.seed(task)
            for objective in args.objectives.split(","):
                started = time.perf_counter()
                outcome = planner.solve_from_seed(seed, objective)
                margin = outcome.plan.margin
                rows.append({"task": name, "objective": objective, "success": bool(outcome.success),
                             "smallest": float(margin.min()), "mean": float(margin.mean()),
                             "iterations": int(outcome.stages[-1].iterations),
                             "seed_iterations": int(seed.outcome.stages[-1].iterations),
                             "seconds": time.perf_counter() - started})
                print(rows[-1], flush=True)
    Path(args.out).write_text(json.dumps({"knots": args.knots, "tasks_dir": str(args.tasks_dir),
                                          "evaluation": args.evaluation, "options": args.options, "rows": rows},
                                         indent=1), encoding="utf-8")


def ratio(after: float, before: float) -> str:
    if abs(before) < 1e-2:
        return "-" if abs(after) < 1e-2 else "new"
    return f"{after / before:.4f}"


def compare(args) -> None:
    from results_file import publish
    before, after = (json.loads(Path(p).read_text(encoding="utf-8")) for p in (args.before, args.after))
    renamed = dict(pair.split("=", 1) for pair in args.names.split(",") if pair)
    now = {(r["task"], r["objective"]): r for r in after["rows"]}
    lines = [f"## {args.section}", "",
             f"Files: `{args.before}` against `{args.after}` ({before['knots']} knots; compare command: "
             f"`python benchmarks/objective_margins.py compare {' '.join(sys.argv[2:])}`).", "",
             "| task | objective (before -> after) | smallest before / after [N] | ratio | mean before / after [N] "
             "| ratio | iterations before / after | seed iterations before / after |",
             "| --- | --- | ---: | ---: | ---: | ---: | ---: | ---: |"]
    for r in before["rows"]:
        new_name = renamed.get(r["objective"], r["objective"])
        a = now.get((r["task"], new_name))
        if a is None:
            continue
        name = r["objective"] if new_name == r["objective"] else f"{r['objective']} -> {new_name}"
        lines.append(f"| {r['task']} | {name} | {r['smallest']:.3f} / {a['smallest']:.3f} | "
                     f"{ratio(a['smallest'], r['smallest'])} | {r['mean']:.2f} / {a['mean']:.2f} | "
                     f"{ratio(a['mean'], r['mean'])} | {r['iterations']} / {a['iterations']} | "
                     f"{r.get('seed_iterations', '-')} / {a.get('seed_iterations', '-')} |")
    publish("\n".join(lines) + "\n", args.write, args.section)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    commands = parser.add_subparsers(dest="command", required=True)
    run = commands.add_parser("solve")
    run.add_argument("--tasks-dir", default="tasks")
    run.add_argument("--tasks", default="steep_ramp,crawl_space,stair_landing,trench")
    run.add_argument("--knots", type=int, default=60)
    run.add_argument("--objectives", default="torque,robust-min,robust-sum")
    run.add_argument("--evaluation", help="the planner's evaluation (default: the planner's default)")
    run.add_argument("--options", help="JSON object of Ipopt options over brace's defaults")
    run.add_argument("--out", required=True)
    table = commands.add_parser("compare")
    table.add_argument("before")
    table.add_argument("after")
    table.add_argument("--names", default="", help="OLD=NEW,...: objectives renamed in between")
    table.add_argument("--write", metavar="RESULTS.md")
    table.add_argument("--section", default=SECTION, help=f"heading of the section written (default {SECTION})")
    args = parser.parse_args()
    solve(args) if args.command == "solve" else compare(args)


if __name__ == "__main__":
    main()
