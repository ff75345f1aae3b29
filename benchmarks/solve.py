"""Time and memory of planning, per demo task and knot count, each plan in a fresh process.

    python benchmarks/solve.py [--tasks steep_ramp,crawl_space] [--knots 30,60,120]
                               [--objective robust] [--evaluation compiled,expanded,mapped]
                               [--again] [--compare 60] [--torque-gains variables]
                               [--strategy direct,coarse-3,coarse-warm-3,warm-start] [--warm-only]
                               [--threads 1,2]
                               [--write benchmarks/RESULTS.md]

Every measurement runs in a child process of its own (``python benchmarks/solve.py --child ...``),
so it pays what a user's first plan pays: imports, solver builds, the seed, both solver stages
and the certified margins. With ``--again`` the child then plans the same task a second time in
the same process, with its built solvers kept: the figure a plan costs once its shape is built. Per stage it
reports iterations, solve time and the share of that time spent evaluating the NLP's functions
and derivatives (the rest is Ipopt's own work: factorizations, line search); per run the peak
resident memory; per task the growth exponent of the whole-plan time against knots (least
squares on log time against log knots).

``--evaluation`` names how the NLP is evaluated: ``compiled`` (the knot functions and their
derivatives as compiled C from brace's cache folder, mapped over the knots; measured twice, each
in a fresh process: first with an empty cache folder, which pays the compiler, then with the
cache that run left, as every later process finds it), ``expanded`` (one scalar graph, CasADi
``expand=True``: faster iterations, slow build) or ``mapped`` (the knot functions interpreted,
mapped over the knots, ``expand=False``: fast build, slower iterations). ``--compare K`` also solves
``robust``, ``robust-min`` and ``robust-sum`` from one seed per task at K knots (compiled evaluation) and
reports their certified margins (``--compare-only``: nothing else). ``--strategy`` lists how the robust stage starts: ``direct`` (from the seed
with its starting gains), ``coarse-R`` (``Planner(continuation=R)``: seed and objective first on
about K/R knots, that plan moved onto the K knots as the objective's start), ``coarse-warm-R``
(``Planner(continuation=R, warm_start=True)``: the same, the full stage also warm-started from the
coarse stage's multipliers moved onto the K knots), ``warm-start``
(``Planner(warm_start=True)``: from the seed with its multipliers); ``--warm-only`` measures compiled evaluation
only with a warm cache (one cache folder per task, filled by an unrecorded first plan). ``--threads``
lists thread counts of the mapped knot functions (``Planner(threads=N)``; default: the planner's own
choice) and adds a table of the objective stage per count: iterations, time, evaluation time per
function (Hessian of the Lagrangian, constraint Jacobian, the rest), Ipopt's own time per iteration
and the ratio to the first count listed. Prints Markdown; ``--write`` replaces the "## Solve" section of the
results file (``--section`` names another). Record the machine's load with the figures: timings on a busy machine are slow.
"""
from __future__ import annotations

import argparse
import datetime
import json
import os
import platform
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from results_file import publish

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
ROOT = Path(__file__).resolve().parent.parent
TASKS = ["stair_landing", "steep_ramp", "trench", "crawl_space"]


COMPILED_LABELS = ["compiled, empty cache", "compiled, warm cache"]


# -- child process: one measurement ---------------------------------------------------------
STRATEGIES = ("direct", "coarse-R", "coarse-warm-R", "warm-start")


def strategy_settings(strategy: str) -> dict:
    """``Planner`` keywords of a ``--strategy`` entry."""
    if strategy == "direct":
        return {}
    if strategy == "warm-start":
        return {"warm_start": True}
    if strategy.startswith("coarse-") and strategy[7:].isdigit():
        return {"continuation": int(strategy[7:])}
    if strategy.startswith("coarse-warm-") and strategy[12:].isdigit():
        return {"continuation": int(strategy[12:]), "warm_start": True}
    raise SystemExit(f"--strategy: unknown entry '{strategy}' (known: {', '.join(STRATEGIES)})")


