"""Fuzzing task files: every mutation of a valid task is either accepted or a clear error, never a traceback.

Hypothesis (derandomized, so CI sees the same cases every run) drops,
retypes, perturbs, renames and swaps fields of three valid tasks (explicit
contacts on flat ground, a ramp terrain, a stair of blocks), writes the
result as YAML and runs ``brace solve TASK --check-only`` in-process:
loading, validation, the solver-option probe and the pre-solve checks.
Accepted outcomes: exit 0 (valid, checks passed) or 2 (one-line error
naming the file, or a proven-impossible task with its findings). Anything
else, a traceback, exit 70 (an unexpected exception) or a case running past
its deadline fails the test. A smaller run solves valid perturbed tasks at
3 knots with a few Ipopt iterations (exit 0, 1 or 2).
"""
from __future__ import annotations

import contextlib
import copy
import io
import math
import re
import signal
import tempfile
from pathlib import Path

import yaml
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from flat_ground import flat_stance
from optimizer.cli import main

ROOT = Path(__file__).resolve().parents[1]
ROBOT = str(ROOT / "models" / "stilt.yaml")
TARGETS = [{"label": "pick", "position": [0.6, 0.05, 0.4], "window": [0.8, 1.0]},
           {"label": "place", "position": [0.3, -0.3, 0.3], "time": 1.6}]
BASES = {
    "flat": {
        "name": "fuzz_flat", "robot": ROBOT, "horizon": {"duration": 2.0, "knots": 8},
        "stance": flat_stance(),
        "hand_targets": TARGETS, "disturbances": [{"frame": "grip_point", "kind": "force"}],
        "objective": "robust", "pyramid_facets": 4, "min_normal_force": 5.0, "solver": {"max_iter": 5},
    },
    "ramp": {
        "robot": ROBOT, "horizon": {"duration": 2.5, "knots": 8},
        "stance": {"terrain": {"kind": "ramp", "slope_deg": 15.0, "uphill": [1.0, 0.0], "friction": 0.7},
                   "feet": {"foot_fl": [0.26, 0.19], "foot_fr": {"xy": [0.26, -0.19], "surface": "ramp"},
                            "foot_rl": [-0.24, 0.19], "foot_rr": [-0.24, -0.19]}},
        "hand_targets": [{"position": [0.7, 0.0, 0.5], "time": 1.0, "orientation": {"rpy_deg": [0, 20, 0]}}],
        "initial_posture": "stance",
    },
    "stair": {
        "robot": ROBOT, "horizon": {"duration": 2.0, "knots": 8},
        "stance": {"terrain": {"kind": "blocks", "friction": 0.8,
                               "blocks": [{"center": [0.45, 0.0], "size": [0.5, 1.0], "height": 0.1}]},
                   "feet": {"foot_fl": [0.3, 0.18], "foot_fr": [0.3, -0.18], "foot_rl": [-0.22, 0.18],
                            "foot_rr": [-0.22, -0.18]}},
        "hand_targets": [{"position": [0.8, 0.0, 0.45], "window": [0.9, 1.1]}],
        "disturbances": [{"kind": "wrench", "shape": [[1 if i == j else 0 for j in range(6)] for i in range(6)]}],
    },
}
CASE_SECONDS = 60          # per-case deadline: a case running longer counts as a hang
ANY_VALUE = st.one_of(
    st.none(), st.booleans(), st.integers(-10 ** 12, 10 ** 12), st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=6), st.lists(st.floats(-5, 5), max_size=4), st.lists(st.text(max_size=3), max_size=2),
    st.dictionaries(st.text(max_size=4), st.integers(-3, 3), max_size=2), st.just("stance"), st.just([0.0, 0.0, 1.0]))


class CaseTooSlow(Exception):
    pass


@contextlib.contextmanager
def deadline(seconds: float):
    """Raise CaseTooSlow inside the block after ``seconds`` (SIGALRM; the tests run in the main thread)."""
    def expire(signum, frame):
        raise CaseTooSlow(f"case ran longer than {seconds} s")

    previous = signal.signal(signal.SIGALRM, expire)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


# ---------------------------------------------------------------- mutations


def node_paths(data, prefix=()) -> list[tuple]:
    """Paths to every value inside ``data`` (mapping keys and list indices)."""
    items = data.items() if isinstance(data, dict) else enumerate(data) if isinstance(data, list) else []
    out = []
    for key, value in items:
        out.append(prefix + (key,))
        out += node_paths(value, prefix + (key,))
    return out


def parent_of(data, path):
    for key in path[:-1]:
        data = data[key]
    return data


