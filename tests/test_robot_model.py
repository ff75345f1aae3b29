"""The demo robot stilt and the robot-file loader.

References: Pinocchio's own algorithms (computeTotalMass, forward kinematics),
the URDF text read with the standard library's XML parser, and the textbook
properties of rigid-body inertia (positive definite, triangle inequality on the
principal moments).
"""
from __future__ import annotations

import importlib.util
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest
import yaml

from optimizer.errors import ModelError
from optimizer.robot.model import load_robot

MODELS = Path(__file__).resolve().parents[1] / "models"
STILT = MODELS / "stilt.yaml"
URDF_TEXT = (MODELS / "stilt.urdf").read_text(encoding="utf-8")
ROBOT_FILE = yaml.safe_load(STILT.read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def stilt():
    return load_robot(STILT)


def write_robot(tmp_path, urdf_text=URDF_TEXT, **changes) -> Path:
    """A copy of the stilt robot file (and URDF) in tmp_path with top-level fields changed."""
    (tmp_path / "robot.urdf").write_text(urdf_text, encoding="utf-8")
    data = {**ROBOT_FILE, "urdf": "robot.urdf", **changes}
    path = tmp_path / "robot.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    return path


def urdf_elements(tag: str) -> list[ET.Element]:
    return list(ET.fromstring(URDF_TEXT).iter(tag))


# ---------------------------------------------------------------- the demo robot


def test_stilt_sizes_and_names(stilt):
    # 4 legs x 3 joints + 6 arm joints; free-flyer adds 7 (q) and 6 (v) entries (docs/formulation.md section 1).
    assert (stilt.nq, stilt.nv, stilt.nj) == (7 + 18, 6 + 18, 18)
    assert stilt.joint_names == list(stilt.model.names)[2:]
    urdf_moving = {j.get("name") for j in urdf_elements("joint") if j.get("type") != "fixed"}
    assert set(stilt.joint_names) == urdf_moving
    assert stilt.contact_frames == ["foot_fl", "foot_fr", "foot_rl", "foot_rr"]
    assert stilt.hand_frame == "grip_point"
    assert stilt.joint_lower.shape == stilt.joint_upper.shape == (stilt.nq - 7,)
    assert np.all(stilt.joint_lower < stilt.joint_upper)


def test_stilt_mass_from_pinocchio_and_urdf(stilt):
    # Reference: pinocchio.computeTotalMass, and the sum of the URDF's <mass> elements.
    total = pin.computeTotalMass(stilt.model)
    urdf_sum = sum(float(m.get("value")) for m in urdf_elements("mass"))
    assert 35.0 <= total <= 50.0
    np.testing.assert_allclose([stilt.mass, urdf_sum], total, rtol=1e-12)
    np.testing.assert_allclose(stilt.gravity, [0.0, 0.0, -9.81], atol=1e-12)  # Pinocchio's default


def test_stilt_inertias_are_physical(stilt):
    # Textbook rigid-body property: the inertia about the centre of mass is positive
    # definite and its principal moments obey I1 + I2 >= I3 (any order).
    for j in range(1, stilt.model.njoints):
        moments = np.sort(np.linalg.eigvalsh(stilt.model.inertias[j].inertia))
        assert moments[0] > 0, stilt.model.names[j]
        assert moments[0] + moments[1] >= moments[2] * (1 - 1e-12), stilt.model.names[j]


def test_stilt_limits_match_urdf(stilt):
    # Reference: the <limit> elements read with the XML parser.
    limits = {j.get("name"): j.find("limit") for j in urdf_elements("joint") if j.get("type") != "fixed"}
    effort = np.array([float(limits[n].get("effort")) for n in stilt.joint_names])
    velocity = np.array([float(limits[n].get("velocity")) for n in stilt.joint_names])
    lower = np.array([float(limits[n].get("lower")) for n in stilt.joint_names])
    np.testing.assert_allclose(stilt.torque_upper, effort, rtol=0)
    np.testing.assert_allclose(stilt.torque_lower, -effort, rtol=0)
    np.testing.assert_allclose(stilt.velocity_limit, velocity, rtol=0)
    np.testing.assert_allclose(stilt.joint_lower, lower, rtol=0)  # all revolute: one entry each
    legs = [n for n in stilt.joint_names if n[:2] in ("fl", "fr", "rl", "rr")]
    assert all(60.0 <= stilt.torque_upper[stilt.joint_index(n)] <= 90.0 for n in legs)


def test_standing_posture_has_feet_on_the_ground(stilt):
    # Reference: Pinocchio forward kinematics of the posture in the robot file.
    data = stilt.model.createData()
    pin.framesForwardKinematics(stilt.model, data, stilt.standing_posture)
    heights = [data.oMf[stilt.frame_id(f)].translation[2] for f in stilt.contact_frames]
    np.testing.assert_allclose(heights, 0.0, atol=1e-3)
    assert stilt.standing_posture[2] == pytest.approx(0.45, abs=0.02)


def test_wrist_does_not_cap_a_grip_force(stilt):
    # docs/formulation.md section 10: a grip-point force F loads a wrist joint with at most
    # |F| * (distance from the joint origin to the grip point), a bound on the
    # lever about the axis. Effort / distance must exceed 300 N in every posture.
    model, data = stilt.model, stilt.model.createData()
    rng = np.random.default_rng(7)
    grip = stilt.frame_id("grip_point")
    for _ in range(50):
        q = pin.neutral(model)
        q[7:] = rng.uniform(stilt.joint_lower, stilt.joint_upper)
        pin.framesForwardKinematics(model, data, q)
        for name in ("wrist_roll", "wrist_pitch", "wrist_yaw"):
            lever = np.linalg.norm(data.oMf[grip].translation - data.oMi[model.getJointId(name)].translation)
            assert stilt.torque_upper[stilt.joint_index(name)] / lever > 300.0


def test_front_leg_reaches_above_the_body(stilt):
    # A front leg must be able to press on a low ceiling: at the hip-flexion lower
    # limit with the knee nearly straight, the foot is above the body's top face
    # (body 0.15 m tall). Reference: Pinocchio forward kinematics.
    q = stilt.standing_posture.copy()
    for name, value in (("fl_hip_flex", stilt.joint_lower[stilt.joint_index("fl_hip_flex")]),
                        ("fl_knee", stilt.joint_upper[stilt.joint_index("fl_knee")])):
        q[stilt.model.idx_qs[stilt.model.getJointId(name)]] = value
    data = stilt.model.createData()
    pin.framesForwardKinematics(stilt.model, data, q)
    assert data.oMf[stilt.frame_id("foot_fl")].translation[2] > q[2] + 0.075 + 0.2


def test_arm_reach(stilt):
    # Distance from the shoulder axis to the grip point with the arm straight: about 0.8 m.
    model, data = stilt.model, stilt.model.createData()
    q = pin.neutral(model)
    pin.framesForwardKinematics(model, data, q)
    shoulder = data.oMi[model.getJointId("arm_shoulder")].translation
    reach = np.linalg.norm(data.oMf[stilt.frame_id("grip_point")].translation - shoulder)
    assert 0.7 <= reach <= 0.9


def test_committed_urdf_matches_its_parameters():
    spec = importlib.util.spec_from_file_location("generate_urdf", MODELS / "generate_urdf.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    params = yaml.safe_load((MODELS / "stilt.params.yaml").read_text(encoding="utf-8"))
    assert module.build_urdf(params) == URDF_TEXT


def test_box_and_cylinder_inertia_formulas():
    # Textbook formulas (from memory): box m(b^2+c^2)/12; cylinder axial m r^2/2,
    # transverse m(3 r^2 + h^2)/12.
    spec = importlib.util.spec_from_file_location("generate_urdf", MODELS / "generate_urdf.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    np.testing.assert_allclose(module.box_inertia(12.0, (1.0, 2.0, 3.0)), [13.0, 10.0, 5.0], rtol=1e-12)
    np.testing.assert_allclose(module.cylinder_inertia(2.0, 1.0, 3.0, "y"), [2.0, 1.0, 2.0], rtol=1e-12)


# ---------------------------------------------------------------- overrides


def test_limit_overrides_replace_urdf_values(tmp_path):
    path = write_robot(tmp_path, limits={"torque": {"fl_knee": [-20.0, 30.0]}, "velocity": {"arm_yaw": 1.5}})
    robot = load_robot(path)
    i = robot.joint_index("fl_knee")
    assert (robot.torque_lower[i], robot.torque_upper[i]) == (-20.0, 30.0)
    assert robot.velocity_limit[robot.joint_index("arm_yaw")] == 1.5
    assert robot.torque_upper[robot.joint_index("fr_knee")] == 90.0


# ---------------------------------------------------------------- errors


def test_missing_robot_file(tmp_path):
    with pytest.raises(ModelError, match="no such file"):
        load_robot(tmp_path / "absent.yaml")


def test_yaml_syntax_error(tmp_path):
    path = tmp_path / "robot.yaml"
    path.write_text("urdf: [unclosed\n", encoding="utf-8")
    with pytest.raises(ModelError, match="valid YAML"):
        load_robot(path)


def test_missing_urdf_file(tmp_path):
    path = write_robot(tmp_path, urdf="nowhere.urdf")
    with pytest.raises(ModelError, match=r"nowhere\.urdf.*no such file"):
        load_robot(path)


def test_unknown_field_is_named(tmp_path):
    path = write_robot(tmp_path, contact=["foot_fl"])
    with pytest.raises(ModelError, match="did you mean 'contacts'"):
        load_robot(path)


def test_unknown_contact_frame_lists_close_names(tmp_path):
    path = write_robot(tmp_path, contacts=["foot_fl", "foot_fx"])
    with pytest.raises(ModelError, match=r"contacts\[1\].*'foot_fx'.*close names: foot_f"):
        load_robot(path)


def test_unknown_hand_frame(tmp_path):
    path = write_robot(tmp_path, hand="grip_pont")
    with pytest.raises(ModelError, match=r"field 'hand'.*close names: grip_point"):
        load_robot(path)


def test_moving_link_without_inertia(tmp_path):
    root = ET.fromstring(URDF_TEXT)
    shank = next(link for link in root.iter("link") if link.get("name") == "fr_shank")
    shank.remove(shank.find("inertial"))
    path = write_robot(tmp_path, urdf_text=ET.tostring(root, encoding="unicode"))
    with pytest.raises(ModelError, match=r"link 'fr_shank' <inertial>.*mass > 0"):
        load_robot(path)


def test_joint_without_effort_limit(tmp_path):
    text = URDF_TEXT.replace('velocity="10" effort="90"', 'velocity="10" effort="0"', 1)
    path = write_robot(tmp_path, urdf_text=text)
    with pytest.raises(ModelError, match=r"joint 'fl_knee' <limit effort>.*limits\.torque\.fl_knee"):
        load_robot(path)
    path = write_robot(tmp_path, urdf_text=text, limits={"torque": {"fl_knee": [-80, 80]}})
    robot = load_robot(path)  # the override makes it loadable
    assert robot.torque_upper[robot.joint_index("fl_knee")] == 80.0


def test_bad_posture_joint_name(tmp_path):
    standing = {"base_height": 0.45, "joints": {"fl_kne": -1.0}}
    path = write_robot(tmp_path, standing=standing)
    with pytest.raises(ModelError, match=r"standing\.joints\.fl_kne.*close names: fl_knee"):
        load_robot(path)


def test_override_of_unknown_joint(tmp_path):
    path = write_robot(tmp_path, limits={"velocity": {"elbow": 2.0}})
    with pytest.raises(ModelError, match=r"limits\.velocity\.elbow.*did you mean 'arm_elbow'"):
        load_robot(path)


def test_non_finite_number_in_robot_file(tmp_path):
    path = write_robot(tmp_path, standing={"base_height": float("nan")})
    with pytest.raises(ModelError, match=r"standing\.base_height.*finite"):
        load_robot(path)


def test_non_finite_number_in_urdf(tmp_path):
    path = write_robot(tmp_path, urdf_text=URDF_TEXT.replace('<mass value="22" />', '<mass value="inf" />'))
    with pytest.raises(ModelError, match=r"link 'body' <mass value>.*finite numbers"):
        load_robot(path)


def test_malformed_urdf_xml(tmp_path):
    path = write_robot(tmp_path, urdf_text=URDF_TEXT[:500])
    with pytest.raises(ModelError, match="well-formed URDF XML"):
        load_robot(path)


def test_urdf_parser_failure_is_wrapped_and_silent(tmp_path, capfd):
    # Two unconnected links: two root links, which the URDF parser refuses.
    text = URDF_TEXT.replace("</robot>", '<link name="stray" /></robot>')
    path = write_robot(tmp_path, urdf_text=text)
    with pytest.raises(ModelError, match="a URDF model Pinocchio can read.*root link"):
        load_robot(path)
    assert capfd.readouterr().err == ""
