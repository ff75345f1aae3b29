"""Ctrl-C during a solve: exit code 130 (128 + SIGINT, shell convention), no plan file, no temporary file."""
from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[1]
FEET = {"foot_fl": (0.25, 0.18), "foot_fr": (0.25, -0.18), "foot_rl": (-0.25, 0.18), "foot_rr": (-0.25, -0.18)}
TASK = {
    "robot": str(ROOT / "models" / "stilt.yaml"),
    "horizon": {"duration": 2.0, "knots": 10},
    "stance": {"contacts": {f: {"position": [x, y, 0.0], "normal": [0, 0, 1], "friction": 0.8}
                            for f, (x, y) in FEET.items()}},
    "hand_targets": [{"position": [0.7, 0.1, 0.35], "window": [0.8, 1.0], "label": "pick"}],
    "objective": "robust",
}


def test_sigint_during_the_solve_leaves_no_plan(tmp_path):
    task = tmp_path / "task.yaml"
    task.write_text(yaml.safe_dump(TASK), encoding="utf-8")
    out = tmp_path / "out" / "plan.npz"
    env = dict(os.environ, PYTHONUNBUFFERED="1", OPENBLAS_NUM_THREADS="1")
    process = subprocess.Popen([sys.executable, "-m", "optimizer", "solve", str(task), "--out", str(out)],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    deadline = time.monotonic() + 120
    for line in process.stdout:                    # progress lines come from inside the Ipopt loop
        if " iter " in line or time.monotonic() > deadline:
            break
    process.send_signal(signal.SIGINT)
    _, err = process.communicate(timeout=120)
    assert process.returncode == 130, err
    assert "interrupted; no output was written" in err and "Traceback" not in err
    left = sorted(p.name for p in out.parent.iterdir())
    assert left == ["plan.ipopt.log"], left        # no plan, no stopping point, no .plan.npz.* temporary