def child(task_name: str, knots: int, objective: str, evaluation: str, torque_gains: str, again: bool,
          strategy: str = "direct", threads: int | None = None) -> dict:
    """Plan once from a fresh process and, with ``again``, once more with the built solvers kept."""
    started = time.perf_counter()
    from optimizer.planner import Planner
    from optimizer.problem.task import load_task
    imported = time.perf_counter() - started
    task = load_task(ROOT / "tasks" / f"{task_name}.yaml")
    runs = []
    with Planner(knots=knots, evaluation=evaluation, torque_gains=torque_gains, threads=threads,
                 **strategy_settings(strategy)) as planner:
        for _ in range(2 if again else 1):
            began = time.perf_counter()
            outcome = planner.solve(task, objective)
            runs.append(_run_figures(outcome, time.perf_counter() - began))
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux: kB
    return {"task": task_name, "knots": knots, "objective": objective, "evaluation": evaluation,
            "strategy": strategy, "threads": planner.threads_for(planner.prepared(task)), "import": imported, "fresh": runs[0],
            "built": runs[1] if again else None, "peak_mb": peak_mb}


def _run_figures(outcome, wall: float) -> dict:
    stages = [{"objective": s.objective, "status": s.status, "iterations": s.iterations, "knots": s.knots,
               "solve": s.solve_time, "eval": s.eval_time, "build": s.build_time, "split": s.eval_split}
              for s in outcome.stages]
    margin = outcome.plan.margin if outcome.plan is not None else None
    return {"wall": wall, "stages": stages,
            "margin_min": None if margin is None else float(margin.min()),
            "margin_mean": None if margin is None else float(margin.mean())}


def compare_child(task_name: str, knots: int) -> dict:
    """Certified margins of the robust objectives from one seed, mapped evaluation."""
    from optimizer.planner import Planner
    from optimizer.problem.task import load_task
    task = load_task(ROOT / "tasks" / f"{task_name}.yaml")
    out = {}
    with Planner(knots=knots, evaluation="compiled") as planner:
        outcomes = planner.solve_objectives(task, ["robust", "robust-min", "robust-sum"])
    for name, outcome in outcomes.items():
        stage = outcome.stages[-1]
        margin = outcome.plan.margin if outcome.plan is not None else None
        out[name] = {"iterations": stage.iterations, "status": stage.status,
                     "min": None if margin is None else float(margin.min()),
                     "mean": None if margin is None else float(margin.mean())}
    return {"task": task_name, "knots": knots, "objectives": out}


def in_child(*args: str, cache: str | None = None) -> dict:
    """Run this script with ``args`` in a fresh interpreter (``cache``: its cache folder); its last output line is JSON."""
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    if cache is not None:
        env["BRACE_CACHE_DIR"] = cache
    done = subprocess.run([sys.executable, str(Path(__file__).resolve()), *args], capture_output=True,
                          text=True, env=env, cwd=ROOT)
    lines = [line for line in done.stdout.splitlines() if line.startswith("{")]
    if done.returncode != 0 or not lines:
        raise RuntimeError(f"child {' '.join(args)} failed:\n{done.stderr[-2000:]}")
    return json.loads(lines[-1])


# -- tables ---------------------------------------------------------------------------------
def stage_text(stage: dict, knots: int | None = None) -> str:
    share = stage["eval"] / stage["solve"] if stage["solve"] > 0 else 0.0
    at = f" at {stage['knots']} knots" if knots is not None and stage.get("knots") not in (None, knots) else ""
    return f"{stage['iterations']} it, {stage['solve']:.1f} s ({share:.0%} eval){at}"


def stages_text(stages: list[dict], knots: int) -> str:
    """The stages of one plan, ``+`` between them: more than one when a continuation ran."""
    return " + ".join(stage_text(stage, knots) for stage in stages) if stages else "-"


