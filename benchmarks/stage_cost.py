"""What one robust-stage iteration costs: compiler flags of the knot functions and Ipopt's linear-solver options.

    python benchmarks/stage_cost.py [--tasks steep_ramp,crawl_space] [--knots 30]
                                    [--flags=-O0,-O2] [--flag-tasks steep_ramp] [--options '[{}, {"mumps_pivot_order": 5}]']
                                    [--write benchmarks/RESULTS.md]

Two measurements per task, in this process, with brace's cache folder (``$BRACE_CACHE_DIR``):

* **Compiler flags** (tasks of ``--flag-tasks``, default the first task). The task's knot functions are compiled (or loaded from the cache) once per
  entry of ``--flags``; then each library's value, Jacobian and Hessian part are evaluated at random
  inputs, the flags taking turns, three rounds of 100 calls. Reported: compile time (0 when the
  cache held the libraries) and the evaluation time of all knot functions once, with its ratio to
  the first entry's.
* **Ipopt options.** One feasibility seed, then the robust stage from it once per entry of
  ``--options`` (each a JSON object of Ipopt options over brace's defaults, a solver of its own).
  Reported: iterations, the stage's time per iteration split into evaluating the NLP and Ipopt's own
  work (factorizations, line search), the part of Ipopt's own work spent in its primal-dual linear
  systems (factorizing and solving the KKT matrix with MUMPS, from Ipopt's
  ``print_timing_statistics``), and the certified margins. The first entry is measured again last, so
  the spread of the repeated entry shows the machine's noise.

Prints Markdown; ``--write`` replaces the section "Robust-stage iterations, per-iteration cost"
(``--section`` names another). ``--flags=`` (empty) leaves the compiler flags out.
"""
from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import shlex
import sys
import time
from pathlib import Path

import numpy as np
from results_file import publish

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
ROOT = Path(__file__).resolve().parent.parent
SECTION = "Robust-stage iterations, per-iteration cost"
ROUNDS, CALLS = 3, 100


def flag_rows(task, flags: list[str]) -> list[str]:
    """Compile time and interleaved evaluation time of ``task``'s knot functions per compiler flag."""
    from optimizer.planner import Planner
    from optimizer.transcription import compiled
    with Planner(evaluation="mapped") as planner:
        functions = planner.transcription(task, "robust").functions
        originals = {name: compiled._get(functions, name) for name in compiled.knot_function_names(functions)}
    libraries, compile_time = {}, {}
    default = compiled.FLAGS
    try:
        for flag in flags:
            compiled.FLAGS = default[:-1] + (flag,)
            started = time.perf_counter()
            libraries[flag], built = compiled.compiled_functions(originals)
            compile_time[flag] = time.perf_counter() - started if built else 0.0
    finally:
        compiled.FLAGS = default
    rng = np.random.default_rng(0)
    calls = {flag: [] for flag in flags}
    for name in originals:
        for flag in flags:
            function = libraries[flag][name]
            for part in (function, function.jacobian(), function.reverse(1).jacobian()):
                calls[flag].append((part, [rng.normal(size=part.sparsity_in(i).shape) for i in range(part.n_in())]))
    spent = dict.fromkeys(flags, 0.0)
    for _ in range(ROUNDS):
        for flag in flags:
            started = time.perf_counter()
            for _ in range(CALLS):
                for part, args in calls[flag]:
                    part(*args)
            spent[flag] += (time.perf_counter() - started) / CALLS / ROUNDS
    first = spent[flags[0]]
    return [f"| {task.path.stem} | `{flag}` | {compile_time[flag]:.1f} | {spent[flag] * 1e3:.2f} | "
            f"{spent[flag] / first:.2f} |" for flag in flags]


TIMING = {"print_timing_statistics": "yes"}


def linear_system_time(log: Path) -> float:
    """Wall time [s] Ipopt spent in its primal-dual linear systems, from the timing statistics in ``log``
    (the line ``PDSystemSolverTotal....: cpu (sys: s wall: w)``); NaN when the log has none."""
    for line in log.read_text(errors="replace").splitlines():
        if line.startswith("PDSystemSolverTotal"):
            return float(line.rsplit("wall:", 1)[1].strip(" )"))
    return float("nan")


