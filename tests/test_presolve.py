"""Pre-solve checks: reach from the kinematic chain, standing still, statics and timing estimates.

References: the URDF's joint origins read with the standard library's XML
parser (chain lengths), Pinocchio's forward kinematics (the reach bound holds
for random postures), the inclined plane (a block rests on a slope of angle
theta iff mu >= tan theta, textbook statics), the geometry of a 4-facet
pyramid inscribed in a cone (|f.t| <= mu cos(45 deg) f.n along its axes,
common practice), and the weight shared by contacts on flat ground
(sum of normal forces = m g).
"""
from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest
import yaml

from flat_ground import FEET, flat_stance
from optimizer.analysis.presolve import frames_chain_length, require_possible, run_checks, standing_findings
from optimizer.cli import main
from optimizer.errors import InfeasibleTask
from optimizer.problem.task import load_task

ROOT = Path(__file__).resolve().parents[1]
ROBOT = ROOT / "models" / "stilt.yaml"
URDF = (ROOT / "models" / "stilt.urdf").read_text(encoding="utf-8")


def flat_task(**extra) -> dict:
    contacts = flat_stance()["contacts"]
    task = {"robot": str(ROBOT), "horizon": {"duration": 2.0, "knots": 8}, "stance": {"contacts": contacts},
            "hand_targets": [{"position": [0.6, 0.0, 0.4], "window": [0.8, 1.2], "label": "pick"}]}
    task.update(extra)
    return task


def ramp_task(slope_deg: float, mu: float, facets: int = 4, **extra) -> dict:
    task = {"robot": str(ROBOT), "horizon": {"duration": 2.0, "knots": 8},
            "stance": {"terrain": {"kind": "ramp", "slope_deg": slope_deg, "friction": mu},
                       "feet": {f: [x, y] for f, (x, y) in FEET.items()}},
            "pyramid_facets": facets, "min_normal_force": 0.0}
    task.update(extra)
    return task


def load(tmp_path, data, name="task.yaml"):
    path = tmp_path / name
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    return load_task(path)


# ---------------------------------------------------------------- reach


def urdf_chain_to_root(child_link: str) -> tuple[float, list]:
    """Sum of |joint origin xyz| from a link up to the base, read from the URDF XML alone."""
    root = ET.fromstring(URDF)
    parent_of = {j.find("child").get("link"): j for j in root.iter("joint")}
    length, link = 0.0, child_link
    while link in parent_of:
        joint = parent_of[link]
        origin = joint.find("origin")
        xyz = [float(v) for v in origin.get("xyz", "0 0 0").split()] if origin is not None else [0, 0, 0]
        length += float(np.linalg.norm(xyz))
        link = joint.find("parent").get("link")
    return length


def test_chain_length_matches_the_urdf_joint_origins():
    robot = load_task_robot()
    # foot and grip frames are fixed-joint links in the URDF: the XML chain includes their offsets
    expected = urdf_chain_to_root("foot_fl") + urdf_chain_to_root("grip_point")
    assert frames_chain_length(robot, "foot_fl", "grip_point") == pytest.approx(expected, abs=1e-9)


def load_task_robot():
    from optimizer.robot.model import load_robot
    return load_robot(ROBOT)


def test_reach_bound_holds_at_random_postures():
    robot = load_task_robot()
    model, data = robot.model, robot.model.createData()
    rng = np.random.default_rng(7)
    bound = frames_chain_length(robot, "foot_rr", "grip_point")
    largest = 0.0
    lower, upper = robot.joint_lower, robot.joint_upper
    for _ in range(2000):
        q = pin.neutral(model)
        q[7:] = rng.uniform(lower, upper)
        pin.framesForwardKinematics(model, data, q)
        gap = np.linalg.norm(data.oMf[model.getFrameId("grip_point")].translation
                             - data.oMf[model.getFrameId("foot_rr")].translation)
        largest = max(largest, gap)
    assert largest <= bound + 1e-12
    assert largest >= 0.6 * bound        # the bound is not absurdly loose


