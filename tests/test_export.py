"""brace export: a plan resampled for a tracking controller.

External references: Pinocchio's ``integrate`` (the plan's integrator between
knots), Pinocchio's frame Jacobians (LOCAL_WORLD_ALIGNED) for the balance of
the response gains, and the Coulomb pyramid / torque box written out here
from the plan file's own meta (friction, tangents, normals, limits).
"""
import json

import numpy as np
import pinocchio as pin
import pytest

from optimizer.analysis.export import resample, sample_times
from optimizer.cli import main
from optimizer.planfile import load_plan, save_plan
from test_solve_demo_tasks import plan_of


@pytest.fixture(scope="module")
def ramp():
    return plan_of("steep_ramp", "robust")[1]


def knot_rate(plan, per_step=2):
    """A rate whose grid holds every knot time (uniform knots)."""
    return per_step / (plan.t[1] - plan.t[0])


def test_row_count_at_200_hz(ramp):
    # floor(T * rate) + 1 samples of a uniform grid from 0 to T
    assert len(sample_times(2.5, 200.0)) == 501
    assert resample(ramp, 200.0).t.shape == (int(np.floor(ramp.t[-1] * 200 + 1e-9)) + 1,)


def test_samples_at_knot_times_are_the_plans_values(ramp):
    tr = resample(ramp, knot_rate(ramp))
    for k, t in enumerate(ramp.t):
        i = int(np.argmin(np.abs(tr.t - t)))
        assert abs(tr.t[i] - t) < 1e-9
        for name in ("q", "v", "a", "tau", "contact_forces"):
            assert np.abs(getattr(tr, name)[i] - getattr(ramp, name)[k]).max() <= 1e-9, (name, k)


def test_between_knots_the_plans_integrator_holds(ramp):
    # Pinocchio's integrate with the next knot's velocity: the semi-implicit Euler step of the plan
    model = pin.buildModelFromXML(ramp.meta["urdf"], pin.JointModelFreeFlyer())
    tr = resample(ramp, 200.0)
    quat = np.linalg.norm(tr.q[:, 3:7], axis=1)
    assert np.abs(quat - 1.0).max() < 1e-12
    k, h = 2, ramp.t[1] - ramp.t[0]
    inside = np.flatnonzero((tr.t > ramp.t[k] + 1e-9) & (tr.t < ramp.t[k + 1] - 1e-9))
    for i in inside:
        dt = tr.t[i] - ramp.t[k]
        assert np.allclose(tr.q[i], pin.integrate(model, ramp.q[k], dt * ramp.v[k + 1]), atol=1e-12)
        assert np.allclose(tr.v[i], ramp.v[k] + dt * ramp.a[k], atol=1e-12)
    # the step reaches the next knot (within the solver's tolerance on the integrator rows)
    end = pin.integrate(model, ramp.q[k], h * ramp.v[k + 1])
    assert np.abs(pin.difference(model, ramp.q[k + 1], end)).max() < 1e-6


def _pyramid_rooms(meta, forces):
    """Room of every facet of every inscribed pyramid and of every minimum normal force [N]."""
    m = meta["friction_pyramid"]["facets"]
    rooms = []
    for c, f in enumerate(forces):
        n = np.array(meta["contact_normals"][c])
        t1, t2 = np.array(meta["friction_pyramid"]["tangents"][c])
        mu = meta["friction"][c]
        for j in range(m):
            # facet j of the inscribed pyramid: edges on the cone, facing angle 2 pi j / m
            phi = 2 * np.pi * j / m
            d = np.cos(phi) * t1 + np.sin(phi) * t2
            rooms.append(mu * np.cos(np.pi / m) * (f @ n) - f @ d)
        rooms.append(f @ n - meta["min_normal_force"])
    return np.array(rooms)


