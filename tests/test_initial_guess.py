"""The initial guess's contact forces where a posture cannot be held still."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from optimizer.problem.schedule import contacts_at
from optimizer.problem.stance import static_support_lp
from optimizer.problem.task import load_task
from optimizer.transcription.guess import UNHOLDABLE_SLACK, initial_guess
from stepping_plans import STEPPING

TASKS = Path(__file__).resolve().parent.parent / "tasks"


@pytest.mark.parametrize("name", STEPPING)
def test_stepping_guesses_keep_every_contact_force_near_the_weight(name):
    """On three feet mid-step the posture often cannot be held still; the guess must not carry the static
    LP's arbitrary forces there (before: up to 4.5e4 N at 20 knots, over 100 times the weight). Bound:
    three times the robot's weight on one contact (common practice for a walking machine's peak load,
    stated from memory; a slow step loads a foot with less than the whole weight)."""
    task = load_task(TASKS / f"{name}.yaml").with_knots(20)
    guess = initial_guess(task)
    weight = task.robot.mass * np.linalg.norm(task.robot.gravity)
    per_contact = guess["lam"].reshape(-1, 3, task.knots)
    assert np.all(np.isfinite(per_contact))
    assert np.linalg.norm(per_contact, axis=1).max() < 3 * weight


def test_an_unholdable_knot_takes_the_forces_of_the_nearest_holdable_one():
    """Where the static support LP (SciPy's HiGHS) cannot hold the guessed posture, the guess repeats the
    forces of the nearest knot that it can hold, contact by contact, with zero on feet in the air."""
    task = load_task(TASKS / "landing_pick.yaml").with_knots(20)
    guess = initial_guess(task)
    active = task.schedule.loaded(task.times)
    slack = [static_support_lp(task.robot, guess["q"][:, k],
                               [c for c, on in zip(contacts_at(task, t), active[k]) if on], task.facets).slack
             for k, t in enumerate(task.times)]
    holdable = np.flatnonzero(np.array(slack) >= UNHOLDABLE_SLACK)
    unholdable = [k for k in range(task.knots) if k not in holdable]
    assert unholdable, "the task has no unholdable knot at this count: the check says nothing"
    for k in unholdable:
        near = holdable[np.argmin(abs(holdable - k))]
        keep = np.repeat(active[k], 3)
        assert np.array_equal(guess["lam"][keep, k], guess["lam"][keep, near])
        assert np.all(guess["lam"][~keep, k] == 0.0)
