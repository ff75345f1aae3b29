"""The stepping demo plans (``landing_pick``, ``wall_brace``) at few knots, solved once per test process.

One feasibility seed per task serves both objectives. Shared by the schedule
and simulation tests (a module-level cache: every test module imports this
one module object).
"""
from __future__ import annotations

from optimizer.planner import Planner
from optimizer.problem.task import load_task

STEPPING = ["landing_pick", "wall_brace"]
OBJECTIVES = ["robust", "torque"]
KNOTS = 10          # the smallest count that keeps two knots in every swing of both demos
_SOLVED: dict = {}


def stepping_plan(name: str, objective: str):
    """(task, plan) of a stepping demo at KNOTS knots."""
    if name not in _SOLVED:
        task = load_task(f"tasks/{name}.yaml").with_knots(KNOTS)
        with Planner() as planner:
            seed = planner.seed(task)
            _SOLVED[name] = task, {obj: planner.solve_from_seed(seed, obj) for obj in OBJECTIVES}
    task, outcomes = _SOLVED[name]
    outcome = outcomes[objective]
    assert outcome.success, [(s.objective, s.status, s.message) for s in outcome.stages]
    return task, outcome.plan
