"""Every entry of every registry meets the same checks: terrain kinds, objectives, commands,
solver backends, limit kinds. A new entry is tested the moment it is registered.

References are named beside each check: geometry of a surface (a normal is
perpendicular to every tangent, finite differences), the method of Lagrange
multipliers for an equality-constrained quadratic (textbook), the rows of
docs/formulation.md section 3 written out by hand, and the task-file guide.
"""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import casadi as ca
import numpy as np
import pytest

from optimizer.cli import COMMAND_HELP, COMMANDS, main
from optimizer.errors import TaskError
from optimizer.planner import Planner
from optimizer.problem.friction import pyramid_facets, tangent_basis
from optimizer.problem.limits import LIMIT_KINDS, NUMPY_OPS, KnotLimits, LimitValues
from optimizer.problem.task import load_task
from optimizer.problem.terrain import TERRAINS, build_terrain
from optimizer.schema import Fields
from optimizer.solver.registry import BACKENDS
from optimizer.transcription.constraints import FAMILIES
from optimizer.transcription.guess import initial_guess
from optimizer.transcription.knot_functions import CASADI_OPS
from optimizer.transcription.objectives import OBJECTIVES
from optimizer.transcription.parameters import parameter_values

ROOT = Path(__file__).resolve().parents[1]
TASK_GUIDE = (ROOT / "docs" / "task-files.md").read_text(encoding="utf-8")
README = (ROOT / "README.md").read_text(encoding="utf-8")


# ---------------------------------------------------------------- terrain kinds


def terrain(spec):
    return build_terrain(Fields(spec, "t.yaml", "stance.terrain", TaskError))


@pytest.mark.parametrize("kind", sorted(TERRAINS))
def test_terrain_kind_places_feet_on_its_surfaces(kind):
    cls = TERRAINS[kind]
    assert cls.EXAMPLE.get("kind") == kind and f"`{kind}`" in TASK_GUIDE   # documented for users
    ground = terrain(cls.EXAMPLE)
    rng, h, placed = np.random.default_rng(3), 1e-4, 0
    for xy in rng.uniform(-0.6, 0.6, size=(30, 2)):
        try:
            here = ground.place(xy, None, "f")
        except TaskError:
            continue                      # e.g. too near a block edge: refused on purpose
        placed += 1
        assert np.linalg.norm(here.normal) == pytest.approx(1.0, abs=1e-12)
        assert here.surface in ground.surfaces and here.friction > 0
        assert here.normal[2] > 0          # a foot placed without a named surface stands on ground facing up
        # geometry: finite-difference tangents of the surface are perpendicular to its normal
        for step in (np.array([h, 0.0]), np.array([0.0, h])):
            try:
                there = ground.place(xy + step, None, "f")
            except TaskError:
                continue
            if there.surface == here.surface:
                assert (there.foothold - here.foothold) / h @ here.normal == pytest.approx(0.0, abs=1e-8)
    assert placed >= 10


@pytest.mark.parametrize("kind", sorted(TERRAINS))
def test_terrain_kind_gives_its_surfaces_as_geometry(kind):
    # Every foothold lies on the surface it was placed on, and a point just under it (along
    # the normal, into the terrain) is on the terrain's side: the clearance rows keep shapes
    # out of exactly the surfaces the feet stand on (signed distance, plane or box).
    ground = terrain(TERRAINS[kind].EXAMPLE)
    surfaces = {s.name: s for s in ground.geometry()}
    assert set(surfaces) <= set(ground.surfaces) and surfaces
    placed = 0
    for xy in np.random.default_rng(5).uniform(-0.6, 0.6, size=(30, 2)):
        try:
            here = ground.place(xy, None, "f")
        except TaskError:
            continue
        placed += 1
        surface = surfaces[here.surface]
        assert surface.point_distance(here.foothold) == pytest.approx(0.0, abs=1e-9)
        assert surface.point_distance(here.foothold - 0.01 * here.normal) < 0.0
        assert surface.point_distance(here.foothold + 0.01 * here.normal) == pytest.approx(0.01, abs=1e-9)
    assert placed >= 10