def beyond_reach_target(missing: float) -> list:
    """A point ahead of the robot whose distance from the rear feet is the XML chain length + ``missing``."""
    chain = urdf_chain_to_root("foot_rl") + urdf_chain_to_root("grip_point")
    dy, dz = 0.18, 0.4
    x = -0.25 + math.sqrt((chain + missing) ** 2 - dy ** 2 - dz ** 2)
    return [x, 0.0, dz]


def test_target_half_a_metre_beyond_reach_is_rejected_with_the_distance(tmp_path, capsys):
    data = flat_task(hand_targets=[{"position": beyond_reach_target(0.5), "time": 1.0, "label": "pick"}])
    task = load(tmp_path, data)
    findings = [f for f in run_checks(task) if f.impossible]
    assert [f.check for f in findings] == ["reach"]
    assert findings[0].shortfall == pytest.approx(0.5, abs=1e-9)
    code = main(["solve", str(task.path), "--out", str(tmp_path / "plan.npz")])
    err = capsys.readouterr().err
    assert code == 2
    assert "hand target 'pick' (hand_targets[0])" in err and "0.50 m missing" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["task.yaml"]   # nothing built, nothing written


def test_target_just_within_the_bound_is_not_rejected(tmp_path):
    data = flat_task(hand_targets=[{"position": beyond_reach_target(-0.01), "time": 1.0}])
    assert not [f for f in run_checks(load(tmp_path, data)) if f.check == "reach"]


def test_footholds_beyond_the_legs_span(tmp_path):
    data = flat_task()
    data["stance"]["contacts"]["foot_rr"]["position"] = [-2.0, -0.18, 0.0]
    findings = run_checks(load(tmp_path, data))
    assert findings[0].check == "reach" and findings[0].impossible
    assert "footholds of foot_fl and foot_rr" in findings[0].what
    gap = np.linalg.norm([0.25 + 2.0, 0.36, 0.0])
    expected = gap - urdf_chain_to_root("foot_fl") - urdf_chain_to_root("foot_rr")
    assert findings[0].shortfall == pytest.approx(expected, abs=1e-9)


# ---------------------------------------------------------------- standing still


def test_40_degree_ramp_with_mu_half_cannot_stand_still(tmp_path, capsys):
    task = load(tmp_path, ramp_task(40.0, 0.5))
    with pytest.raises(InfeasibleTask, match=r"cannot stand still.*mu >= 0\.84.*gives 0\.50 \(0\.34 short\)"):
        require_possible(task)
    finding = standing_findings(task)[0]
    # inclined plane: the needed friction is tan(40 deg) = 0.8391 (textbook)
    assert finding.shortfall == pytest.approx(math.tan(math.radians(40.0)) - 0.5, rel=1e-3)
    assert main(["solve", str(task.path), "--check-only"]) == 2
    assert "cannot stand still" in capsys.readouterr().err


def test_40_degree_ramp_with_mu_one_passes(tmp_path):
    task = load(tmp_path, ramp_task(40.0, 1.0, facets=16))
    findings = run_checks(task)
    assert not [f for f in findings if f.impossible]
    assert not [f for f in findings if f.check == "standing"]


def test_coarse_pyramid_is_named_when_the_cone_would_hold(tmp_path):
    # 4 facets keep mu cos(45 deg) along the slope: 1.0 * 0.707 < tan 40 = 0.839, so mu must be 0.839 / 0.707
    task = load(tmp_path, ramp_task(40.0, 1.0, facets=4))
    finding = standing_findings(task)[0]
    assert finding.impossible and "4-facet friction pyramids" in finding.what and "pyramid_facets" in finding.hint
    needed = math.tan(math.radians(40.0)) / math.cos(math.pi / 4)
    assert finding.shortfall == pytest.approx(needed - 1.0, rel=1e-3)


