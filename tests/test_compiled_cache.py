"""Compiled knot functions and the cache folder they live in.

The compiled code must compute what the CasADi functions it comes from
compute (values, Jacobians and Hessians, checked against CasADi's own SX
evaluation and the equations of motion against Pinocchio's ``rnea``); a plan
from compiled code must be the uncompiled plan and pass the physics checks;
the cache must survive two processes building one entry at once, never use a
truncated or mismatched entry, and fall back with one notice when no
compiler is found.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import casadi as ca
import numpy as np
import pinocchio as pin
import pytest

from optimizer import cache
from optimizer.analysis.plan_check import check_plan
from optimizer.cli import main
from optimizer.planner import Planner, take_notice
from optimizer.problem.task import load_task
from optimizer.transcription import compiled

ROOT = Path(__file__).resolve().parent.parent
KNOTS = 6


@pytest.fixture
def own_cache(tmp_path, monkeypatch):
    """A fresh, empty cache folder for one test."""
    folder = tmp_path / "cache"
    monkeypatch.setenv(cache.ENVIRONMENT, str(folder))
    return folder


def small_function(scale: float = 1.0) -> ca.Function:
    """A small nonlinear function of two inputs (cheap to compile)."""
    x, y = ca.SX.sym("x", 3), ca.SX.sym("y")
    out = ca.vertcat(ca.sin(x[0]) * y * scale, x[1] ** 2 * x[0] + y * y, ca.exp(x[2]) * x[0])
    return ca.Function("small", [x, y], [out], ["x", "y"], ["r"])


@pytest.fixture(scope="module")
def ramp():
    return load_task(ROOT / "tasks" / "steep_ramp.yaml").with_knots(KNOTS)


@pytest.fixture(scope="module")
def planners():
    with Planner(evaluation="compiled") as built, Planner(evaluation="mapped") as plain:
        yield built, plain


def test_compiled_functions_match_casadi_and_pinocchio(ramp, planners):
    built, plain = planners
    fast = built.transcription(ramp, "feasible").functions
    slow = plain.transcription(ramp, "feasible").functions
    assert built.transcription(ramp, "feasible").compile_failure is None
    assert fast.dynamics.class_name() == "External" and slow.dynamics.class_name() == "SXFunction"
    rng = np.random.default_rng(3)
    for name in compiled.knot_function_names(slow):
        a, b = compiled._get(fast, name), compiled._get(slow, name)
        inputs = [rng.standard_normal(b.sparsity_in(i).shape) for i in range(b.n_in())]
        # CasADi's SX interpreter is the reference for the generated C: values, Jacobians, Hessians.
        for got, want in zip(a.call(inputs), b.call(inputs)):
            assert np.allclose(np.array(got), np.array(want), rtol=1e-10, atol=1e-10), name
        ja, jb = a.jacobian(), b.jacobian()
        outs = b.call(inputs)
        for got, want in zip(ja.call(inputs + outs), jb.call(inputs + outs)):
            assert np.allclose(np.array(got), np.array(want), rtol=1e-9, atol=1e-9), name
        seeds = [rng.standard_normal(b.sparsity_out(i).shape) for i in range(b.n_out())]
        adjoints = b.reverse(1).call(inputs + outs + seeds)
        args = inputs + outs + seeds + adjoints
        for got, want in zip(a.reverse(1).jacobian().call(args), b.reverse(1).jacobian().call(args)):
            assert np.allclose(np.array(got), np.array(want), rtol=1e-9, atol=1e-9), name
    # Pinocchio rnea: with no joint torque and no contact force, the compiled residual is rnea / (m g).
    model = ramp.robot.model
    q = pin.randomConfiguration(model, -np.ones(model.nq), np.ones(model.nq))
    v, a = rng.standard_normal(model.nv), rng.standard_normal(model.nv)
    residual = np.array(fast.dynamics(q, v, a, np.zeros(model.nv - 6), np.zeros(3 * fast.structure.nc))).ravel()
    weight = ramp.robot.mass * np.linalg.norm(ramp.robot.gravity)
    assert np.allclose(residual, pin.rnea(model, model.createData(), q, v, a) / weight, atol=1e-10)


def test_the_compiled_plan_is_the_uncompiled_plan_and_passes_the_physics_checks(ramp, planners):
    built, plain = planners
    fast, slow = built.solve(ramp, "feasible"), plain.solve(ramp, "feasible")
    assert fast.success and slow.success
    # Same NLP, same start: both reach the same point within Ipopt's tolerance (tol 1e-6).
    assert np.allclose(fast.plan.q, slow.plan.q, atol=1e-5)
    assert np.allclose(fast.plan.tau, slow.plan.tau, atol=1e-3 * np.abs(slow.plan.tau).max())
    report = check_plan(fast.plan)  # Pinocchio re-check: dynamics, integration, contacts, limits
    assert report.passed, [r.reason() for r in report.failures()]


def test_a_cached_library_is_reused_and_a_broken_one_rebuilt(own_cache):
    f = small_function()
    x, y = np.array([0.3, -1.2, 0.5]), 2.0
    first, built = compiled.compiled_functions({"f": f})
    assert built == ["f"] and np.allclose(np.array(first["f"](x, y)), np.array(f(x, y)), atol=1e-12)
    again, built = compiled.compiled_functions({"f": f})
    assert built == []  # valid entry: loaded, not compiled
    library = next(own_cache.rglob("*.so"))
    # Truncated. Written beside and renamed over, as the library is mapped into this process:
    # writing into its file in place would change the loaded code under our feet.
    cut = library.with_name("cut")
    cut.write_bytes(library.read_bytes()[:1000])
    os.replace(cut, library)
    _, built = compiled.compiled_functions({"f": f})
    assert built == ["f"] and cache.valid_entry(library)
    library.with_name(library.name + cache.SIDECAR).write_text("0" * 64 + "\n")  # digest of other bytes
    _, built = compiled.compiled_functions({"f": f})
    assert built == ["f"] and cache.valid_entry(library)
    # Another function (a changed number in it) is another entry.
    _, built = compiled.compiled_functions({"g": small_function(2.0)})
    assert built == ["g"] and len(list(own_cache.rglob("*.so"))) == 2


CHILD = textwrap.dedent("""
    import json, sys
    import numpy as np
    sys.path.insert(0, sys.argv[1])
    sys.path.insert(0, sys.argv[2])
    from test_compiled_cache import small_function
    from optimizer.transcription import compiled
    loaded, built = compiled.compiled_functions({"f": small_function()})
    print(json.dumps({"built": built, "value": np.array(loaded["f"]([0.3, -1.2, 0.5], 2.0)).ravel().tolist()}))
