"""Crawl space: what a ceiling-foot preload, minimum normal force or friction reserve does to both plans.

    python benchmarks/crawl_preload.py [--knots 20] [--variants none,preload-30+fr-0.1,...]
                                       [--write benchmarks/RESULTS.md]

The crawl space's torque-optimal plan presses its ceiling feet with the
minimum normal force on a friction facet, and its nominal replay in MuJoCo
loses them. Each variant changes ``tasks/crawl_space.yaml`` (its ceiling
feet's ``min_normal_force`` or ``preload``, the task-wide
``min_normal_force``, the ``friction_reserve``; the task file's own choice
of these is removed first), solves the torque and the robust plan, replays
both without a push (``brace simulate`` defaults: feet within 5 mm of their
footholds, hand targets within 2 cm, no contact lost over 5 ms) and
certifies the robust plan (smallest and mean certified margin over the
knots). Prints Markdown; ``--write`` replaces the "## Crawl space preload"
section of the results file.
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
import numpy as np  # noqa: E402

from optimizer.analysis.certify import certify_plan  # noqa: E402
from optimizer.files import read_yaml_mapping  # noqa: E402
from optimizer.errors import TaskError  # noqa: E402
from optimizer.planfile import build_model  # noqa: E402
from optimizer.planner import solve  # noqa: E402
from optimizer.problem.task import task_from_mapping  # noqa: E402
from optimizer.simulation.inputs import simulation_inputs  # noqa: E402
from optimizer.simulation.pushes import Simulator  # noqa: E402
from results_file import publish, simulation_run_line

TASK = ROOT / "tasks" / "crawl_space.yaml"
CEILING_FEET = ("foot_fl", "foot_fr")
# label -> (ceiling feet's own keys, top-level keys)
VARIANTS = {
    "none": ({}, {}),
    "all feet min 40 N": ({}, {"min_normal_force": 40.0}),
    "all feet min 40 N + fr 0.2": ({}, {"min_normal_force": 40.0, "friction_reserve": 0.2}),
    "fr 0.2": ({}, {"friction_reserve": 0.2}),
    "ceiling min 25 N": ({"min_normal_force": 25.0}, {}),
    "ceiling min 30 N": ({"min_normal_force": 30.0}, {}),
    "ceiling min 20 N + fr 0.2": ({"min_normal_force": 20.0}, {"friction_reserve": 0.2}),
    "ceiling min 30 N + fr 0.2": ({"min_normal_force": 30.0}, {"friction_reserve": 0.2}),
    "ceiling preload 30 N": ({"preload": 30.0}, {}),
    "ceiling preload 30 N + fr 0.1": ({"preload": 30.0}, {"friction_reserve": 0.1}),
    "ceiling preload 30 N + fr 0.2": ({"preload": 30.0}, {"friction_reserve": 0.2}),
    "ceiling preload 35 N + fr 0.1": ({"preload": 35.0}, {"friction_reserve": 0.1}),
    "ceiling preload 35 N + fr 0.2": ({"preload": 35.0}, {"friction_reserve": 0.2}),
    "ceiling preload 40 N + fr 0.1": ({"preload": 40.0}, {"friction_reserve": 0.1}),
    "ceiling preload 40 N + fr 0.2": ({"preload": 40.0}, {"friction_reserve": 0.2}),
}


# What the cells of plan_cells hold, for a section's text.
CELLS_NOTE = ("Nominal replay in MuJoCo, `brace simulate` defaults: feet = largest distance of a stance foot "
              "from its interval's foothold, hand = largest hand-target error, losses = contact losses over 5 ms; "
              "passes = feet within 5 mm, hand targets within 20 mm, no contact lost, no torque clipped over "
              "20 ms. Robust margin: the robust plan's exact certified margin, smallest / mean over the knots "
              "(`brace certify`).")


def variant_task(label: str, knots: int):
    """The crawl space task with ``label``'s changes, at ``knots`` knots."""
    feet_keys, top_keys = VARIANTS[label]
    data = copy.deepcopy(read_yaml_mapping(TASK, TaskError))
    data.pop("friction_reserve", None)
    data.pop("min_normal_force", None)
    for frame in CEILING_FEET:
        foot = data["stance"]["feet"][frame]
        for key in ("min_normal_force", "preload"):
            foot.pop(key, None)
        foot.update(feet_keys)
    data.update(top_keys)
    return task_from_mapping(data, TASK).with_knots(knots)


