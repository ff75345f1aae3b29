"""A stage-structured solver on brace's robust stage: CasADi's ``fatrop`` plugin against Ipopt.

    python benchmarks/stage_solver.py [--tasks steep_ramp] [--knots 30] [--max-iter 500]
                                      [--write benchmarks/RESULTS.md]

fatrop solves optimal control problems by a Riccati recursion over the
stages, so it needs the NLP in stage form: variables ordered knot by knot,
states first; each knot's rows after the dynamic link into it; that link
written as ``x[k+1] = F(x[k], u[k])``; no variable shared by all knots.
brace's NLP is not in that form, so this script builds a variant of it,
here and nowhere else:

* the configuration step uses ``v[k] + h a[k]`` in place of ``v[k+1]``
  (the same semi-implicit Euler step, once the velocity row holds);
* the ``robust`` objective's margin floor is one variable per knot, linked
  knot to knot (``floor[k+1] = floor[k]``), its mean in the cost;
* states ``x[k] = (v[k], q[k], floor[k])`` (the order of the link rows),
  controls everything else of the knot; the rows are permuted into stage
  order, with N, nx, nu and ng handed to fatrop (``structure_detection:
  manual``).

Per task, one feasibility seed (the planner's defaults), then the robust
stage three ways from the same start (the starting gains of the planner):
Ipopt on brace's own NLP, Ipopt on the stage form, fatrop on the stage
form. Reported: iterations, solve time, the time fatrop spends computing
search directions, smallest and mean margin (the plan's own ``rho``),
stage sizes. Prints Markdown; ``--write`` replaces the section
"Stage-structured solver".
"""
from __future__ import annotations

import argparse
import datetime
import os
import platform
import sys
import time
from pathlib import Path

import casadi as ca
import numpy as np
from results_file import publish

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
SECTION = "Stage-structured solver"
STATES = ("v", "q", "floor")                        # the order of the link rows below
LINKS = ("velocity integration", "configuration integration", "floor link")

from optimizer.problem.requirement import required_margins  # noqa: E402
from optimizer.transcription import objectives  # noqa: E402
from optimizer.transcription.nlp import Transcription  # noqa: E402
from optimizer.transcription.parameters import parameter_values, separating_planes  # noqa: E402
from optimizer.transcription.structure import structure_of  # noqa: E402


class StageFloorRobust(objectives.Robust):
    """``robust`` with its floor as one variable per knot, linked knot to knot (the cost takes their mean)."""

    def add_variables(self, layout, ctx):
        objectives.RobustSum.add_variables(self, layout, ctx)
        layout.add("floor", 1, ctx.knots, scale=ctx.weight)

    def add_constraints(self, V, P, stack, ctx):
        super().add_constraints(V, P, stack, ctx)   # the margin floor rows, one floor per knot
        stack.add("floor link", (V["floor"][:, 1:] - V["floor"][:, :-1]) / ctx.weight, range(1, ctx.knots))

    def cost(self, V, P, ctx):
        floor = ca.sum2(V["floor"]) / (ctx.knots * ctx.weight)
        mean = ca.sum2(objectives.knot_margins(V, P, ctx)) / (ctx.knots * ctx.weight)
        return (-floor - self.MEAN_WEIGHT * mean + objectives._gain_term(V, ctx.points, ctx)
                + objectives.regularizer(V, P, ctx))


class StageTranscription(Transcription):
    """brace's NLP with an explicit configuration step: ``q[k+1] = integrate(q[k], h (v[k] + h a[k]))``."""

    def _step_velocities(self, V, P):
        return V["v"][:, :-1] + P["step"] * V["a"][:, :-1]


def block_knots(transcription, block) -> list[int]:
    """The knot of each column of a variable block."""
    if block.name == "separation":
        return list(transcription.structure.clearance_knots)
    if block.cols != transcription.structure.knots:
        raise ValueError(f"block '{block.name}' is shared by all knots: no stage form")
    return list(range(block.cols))