@pytest.mark.parametrize("kind", sorted(TERRAINS))
def test_terrain_kind_names_bad_input(kind):
    spec = dict(TERRAINS[kind].EXAMPLE, no_such_key=1.0)
    with pytest.raises(TaskError, match=r"stance\.terrain.*no_such_key"):
        terrain(spec)
    ground = terrain(TERRAINS[kind].EXAMPLE)
    with pytest.raises(TaskError, match=r"f\.surface.*one of the surfaces"):
        ground.place(np.zeros(2), "no_such_surface", "f")


# ---------------------------------------------------------------- objectives


@pytest.fixture(scope="module")
def standing_task():
    return load_task(ROOT / "tasks" / "steep_ramp.yaml").with_knots(3)


@pytest.fixture(scope="module")
def planner():
    with Planner() as shared:
        yield shared


@pytest.mark.parametrize("name", sorted(OBJECTIVES))
def test_objective_builds_a_labelled_nlp_with_a_finite_cost(name, planner, standing_task):
    task = standing_task
    transcription = planner.transcription(task, name)
    objective = OBJECTIVES[name]()
    assert objective.name == name and f"`{name}`" in TASK_GUIDE + README
    # every row of g is labelled, with a family diagnosis can put in words
    labels = transcription.constraints.labels
    assert len(labels) == transcription.nlp["g"].numel() == transcription.lbg.size
    assert {label.family for label in labels} <= set(FAMILIES)
    assert all(0 <= label.knot < task.knots and label.who for label in labels)
    # robust objectives, and only they, carry margins
    margins = [b.name for b in transcription.variables.blocks if b.name.startswith("rho")]
    assert bool(margins) == objective.robust
    # bounds are ordered and the cost is a finite number at the starting point
    lbx, ubx = transcription.bounds(task.initial_posture)
    assert np.all(lbx <= ubx) and np.all(transcription.lbg <= transcription.ubg)
    p = parameter_values(task, transcription.structure, transcription.parameters)
    x0 = np.clip(transcription.variables.pack(initial_guess(task)), lbx, ubx)
    cost = ca.Function("cost", [transcription.nlp["x"], transcription.nlp["p"]], [transcription.nlp["f"]])
    assert np.isfinite(float(cost(x0, p)))


