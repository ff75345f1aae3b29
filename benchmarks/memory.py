"""Memory estimate against measured peak memory of `brace solve`, at several knot counts.

    python benchmarks/memory.py [--knots 30,60,120] [--runs steep_ramp:robust,trench:torque]
                                [--evaluation expanded|compiled|mapped] [--write benchmarks/RESULTS.md]

For each task, objective and knot count: the estimate `brace solve` prints
before building (``optimizer.footprint.estimate_memory``, taken in a fresh
process after loading the task, as the command does) and the peak resident
memory of the whole `brace solve` run (supervisor and work process), read
from the operating system when it ends (``wait4``'s ``ru_maxrss``). Also
prints the growth of the peak per knot divided by the estimate's expanded
nodes per knot: the bytes per node that ``solver.ipopt.BUILD_BYTES_PER_NODE``
holds (``COMPILED_BUILD_BYTES_PER_NODE`` for ``--evaluation compiled`` and
``mapped``, whose solvers are built without expansion). ``--evaluation``
passes the same choice to the estimate and to `brace solve`; with
``compiled`` each task gets a fresh cache folder, filled by a first run at
the smallest knot count (reported as the "empty cache" row: its build runs
the C compiler), so the measured rows load the libraries, as every later
process does. Prints Markdown; ``--write`` replaces the "## Memory" section
of the results file (another section for another evaluation:
"## Memory, compiled evaluation").
"""
from __future__ import annotations

import argparse
import datetime
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from results_file import publish

ROOT = Path(__file__).resolve().parent.parent
ENV = dict(os.environ, OPENBLAS_NUM_THREADS="1", PYTHONPATH=str(ROOT))
ESTIMATE = """
import sys
from optimizer.problem.task import load_task
from optimizer.footprint import estimate_memory
from optimizer.planner import shared_planner
task = load_task(sys.argv[1]).with_knots(int(sys.argv[2]))
e = estimate_memory(task, sys.argv[3], shared_planner(sys.argv[4]))
print(e.total, sum(s.nodes_per_knot for s in e.stages))
"""


def estimate(task: Path, knots: int, objective: str, evaluation: str) -> tuple[int, float]:
    """(estimated peak [bytes], expanded nodes per knot) from a fresh process."""
    done = subprocess.run([sys.executable, "-c", ESTIMATE, str(task), str(knots), objective, evaluation],
                          capture_output=True, text=True, env=ENV, check=True)
    total, nodes = done.stdout.split()
    return int(total), float(nodes)


def measured_peak(task: Path, knots: int, objective: str, evaluation: str,
                  cache: str | None = None) -> tuple[int, float, int]:
    """(peak resident memory [bytes], wall time [s], exit code) of one `brace solve` (``cache``: its cache folder)."""
    with tempfile.TemporaryDirectory(prefix="brace-bench-") as folder:
        started = time.perf_counter()
        process = subprocess.Popen([sys.executable, "-m", "optimizer", "solve", str(task), "--knots", str(knots),
                                    "--objective", objective, "--quiet", "--skip-checks", "--memory-limit", "1T",
                                    "--evaluation", evaluation, *(["--cache-dir", cache] if cache else []),
                                    "--out", str(Path(folder) / "plan.npz")],
                                   stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=ENV)
        _, status, usage = os.wait4(process.pid, 0)
        process.returncode = os.waitstatus_to_exitcode(status)
        return usage.ru_maxrss * 1024, time.perf_counter() - started, process.returncode


def row(name: str, objective: str, knots: int, evaluation: str, cache: str | None, label: str = "") -> tuple:
    """One table row (and its knots, peak [bytes], nodes per knot): estimate, then the measured `brace solve`."""
    task = ROOT / "tasks" / f"{name}.yaml"
    guess, nodes = estimate(task, knots, objective, evaluation)
    peak, wall, code = measured_peak(task, knots, objective, evaluation, cache)
    status = "" if code == 0 else f" (exit {code})"
    text = (f"| {name} | {objective} | {knots}{label} | {guess / 2**20:.0f} | {peak / 2**20:.0f}{status} | "
            f"{peak / guess:.2f} | {wall:.0f} |")
    print(text, flush=True)
    return text, (knots, peak, nodes)