def stage_order(transcription):
    """``(columns, rows, nx, nu, ng)``: the stage form's variable and row order (indices into brace's x and g)
    and the sizes per knot."""
    K = transcription.structure.knots
    states, controls = [[[] for _ in STATES] for _ in range(K)], [[] for _ in range(K)]
    for block in transcription.variables.blocks:
        for column, k in enumerate(block_knots(transcription, block)):
            indices = range(block.offset + column * block.rows, block.offset + (column + 1) * block.rows)
            (states[k][STATES.index(block.name)] if block.name in STATES else controls[k]).extend(indices)
    links, rows = [[[] for _ in LINKS] for _ in range(K)], [[] for _ in range(K)]
    for group in transcription.constraints.groups:
        for i, label in enumerate(group.labels):
            if group.name in LINKS:
                links[label.knot - 1][LINKS.index(group.name)].append(group.offset + i)
            else:
                rows[label.knot].append(group.offset + i)
    columns, order, nx, nu, ng = [], [], [], [], []
    for k in range(K):
        x_k = [i for part in states[k] for i in part]
        columns += x_k + controls[k]
        order += [i for part in links[k] for i in part] + rows[k]
        nx.append(len(x_k)), nu.append(len(controls[k])), ng.append(len(rows[k]))
    return np.array(columns), np.array(order), nx, nu, ng


def stage_start(seed, transcription):
    """``(x0, p, lbx, ubx)`` of the robust stage in ``transcription``'s own order, from the seed."""
    from optimizer.planner import _initial_gains
    task = seed.task
    arrays = dict(seed.arrays, **_initial_gains(task, seed.arrays))
    layout = transcription.variables
    x0 = layout.pack(arrays)
    p = parameter_values(task, transcription.structure, transcription.parameters, motion=arrays["q"])
    layout.set(x0, "rooms", transcription.rooms_at(arrays, p))
    if "separation" in layout:
        layout.set(x0, "separation", separating_planes(task, transcription.structure, arrays["q"]))
    if layout["floor"].cols > 1:
        layout.set(x0, "floor", float(np.min(arrays["rho0"])))
    lbx, ubx = transcription.bounds(task.initial_posture,
                                    required_margins(task.requirements, task.times, len(task.disturbances)))
    return np.clip(x0, lbx, ubx), p, lbx, ubx


def run(name, transcription, nlp, start, lbg, ubg, plugin, options, columns=None):
    """One robust stage; a row of figures."""
    x0, p, lbx, ubx = start
    if columns is not None:
        x0, lbx, ubx = x0[columns], lbx[columns], ubx[columns]
    started = time.perf_counter()
    solver = ca.nlpsol("stage", plugin, nlp, dict(options, expand=True, print_time=False, error_on_fail=False))
    build = time.perf_counter() - started
    started = time.perf_counter()
    out = solver(x0=x0, p=p, lbx=lbx, ubx=ubx, lbg=lbg, ubg=ubg)
    wall = time.perf_counter() - started
    stats = solver.stats()
    x = np.array(out["x"]).ravel()
    if columns is not None:
        x = x[np.argsort(columns)]
    rho = transcription.variables.get(x, "rho0").ravel()
    direction = stats.get("fatrop", {}).get("compute_sd_time")
    status = "solved" if stats.get("success") else f"stopped ({stats.get('return_status')})"
    return {"name": name, "status": status, "build": build,
            "iterations": int(stats.get("iter_count", 0)), "wall": wall, "direction": direction,
            "smallest": float(rho.min()), "mean": float(rho.mean())}


