"""Memory before building: sizes, what the machine has, the estimate's shape, refusal before any build.

The estimate itself is checked against measured peaks (30, 60, 120 knots)
by ``benchmarks/memory.py`` (``benchmarks/RESULTS.md``); here: its parts.
"""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import casadi as ca
import pytest
import yaml

from optimizer.footprint import estimate_memory, stage_size
from optimizer.memory import available_memory, parse_size
from optimizer.planner import shared_planner
from optimizer.problem.task import load_task, task_from_mapping
from optimizer.transcription.nlp import Transcription
from optimizer.transcription.objectives import objective_named
from optimizer.transcription.structure import structure_of

ROOT = Path(__file__).resolve().parents[1]
RAMP = ROOT / "tasks" / "steep_ramp.yaml"


@pytest.mark.parametrize("text, size", [
    ("8G", 8 * 2**30), ("512M", 512 * 2**20), ("1.5 GB", int(1.5 * 2**30)), ("64k", 64 * 1024), ("2TiB", 2 * 2**40)])
def test_sizes_in_binary_units(text, size):
    assert parse_size(text) == size   # binary units, 1 K = 1024 bytes (common practice, IEC 80000-13 "Ki")


@pytest.mark.parametrize("text", ["8", "lots", "-1G", "0M", "", "8X", True, 8])
def test_sizes_without_a_unit_or_positive_value_are_refused(text):
    assert parse_size(text) is None


def test_available_memory_agrees_with_psutil():
    psutil = pytest.importorskip("psutil")
    ours = available_memory()
    theirs = psutil.virtual_memory().available   # psutil reads the same kernel figure its own way
    assert ours is not None
    assert ours.size <= theirs * 1.1 + 64 * 2**20  # a cgroup limit may only make it smaller


def test_nodes_grow_linearly_with_knots():
    """The two small probes predict the expanded NLP's size at a larger knot count (within 2 %)."""
    task = load_task(RAMP)
    size = stage_size(task, "robust")
    big = task.with_knots(16)
    nlp = Transcription(big.robot, shared_planner().symbolic_robot(big.robot), structure_of(big), objective_named("robust")).nlp
    nodes = ca.Function("nlp", [nlp["x"], nlp["p"]], [nlp["f"], nlp["g"]]).expand().n_nodes()
    predicted = size.nodes_fixed + 16 * size.nodes_per_knot
    assert abs(predicted - nodes) <= 0.02 * nodes, (predicted, nodes)


def test_sizes_measured_once_serve_tasks_that_differ_in_numbers_only():
    """A ramp with another slope, friction and hand targets reads the same transcription with other
    parameters: its sizes come from the first ramp's measurement, and they still predict CasADi's own
    node count of its 16-knot NLP (within 2 %, as above)."""
    data = yaml.safe_load(RAMP.read_text())
    data["stance"]["terrain"].update(slope_deg=18.0, friction=0.6)
    data["hand_targets"][0]["position"] = [0.8, 0.1, 0.45]
    other = task_from_mapping(data, RAMP)
    first = stage_size(load_task(RAMP), "robust")
    assert stage_size(other, "robust") is first       # measured once: the very same record
    big = other.with_knots(16)
    nlp = Transcription(big.robot, shared_planner().symbolic_robot(big.robot), structure_of(big),
                        objective_named("robust")).nlp
    nodes = ca.Function("nlp", [nlp["x"], nlp["p"]], [nlp["f"], nlp["g"]]).expand().n_nodes()
    assert abs(first.nodes_fixed + 16 * first.nodes_per_knot - nodes) <= 0.02 * nodes


def test_robust_needs_more_than_feasible_and_knots_cost_memory():
    task = load_task(RAMP)
    feasible, robust = estimate_memory(task.with_knots(40), "feasible"), estimate_memory(task.with_knots(40), "robust")
    assert robust.total > feasible.total
    assert robust.at(80) > robust.at(40)
    fits = robust.largest_knots(robust.at(57) + 1)
    assert fits == 57


def size_after(text: str, lead: str) -> float:
    """The size brace prints right after ``lead`` in ``text`` ("687 MB", "1.3 GB"), in bytes."""
    number, unit = text.split(lead, 1)[1].split()[:2]
    return float(number) * {"MB": 2**20, "GB": 2**30}[unit]


def run_cli(argv, tmp_path, **environment):
    """``brace ARGV`` in a fresh process in ``tmp_path``, with ``environment`` added to this one's."""
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", PYTHONPATH=str(ROOT), **environment)
    return subprocess.run([sys.executable, "-m", "optimizer", *argv], capture_output=True, text=True,
                          env=env, timeout=300, cwd=tmp_path)