# ---------------------------------------------------------------- commands


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_command_has_help_and_refuses_a_missing_file_in_one_line(command, capsys, tmp_path):
    assert COMMAND_HELP[command] and f"brace {command}" in README
    with pytest.raises(SystemExit) as stop:
        main([command, "--help"])
    assert stop.value.code == 0 and "usage:" in capsys.readouterr().out
    missing = tmp_path / "missing.yaml"
    assert main([command, str(missing)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and str(missing) in err[0] and "Traceback" not in err[0]


# ---------------------------------------------------------------- solver backends


def lagrange_nlp():
    """min (x - p)^2 + (y - 2)^2 s.t. x + y = 1: Lagrange multipliers give x = (p - 1)/2, y = (3 - p)/2."""
    x, p = ca.SX.sym("x", 2), ca.SX.sym("p")
    return {"x": x, "p": p, "f": (x[0] - p) ** 2 + (x[1] - 2) ** 2, "g": x[0] + x[1]}


@pytest.mark.parametrize("name", sorted(BACKENDS))
def test_backend_builds_once_and_solves_many(name):
    backend = BACKENDS[name]
    seen = []
    solver = backend.build(lagrange_nlp(), {}, expand=True, progress=lambda i, x, f, g: seen.append(i))
    assert solver.build_time >= 0.0
    for p in (0.0, 3.0, -5.0):
        result = solver.solve(np.zeros(2), p, -np.inf * np.ones(2), np.inf * np.ones(2), 1.0, 1.0)
        assert result.success and result.status in ("solved", "acceptable")
        np.testing.assert_allclose(result.x, [(p - 1) / 2, (3 - p) / 2], atol=1e-7)
        # stationarity of f + lam g: 2 (x - p) + lam = 0, so lam = p + 1
        np.testing.assert_allclose(result.lam_g, [p + 1], atol=1e-6)
        assert result.max_violation <= 1e-8 and result.iterations >= 0
    assert seen, "the progress callback was never called"
    # x >= 2 and y >= 2 cannot meet x + y = 1: the backend says so in neutral words
    result = solver.solve(np.zeros(2), 0.0, 2.0 * np.ones(2), np.inf * np.ones(2), 1.0, 1.0)
    assert not result.success and result.status not in ("solved", "acceptable")


@pytest.mark.parametrize("name", sorted(BACKENDS))
def test_backend_checks_options_before_building(name):
    backend = BACKENDS[name]
    assert backend.check_options({}) is None
    reason = backend.check_options({"no_such_option_anywhere": 1})
    assert isinstance(reason, str) and reason and "\n" not in reason


# ---------------------------------------------------------------- limit kinds


def limit_case(seed: int):
    rng = np.random.default_rng(seed)
    joints, contacts, m = ("j0", "j1", "j2"), ("c0", "c1"), 4
    normals = [n / np.linalg.norm(n) for n in rng.normal(size=(2, 3)) + [0, 0, 3]]
    facets = [pyramid_facets(n, tangent_basis(n), 0.7, m) for n in normals]
    values = LimitValues(-rng.uniform(5, 9, 3), rng.uniform(5, 9, 3), facets, normals, 4.0, 300.0)
    return KnotLimits(joints, contacts, m), values, rng


@pytest.mark.parametrize("kind", sorted(LIMIT_KINDS))
def test_limit_kind_rows_are_named_once_and_agree_across_array_libraries(kind):
    limits, values, rng = limit_case(11)
    names = limits.names
    mine = [i for i, n in enumerate(names) if n.kind == kind]
    assert mine and len({str(n) for n in names}) == len(names)          # one spelling, no two alike
    tau, lam = rng.normal(size=3), rng.normal(size=6) * 50 + np.tile([0, 0, 80.0], 2)
    rooms = limits.rooms(tau, lam, values)
    # the same definition evaluated by CasADi
    symbolic = LimitValues(ca.DM(values.tau_lower), ca.DM(values.tau_upper), [ca.DM(f) for f in values.facets],
                           [ca.DM(n) for n in values.normals], values.min_normal_force, values.weight)
    np.testing.assert_allclose(np.array(limits.rooms(ca.DM(tau), ca.DM(lam), symbolic, CASADI_OPS)).ravel(), rooms,
                               rtol=1e-12, atol=1e-12)
    # affine: the linear form reproduces the rooms
    a_tau, a_lam, b = limits.linear(values)
    np.testing.assert_allclose(b + a_tau @ tau + a_lam @ lam, rooms, rtol=1e-12, atol=1e-9)
    assert np.all(np.asarray(limits.scales(values, NUMPY_OPS))[mine] > 0)


def test_limit_rows_match_the_formulas_written_out():
    # docs/formulation.md section 3, by hand: torque box, -g.f per facet, n.f - f_min
    limits, values, rng = limit_case(5)
    tau, lam = rng.normal(size=3), rng.normal(size=6) * 30
    expected = np.concatenate([values.tau_upper - tau, tau - values.tau_lower,
                               *[-(values.facets[c] @ lam[3 * c:3 * c + 3]) for c in range(2)],
                               [values.normals[c] @ lam[3 * c:3 * c + 3] - 4.0 for c in range(2)]])
    np.testing.assert_allclose(limits.rooms(tau, lam, values), expected, rtol=1e-14)


def test_every_command_runs_as_a_module(tmp_path):
    # the installed entry point and `python -m optimizer` are the same program
    run = subprocess.run([sys.executable, "-m", "optimizer", "--help"], capture_output=True, text=True,
                         cwd=ROOT, env={"PYTHONPATH": str(ROOT), "PATH": ""}, timeout=120)
    assert run.returncode == 0 and all(name in run.stdout for name in COMMANDS)


def test_limit_row_names_are_listed_once_for_a_knot_layout():
    # One layout (joints, contacts, facets), one list of names: read again, or from another
    # knot with the same layout, it is the same object, and the scales follow it row by row.
    limits, values, _ = limit_case(3)
    again = KnotLimits(tuple(limits.joints), tuple(limits.contacts), limits.facets)
    assert limits.names is limits.names and again.names is limits.names
    assert len(np.asarray(limits.scales(values, NUMPY_OPS))) == limits.size == len(limits.names)
    other = KnotLimits(limits.joints, limits.contacts[:1], limits.facets)
    assert other.size == limits.size - limits.facets - 1   # one contact fewer: its facets and its normal row