def replay(plan) -> dict:
    """Nominal replay: largest foot distance [m], hand-target error [m], contact losses, within limits."""
    inputs = simulation_inputs(plan, build_model("plan", plan.meta["urdf"]))
    n = Simulator(plan, inputs.surfaces, inputs.targets, inputs.hand_frame).nominal()
    return {"feet": max(f["distance_m"] for f in n["feet"]),
            "hand": max((t["error_m"] for t in n["targets"]), default=float("nan")),
            "losses": sum(f["contact_losses"] for f in n["feet"]), "ok": bool(n["ok"])}


def plan_cells(task) -> list:
    """Solve ``task``'s torque and robust plans: each one's replay cells (feet, hand [mm], losses, passes)
    and the robust plan's certified margin, smallest / mean over the knots [N]."""
    cells, margins = [], None
    for objective in ("torque", "robust"):
        outcome = solve(task, objective)
        if outcome.plan is None:
            cells += ["solve failed"] * 4
            continue
        r = replay(outcome.plan)
        cells += [f"{1e3 * r['feet']:.1f}", f"{1e3 * r['hand']:.1f}", str(r["losses"]), "yes" if r["ok"] else "no"]
        if objective == "robust":
            margins = np.array([k.rho for k in certify_plan(outcome.plan).knots])
    return cells + ["-" if margins is None else f"{margins.min():.1f} / {margins.mean():.1f}"]


def row(label: str, knots: int) -> str:
    cells = [label] + plan_cells(variant_task(label, knots))
    print(f"{label} done", file=sys.stderr, flush=True)
    return "| " + " | ".join(cells) + " |"


def section(args, rows, elapsed, load_before, load_after) -> str:
    return "\n".join([
        "## Crawl space preload", "",
        simulation_run_line(f"python benchmarks/crawl_preload.py --knots {args.knots}", elapsed, load_before,
                            load_after) + " "
        "(shared machine; no timing is read from this run).", "",
        f"`tasks/crawl_space.yaml` at {args.knots} knots with the ceiling feet's (foot_fl, foot_fr) own "
        "minimum normal force or preload, or the task-wide minimum, and the friction reserve (fr) of each row "
        "(the task's own choice of these removed first). " + CELLS_NOTE, "",
        "| variant | torque plan: feet [mm] | hand [mm] | losses | passes | robust plan: feet [mm] | hand [mm] | "
        "losses | passes | robust margin, smallest / mean [N] |",
        "| --- | ---: | ---: | ---: | --- | ---: | ---: | ---: | --- | ---: |",
        *rows, ""])


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--knots", type=int, default=20)
    parser.add_argument("--variants", default=",".join(VARIANTS), help="comma-separated labels of VARIANTS")
    parser.add_argument("--write", metavar="RESULTS.md")
    args = parser.parse_args(argv)
    labels = [v.strip() for v in args.variants.split(",") if v.strip()]
    unknown = [v for v in labels if v not in VARIANTS]
    if unknown:
        parser.error(f"unknown variants {unknown}; known: {list(VARIANTS)}")
    started, load_before = time.perf_counter(), os.getloadavg()[0]
    rows = [row(label, args.knots) for label in labels]
    publish(section(args, rows, time.perf_counter() - started, load_before, os.getloadavg()[0]), args.write,
            "Crawl space preload")
    return 0


if __name__ == "__main__":
    sys.exit(main())