""")


def test_two_processes_building_one_entry_at_once(own_cache):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    args = [sys.executable, "-c", CHILD, str(ROOT), str(Path(__file__).parent)]
    children = [subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
                for _ in range(2)]
    results = []
    for child in children:
        out, err = child.communicate(timeout=300)
        assert child.returncode == 0, err[-2000:]
        results.append(json.loads(out.strip().splitlines()[-1]))
    # The entry lock: one process compiles, the other waits and loads its library.
    assert sorted(len(r["built"]) for r in results) == [0, 1]
    want = np.array(small_function()([0.3, -1.2, 0.5], 2.0)).ravel()
    assert all(np.allclose(r["value"], want, atol=1e-12) for r in results)
    libraries = list(own_cache.rglob("*.so"))
    assert len(libraries) == 1 and cache.valid_entry(libraries[0])
    assert not [p.name for p in own_cache.rglob(".*")]  # no temporary file left


def test_without_a_compiler_the_planner_falls_back_and_says_so_once(ramp, own_cache, monkeypatch):
    monkeypatch.setenv(compiled.COMPILER_ENVIRONMENT, str(own_cache / "no-such-compiler"))
    take_notice()
    with Planner(evaluation="compiled") as planner:
        feasible = planner.transcription(ramp, "feasible")
        robust = planner.transcription(ramp, "robust")
    assert "no-such-compiler" in feasible.compile_failure and robust.compile_failure == feasible.compile_failure
    assert feasible.functions.dynamics.class_name() == "SXFunction"
    notes = take_notice()
    assert len(notes) == 1 and "no-such-compiler" in notes[0]
    assert not own_cache.exists() or not list(own_cache.rglob("*.so"))


def test_brace_solve_without_a_compiler_says_so_once_and_writes_the_plan(ramp, own_cache, monkeypatch, tmp_path,
                                                                          capsys):
    monkeypatch.setenv(compiled.COMPILER_ENVIRONMENT, str(own_cache / "no-such-compiler"))
    out = tmp_path / "plan.npz"
    code = main(["solve", str(ROOT / "tasks" / "steep_ramp.yaml"), "--knots", str(KNOTS), "--objective", "feasible",
                 "--quiet", "--skip-checks", "--evaluation", "compiled", "--out", str(out)])
    printed = capsys.readouterr().out
    assert code == 0 and out.exists()
    assert printed.count("no-such-compiler") == 1


def test_cache_command_shows_and_clears(own_cache, capsys):
    compiled.compiled_functions({"f": small_function()})
    assert main(["cache", "show", "--cache-dir", str(own_cache)]) == 0
    assert "1 compiled library" in capsys.readouterr().out
    assert main(["cache", "clear", "--cache-dir", str(own_cache)]) == 0
    assert "cleared" in capsys.readouterr().out
    assert not list(own_cache.rglob("*.so"))


def _nlp_classes(transcription) -> set[str]:
    """Class names of every function inside the transcription's NLP (``ThreadMap`` for a threaded map)."""
    nlp = transcription.nlp
    whole = ca.Function("nlp", [nlp["x"], nlp["p"]], [nlp["f"], nlp["g"]])
    return {f.class_name() for f in whole.find_functions()}


