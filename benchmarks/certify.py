"""Time per knot of exact certification on the demo robot.

    python benchmarks/certify.py [--knots 40] [--plan PLAN.npz ...] [--repeat 3]
    python benchmarks/certify.py --wrench [--knots 10]

Without ``--plan`` it certifies a standing plan of the demo robot
(models/stilt.urdf: nc = 4, nj = 18, disturbance at the hand) whose arm sweeps
through ``--knots`` postures, forces from a least-squares statics solve. With
``--plan`` it certifies solved plans as they are. For every mode (adaptive or
whole-polytope projection) and LP backend it reports the median and 90th
percentile wall time per knot, everything included (Jacobians, LP set-up,
projection), and the LPs per knot. Prints a Markdown table.

``--wrench`` instead certifies the standing demo plan with a 6-D wrench
disturbance at the hand: per knot the exact figure by projection (time, LPs,
gap between its bounds) against the smallest support value over 400 sampled
directions (what was printed as "exact" before 6-D projection), their ratio
and the sampling time.
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
from optimizer.analysis.polytope import sample_support  # noqa: E402
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


def wrench_table(knots: int) -> None:
    """Exact 6-D projection against 400 sampled directions, per knot of the standing demo."""
    from certify_checks import demo_standing, standing_plan

    from optimizer.analysis.certify import support_lp

    plan = standing_plan(**demo_standing(sweep=0.8, knots=knots), kind="wrench")
    robot = PlanRobot(plan.meta, 0)
    print("| knot | exact [N, N m] | upper - lower | LPs | ms | sampled min (400 dirs) | sampled / exact | ms |")
    print("| ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |")
    for k in range(knots):
        resp = knot_response(plan, k, robot)
        start = time.perf_counter()
        cert, _ = certify_response(resp, planned_margin(plan, k, 0), Settings(), k)
        exact_ms = 1e3 * (time.perf_counter() - start)
        start = time.perf_counter()
        sampled = sample_support(support_lp(resp, Settings()), 400)
        sampled_ms = 1e3 * (time.perf_counter() - start)
        print(f"| {k} | {cert.rho:.3f} | {cert.upper - cert.lower:.1e} | {cert.lps} | {exact_ms:.0f} | "
              f"{sampled.upper:.3f} | {sampled.upper / cert.rho:.2f} | {sampled_ms:.0f} |")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--knots", type=int, default=40)
    parser.add_argument("--plan", nargs="*", default=[])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--wrench", action="store_true", help="6-D projection against sampled directions")
    args = parser.parse_args(argv)
    if args.wrench:
        wrench_table(args.knots)
        return 0
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
