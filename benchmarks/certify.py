"""Time per knot of exact certification on the demo robot.

    python benchmarks/certify.py [--knots 40] [--plan PLAN.npz ...] [--repeat 3]

Without ``--plan`` it certifies a standing plan of the demo robot
(models/stilt.urdf: nc = 4, nj = 18, disturbance at the hand) whose arm sweeps
through ``--knots`` postures, forces from a least-squares statics solve. With
``--plan`` it certifies solved plans as they are. For every mode (adaptive or
whole-polytope projection) and LP backend it reports the median and 90th
percentile wall time per knot, everything included (Jacobians, LP set-up,
projection), and the LPs per knot. Prints a Markdown table.
"""
from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "tests"))

import numpy as np  # noqa: E402

from optimizer.analysis.certify import Settings, certify_response, planned_margin  # noqa: E402
from optimizer.analysis.knot_response import PlanRobot, knot_response  # noqa: E402
from optimizer.planfile import load_plan  # noqa: E402


def standing_demo_plan(knots: int):
    from certify_checks import demo_standing, standing_plan

    return standing_plan(**demo_standing(sweep=0.8, knots=knots))


def time_plan(plan, settings: Settings, repeat: int):
    """Per-knot wall times [s] (best of ``repeat``) and LPs per knot."""
    robot = PlanRobot(plan.meta, 0)
    times, lps = [], []
    for k in range(plan.t.shape[0]):
        best = np.inf
        for _ in range(repeat):
            start = time.perf_counter()
            cert, _ = certify_response(knot_response(plan, k, robot), planned_margin(plan, k, 0), settings, k)
            best = min(best, time.perf_counter() - start)
        times.append(best)
        lps.append(cert.lps)
    return np.array(times), np.array(lps)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--knots", type=int, default=40)
    parser.add_argument("--plan", nargs="*", default=[])
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args(argv)
    plans = [(f"standing demo, {args.knots} knots", standing_demo_plan(args.knots))]
    plans += [(Path(p).name, load_plan(p)) for p in args.plan]
    print("| plan | mode | LP backend | median ms/knot | p90 ms/knot | LPs/knot (median) |")
    print("| --- | --- | --- | ---: | ---: | ---: |")
    for name, plan in plans:
        for full in (False, True):
            for backend in ("resident", "linprog"):
                times, lps = time_plan(plan, Settings(full=full, backend=backend), args.repeat)
                mode = "whole polytope" if full else "adaptive"
                print(f"| {name} | {mode} | {backend} | {1e3 * np.median(times):.1f} | "
                      f"{1e3 * np.percentile(times, 90):.1f} | {np.median(lps):.0f} |")
    return 0


if __name__ == "__main__":
    sys.exit(main())
