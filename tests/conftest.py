"""Suite-wide check that brace leaves no temporary file or folder behind.

The whole session runs with a fresh, empty temporary folder (``TMPDIR`` and
:data:`tempfile.tempdir`, inherited by every command the tests start). When
the session ends, that folder may hold only pytest's own ``pytest-of-*``
folder and the folder of scratch space this test process itself still uses
(its solvers stay cached until exit; that exit cleanup is checked by
``tests/test_temporary_files.py`` in a separate process). Anything else is
litter made by brace (or by a library through brace) and fails the session.

The session also gets a fresh cache folder of its own (``BRACE_CACHE_DIR``),
removed at the end.

With pytest-xdist (the README's test command runs two workers) both folders
are made once, by the controlling process, and every worker inherits them;
the litter check runs there too, after the workers have exited, so each
worker's own scratch space must be gone by then (its exit cleanup).
"""
from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

import pytest

_ORIGINAL_TMPDIR = os.environ.get("TMPDIR")
_ORIGINAL_CACHE = os.environ.get("BRACE_CACHE_DIR")
_SUITE_TMP: Path | None = None
_SUITE_CACHE: Path | None = None


def pytest_configure(config):
    global _SUITE_TMP, _SUITE_CACHE
    if hasattr(config, "workerinput"):  # a pytest-xdist worker shares the controller's folder
        return
    # One fresh cache folder of compiled knot functions for the whole session: tests share what
    # earlier tests compiled, and never see a cache left by an earlier session or by the user.
    _SUITE_CACHE = Path(tempfile.mkdtemp(prefix="suite-cache-"))
    os.environ["BRACE_CACHE_DIR"] = str(_SUITE_CACHE)
    _SUITE_TMP = Path(tempfile.mkdtemp(prefix="suite-tmp-"))
    os.environ["TMPDIR"] = str(_SUITE_TMP)
    tempfile.tempdir = str(_SUITE_TMP)


def litter(folder: Path) -> list[str]:
    """Entries of ``folder`` that nobody but brace could have left there."""
    from optimizer import supervisor

    own = supervisor.current_scratch_root()
    return sorted(p.name for p in folder.iterdir()
                  if not p.name.startswith("pytest-of-") and (own is None or p != own))


@pytest.hookimpl(trylast=True)  # after pytest-xdist has stopped its workers
def pytest_sessionfinish(session, exitstatus):
    """After the last test: the session's temporary folder holds nothing brace made, else the run fails."""
    if _SUITE_TMP is None:
        return
    left = litter(_SUITE_TMP)
    if left:
        reporter = session.config.pluginmanager.get_plugin("terminalreporter")
        message = f"temporary files left behind in {_SUITE_TMP}: {left}"
        if reporter is not None:
            reporter.ensure_newline()
            reporter.write_line(message, red=True, bold=True)
        else:
            print(message)
        session.exitstatus = pytest.ExitCode.TESTS_FAILED


def pytest_unconfigure(config):
    if _SUITE_TMP is None:
        return
    if _ORIGINAL_CACHE is None:
        os.environ.pop("BRACE_CACHE_DIR", None)
    else:
        os.environ["BRACE_CACHE_DIR"] = _ORIGINAL_CACHE
    shutil.rmtree(_SUITE_CACHE, ignore_errors=True)
    tempfile.tempdir = None
    if _ORIGINAL_TMPDIR is None:
        os.environ.pop("TMPDIR", None)
    else:
        os.environ["TMPDIR"] = _ORIGINAL_TMPDIR
    shutil.rmtree(_SUITE_TMP, ignore_errors=True)


TWO_POINT_KNOTS = 6


@pytest.fixture(scope="session")
def two_point_plans():
    """The two-point demo task (``drawer_bump``: grip and body) planned with ``robust`` at 6 knots
    from one feasibility seed, twice: ``"smallest"`` as the task says (both points weigh 1) and
    ``"first only"`` (the body's objective weight 0, so the objective sees the grip alone).

    Both plans use one built solver (the weights are parameters). Returns
    ``{"task": task, "smallest": Plan, "first only": Plan}``.
    """
    import dataclasses

    from optimizer import Planner, load_task

    task = load_task(Path(__file__).resolve().parents[1] / "tasks" / "drawer_bump.yaml")
    with Planner(knots=TWO_POINT_KNOTS) as planner:
        seed = planner.seed(task)
        assert seed.success
        grip, body = seed.task.disturbances
        first_only = dataclasses.replace(seed.task, disturbances=[grip, dataclasses.replace(body, objective_weight=0.0)])
        plans = {"task": seed.task}
        for name, variant in (("smallest", seed.task), ("first only", first_only)):
            outcome = planner.solve_from_seed(dataclasses.replace(seed, task=variant), "robust")
            assert outcome.success, outcome.stages[-1]
            plans[name] = outcome.plan
    return plans