def test_threaded_knot_functions_give_the_serial_plan(ramp):
    # Four threads over 6 knots (5 for the integration steps) also splits the knots unevenly.
    with Planner(evaluation="compiled", threads=1) as serial, Planner(evaluation="compiled", threads=4) as threaded:
        one, four = serial.solve(ramp, "robust"), threaded.solve(ramp, "robust")
        transcription = threaded.transcription(ramp, "robust")
        assert "ThreadMap" in _nlp_classes(transcription)
        assert "ThreadMap" not in _nlp_classes(serial.transcription(ramp, "robust"))
        # Pinocchio rnea: the threaded map of the equations of motion over the knots is rnea / (m g) at each knot.
        model, rng = ramp.robot.model, np.random.default_rng(5)
        q = np.column_stack([pin.randomConfiguration(model, -np.ones(model.nq), np.ones(model.nq))
                             for _ in range(KNOTS)])
        v, a = rng.standard_normal((model.nv, KNOTS)), rng.standard_normal((model.nv, KNOTS))
        dynamics = transcription._map(transcription.functions.dynamics, KNOTS)
        nc = transcription.structure.nc
        residual = np.array(dynamics(q, v, a, np.zeros((model.nv - 6, KNOTS)), np.zeros((3 * nc, KNOTS))))
        weight = ramp.robot.mass * np.linalg.norm(ramp.robot.gravity)
        for k in range(KNOTS):
            want = pin.rnea(model, model.createData(), q[:, k], v[:, k], a[:, k]) / weight
            assert np.allclose(residual[:, k], want, atol=1e-10), k
    assert one.success and four.success
    # The serial evaluation is the reference: each knot is evaluated by the same code on the same numbers,
    # so the solver takes the same path (same iterations) to the same plan.
    assert [s.iterations for s in four.stages] == [s.iterations for s in one.stages]
    for name in ("q", "v", "a", "tau", "contact_forces", "margin"):
        want = getattr(one.plan, name)
        assert np.allclose(getattr(four.plan, name), want, rtol=1e-9, atol=1e-9 * max(1.0, np.abs(want).max())), name
    report = check_plan(four.plan)  # Pinocchio re-check: dynamics, integration, contacts, limits
    assert report.passed, [r.reason() for r in report.failures()]


def test_thread_count_from_the_planner_or_the_environment(monkeypatch, tmp_path, capsys):
    from optimizer.planner import THREADS_ENVIRONMENT, evaluation_threads

    ramp = load_task(ROOT / "tasks" / "steep_ramp.yaml")
    monkeypatch.delenv(THREADS_ENVIRONMENT, raising=False)
    assert evaluation_threads() == 1                                      # serial unless told
    assert Planner(evaluation="compiled").threads_for(ramp.with_knots(200)) == 1
    assert Planner(evaluation="compiled", threads=2).threads_for(ramp) == 2
    monkeypatch.setenv(THREADS_ENVIRONMENT, "3")
    assert evaluation_threads() == 3 and evaluation_threads(1) == 1
    assert Planner(evaluation="compiled").threads_for(ramp) == 3
    assert Planner(evaluation="expanded").threads_for(ramp) == 1
    with pytest.raises(ValueError):
        Planner(evaluation="compiled", threads=0)
    monkeypatch.setenv(THREADS_ENVIRONMENT, "two")
    code = main(["solve", str(ROOT / "tasks" / "steep_ramp.yaml"), "--check-only", "--skip-checks",
                 "--out", str(tmp_path / "plan.npz")])
    err = capsys.readouterr().err.strip()
    assert code == 2 and err.count("\n") == 0 and "$BRACE_THREADS: expected a whole number >= 1" in err, err