def test_a_solve_over_the_limit_is_refused_before_any_build(tmp_path):
    out = tmp_path / "plans" / "ramp.npz"
    done = run_cli(["solve", str(RAMP), "--knots", "120", "--memory-limit", "600M", "--evaluation", "expanded",
                    "--out", str(out)], tmp_path)
    assert done.returncode == 2, done.stderr
    err = [line for line in done.stderr.splitlines() if line.strip()]
    assert len(err) == 1 and "Traceback" not in done.stderr
    assert "for 120 knots" in err[0] and "more than the 600 MB set as the memory limit" in err[0], err
    fits = int(err[0].split("--knots ")[1].split(")")[0])
    assert 2 <= fits < 120
    # the compiled build's solvers need several times less per node: more knots fit under the same limit
    leaner = int(err[0].split("with --evaluation compiled up to ")[1].split(" knots")[0])
    assert fits < leaner < 120
    assert "building" not in done.stdout          # refused before any solver was built
    assert not out.parent.exists()                # no plan, no log


def test_task_memory_limit_is_read_and_checked(tmp_path, capsys):
    from optimizer.cli import main

    data = yaml.safe_load(RAMP.read_text())
    data["robot"] = str((RAMP.parent / data["robot"]).resolve())
    data["solver"] = dict(data.get("solver") or {}, memory_limit="lots")
    bad = tmp_path / "bad.yaml"
    bad.write_text(yaml.safe_dump(data))
    assert main(["solve", str(bad), "--check-only", "--skip-checks"]) == 2
    assert "field 'solver.memory_limit': expected a size with a unit" in capsys.readouterr().err
    data["solver"]["memory_limit"] = "300M"   # read by brace, not handed to Ipopt (which would refuse it)
    small = tmp_path / "small.yaml"
    small.write_text(yaml.safe_dump(data))
    assert main(["solve", str(small), "--check-only", "--skip-checks", "--knots", "100"]) == 2
    assert "more than the 300 MB set as the memory limit" in capsys.readouterr().err
    argv = ["solve", str(small), "--check-only", "--skip-checks", "--knots", "100", "--memory-limit", "64G"]
    assert main(argv) == 0                    # the command line overrides the task
    assert "64.0 GB set as the memory limit" in capsys.readouterr().out


def test_memory_the_process_holds_is_not_counted_twice_against_what_is_available(monkeypatch):
    """/proc/meminfo's MemAvailable (and a cgroup's room) leave out what this process holds already
    (Linux kernel documentation, proc(5)); the estimate counts it, so without a --memory-limit the
    solve is refused only when what it adds exceeds what is available."""
    import optimizer.cli.solve as solve_cli
    from optimizer.errors import TooLargeForMemory
    from optimizer.memory import Available

    task = load_task(RAMP).with_knots(6)
    estimate = estimate_memory(task, "feasible")
    adds = estimate.total - estimate.baseline
    assert estimate.baseline > 64 * 2**20 and adds > 0     # a Python process with NumPy, CasADi, Pinocchio
    monkeypatch.setattr(solve_cli, "available_memory", lambda: Available(adds + 32 * 2**20, "available here"))
    solve_cli.check_memory(task, "feasible", None)         # fits, although total > available
    monkeypatch.setattr(solve_cli, "available_memory", lambda: Available(adds - 32 * 2**20, "available here"))
    with pytest.raises(TooLargeForMemory, match="available here"):
        solve_cli.check_memory(task, "feasible", None)


@pytest.mark.parametrize("evaluation", ["expanded", "compiled", "mapped"])
def test_the_estimate_takes_the_figure_of_the_planners_evaluation(evaluation):
    """An expanded build is measured at BUILD_BYTES_PER_NODE, the builds that keep the knot functions
    mapped (compiled, mapped) at COMPILED_BUILD_BYTES_PER_NODE (benchmarks/memory.py, benchmarks/RESULTS.md
    "Memory" and "Memory, compiled evaluation"); the nodes counted are the same either way."""
    from optimizer.solver.ipopt import BUILD_BYTES_PER_NODE, COMPILED_BUILD_BYTES_PER_NODE

    task = load_task(RAMP).with_knots(40)
    expected = BUILD_BYTES_PER_NODE if evaluation == "expanded" else COMPILED_BUILD_BYTES_PER_NODE
    estimate = estimate_memory(task, "robust", shared_planner(evaluation))
    reference = estimate_memory(task, "robust", shared_planner("expanded"))
    assert estimate.bytes_per_node == expected
    assert [s.nodes_per_knot for s in estimate.stages] == [s.nodes_per_knot for s in reference.stages]
    adds, adds_expanded = estimate.at(80) - estimate.at(40), reference.at(80) - reference.at(40)
    assert adds == pytest.approx(adds_expanded * expected / BUILD_BYTES_PER_NODE, rel=1e-6)