def option_rows(task, option_sets: list[dict]) -> list[str]:
    """The robust stage from one seed, once per Ipopt option set (the first again at the end)."""
    from optimizer.planner import Planner
    rows = []
    with Planner(evaluation="compiled") as seeder:
        seed = seeder.seed(task)
        if not seed.success:
            return [f"| {task.path.stem} | seed failed | | | | | | |"]
        for options in [*option_sets, option_sets[0]]:
            with Planner(evaluation="compiled", options={**TIMING, **options}) as planner:
                outcome = planner.solve_from_seed(seed, "robust")
                linear = linear_system_time(planner.built(seed.task, "robust").log)
            stage = outcome.stages[-1]
            per = max(stage.iterations, 1)
            margin = "failed" if outcome.plan is None else \
                f"{outcome.plan.margin.min():.4g} / {outcome.plan.margin.mean():.4g}"
            rows.append(f"| {task.path.stem} | `{json.dumps(options) if options else 'defaults'}` | "
                        f"{stage.status} | {stage.iterations} | {stage.eval_time / per * 1e3:.0f} | "
                        f"{(stage.solve_time - stage.eval_time) / per * 1e3:.0f} | {linear / per * 1e3:.0f} | "
                        f"{margin} |")
            print(rows[-1], flush=True)
    return rows


def uptime() -> str:
    return os.popen("uptime").read().strip() or "unknown"


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tasks", default="steep_ramp,crawl_space")
    parser.add_argument("--knots", type=int, default=30)
    parser.add_argument("--flags", default="-O0,-O2", help="compiler optimization flags, comma separated")
    parser.add_argument("--flag-tasks", help="tasks of the compiler-flag measurement (default: the first task)")
    parser.add_argument("--options", default="[{}]", help="JSON list of Ipopt option sets")
    parser.add_argument("--write", metavar="RESULTS.md")
    parser.add_argument("--section", default=SECTION, help=f"heading of the results section (default {SECTION})")
    args = parser.parse_args(argv)
    from optimizer.problem.task import load_task
    started, loads = time.perf_counter(), [uptime()]
    flags, option_sets = [f for f in args.flags.split(",") if f], json.loads(args.options)
    flag_table, option_table = [], []
    tasks = args.tasks.split(",")
    flag_tasks = args.flag_tasks.split(",") if args.flag_tasks else tasks[:1]
    for name in dict.fromkeys(flag_tasks + tasks):
        task = load_task(ROOT / "tasks" / f"{name}.yaml").with_knots(args.knots)
        if name in flag_tasks and flags:
            flag_table += flag_rows(task, flags)
        if name in tasks:
            option_table += option_rows(task, option_sets)
    loads.append(uptime())
    lines = [
        f"## {args.section}", "",
        f"Script: `python benchmarks/stage_cost.py --tasks {args.tasks} --knots {args.knots} --flags={args.flags} "
        f"--flag-tasks {','.join(flag_tasks)} "
        + (f"--section {shlex.quote(args.section)} " if args.section != SECTION else "") +
        f"--options {shlex.quote(args.options)}` ({datetime.date.today().isoformat()}, {os.cpu_count()} cores, "
        f"{platform.processor() or platform.machine()}, Python {platform.python_version()}, "
        f"`OPENBLAS_NUM_THREADS=1`, Ipopt + MUMPS through CasADi, compiled evaluation); whole run "
        f"{(time.perf_counter() - started) / 60:.1f} min. Machine load (`uptime`) at the start and the end: "
        + " / ".join(f"`{x}`" for x in loads) + ".", "",
        *(["Knot functions per compiler flag: compile time [s] (0: loaded from the cache), time to evaluate "
            "every knot function's value, Jacobian and Hessian part once [ms] (flags taking turns, "
            f"{ROUNDS} rounds of {CALLS} calls), and its ratio to the first flag's:", "",
            "| task | flag | compile [s] | evaluation [ms] | ratio |", "| --- | --- | ---: | ---: | ---: |",
            *flag_table, ""] if flag_table else []),
        "Robust stage from one seed per Ipopt option set (the first set repeated last: its spread is the "
        "machine's noise); per iteration the time evaluating the NLP, Ipopt's own work, and the part of "
        "that in its linear systems (factorizing and solving the KKT matrix) [ms]:", "",
        "| task | Ipopt options | status | iterations | eval [ms/it] | own [ms/it] | of it linear systems "
        "[ms/it] | margin min / mean [N] |",
        "| --- | --- | --- | ---: | ---: | ---: | ---: | --- |", *option_table]
    publish("\n".join(lines) + "\n", args.write, args.section)
    return 0


if __name__ == "__main__":
    sys.exit(main())
