"""Other starts of the robust stage: coarse to fine (a coarse plan moved onto a finer knot grid, and a
plan solved from it), the seed's multipliers carried into it (warm start), and both together (the
coarse stage's multipliers moved onto the finer grid).

References: SciPy's ``Rotation``/``Slerp`` (the geodesic between two
orientations, independent of Pinocchio), NumPy's ``interp`` (piecewise
linear interpolation), and the direct solve of the same task (another start
must reach the same certified margins, to solver tolerance), re-checked with
Pinocchio (``check_plan``) and SciPy's LPs (``certify_checks``).
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest
from scipy.spatial.transform import Rotation, Slerp

from certify_checks import check_plan_against_sampled_lps
from optimizer.analysis.certify import margin_within
from optimizer.analysis.plan_check import check_plan
from optimizer.planner import Planner, carried_multipliers, coarse_knots
from optimizer.problem.task import load_task
from optimizer.transcription.resample import AS_IS_FAMILIES, resampled, resampled_multipliers

ROOT = Path(__file__).resolve().parents[1]
KNOTS, COARSE = 10, 4   # 9 fine steps = 3 coarse steps: every third fine knot is a coarse one


@pytest.fixture(scope="module")
def ramp():
    return load_task(ROOT / "tasks" / "steep_ramp.yaml").with_knots(KNOTS)


@pytest.fixture(scope="module")
def moved(ramp):
    """Random configurations and per-knot blocks on ``COARSE`` knots, moved onto ``KNOTS`` knots."""
    model = ramp.robot.model
    rng = np.random.default_rng(7)
    pin.seed(7)
    q = np.array([pin.randomConfiguration(model, -np.ones(model.nq), np.ones(model.nq))
                  for _ in range(COARSE)]).T
    arrays = {"q": q, "tau": rng.normal(size=(model.nv - 6, COARSE)), "rho0": rng.uniform(0, 50, (1, COARSE)),
              "floor": np.array([[3.0]]), "rooms": rng.normal(size=(5, COARSE))}
    coarse_times, fine_times = np.linspace(0, ramp.duration, COARSE), ramp.times
    return arrays, coarse_times, fine_times, resampled(model, arrays, coarse_times, fine_times)


def test_moved_plan_keeps_unit_quaternions_and_the_coarse_knots(moved):
    arrays, coarse_times, fine_times, out = moved
    assert out["q"].shape == (arrays["q"].shape[0], fine_times.size)
    # unit quaternion: the base orientation q[3:7] stays on the sphere (Pinocchio's free-flyer convention)
    np.testing.assert_allclose(np.linalg.norm(out["q"][3:7], axis=0), 1.0, atol=1e-12)
    for name in ("q", "tau", "rho0"):
        np.testing.assert_allclose(out[name][:, ::3], arrays[name], atol=1e-12)  # fine knot 3j is coarse knot j
    np.testing.assert_array_equal(out["floor"], arrays["floor"])   # one-column blocks are kept
    assert "rooms" not in out                                      # recomputed by the planner for any start


def test_moved_orientations_follow_scipy_slerp(moved):
    arrays, coarse_times, fine_times, out = moved
    # SciPy's Slerp: the constant-speed geodesic between the coarse orientations (quaternions x, y, z, w,
    # as Pinocchio stores them); q and -q are one rotation, so rotations are compared, not quaternions.
    slerp = Slerp(coarse_times, Rotation.from_quat(arrays["q"][3:7].T))
    between = slerp(fine_times)
    angle = (Rotation.from_quat(out["q"][3:7].T) * between.inv()).magnitude()
    assert np.max(angle) < 1e-9
    # the joint coordinates (revolute, one each) and every other per-knot block are linear in time
    for row in range(7, arrays["q"].shape[0]):
        np.testing.assert_allclose(out["q"][row], np.interp(fine_times, coarse_times, arrays["q"][row]), atol=1e-12)
    for row in range(arrays["tau"].shape[0]):
        np.testing.assert_allclose(out["tau"][row], np.interp(fine_times, coarse_times, arrays["tau"][row]))


def test_integrated_move_meets_the_integration_rule_by_pinocchio(moved, ramp):
    arrays, coarse_times, fine_times, _ = moved
    model = ramp.robot.model
    out = resampled(model, arrays, coarse_times, fine_times, integrated=True)
    h = fine_times[1] - fine_times[0]
    # Pinocchio's integrate on the free-flyer model: q[k+1] = integrate(q[k], h v[k+1]) at every step,
    # and v[k+1] = v[k] + h a[k] (the semi-implicit Euler rule of the plan files), at rest at both ends.
    # Configurations are compared by Pinocchio's difference (q and -q are one base orientation).
    for k in range(fine_times.size - 2):
        step = pin.integrate(model, out["q"][:, k], h * out["v"][:, k + 1])
        np.testing.assert_allclose(pin.difference(model, step, out["q"][:, k + 1]), 0.0, atol=1e-9)
    np.testing.assert_allclose(out["v"][:, 1:] - out["v"][:, :-1], h * out["a"][:, :-1], atol=1e-9)
    assert not out["v"][:, 0].any() and not out["v"][:, -1].any() and not out["a"][:, -1].any()
    np.testing.assert_array_equal(out["q"], resampled(model, arrays, coarse_times, fine_times)["q"])


def test_a_block_of_another_width_is_refused(ramp):
    with pytest.raises(ValueError, match="columns"):
        resampled(ramp.robot.model, {"G0": np.zeros((3, 7))}, np.linspace(0, 1, 4), np.linspace(0, 1, 10))


def test_coarse_knots_are_about_a_third():
    assert coarse_knots(10, 3) == 4 and coarse_knots(60, 3) == 21 and coarse_knots(30, 3) == 11
    assert coarse_knots(5, 3) == 4   # never fewer than four
    with pytest.raises(ValueError, match="continuation"):
        Planner(continuation=1)


@pytest.fixture(scope="module")
def direct(ramp):
    with Planner(evaluation="compiled") as planner:
        outcome = planner.solve(ramp, "robust")
    assert outcome.success
    return outcome


def assert_same_certified_plan(outcome, direct):
    """Same margins as the direct solve, and a plan that passes the physics and certification checks."""
    assert outcome.success and outcome.plan.q.shape == direct.plan.q.shape
    # Both are local optima of one NLP from different starts; the certified margins (the solved gains
    # re-checked knot by knot) agree to 1 % of the largest margin.
    scale = direct.plan.margin.max()
    np.testing.assert_allclose(outcome.plan.margin, direct.plan.margin, atol=0.01 * scale)
    assert outcome.plan.margin.sum() >= 0.99 * direct.plan.margin.sum()
    assert check_plan(outcome.plan).passed   # equations of motion, cones, limits by Pinocchio
    rows = check_plan_against_sampled_lps(outcome.plan, n_dirs=60, knots=[0, KNOTS // 2])
    assert all(margin_within(row["planned"], row["rho"]) for row in rows)   # planned margin is certified


def test_continuation_reaches_the_direct_solves_certified_margins(ramp, direct):
    with Planner(evaluation="compiled", continuation=3) as planner:
        continued = planner.solve(ramp, "robust")
    assert [(s.objective, s.knots) for s in continued.stages] == [("feasible", COARSE), ("robust", COARSE),
                                                                  ("robust", KNOTS)]
    assert_same_certified_plan(continued, direct)


def test_warm_start_carries_the_seeds_multipliers_and_reaches_the_same_plan(ramp, direct):
    with Planner(evaluation="compiled", warm_start=True) as planner:
        seed = planner.seed(ramp)
        robust = planner.transcription(ramp, "robust")
        lam_x, lam_g = carried_multipliers(seed.outcome, robust)
        warm = planner.solve_from_seed(seed, "robust")
    before = seed.outcome.transcription
    # the equations of motion keep their multipliers row for row; the robustness rows start at zero
    eom, old = (next(g for g in t.constraints.groups if g.name == "equations of motion") for t in (robust, before))
    np.testing.assert_array_equal(lam_g[eom.slice()], seed.outcome.multipliers[old.slice()])
    assert np.any(lam_g[eom.slice()] != 0.0)
    balance = next(g for g in robust.constraints.groups if g.name.startswith("robust balance"))
    assert not np.any(lam_g[balance.slice()])
    q, old_q = robust.variables["q"], before.variables["q"]
    np.testing.assert_array_equal(lam_x[q.offset:q.stop], seed.outcome.bound_multipliers[old_q.offset:old_q.stop])
    assert [s.objective for s in warm.stages] == ["feasible", "robust"]
    assert_same_certified_plan(warm, direct)


@pytest.fixture(scope="module")
def two_grids(ramp):
    """The robust NLPs of the ramp on ``COARSE`` and ``KNOTS`` knots (built, not solved)."""
    with Planner(evaluation="mapped") as planner:
        coarse_task = ramp.with_knots(COARSE)
        yield (planner.transcription(coarse_task, "robust"), coarse_task.times,
               planner.transcription(ramp, "robust"), ramp.times)


def _key(group):
    return group.name.split("@")[0], group.size // len(group.knots)


def test_moved_multipliers_are_linear_in_time_and_keep_their_sum_over_the_horizon(two_grids):
    before, times, after, new_times = two_grids
    # Coarse multipliers that differ by group, row and knot: (100 group + row) + knot time [s], so a
    # row or knot mixed up, or a column-major order broken, changes the values below.
    lam_g = np.zeros(before.constraints.size)
    base = {}
    for index, group in enumerate(before.constraints.groups):
        rows = _key(group)[1]
        base.setdefault(_key(group), 100.0 * index + np.arange(rows))
        values = base[_key(group)][:, None] + times[list(group.knots)][None, :]
        lam_g[group.slice()] = values.reshape(-1, order="F")
    lam_x = np.arange(before.variables.size, dtype=float)
    new_x, new_g = resampled_multipliers(before, lam_x, lam_g, after, times, new_times)
    assert new_x.shape == (after.variables.size,) and new_g.shape == (after.constraints.size,)
    counts_before, counts_after = {}, {}
    for grid, counts in ((before, counts_before), (after, counts_after)):
        for group in grid.constraints.groups:
            counts[_key(group)] = counts.get(_key(group), 0) + len(group.knots)
    checked = set()
    for group in after.constraints.groups:
        key = _key(group)
        assert key in base, group.name   # the ramp's groups all exist on the coarse grid (no swings)
        coarse_times = [times[k] for g in before.constraints.groups if _key(g) == key for k in g.knots]
        # linear in time between the coarse knots, held beyond them (NumPy's interp does the same)
        t = np.clip(new_times[list(group.knots)], min(coarse_times), max(coarse_times))
        expected = base[key][:, None] + t[None, :]
        if group.family not in AS_IS_FAMILIES:
            expected = expected * counts_before[key] / counts_after[key]
        np.testing.assert_allclose(new_g[group.slice()].reshape(expected.shape, order="F"), expected,
                                   err_msg=group.name)
        checked.add(group.family)
    assert {"equations of motion", "velocity integration", "hand target", "robust balance",
            "margin floor"} <= checked
    # A per-knot density constant in time keeps its sum over the horizon (a quadrature of the cost's
    # mean over knots): the equations of motion, 4 coarse knots against 10 fine ones.
    eom_before, eom_after = before.constraints.group("equations of motion"), after.constraints.group(
        "equations of motion")
    flat = np.zeros(before.constraints.size)
    flat[eom_before.slice()] = 1.0
    _, moved = resampled_multipliers(before, lam_x, flat, after, times, new_times)
    assert moved[eom_after.slice()].sum() == pytest.approx(eom_before.size)
    # one-knot rows keep their values: each hand target lies at one knot on both grids here
    targets = [g for g in after.constraints.groups if g.family == "hand target"]
    assert targets and all(len(g.knots) == 1 for g in targets)
    assert counts_before[_key(targets[0])] == counts_after[_key(targets[0])]
    # variable blocks: rows kept, columns moved in time; the single floor kept as it was
    for name in ("q", "G0", "rho0", "rooms"):
        old, new = before.variables[name], after.variables[name]
        values = lam_x[old.offset:old.stop].reshape((old.rows, old.cols), order="F")
        expected = np.array([np.interp(new_times, times, row) for row in values]) * COARSE / KNOTS
        np.testing.assert_allclose(new_x[new.offset:new.stop].reshape(expected.shape, order="F"), expected,
                                   err_msg=name)
    floor_before, floor_after = before.variables["floor"], after.variables["floor"]
    assert new_x[floor_after.offset] == lam_x[floor_before.offset]


def test_coarse_warm_start_reaches_the_direct_solves_certified_margins(ramp, direct):
    with Planner(evaluation="compiled", continuation=3, warm_start=True) as planner:
        continued = planner.solve(ramp, "robust")
    assert [(s.objective, s.knots) for s in continued.stages] == [("feasible", COARSE), ("robust", COARSE),
                                                                  ("robust", KNOTS)]
    assert_same_certified_plan(continued, direct)