def test_brace_solve_estimates_for_the_evaluation_it_is_given(tmp_path):
    """At 120 knots the expanded robust build of the ramp was measured at 3.4 GB (benchmarks/RESULTS.md,
    "Memory"), the compiled one at a fraction of it: under a 2 GB limit `brace solve` refuses the first and
    lets the second through (--check-only: nothing is built)."""
    argv = ["solve", str(RAMP), "--knots", "120", "--memory-limit", "2G", "--check-only", "--skip-checks"]
    refused = run_cli([*argv, "--evaluation", "expanded"], tmp_path)
    assert refused.returncode == 2 and "more than the 2.0 GB set as the memory limit" in refused.stderr, refused.stderr
    done = run_cli([*argv, "--evaluation", "compiled"], tmp_path)
    assert done.returncode == 0, done.stderr
    assert "brace solve: memory: about" in done.stdout and "for 120 knots" in done.stdout
    # the refusal points at the compiled evaluation with the figure that run then estimates, up to what each
    # process held when it estimated (a few MB)
    advised = size_after(refused.stderr, "with --evaluation compiled it needs about ")
    assert advised == pytest.approx(size_after(done.stdout, "brace solve: memory: about "), rel=0.05), \
        (refused.stderr, done.stdout)


def test_the_warning_near_the_limit_names_the_leaner_evaluation_only_for_expanded_solves(capsys):
    """Above 80 % of the limit `brace solve` warns; for an expanded build it names `--evaluation compiled`,
    whose figure per node is several times smaller (benchmarks/RESULTS.md "Memory, compiled evaluation")."""
    import optimizer.cli.solve as solve_cli

    task = load_task(RAMP).with_knots(20)
    for evaluation in ("expanded", "compiled"):
        estimate = estimate_memory(task, "robust", shared_planner(evaluation))
        solve_cli.check_memory(task, "robust", int(estimate.total / 0.9), evaluation)
        out = capsys.readouterr().out
        assert "warning: the estimate is 90 %" in out, out
        assert ("--evaluation compiled" in out) == (evaluation == "expanded"), out


def test_brace_solve_chooses_the_compiled_evaluation_from_30_knots_when_a_compiler_is_there(monkeypatch):
    """`--evaluation auto`, brace solve's default: compiled from AUTO_COMPILED_KNOTS knots on (where even the
    first compiled plan of a shape was faster than the expanded one, benchmarks/RESULTS.md "Solve, compiled
    evaluation and cache"), expanded below and whenever no C compiler is found; a named evaluation is kept."""
    from optimizer.cli.cache import AUTO_COMPILED_KNOTS, chosen_evaluation
    from optimizer.transcription.compiled import COMPILER_ENVIRONMENT

    monkeypatch.setenv(COMPILER_ENVIRONMENT, sys.executable)     # a command that exists stands for the compiler
    assert chosen_evaluation("auto", AUTO_COMPILED_KNOTS) == "compiled"
    assert chosen_evaluation("auto", AUTO_COMPILED_KNOTS - 1) == "expanded"
    assert chosen_evaluation("expanded", 240) == "expanded" and chosen_evaluation("mapped", 6) == "mapped"
    monkeypatch.setenv(COMPILER_ENVIRONMENT, "no-such-compiler-here")
    assert chosen_evaluation("auto", 240) == "expanded"


@pytest.mark.parametrize("compiler", ["present", "missing"])
def test_brace_solve_estimates_memory_for_the_evaluation_it_chose(compiler, tmp_path):
    """At 60 knots brace solve's automatic choice is the compiled evaluation when the compiler is found and the
    expanded one when not: its memory estimate is the one printed with that evaluation named."""
    from optimizer.transcription.compiled import COMPILER_ENVIRONMENT

    command = sys.executable if compiler == "present" else "no-such-compiler-here"

    def estimate(*extra):
        done = run_cli(["solve", str(RAMP), "--knots", "60", "--check-only", "--skip-checks", "--memory-limit", "64G",
                        *extra], tmp_path, **{COMPILER_ENVIRONMENT: command})
        assert done.returncode == 0, done.stderr
        return size_after(done.stdout, "brace solve: memory: about ")

    chosen, compiled, expanded = estimate(), estimate("--evaluation", "compiled"), estimate("--evaluation", "expanded")
    assert expanded > 2 * compiled                   # several times less per node (see above)
    # the same estimate up to what each process held when it estimated (a few MB)
    assert chosen == pytest.approx(compiled if compiler == "present" else expanded, rel=0.05)