def run_rows(result: dict) -> list[str]:
    rows = []
    for label in ("fresh", "built"):
        run = result[label]
        if run is None:
            continue
        stages = run["stages"]
        build = sum(s["build"] for s in stages)
        seeds = [s for s in stages if s["objective"] == "feasible"]
        mains = [s for s in stages if s["objective"] != "feasible"]
        seed_time = sum(s["solve"] for s in seeds)
        figures = "failed" if run["margin_min"] is None else f"{run['margin_min']:.3g} / {run['margin_mean']:.3g}"
        ratio = f"{sum(s['solve'] for s in mains) / seed_time:.2f}" if mains and seed_time > 0 else "-"
        whole = run["wall"] + (result["import"] if label == "fresh" else 0.0)
        evaluation = result["evaluation"] + (f", {result['strategy']}"
                                             if result.get("strategy", "direct") != "direct" else "")
        evaluation += f", {result['threads']} thread{'s' if result['threads'] != 1 else ''}" \
            if result.get("threads_listed") else ""
        rows.append(f"| {result['task']} | {result['knots']} | {evaluation} | "
                    f"{'fresh process' if label == 'fresh' else 'built kept'} | {whole:.1f} | {build:.1f} | "
                    f"{stages_text(seeds, result['knots'])} | {stages_text(mains, result['knots'])} | {ratio} | "
                    f"{result['peak_mb'] / 1024:.2f} | {figures} |")
    return rows


def growth_exponent(results: list[dict], task: str, evaluation: str, label: str,
                    strategy: str = "direct") -> float | None:
    import numpy as np
    points = [(r["knots"], r[label]["wall"]) for r in results
              if r["task"] == task and r["evaluation"] == evaluation and r.get("strategy", "direct") == strategy
              and r[label] and r[label]["wall"] > 0]
    if len(points) < 2:
        return None
    k, t = np.log([p[0] for p in points]), np.log([p[1] for p in points])
    return float(np.polyfit(k, t, 1)[0])


def per_iteration(results: list[dict], task: str, evaluation: str, strategy: str = "direct") -> list[tuple]:
    """(knots, iterations, solve time [s], time per iteration [s]) of the objective stages at the full knot
    count, fresh-process plans of ``task`` with ``evaluation``, by knots."""
    points = []
    for r in results:
        if r["task"] != task or r["evaluation"] != evaluation or r.get("strategy", "direct") != strategy:
            continue
        mains = [s for s in r["fresh"]["stages"]
                 if s["objective"] != "feasible" and s.get("knots") in (None, r["knots"])]
        iterations, solve = sum(s["iterations"] for s in mains), sum(s["solve"] for s in mains)
        if iterations > 0:
            points.append((r["knots"], iterations, solve, solve / iterations))
    return sorted(points)


def per_iteration_rows(results: list[dict], labels: list[tuple]) -> list[str]:
    """Markdown rows: the objective stage's time per iteration against knots, with its growth exponent."""
    import numpy as np
    rows = []
    for task, label, strategy in labels:
        points = per_iteration(results, task, label, strategy)
        if len(points) < 2:
            continue
        slope = np.polyfit(np.log([p[0] for p in points]), np.log([p[3] for p in points]), 1)[0]
        cells = ", ".join(f"{k}: {t:.3f} s ({n} it)" for k, n, _, t in points)
        name = label + (f", {strategy}" if strategy != "direct" else "")
        rows.append(f"| {task} | {name} | {cells} | {slope:.2f} |")
    return rows


def objective_stage(result: dict) -> dict | None:
    """The fresh plan's objective stage at the full knot count, or None (a feasibility plan)."""
    mains = [s for s in result["fresh"]["stages"]
             if s["objective"] != "feasible" and s.get("knots") in (None, result["knots"])]
    return mains[-1] if mains else None


def thread_rows(results: list[dict]) -> list[str]:
    """Markdown rows: the objective stage per thread count, and its ratios to the first count of its group."""
    rows, first = [], {}
    for r in results:
        stage = objective_stage(r)
        if not r.get("threads_listed") or stage is None:
            continue
        split = stage.get("split", {})
        hess, jac = split.get("hess_l", 0.0), split.get("jac_g", 0.0)
        own = (stage["solve"] - stage["eval"]) / max(stage["iterations"], 1)
        figures = (stage["solve"], stage["eval"], own)
        base = first.setdefault((r["task"], r["knots"], r["evaluation"], r.get("strategy", "direct")), figures)
        ratios = " | ".join(f"{a / b:.2f}" if b > 0 else "-" for a, b in zip(figures, base))
        rows.append(f"| {r['task']} | {r['knots']} | {r['evaluation']} | {r['threads']} | {stage['iterations']} | "
                    f"{stage['solve']:.2f} | {stage['eval']:.2f} ({hess:.2f} / {jac:.2f} / "
                    f"{stage['eval'] - hess - jac:.2f}) | {own:.3f} | {ratios} |")
    return rows


