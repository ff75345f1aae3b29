"""Replays of every demo plan in MuJoCo: nominal tracking and the largest survived push.

    python benchmarks/simulate.py [--knots 60] [--tasks landing_pick,wall_brace,...]
                                  [--plans DIR] [--write benchmarks/RESULTS.md]
                                  [--figure docs/figures/simulation_pushes.png]

For each demo task (every file in ``tasks/``), the robust and the torque plan (solved here, or read from
``DIR/<task>_<objective>_<knots>.npz`` when present, and saved there when
solved): the nominal replay's largest distance of a stance foot from its
interval's foothold (swinging feet are not judged), hand target error and
base error; then, at the knot of the smallest certified
margin and at the middle knot, the largest push along the certified weakest
direction survived in ``informed`` and in ``blind`` mode, against the
certified margin, the exact figure, and the size at which the plan's linear
response meets a limit along that direction. Prints Markdown; ``--write``
replaces the "## Simulation" section of the results file; ``--figure`` draws
every survived push against its certified margin
(:func:`optimizer.report.simulation.push_figure`). Nothing here is tuned to
agree with the certificate: the settings are the command's defaults.
"""
from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
ROOT = Path(__file__).resolve().parent.parent

import mujoco  # noqa: E402
import numpy as np  # noqa: E402

from optimizer.planfile import build_model, load_plan, save_plan  # noqa: E402
from optimizer.planner import solve  # noqa: E402
from optimizer.problem.task import load_task  # noqa: E402
from optimizer.report.simulation import write_push_figure  # noqa: E402
from optimizer.simulation.inputs import simulation_inputs  # noqa: E402
from optimizer.simulation.pushes import Simulator  # noqa: E402
from results_file import publish, simulation_run_line

TASKS = sorted(path.stem for path in (ROOT / "tasks").glob("*.yaml"))    # every demo task
OBJECTIVES = ["robust", "torque"]


def plan_for(name: str, objective: str, knots: int, folder: Path | None):
    path = None if folder is None else folder / f"{name}_{objective}_{knots}.npz"
    if path is not None and path.exists():
        return load_plan(path)
    outcome = solve(load_task(ROOT / "tasks" / f"{name}.yaml"), objective, knots=knots)
    if outcome.plan is None:
        return None
    if path is not None:
        folder.mkdir(parents=True, exist_ok=True)
        save_plan(outcome.plan, path)
    return outcome.plan


def mm(x) -> str:
    return f"{1e3 * x:.1f}"


def newtons(x) -> str:
    return "-" if x is None or not np.isfinite(x) else f"{x:.1f}"


def survived_text(p) -> str:
    ratio = "-" if not np.isfinite(p.ratio) else f"{p.ratio:.2f}"
    size = newtons(p.survived) if np.isfinite(p.failed) else ">=" + newtons(p.survived)
    return f"{size} ({ratio})"


def rows(names, knots, folder):
    nominal = ["| task | objective | stance intervals | feet, largest from foothold [mm] | "
               "hand targets, largest error [mm] | base, largest error [mm] | contact losses | torque clipped [s] | "
               "nominal within limits |",
               "| --- | --- | ---: | ---: | ---: | ---: | ---: | --- | --- |"]
    pushes = ["| task | objective | knot | certified [N] | exact [N] | linear response limit [N] | "
              "informed: survived [N] (/certified) | blind: survived [N] (/certified) | informed ended by | "
              "blind ended by |",
              "| --- | --- | ---: | ---: | ---: | ---: | ---: | ---: | --- | --- |"]
    documents = []
    for name in names:
        for objective in OBJECTIVES:
            plan = plan_for(name, objective, knots, folder)
            if plan is None:
                nominal.append(f"| {name} | {objective} | solve failed | | | | | | |")
                continue
            inputs = simulation_inputs(plan, build_model("plan", plan.meta["urdf"]))
            sim = Simulator(plan, inputs.surfaces, inputs.targets, inputs.hand_frame)
            n = sim.nominal()
            feet = max(f["distance_m"] for f in n["feet"])
            targets = max((t["error_m"] for t in n["targets"]), default=float("nan"))
            losses = sum(f["contact_losses"] for f in n["feet"])
            clipped = ", ".join(f"{j} {x:.2f}" for j, x in n["torque_clipped_s"].items()) or "none"
            intervals = sum(len(f["stances"]) for f in n["feet"])
            nominal.append(f"| {name} | {objective} | {intervals} | {mm(feet)} | {mm(targets)} | "
                           f"{mm(n['base_error_m'])} | {losses} | {clipped} | {'yes' if n['ok'] else 'no'} |")
            document = {"task": name, "objective": objective, "pushes": []}
            documents.append(document)
            for k in sorted({int(np.argmin(plan.margin)), plan.t.shape[0] // 2}):
                informed, blind = sim.largest_push(k, "informed"), sim.largest_push(k, "blind")
                document["pushes"] += [informed.to_json(), blind.to_json()]
                pushes.append(f"| {name} | {objective} | {k} | {newtons(informed.margin)} | "
                              f"{newtons(informed.exact)} | {newtons(informed.linear_limit)} | "
                              f"{survived_text(informed)} | {survived_text(blind)} | {informed.failure} | "
                              f"{blind.failure} |")
            print(f"{name} {objective} done", file=sys.stderr, flush=True)
    return nominal, pushes, documents


def section(args, nominal, pushes, elapsed, load_before, load_after) -> str:
    return "\n".join([
        "## Simulation", "",
        simulation_run_line(f"python benchmarks/simulate.py --knots {args.knots}", elapsed, load_before,
                            load_after) + ": the "
        "machine was shared with other work, so no timing is read from this run.", "",
        f"Demo plans at {args.knots} knots, `brace simulate` defaults (0.5 ms step, elliptic cones, 5 mm foot "
        "spheres; push held 0.2 s with 20 ms ramps, watched 0.3 s after; survived = no stance foot slips over "
        "5 mm, no stance foot without force over 5 ms, no torque clipped over 20 ms; a foot is judged only in "
        "the plan's stance intervals, from 50 ms after a touchdown). \"stance intervals\": runs of stance "
        "knots on one foothold over all feet (4 when no foot steps).", "",
        "Nominal replay (no push):", "", *nominal, "",
        "Largest survived push at the hand along the certified weakest direction, at the knot of the smallest "
        "certified margin and at the middle knot. \"linear response limit\" is the push size at which the "
        "plan's own linear response (the one informed mode applies) meets its first limit along that "
        "direction; \">=\" marks pushes survived up to the largest size tried (8 times the margin, or 8 % of "
        "the weight when the margin is smaller than 1 % of it); \"(-)\": no ratio to a margin below 0.1 % of "
        "the weight.", "", *pushes, ""])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--knots", type=int, default=60)
    parser.add_argument("--tasks", default=",".join(TASKS))
    parser.add_argument("--plans", metavar="DIR", help="read plans from / save plans to this folder")
    parser.add_argument("--write", metavar="RESULTS.md")
    parser.add_argument("--figure", metavar="PNG", help="draw the survived pushes against the margins here")
    args = parser.parse_args(argv)
    started, load_before = time.perf_counter(), os.getloadavg()[0]
    nominal, pushes, documents = rows(args.tasks.split(","), args.knots, Path(args.plans) if args.plans else None)
    if args.figure:
        write_push_figure(documents, args.figure)
    text = section(args, nominal, pushes, time.perf_counter() - started, load_before, os.getloadavg()[0])
    publish(text, args.write, "Simulation")
    return 0


if __name__ == "__main__":
    sys.exit(main())