@pytest.mark.parametrize("stored", [True, False], ids=["plan-gains", "recomputed-gains"])
def test_gains_reproduce_the_linear_response_at_knot_times(ramp, stored):
    plan = ramp
    if not stored:
        plan = load_plan_without_gains(ramp)
    tr = resample(plan, knot_rate(plan))
    meta = plan.meta
    model = pin.buildModelFromXML(meta["urdf"], pin.JointModelFreeFlyer())
    data = model.createData()
    ids = [model.getFrameId(n) for n in meta["contact_frames"]]
    hand = model.getFrameId(meta["disturbances"][0]["frame"])
    W = np.array(meta["disturbances"][0]["shape"])
    lower, upper = (np.array(meta["torque_limits"][s], float) for s in ("lower", "upper"))
    rng = np.random.default_rng(3)
    for k, t in enumerate(plan.t):
        i = int(np.argmin(np.abs(tr.t - t)))
        K_f, K_tau = tr.gain_force[i].reshape(-1, 3), tr.gain_tau[i]
        pin.computeJointJacobians(model, data, plan.q[k])
        pin.updateFramePlacements(model, data)
        Jc = np.vstack([pin.getFrameJacobian(model, data, c, pin.LOCAL_WORLD_ALIGNED)[:3] for c in ids])
        Je = pin.getFrameJacobian(model, data, hand, pin.LOCAL_WORLD_ALIGNED)[:3]
        # equations of motion with the motion held: 0 = S^T dtau + Jc^T dlambda + Je^T W u
        residual = np.vstack([np.zeros((6, 3)), K_tau]) + Jc.T @ K_f + Je.T @ W
        assert np.abs(residual).max() < 1e-6 * np.abs(Je).max() * max(1.0, np.abs(K_tau).max())
        # every push of size margin is rejected within the plan's limits by these gains
        rho = tr.margin[i]
        assert rho >= -1e-9
        if stored:
            assert rho == pytest.approx(plan.margin[k], rel=1e-9, abs=1e-9)
        for u in rng.normal(size=(40, 3)):
            u *= rho / np.linalg.norm(u)
            forces = plan.contact_forces[k] + (K_f @ u).reshape(-1, 3)
            tau = plan.tau[k] + K_tau @ u
            assert _pyramid_rooms(meta, forces).min() >= -1e-6 * rho - 1e-9
            assert np.all(tau <= upper + 1e-6) and np.all(tau >= lower - 1e-6)


def load_plan_without_gains(plan):
    import dataclasses
    return dataclasses.replace(plan, extras={k: v for k, v in plan.extras.items()
                                             if not k.startswith("response_gains")})


def test_csv_and_npz_from_the_command_line(ramp, tmp_path, capsys):
    path = tmp_path / "ramp.npz"
    save_plan(ramp, path)
    assert main(["export", str(path), "--rate", "200"]) == 0
    csv = tmp_path / "ramp-200hz.csv"
    lines = csv.read_text().splitlines()
    header = lines[0].split(",")
    assert header[0] == "t [s]" and len(lines) == 1 + 501
    body = np.loadtxt(csv, delimiter=",", skiprows=1)
    assert body.shape == (501, len(header))
    assert np.abs(body[0, 1:1 + ramp.q.shape[1]] - ramp.q[0]).max() <= 1e-12
    assert main(["export", str(path), "--rate", "50", "--format", "npz", "--out", str(tmp_path / "x.npz")]) == 0
    with np.load(tmp_path / "x.npz", allow_pickle=False) as z:
        info = json.loads(str(z["info"]))
        assert z["t"].shape == (126,) and info["rate_hz"] == 50.0 and len(z["columns"]) == len(header)
    assert main(["export", str(path), "--rate", "-3"]) == 2
    err = capsys.readouterr().err
    assert "--rate" in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "ramp--3hz.csv").exists()


def test_an_old_plan_without_gains_still_exports(ramp, tmp_path):
    path = tmp_path / "old.npz"
    save_plan(load_plan_without_gains(ramp), path)
    assert "response_gains_0" not in load_plan(path).extras
    assert main(["export", str(path), "--rate", "20", "--out", str(tmp_path / "old.csv")]) == 0
