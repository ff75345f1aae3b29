"""No litter: the Python API's temporary folders disappear when the process ends.

``brace`` commands are covered by the supervisor (``tests/test_interrupt.py``
and the session check in ``tests/conftest.py``); here a plain Python process
solves through ``optimizer.solve`` (its built solvers, and their Ipopt log
folders, stay cached for the process's lifetime) and exits normally.
"""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

SCRIPT = """
import os, sys
import optimizer
task = optimizer.load_task(sys.argv[1])
outcome = optimizer.solve(task, objective="feasible", knots=3)
assert outcome.plan is not None, outcome.stages
print("during:", sorted(os.listdir(os.environ["TMPDIR"])))
"""


@pytest.mark.slow
def test_python_api_leaves_no_temporary_folder(tmp_path):
    scratch = tmp_path / "tmp"
    scratch.mkdir()
    env = dict(os.environ, TMPDIR=str(scratch), OPENBLAS_NUM_THREADS="1", PYTHONPATH=str(ROOT))
    done = subprocess.run([sys.executable, "-c", SCRIPT, str(ROOT / "tasks" / "steep_ramp.yaml")],
                          capture_output=True, text=True, env=env, timeout=600)
    assert done.returncode == 0, done.stderr
    during = [line for line in done.stdout.splitlines() if line.startswith("during:")]
    assert during and "brace-" in during[0], done.stdout   # the solver's log folder was in TMPDIR while it ran
    assert sorted(os.listdir(scratch)) == []                # and is gone after a normal exit