def load_text() -> str:
    try:
        return os.popen("uptime").read().strip()
    except OSError:
        return "unknown"


def section(args, results, growth, comparison, elapsed, loads) -> str:
    cpu = platform.processor() or platform.machine()
    lines = [
        f"## {args.section}", "",
        f"Script: `python benchmarks/solve.py --tasks {args.tasks}"
        + ("" if args.compare_only else f" --knots {args.knots} --objective {args.objective} --evaluation "
           f"{args.evaluation}")
        + (" --torque-gains variables" if args.torque_gains == "variables" else "")
        + (" --again" if args.again else "")
        + (f" --compare {args.compare}" if args.compare else "")
        + (f" --compare-tasks {args.compare_tasks}" if args.compare and args.compare_tasks else "")
        + (" --compare-only" if args.compare_only else "")
        + (f" --strategy {args.strategy}" if args.strategy != "direct" else "")
        + (" --warm-only" if args.warm_only else "")
        + (f" --threads {args.threads}" if args.threads else "")
        + (f" --section '{args.section}'" if args.section != "Solve" else "") + "` "
        f"({datetime.date.today().isoformat()}, {os.cpu_count()} cores, {cpu}, Python "
        f"{platform.python_version()}, `OPENBLAS_NUM_THREADS=1`, Ipopt + MUMPS through CasADi); "
        f"whole run {elapsed / 60:.1f} min.", "",
        "Machine load (`uptime`) at the start and the end of the run: " + " / ".join(f"`{x}`" for x in loads)
        + (". Iterations and certified margins do not depend on the load." if args.compare_only else
           ". The machine was shared with other jobs while this ran, so absolute times are slow and "
           "noisy; ratios within one row (robust / feasible, evaluation share) are the steadier figures."), "",
        "Each row pair is one fresh process: \"fresh process\" is its first plan (imports, solver "
        "builds, seed, both stages, certified margins); \"built kept\" plans the same task again in "
        "that process with the built solvers kept. \"whole\" is the wall time of the plan "
        "(imports included for the first); \"build\" is solver creation; each stage gives "
        "iterations, solve time and the share of it spent evaluating the NLP (\"eval\"); "
        "\"robust / feasible\" divides the objective stage's solve time by the seed's; peak is the "
        "process's peak resident memory. \"compiled, empty cache\" starts from an empty cache folder, "
        "so its build includes generating and compiling the knot functions' C code; \"compiled, warm "
        "cache\" is the next fresh process, which loads the libraries the first one left."
        + (" \"coarse-R\" plans coarse to fine (`Planner(continuation=R)`): its feasible stage is the "
           "seed on the coarse knots, its objective stages the coarse one and then the full one from the "
           "coarse plan moved onto the full knots (the knot count of a coarse stage is given); robust / "
           "feasible divides their sum by the coarse seed's time. \"warm-start\" starts the robust stage "
           "from the seed's multipliers (`Planner(warm_start=True)`). \"coarse-warm-R\" is coarse-R with the "
           "full stage also started from the coarse robust stage's multipliers moved onto the full knots "
           "(`Planner(continuation=R, warm_start=True)`)." if args.strategy != "direct" else ""), "",
        "| task | knots | evaluation | plan | whole [s] | build [s] | feasible stage | objective stage | "
        "robust / feasible | peak [GB] | margin min / mean [N] |",
        "| --- | ---: | --- | --- | ---: | ---: | --- | --- | ---: | ---: | --- |"]
    if args.compare_only:   # the opening lines, then the comparison
        lines = lines[:5]
    for result in results:
        lines += run_rows(result)
    if growth:
        lines += ["", "Growth exponent of the whole-plan time against knots (fit over the knot counts above):", "",
                  "| task | evaluation | fresh process | built kept |", "| --- | --- | ---: | ---: |"]
        lines += [f"| {task} | {ev} | {fmt(a)} | {fmt(b)} |" for task, ev, a, b in growth]
    several_threads = bool(args.threads) and "," in args.threads   # per-iteration fits would mix thread counts
    iteration_rows = [] if several_threads else per_iteration_rows(
        results, sorted({(r["task"], r["evaluation"], r.get("strategy", "direct")) for r in results}))
    threaded = thread_rows(results)
    if threaded:
        lines += ["", "Objective stage per thread count of the knot functions (`Planner(threads=N)`, fresh "
                  "process each): iterations, stage time, evaluation time (Hessian of the Lagrangian / "
                  "constraint Jacobian / the rest), Ipopt's own time per iteration (stage time less "
                  "evaluation, over iterations: factorizations, line search), and each of the three times "
                  "divided by the first thread count's of the same task:", "",
                  "| task | knots | evaluation | threads | iterations | stage [s] | eval [s] (hess_l / jac_g / "
                  "other) | Ipopt own [s/it] | stage ratio | eval ratio | Ipopt own ratio |",
                  "| --- | ---: | --- | ---: | ---: | ---: | --- | ---: | ---: | ---: | ---: |"]
        lines += threaded
    if iteration_rows:
        lines += ["", "Objective stage's solve time per iteration against knots (fresh-process plans; knots: time "
                  "per iteration (iterations)) and its growth exponent: steadier than the whole time, which "
                  "also follows the iteration count:", "",
                  "| task | evaluation | time per iteration | exponent |", "| --- | --- | --- | ---: |"]
        lines += iteration_rows
    if comparison:
        lines += ["", f"Robust objectives from one seed at {args.compare} knots (compiled evaluation), certified "
                  "margins min / mean [N] and the objective stage's iterations:", "",
                  "| task | robust | robust-min | robust-sum | robust min / robust-min min | "
                  "robust mean / robust-sum mean |", "| --- | --- | --- | --- | ---: | ---: |"]
        for row in comparison:
            o = row["objectives"]
            cells = [f"{v['min']:.3g} / {v['mean']:.3g} ({v['iterations']} it)" if v["min"] is not None
                     else f"failed ({v['status']})" for v in (o["robust"], o["robust-min"], o["robust-sum"])]
            ok = all(v["min"] is not None for v in o.values())
            r1 = f"{o['robust']['min'] / o['robust-min']['min']:.2f}" if ok and o["robust-min"]["min"] > 0 else "-"
            r2 = f"{o['robust']['mean'] / o['robust-sum']['mean']:.2f}" if ok and o["robust-sum"]["mean"] > 0 else "-"
            lines.append(f"| {row['task']} | {' | '.join(cells)} | {r1} | {r2} |")
    return "\n".join(lines) + "\n"