def task_rows(task_name, knots, max_iter) -> list[dict]:
    from optimizer.planner import Planner
    from optimizer.problem.task import load_task
    from optimizer.transcription.objectives import objective_named
    task = load_task(ROOT / "tasks" / f"{task_name}.yaml").with_knots(knots)
    with Planner() as planner:
        seed = planner.seed(task)
        robot, symbolic = task.robot, planner.symbolic_robot(task.robot)
        own = Transcription(robot, symbolic, structure_of(task), objective_named("robust"))
        staged = StageTranscription(robot, symbolic, structure_of(task), StageFloorRobust())
    ipopt = {"ipopt": {"tol": 1e-6, "constr_viol_tol": 1e-7, "mu_strategy": "adaptive", "linear_solver": "mumps",
                       "print_level": 0, "sb": "yes", "max_iter": max_iter}}
    rows = [run("Ipopt, brace's NLP", own, own.nlp, stage_start(seed, own), own.lbg, own.ubg, "ipopt", ipopt)]
    columns, order, nx, nu, ng = stage_order(staged)
    x = ca.MX.sym("z", staged.variables.size)
    f, g = ca.Function("nlp", [staged.nlp["x"], staged.nlp["p"]], [staged.nlp["f"], staged.nlp["g"]])(
        x[np.argsort(columns).tolist()], staged.nlp["p"])
    nlp = {"x": x, "p": staged.nlp["p"], "f": f, "g": g[order.tolist()]}
    lbg, ubg = staged.lbg[order], staged.ubg[order]
    start = stage_start(seed, staged)
    rows.append(run("Ipopt, stage form", staged, nlp, start, lbg, ubg, "ipopt", ipopt, columns))
    fatrop = {"structure_detection": "manual", "N": knots - 1, "nx": nx, "nu": nu, "ng": ng,
              "equality": (lbg == ubg).tolist(), "fatrop": {"print_level": 0, "max_iter": max_iter, "tol": 1e-6}}
    rows.append(run("fatrop, stage form", staged, nlp, start, lbg, ubg, "fatrop", fatrop, columns))
    for row in rows:
        row.update(task=task_name, knots=knots, sizes=f"nx {max(nx)}, nu {max(nu)}, ng {max(ng)}")
    return rows


def table(rows, command, elapsed) -> str:
    cpu = platform.processor() or platform.machine()
    lines = [f"## {SECTION}", "",
             f"Script: `{command}` ({datetime.date.today().isoformat()}, {os.cpu_count()} cores, {cpu}, Python "
             f"{platform.python_version()}, CasADi {ca.__version__}, `OPENBLAS_NUM_THREADS=1`); whole run "
             f"{elapsed / 60:.1f} min.", "",
             "| task | knots | solver | status | iterations | build [s] | solve [s] | per iteration [s] "
             "| search directions [s] | margin smallest / mean [N] | stage sizes (largest) |",
             "| --- | ---: | --- | --- | ---: | ---: | ---: | ---: | ---: | ---: | --- |"]
    for r in rows:
        per = r["wall"] / max(r["iterations"], 1)
        direction = "" if r["direction"] is None else f"{r['direction']:.1f}"
        lines.append(f"| {r['task']} | {r['knots']} | {r['name']} | {r['status']} | {r['iterations']} | "
                     f"{r['build']:.1f} | {r['wall']:.1f} | {per:.3f} | {direction} | "
                     f"{r['smallest']:.2f} / {r['mean']:.2f} | {r['sizes']} |")
    return "\n".join(lines) + "\n"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tasks", default="steep_ramp")
    parser.add_argument("--knots", type=int, default=30)
    parser.add_argument("--max-iter", type=int, default=500)
    parser.add_argument("--write", metavar="RESULTS.md")
    args = parser.parse_args()
    started = time.perf_counter()
    rows = [row for name in args.tasks.split(",") for row in task_rows(name, args.knots, args.max_iter)]
    command = "python benchmarks/stage_solver.py " + " ".join(sys.argv[1:])
    publish(table(rows, command.strip(), time.perf_counter() - started), args.write, SECTION)


if __name__ == "__main__":
    main()
