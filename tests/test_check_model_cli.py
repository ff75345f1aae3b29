"""``brace check-model``: exit codes, printed figures and flagged problems.

References: pinocchio.computeTotalMass for the printed mass, Newton (weight
m g) for the printed vertical-force sum, forward kinematics for "off the
ground", and the robot file's own torque limits for "beyond its limit".
"""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pinocchio as pin
import yaml

from optimizer.cli import main

MODELS = Path(__file__).resolve().parents[1] / "models"
STILT = MODELS / "stilt.yaml"
ROBOT_FILE = yaml.safe_load(STILT.read_text(encoding="utf-8"))


def write_robot(tmp_path, **changes) -> Path:
    data = {**ROBOT_FILE, "urdf": str(MODELS / "stilt.urdf"), **changes}
    path = tmp_path / "robot.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    return path


def test_demo_robot_passes(capsys):
    assert main(["check-model", str(STILT)]) == 0
    out = capsys.readouterr().out
    mass = pin.computeTotalMass(pin.buildModelFromUrdf(str(MODELS / "stilt.urdf"), pin.JointModelFreeFlyer()))
    assert f"mass            {mass:.3f} kg" in out
    assert f"sum of vertical forces {mass * 9.81:.2f} N" in out  # Newton: weight m g
    assert "nq 25, nv 24, actuated joints nj 18" in out
    assert "foot_fl, foot_fr, foot_rl, foot_rr" in out
    assert out.rstrip().endswith("problems: none")


def test_feet_off_the_ground_are_flagged(tmp_path, capsys):
    # 20 mm higher base: every foot is 20 mm above z = 0 (forward kinematics of a translated base).
    standing = {**ROBOT_FILE["standing"], "base_height": ROBOT_FILE["standing"]["base_height"] + 0.02}
    path = write_robot(tmp_path, standing=standing)
    assert main(["check-model", str(path)]) == 1
    out = capsys.readouterr().out
    assert out.count("mm from the ground") == 4
    assert "contact foot_fl is +20.0 mm from the ground" in out


def test_weak_knee_is_flagged(tmp_path, capsys):
    path = write_robot(tmp_path, limits={"torque": {"fl_knee": [-5.0, 5.0]}})
    assert main(["check-model", str(path)]) == 1
    out = capsys.readouterr().out
    assert "joint fl_knee needs" in out and "beyond its limit [-5.0, +5.0] N m" in out
    assert "problems: 1" in out


def test_broken_yaml_exits_2_without_traceback(tmp_path, capsys):
    path = tmp_path / "broken.yaml"
    path.write_text("urdf: stilt.urdf\ncontacts: [foot_fl\n", encoding="utf-8")
    assert main(["check-model", str(path)]) == 2
    captured = capsys.readouterr()
    assert "valid YAML" in captured.err and str(path) in captured.err
    assert "Traceback" not in captured.err + captured.out


def test_broken_yaml_in_a_subprocess(tmp_path):
    path = tmp_path / "broken.yaml"
    path.write_text("standing: {base_height: [\n", encoding="utf-8")
    done = subprocess.run([sys.executable, "-m", "optimizer", "check-model", str(path)],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 2
    assert "brace check-model: error:" in done.stderr and "valid YAML" in done.stderr
    assert "Traceback" not in done.stderr

