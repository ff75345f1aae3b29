"""Plan files: round trip, readability without this project, and contract checks."""
import json
import re
import zipfile

import numpy as np
import pinocchio as pin
import pytest

from certify_checks import MODELS, demo_standing, frame_jacobians, standing_plan
from optimizer.errors import PlanFileError, TaskError
from optimizer.planfile import Plan, load_plan, save_plan


@pytest.fixture(scope="module")
def plan():
    return standing_plan(**demo_standing(sweep=0.4, knots=3))


def _arrays(plan):
    out = {k: np.asarray(v) for k, v in plan.arrays().items()}
    out["meta"] = np.array(json.dumps(plan.meta))
    return out


def _write(path, arrays):
    with open(path, "wb") as stream:
        np.savez(stream, **arrays)
    return path


def test_round_trip_keeps_every_array_meta_margins_and_extras(plan, tmp_path):
    plan.margins = plan.margin[:, None].copy()
    plan.extras = {"margin_optimized": plan.margin * 0.5, "flags": np.array([True, False, True])}
    save_plan(plan, tmp_path / "p.npz")
    back = load_plan(tmp_path / "p.npz")
    for key, value in plan.arrays().items():
        np.testing.assert_array_equal(back.arrays()[key], value, err_msg=key)
    assert back.meta == plan.meta
    assert back.contact_active.dtype == np.bool_ and back.q.dtype == np.float64


def test_file_opens_with_numpy_alone_and_meta_is_json(plan, tmp_path):
    # the contract: numpy.load without pickle, meta a 0-d unicode array of JSON
    save_plan(plan, tmp_path / "p.npz")
    with np.load(tmp_path / "p.npz", allow_pickle=False) as f:
        assert f["meta"].shape == () and f["meta"].dtype.kind == "U"
        meta = json.loads(str(f["meta"]))
        assert meta["format"] == "plan/1"
        assert f["q"].shape == (3, 25) and f["contact_forces"].shape == (3, 4, 3)


def test_save_without_npz_suffix_writes_exactly_that_path(plan, tmp_path):
    save_plan(plan, tmp_path / "plan_without_suffix")
    assert (tmp_path / "plan_without_suffix").is_file()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plan_without_suffix"]
    assert load_plan(tmp_path / "plan_without_suffix").knots == 3


def test_fixture_plan_satisfies_equations_of_motion_checked_with_pinocchio(plan):
    # What a reader can check (docs/plan-files.md): rnea(q, v, a) - S^T tau - sum J_c^T lambda_c = 0,
    # and Newton on flat ground: sum of normal forces = m g + m (centre-of-mass acceleration)_z,
    # the latter from Pinocchio's centroidal momentum rate.
    model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
    data = model.createData()
    mass = sum(inertia.mass for inertia in model.inertias)
    for k in range(plan.knots):
        jc = frame_jacobians(model, data, plan.q[k], plan.meta["contact_frames"])
        residual = (pin.rnea(model, data, plan.q[k], plan.v[k], plan.a[k])
                    - np.concatenate([np.zeros(6), plan.tau[k]]) - jc.T @ plan.contact_forces[k].ravel())
        np.testing.assert_allclose(residual, 0.0, atol=1e-9)
        rate = pin.computeCentroidalMomentumTimeVariation(model, data, plan.q[k], plan.v[k], plan.a[k])
        np.testing.assert_allclose(plan.contact_forces[k, :, 2].sum(), mass * 9.81 + rate.linear[2], rtol=1e-12)


def test_saving_a_reserved_extra_key_fails_and_keeps_the_old_file(plan, tmp_path):
    path = tmp_path / "p.npz"
    save_plan(plan, path)
    before = path.read_bytes()
    bad = Plan(**{**plan.__dict__, "extras": {"tau": np.zeros(3)}})
    with pytest.raises(PlanFileError, match=r"extras\.tau"):
        save_plan(bad, path)
    assert path.read_bytes() == before


@pytest.mark.parametrize("change, field, pattern", [
    (lambda a: a.pop("tau"), "tau", r"field 'tau': expected float64 array of shape \(K=3, nj=18\), got 'missing key'"),
    (lambda a: a.pop("meta"), "meta", r"field 'meta'.*missing key"),
    (lambda a: a.update(contact_active=a["contact_active"].astype(int)), "contact_active", r"expected dtype bool"),
    (lambda a: a.update(q=a["q"][:, :-1]), "q", r"expected shape \(K=3, nq=25\), got 'shape \(3, 24\)'"),
    (lambda a: a.update(contact_forces=a["contact_forces"][:, :3]), "contact_forces", r"nc=4"),
    (lambda a: a.update(margin=a["margin"].astype(np.float32)), "margin", r"expected dtype float64"),
    (lambda a: a.update(meta=np.array("{not json")), "meta", r"expected valid JSON"),
    (lambda a: a.update(meta=np.array([json.dumps({"format": "plan/1"})])), "meta", r"0-d unicode array"),
    (lambda a: a.update(v=np.where(np.indices(a["v"].shape)[0] * 100 + np.indices(a["v"].shape)[1] == 105, np.nan,
                                   a["v"])), "v", r"expected finite numbers, got 'a non-finite value at knot 1, coordinate 5'"),
    (lambda a: a.update(t=a["t"][::-1].copy()), "t", r"non-decreasing knot times"),
    (lambda a: a.update(margins=np.zeros((3, 2))), "margins", r"P=1"),
])
def test_contract_violations_name_the_field(plan, tmp_path, change, field, pattern):
    arrays = _arrays(plan)
    change(arrays)
    path = _write(tmp_path / "bad.npz", arrays)
    with pytest.raises(PlanFileError, match=pattern) as info:
        load_plan(path)
    assert info.value.field == field and info.value.file == str(path)


