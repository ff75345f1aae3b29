"""Sweep throughput: variants per minute with 1 and 2 local workers, with and without neighbour warm starts.

    python benchmarks/sweep.py [--knots 10] [--write benchmarks/RESULTS.md]

Runs one small sweep of the steep ramp (slope 10-20 degrees x friction
0.7-1.0, every variant solvable, robust and torque objectives) four times
from scratch, each into a fresh folder: 1 worker cold, 1 worker warm,
2 workers cold, 2 workers warm. Reports wall time (pool start and solver
builds included), variants per minute, the summed Ipopt iterations and
solver seconds of all results, and the load average before and after each
run. The warm/cold ratios of one worker count come from the same run of
this script; on a shared machine compare ratios, not absolute figures.
"""
from __future__ import annotations

import argparse
import datetime
import os
import platform
import sys
import tempfile
import time
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from optimizer.sweep.engines import LocalPool  # noqa: E402
from optimizer.sweep.runner import run_sweep  # noqa: E402
from optimizer.sweep.spec import load_sweep  # noqa: E402
from results_file import publish

GRID = {"slope_deg": [10.0, 15.0, 20.0], "friction": [0.7, 0.85, 1.0]}
CONFIGS = [(1, "none"), (1, "neighbour"), (2, "none"), (2, "neighbour")]


def sweep_file(folder: Path, knots: int, warm: str) -> Path:
    data = {"name": f"bench_{warm}", "task": str(ROOT / "tasks" / "steep_ramp.yaml"), "objectives": ["robust", "torque"],
            "knots": knots, "time_limit_s": 600, "warm_start": warm,
            "axes": {"slope_deg": {"field": "stance.terrain.slope_deg"}, "friction": {"field": "stance.terrain.friction"}},
            "grid": GRID}
    path = folder / f"bench_{warm}.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def load() -> str:
    return " / ".join(f"{x:.1f}" for x in os.getloadavg())


def one_run(folder: Path, knots: int, workers: int, warm: str) -> dict:
    sweep = load_sweep(sweep_file(folder, knots, warm))
    before = load()
    started = time.perf_counter()
    outcome = run_sweep(sweep, folder / f"out_{workers}_{warm}", LocalPool(workers))
    wall = time.perf_counter() - started
    rows = outcome.rows
    solved = [r for r in rows if r["status"] == "solved"]
    seeds = {r["variant"]: r for r in rows}          # one seed per variant, shared by its objectives
    iterations = sum(r.get("iterations") or 0 for r in rows) + sum(r.get("seed_iterations") or 0 for r in seeds.values())
    solver = sum(r.get("solve_time_s") or 0.0 for r in rows) + sum(r.get("seed_time_s") or 0.0 for r in seeds.values())
    stages = {"seed": sum(r.get("seed_iterations") or 0 for r in seeds.values())}
    for objective in sweep.objectives:
        stages[objective] = sum(r.get("iterations") or 0 for r in rows if r["objective"] == objective)
    return {"workers": workers, "warm": warm, "wall": wall, "variants": len(sweep.variants), "stages": stages,
            "per_minute": 60.0 * len(sweep.variants) / wall, "solved": len(solved), "results": len(rows),
            "iterations": iterations, "solver_s": solver, "load_before": before, "load_after": load()}


def table(runs: list[dict]) -> list[str]:
    lines = ["| workers | warm start | wall [s] | variants / min | results solved | Ipopt iterations: seed / robust "
             "/ torque = total | solver time (sum) [s] | load before / after (1, 5, 15 min) |",
             "| ---: | --- | ---: | ---: | ---: | ---: | ---: | --- |"]
    for r in runs:
        stages = " / ".join(str(n) for n in r["stages"].values())
        lines.append(f"| {r['workers']} | {r['warm']} | {r['wall']:.0f} | {r['per_minute']:.2f} | "
                     f"{r['solved']}/{r['results']} | {stages} = {r['iterations']} | {r['solver_s']:.0f} | "
                     f"{r['load_before']} -> {r['load_after']} |")
    return lines


def ratios(runs: list[dict]) -> list[str]:
    by = {(r["workers"], r["warm"]): r for r in runs}
    out = []
    for workers in (1, 2):
        cold, warm = by.get((workers, "none")), by.get((workers, "neighbour"))
        if cold and warm:
            per_stage = ", ".join(f"{name} {warm['stages'][name] / max(cold['stages'][name], 1):.2f}"
                                  for name in cold["stages"])
            out.append(f"- {workers} worker(s): warm / cold Ipopt iterations "
                       f"{warm['iterations'] / cold['iterations']:.2f} ({per_stage}), solver time "
                       f"{warm['solver_s'] / cold['solver_s']:.2f}, wall time {warm['wall'] / cold['wall']:.2f}.")
    for warm in ("none", "neighbour"):
        one, two = by.get((1, warm)), by.get((2, warm))
        if one and two:
            out.append(f"- warm start {warm}: 2 workers / 1 worker variants per minute "
                       f"{two['per_minute'] / one['per_minute']:.2f}.")
    return out


def section(knots: int, runs: list[dict], elapsed: float) -> str:
    cpu = platform.processor() or platform.machine()
    variants = runs[0]["variants"] if runs else 0
    return "\n".join([
        "## Sweep", "",
        f"Script: `python benchmarks/sweep.py --knots {knots}` ({datetime.date.today().isoformat()}, "
        f"{os.cpu_count()} cores, {cpu}, Python {platform.python_version()}, `OPENBLAS_NUM_THREADS=1`); "
        f"whole run {elapsed / 60:.1f} min.", "",
        f"The steep ramp over slope {GRID['slope_deg']} deg x friction {GRID['friction']} ({variants} variants, "
        f"robust and torque: {2 * variants} results), {knots} knots, each configuration from scratch into its own "
        "folder (pool start, solver builds in every worker, pre-solve checks, seed, both objectives, exact "
        "certification, storing). The machine was shared with other engineers' jobs during the run "
        "(load averages in the table; 2 cores), so absolute figures are noisy: read the ratios, which "
        "come from this one run; the Ipopt iteration counts do not depend on load.", "",
        *table(runs), "", *ratios(runs), ""])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--knots", type=int, default=10)
    parser.add_argument("--write", metavar="RESULTS.md")
    args = parser.parse_args(argv)
    started = time.perf_counter()
    runs = []
    with tempfile.TemporaryDirectory(prefix="brace-sweep-bench-") as tmp:
        for workers, warm in CONFIGS:
            runs.append(one_run(Path(tmp), args.knots, workers, warm))
            print(table(runs)[-1], flush=True)
    text = section(args.knots, runs, time.perf_counter() - started)
    publish(text, args.write, "Sweep")
    return 0


if __name__ == "__main__":
    sys.exit(main())