def mutate(draw, data: dict) -> str:
    """Apply one random mutation to ``data`` in place; returns its kind (for statistics)."""
    paths = node_paths(data)
    path = draw(st.sampled_from(paths))
    parent, key = parent_of(data, path), path[-1]
    kind = draw(st.sampled_from(["drop", "retype", "perturb", "swap", "rename"]))
    if kind == "drop":
        del parent[key]
    elif kind == "retype":
        parent[key] = draw(ANY_VALUE)
    elif kind == "perturb":
        parent[key] = perturbed(draw, parent[key])
    elif kind == "swap":
        other = draw(st.sampled_from(paths))
        if other[:len(path)] != path and path[:len(other)] != other:
            other_parent = parent_of(data, other)
            parent[key], other_parent[other[-1]] = other_parent[other[-1]], parent[key]
    elif isinstance(parent, dict):   # rename: a typo in the key
        text = str(key)
        at = draw(st.integers(0, len(text)))
        typo = text[:at] + draw(st.sampled_from(["", "x", "_", "s"])) + text[at + 1:]
        parent[typo] = parent.pop(key)
    return kind


def perturbed(draw, value):
    """Numbers scaled and shifted (sign flips, zero, large); lists get one element perturbed."""
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, (int, float)):
        factor = draw(st.sampled_from([0.0, -1.0, 0.5, 1.1, 3.0, 100.0, 1e6]))
        shifted = value * factor + draw(st.floats(-1.0, 1.0))
        return int(shifted) if isinstance(value, int) and math.isfinite(shifted) else shifted
    if isinstance(value, list) and value:
        i = draw(st.integers(0, len(value) - 1))
        return value[:i] + [perturbed(draw, value[i])] + value[i + 1:]
    return value


def write(folder: Path, data: dict) -> Path:
    path = folder / "task.yaml"
    path.write_text(yaml.safe_dump(data, allow_unicode=True), encoding="utf-8")
    return path


def run_cli(argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err), deadline(CASE_SECONDS):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


def assert_clear(code: int, out: str, err: str, allowed) -> None:
    assert "Traceback" not in out + err, err
    assert code in allowed, f"exit {code}: {err}"
    if code == 2:
        assert re.match(r"brace solve: error: \S.*(field '|expected |cannot be solved)", err), err
    if code == 0:
        assert "brace solve:" in out


# ---------------------------------------------------------------- the fuzz tests

FUZZ = settings(max_examples=110, deadline=None, derandomize=True, database=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.filter_too_much])


def check_mutated(base: str, data) -> None:
    task = copy.deepcopy(BASES[base])
    kinds = [mutate(data.draw, task) for _ in range(data.draw(st.integers(1, 3)))]
    with tempfile.TemporaryDirectory() as folder:
        code, out, err = run_cli(["solve", str(write(Path(folder), task)), "--check-only",
                                  "--out", str(Path(folder) / "plan.npz")])
    event(f"exit {code}")
    event("mutations: " + ", ".join(sorted(kinds)))
    assert_clear(code, out, err, allowed=(0, 2))


@FUZZ
@given(st.data())
def test_mutated_flat_tasks(data):
    check_mutated("flat", data)


@FUZZ
@given(st.data())
def test_mutated_ramp_tasks(data):
    check_mutated("ramp", data)


@FUZZ
@given(st.data())
def test_mutated_stair_tasks(data):
    check_mutated("stair", data)


def test_the_bases_are_valid():
    # the fuzz starts from valid tasks: the errors it finds come from the mutations
    for base in BASES.values():
        with tempfile.TemporaryDirectory() as folder:
            code, out, err = run_cli(["solve", str(write(Path(folder), base)), "--check-only"])
        assert code == 0, err


@settings(max_examples=6, deadline=None, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.too_slow])
@given(st.data())
def test_perturbed_flat_tasks_solve_or_fail_clearly(data):
    task = copy.deepcopy(BASES["flat"])
    numbers = [p for p in node_paths(task) if isinstance(parent_of(task, p)[p[-1]], (int, float, list))
               and p[0] not in ("solver", "horizon")]
    path = data.draw(st.sampled_from(numbers))
    parent_of(task, path)[path[-1]] = perturbed(data.draw, parent_of(task, path)[path[-1]])
    with tempfile.TemporaryDirectory() as folder:
        code, out, err = run_cli(["solve", str(write(Path(folder), task)), "--knots", "3", "--quiet",
                                  "--out", str(Path(folder) / "plan.npz")])
        written = sorted(p.name for p in Path(folder).iterdir())
    event(f"exit {code}")
    assert_clear(code, out, err, allowed=(0, 1, 2))
    assert ("plan.npz" in written) == (code == 0)
    assert ("plan.infeasible.npz" in written) == (code == 1)