@pytest.mark.parametrize("edit, field, pattern", [
    (lambda m: m.update(format="plan/2"), "meta.format", r"expected 'plan/1', got 'plan/2'"),
    (lambda m: m.update(urdf="<robot name='x'><link"), "meta.urdf", r"a URDF that Pinocchio can load"),
    (lambda m: m.update(joint_names=m["joint_names"][::-1]), "meta.joint_names", r"Pinocchio's order"),
    (lambda m: m.update(contact_frames=["foot_fl", "foot_fr", "foot_rl", "paw"]), "meta.contact_frames[3]",
     r"a frame of the URDF, got 'paw'"),
    (lambda m: m.update(friction=[0.5]), "meta.friction", r"a list of 4 numbers"),
    (lambda m: m["friction_pyramid"].update(tangents=[[[1, 0, 0]]] * 4), "meta.friction_pyramid.tangents[0]",
     r"2x3 matrix"),
    (lambda m: m["torque_limits"].update(upper=[1.0] * 17), "meta.torque_limits.upper", r"a list of 18 numbers"),
    (lambda m: m["disturbances"][0].update(kind="torque"), "meta.disturbances[0].kind", r"one of force, wrench"),
    (lambda m: m["disturbances"][0].update(frame="nose"), "meta.disturbances[0].frame", r"a frame of the URDF"),
    (lambda m: m.pop("min_normal_force"), "meta.min_normal_force", r"this required field"),
])
def test_meta_violations_name_the_field(plan, tmp_path, edit, field, pattern):
    meta = json.loads(json.dumps(plan.meta))
    edit(meta)
    arrays = _arrays(plan)
    arrays["meta"] = np.array(json.dumps(meta))
    with pytest.raises(PlanFileError, match=pattern) as info:
        load_plan(_write(tmp_path / "bad.npz", arrays))
    assert info.value.field == field


def test_null_and_infinite_torque_limits_mean_no_limit(plan, tmp_path):
    meta = json.loads(json.dumps(plan.meta))
    meta["torque_limits"] = {"lower": [None] * 18, "upper": [float("inf")] * 18}
    arrays = _arrays(plan)
    arrays["meta"] = np.array(json.dumps(meta))
    loaded = load_plan(_write(tmp_path / "p.npz", arrays))
    assert loaded.meta["torque_limits"]["lower"][0] is None


def test_not_an_archive_and_missing_file_are_plan_file_errors(tmp_path):
    junk = tmp_path / "junk.npz"
    junk.write_text("hello")
    with pytest.raises(PlanFileError, match=r"junk\.npz: expected a NumPy \.npz archive"):
        load_plan(junk)
    with pytest.raises(PlanFileError, match=r"expected an existing plan file"):
        load_plan(tmp_path / "absent.npz")


def test_object_arrays_are_refused_without_unpickling(plan, tmp_path):
    arrays = _arrays(plan)
    arrays["notes"] = np.array([{"a": 1}], dtype=object)
    path = tmp_path / "p.npz"
    with open(path, "wb") as stream:
        np.savez(stream, **arrays)
    with pytest.raises(PlanFileError, match="without pickle"):
        load_plan(path)


def test_unknown_numeric_keys_come_back_as_extras(plan, tmp_path):
    arrays = _arrays(plan)
    arrays["swing_height"] = np.linspace(0.0, 1.0, 3)
    loaded = load_plan(_write(tmp_path / "p.npz", arrays))
    np.testing.assert_array_equal(loaded.extras["swing_height"], np.linspace(0.0, 1.0, 3))
    assert zipfile.is_zipfile(tmp_path / "p.npz")


def test_box_robot_without_joints_loads(tmp_path):
    urdf = (MODELS / "box_on_four_feet.urdf").read_text()
    plan = standing_plan(urdf, ["foot_fl", "foot_fr", "foot_hl", "foot_hr"], 0.25, margin=[0.0])
    save_plan(plan, tmp_path / "box.npz")
    back = load_plan(tmp_path / "box.npz")
    assert back.tau.shape == (1, 0) and re.fullmatch(r"plan/1", back.meta["format"])


def test_error_messages_show_numpy_values_as_plain_numbers():
    # Python's own reprs of the same values: an index tuple and a list of floats.
    assert str(TaskError("task.yaml", "horizon", "two numbers", (np.int64(0), np.int64(5)))).endswith(
        f"got {(0, 5)!r}")
    assert str(TaskError("task.yaml", "x", "a vector", np.array([1.5, 2.0]))).endswith(f"got {[1.5, 2.0]!r}")