def rows(runs, knot_counts, evaluation: str = "expanded"):
    table = ["| task | objective | knots | estimate [MB] | measured peak [MB] | measured / estimate | solve [s] |",
             "| --- | --- | ---: | ---: | ---: | ---: | ---: |"]
    slopes = []
    for run in runs:
        name, objective = run.split(":")
        points = []
        with tempfile.TemporaryDirectory(prefix="brace-bench-cache-") as cache:
            if evaluation == "compiled":   # fills the cache; its peak includes the compiler's run
                table.append(row(name, objective, knot_counts[0], evaluation, cache, " (empty cache)")[0])
            for knots in knot_counts:
                text, point = row(name, objective, knots, evaluation, cache if evaluation == "compiled" else None)
                table.append(text)
                points.append(point)
        (k0, p0, n0), (k1, p1, _) = points[0], points[-1]
        slopes.append(f"{name} {objective}: {(p1 - p0) / (k1 - k0) / n0:.0f} bytes per node "
                      f"({(p1 - p0) / (k1 - k0) / 2**20:.1f} MB per knot, {n0:,.0f} nodes per knot)")
    return table, slopes


def load() -> str:
    try:
        return ", ".join(f"{x:.1f}" for x in os.getloadavg())
    except OSError:
        return "unknown"


def heading(evaluation: str) -> str:
    """The results section of ``evaluation``."""
    return "Memory" if evaluation == "expanded" else f"Memory, {evaluation} evaluation"


def section(args, table, slopes, before, after) -> str:
    figure = "BUILD_BYTES_PER_NODE" if args.evaluation == "expanded" else "COMPILED_BUILD_BYTES_PER_NODE"
    option = "" if args.evaluation == "expanded" else f" --evaluation {args.evaluation}"
    expand = "`expand=True`" if args.evaluation == "expanded" else f"`--evaluation {args.evaluation}`, `expand=False`"
    return "\n".join([
        f"## {heading(args.evaluation)}", "",
        f"Script: `python benchmarks/memory.py --knots {args.knots} --runs {args.runs}{option}` "
        f"({datetime.date.today().isoformat()}, {os.cpu_count()} cores, {platform.machine()}, Python "
        f"{platform.python_version()}, `OPENBLAS_NUM_THREADS=1`, Ipopt + MUMPS through CasADi, {expand}). "
        f"Load average (1, 5, 15 min) {before} at the start and {after} at the end: the machine was shared, "
        "which changes times but not memory.", "",
        "\"estimate\" is what `brace solve` compares with the memory limit before building anything; "
        "\"measured peak\" the largest resident size of the whole command (supervisor and work process), "
        "from the operating system. Target: within a factor of 2.", "",
        *table, "",
        "Growth of the measured peak per knot, per expanded NLP node per knot (the figure "
        f"`{figure}` in `optimizer/solver/ipopt.py` holds):", "",
        *[f"- {line}" for line in slopes], ""])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--knots", default="30,60,120")
    parser.add_argument("--runs", default="steep_ramp:robust,trench:torque")
    parser.add_argument("--evaluation", default="expanded", choices=["expanded", "compiled", "mapped"],
                        help="how the solver evaluates the NLP (brace solve --evaluation); default expanded")
    parser.add_argument("--write", metavar="RESULTS.md")
    args = parser.parse_args(argv)
    before = load()
    table, slopes = rows(args.runs.split(","), [int(k) for k in args.knots.split(",")], args.evaluation)
    text = section(args, table, slopes, before, load())
    publish(text, args.write, heading(args.evaluation))
    return 0


if __name__ == "__main__":
    sys.exit(main())