def fmt(value) -> str:
    return "-" if value is None else f"{value:.2f}"


def measured(task: str, knots: int, evaluation: str, args, strategy: str = "direct",
             cache: str | None = None, threads: str = "default") -> list[dict]:
    """One fresh-process measurement; for ``compiled`` two: an empty cache folder, then the one it left
    (one, with the folder ``cache``, when that is given)."""
    child = ["--child", task, str(knots), args.objective, evaluation, args.torque_gains,
             "again" if args.again else "once", strategy, threads]
    if evaluation != "compiled":
        return [in_child(*child)]
    if cache is not None:
        warm = in_child(*child, cache=cache)
        warm["evaluation"] = "compiled, warm cache"
        return [warm]
    folder = tempfile.mkdtemp(prefix="brace-bench-cache-")
    try:
        empty, warm = in_child(*child, cache=folder), in_child(*child, cache=folder)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    empty["evaluation"], warm["evaluation"] = "compiled, empty cache", "compiled, warm cache"
    return [empty, warm]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tasks", default=",".join(TASKS))
    parser.add_argument("--knots", default="30,60,120")
    parser.add_argument("--objective", default="robust")
    parser.add_argument("--evaluation", default="compiled,expanded,mapped")
    parser.add_argument("--compare", type=int, default=0, metavar="K")
    parser.add_argument("--compare-tasks", metavar="TASKS", help="tasks of --compare (default: --tasks)")
    parser.add_argument("--compare-only", action="store_true", help="only the --compare solves, no plan timings")
    parser.add_argument("--write", metavar="RESULTS.md")
    parser.add_argument("--section", default="Solve", help="heading of the results section written (default Solve)")
    parser.add_argument("--torque-gains", default="eliminated", choices=["eliminated", "variables"],
                        help="joint-torque gains in closed form (default) or as decision variables (ablation)")
    parser.add_argument("--again", action="store_true",
                        help="plan each task a second time in the same process, built solvers kept")
    parser.add_argument("--strategy", default="direct", metavar="S,...",
                        help="robust-stage starts to measure: direct, coarse-R, coarse-warm-R, warm-start "
                             "(default direct)")
    parser.add_argument("--warm-only", action="store_true",
                        help="compiled evaluation with a warm cache only (one folder per task, filled first)")
    parser.add_argument("--threads", metavar="N,...",
                        help="thread counts of the knot functions to measure, e.g. 1,2 (default: the planner's)")
    parser.add_argument("--child", nargs=8, metavar=("TASK", "KNOTS", "OBJECTIVE", "EVALUATION", "GAINS", "AGAIN",
                                                     "STRATEGY", "THREADS"), help=argparse.SUPPRESS)
    parser.add_argument("--compare-child", nargs=2, metavar=("TASK", "KNOTS"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        task, knots, objective, evaluation, gains, again, strategy, threads = args.child
        print(json.dumps(child(task, int(knots), objective, evaluation, gains, again == "again", strategy,
                               None if threads == "default" else int(threads))), flush=True)
        return 0
    if args.compare_child:
        print(json.dumps(compare_child(args.compare_child[0], int(args.compare_child[1]))), flush=True)
        return 0
    started, loads = time.perf_counter(), [load_text()]
    results, comparison, growth = [], [], []
    tasks, evaluations = args.tasks.split(","), args.evaluation.split(",")
    strategies = args.strategy.split(",")
    thread_counts = args.threads.split(",") if args.threads else ["default"]
    if not all(t.isdigit() and int(t) >= 1 for t in thread_counts if t != "default"):
        raise SystemExit(f"--threads: whole numbers >= 1, not '{args.threads}'")
    for strategy in strategies:
        strategy_settings(strategy)   # a wrong entry stops here, before any measurement
    for task in [] if args.compare_only else tasks:
        cache = tempfile.mkdtemp(prefix="brace-bench-cache-") if args.warm_only else None
        try:
            if cache is not None and "compiled" in evaluations:  # fills the cache; not recorded
                in_child("--child", task, args.knots.split(",")[0], args.objective, "compiled", args.torque_gains,
                         "once", "direct", "1", cache=cache)
            for evaluation in evaluations:
                for knots in (int(k) for k in args.knots.split(",")):
                    for strategy in strategies:
                        for threads in thread_counts:
                            for result in measured(task, knots, evaluation, args, strategy, cache, threads):
                                result["threads_listed"] = bool(args.threads)
                                results.append(result)
                                print("\n".join(run_rows(result)), flush=True)
        finally:
            if cache is not None:
                shutil.rmtree(cache, ignore_errors=True)
        for evaluation in evaluations if len(thread_counts) == 1 else []:   # a fit over one thread count
            for label in COMPILED_LABELS if evaluation == "compiled" else [evaluation]:
                for strategy in strategies:
                    name = label + (f", {strategy}" if strategy != "direct" else "")
                    exponents = (growth_exponent(results, task, label, "fresh", strategy),
                                 growth_exponent(results, task, label, "built", strategy))
                    if any(e is not None for e in exponents):
                        growth.append((task, name, *exponents))
    if args.compare:
        for task in (args.compare_tasks or args.tasks).split(","):
            comparison.append(in_child("--compare-child", task, str(args.compare)))
            print(json.dumps(comparison[-1]), flush=True)
    loads.append(load_text())
    text = section(args, results, growth, comparison, time.perf_counter() - started, loads)
    publish(text, args.write, args.section)
    return 0


if __name__ == "__main__":
    sys.exit(main())