@pytest.mark.parametrize("slope", [10.0, 25.0, 35.0, 55.0])
def test_inclined_plane_threshold(tmp_path, slope):
    threshold = math.tan(math.radians(slope))
    low = load(tmp_path, ramp_task(slope, 0.98 * threshold, facets=16), "low.yaml")
    high = load(tmp_path, ramp_task(slope, 1.02 * threshold, facets=16), "high.yaml")
    assert standing_findings(low) and standing_findings(low)[0].impossible
    assert standing_findings(high) == []


def test_min_normal_force_beyond_the_weight_share(tmp_path):
    task = load(tmp_path, flat_task(min_normal_force=150.0))
    finding = standing_findings(task)[0]
    share = task.robot.mass * 9.81 / 4          # flat ground: the four normal forces sum to m g
    assert finding.impossible and "min_normal_force 150.0 N" in finding.what
    assert finding.shortfall == pytest.approx(150.0 - share, rel=1e-3)


def test_a_preload_beyond_the_weight_is_refused(tmp_path):
    # Statics on flat ground (Newton): the four normal forces sum to m g, so no foot can keep a
    # preload above m g, whatever the others do; below it the contacts can carry the weight.
    data = flat_task(min_normal_force=0.0)
    weight = load(tmp_path, data).weight
    data["stance"]["contacts"]["foot_fl"]["preload"] = 1.05 * weight
    finding = standing_findings(load(tmp_path, data))[0]
    assert finding.impossible and f"foot_fl {1.05 * weight:.1f} N" in finding.what
    data["stance"]["contacts"]["foot_fl"]["preload"] = 0.95 * weight
    assert standing_findings(load(tmp_path, data)) == []


def test_surfaces_facing_down_cannot_carry_the_weight(tmp_path):
    data = flat_task()
    for spec in data["stance"]["contacts"].values():
        spec["normal"] = [0, 0, -1]
    finding = standing_findings(load(tmp_path, data))[0]
    assert finding.impossible and "at any friction" in finding.what


# ---------------------------------------------------------------- estimates (warnings)


def test_torque_shortfall_names_the_joint_and_the_amount(tmp_path):
    robot = yaml.safe_load(ROBOT.read_text(encoding="utf-8"))
    robot["urdf"] = str(ROOT / "models" / "stilt.urdf")
    robot["limits"] = {"torque": {"fl_knee": [-1.0, 1.0]}}
    (tmp_path / "weak.yaml").write_text(yaml.safe_dump(robot), encoding="utf-8")
    task = load(tmp_path, flat_task(robot=str(tmp_path / "weak.yaml")))
    findings = [f for f in run_checks(task) if f.check == "statics" and "fl_knee" in f.what]
    assert findings and not findings[0].impossible and findings[0].shortfall > 0
    # raising the limit by the reported shortfall (and a little) removes the finding
    limit = float(1.0 + findings[0].shortfall + 0.5)
    robot["limits"] = {"torque": {"fl_knee": [-limit, limit]}}
    (tmp_path / "weak.yaml").write_text(yaml.safe_dump(robot), encoding="utf-8")
    task = load(tmp_path, flat_task(robot=str(tmp_path / "weak.yaml")))
    assert not [f for f in run_checks(task) if f.check == "statics" and "fl_knee" in f.what]


def test_timing_estimate_names_the_joint(tmp_path):
    targets = [{"position": [0.6, 0.3, 0.4], "window": [0.5, 0.6], "label": "left"},
               {"position": [0.3, -0.5, 0.3], "window": [0.62, 0.7], "label": "right"}]
    findings = [f for f in run_checks(load(tmp_path, flat_task(hand_targets=targets))) if f.check == "timing"]
    assert findings and not findings[0].impossible and "hand target 'right'" in findings[0].what
    assert findings[0].shortfall > 0
    targets[1]["window"] = [1.8, 1.9]
    assert not [f for f in run_checks(load(tmp_path, flat_task(hand_targets=targets))) if f.check == "timing"]


def test_skip_checks_bypasses_the_checks(tmp_path, capsys):
    task = load(tmp_path, ramp_task(40.0, 0.5))
    assert main(["solve", str(task.path), "--check-only", "--skip-checks"]) == 0
    assert "is valid" in capsys.readouterr().out
