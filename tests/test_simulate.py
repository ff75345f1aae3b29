"""brace simulate: the MuJoCo scene and replays, checked against outside references.

References: Pinocchio (frame placements and forward dynamics ``aba`` of the
plan's URDF), MuJoCo's own ray casting (every foothold lies on a terrain
surface, the plan's normal facing out), Newton's statics (the normal forces
of a robot standing still add up to its weight), and the plans themselves
(nominal replay acceptance: feet within 5 mm, hand targets within 2 cm; a
push of half the certified margin survived in informed mode).

Robust demo plans are solved once per module at 20 knots: coarser plans
(8 or 12 knots, a step of 0.2-0.36 s) do not describe a motion a controller
can track closely (see benchmarks/RESULTS.md, "Simulation").
"""
from __future__ import annotations

import json
from pathlib import Path

import matplotlib.image
import mujoco
import numpy as np
import pinocchio as pin
import pytest
import yaml

from certify_checks import demo_standing, standing_plan
from optimizer.cli import main
from optimizer.errors import PlanFileError
from optimizer.planfile import build_model, save_plan
from optimizer.planner import solve
from optimizer.problem.task import load_task
from optimizer.robot.model import load_robot
from optimizer.simulation.inputs import simulation_inputs
from optimizer.simulation.pushes import Settings, Simulator
from optimizer.report.palette import FIGURE_DPI
from optimizer.report.simulation import SIZE
from optimizer.simulation.scene import build_scene
from optimizer.simulation.surfaces import scene_surfaces

TASKS = ["stair_landing", "steep_ramp", "trench", "crawl_space"]
SIM_KNOTS = 20


@pytest.fixture(scope="module")
def robust_plans():
    """The plan ``brace solve`` writes (the task's default robust objective) of every demo task
    at SIM_KNOTS knots, solved once for this module."""
    plans = {}
    for name in TASKS:
        outcome = solve(load_task(f"tasks/{name}.yaml"), knots=SIM_KNOTS)
        assert outcome.success, [(s.objective, s.status) for s in outcome.stages]
        plans[name] = outcome.plan
    return plans


def simulator(plan, settings: Settings | None = None) -> Simulator:
    inputs = simulation_inputs(plan, build_model("plan", plan.meta["urdf"]))
    return Simulator(plan, inputs.surfaces, inputs.targets, inputs.hand_frame, settings)


def standing(knots: int = 6):
    return standing_plan(**demo_standing(knots=knots), mu=0.8)


def test_scene_matches_pinocchio_kinematics_and_forward_dynamics():
    plan = standing(1)
    scene = build_scene(plan, scene_surfaces(plan)[0], frames=["grip_point"])
    model, data = scene.pin_model, scene.pin_model.createData()
    rng = np.random.default_rng(3)
    for _ in range(5):
        q = pin.randomConfiguration(model)
        q[:3] = [0.2, -0.1, 5.0]  # far above the ground: no contact
        v, tau = rng.normal(size=model.nv), rng.normal(scale=5.0, size=model.nv - 6)
        scene.set_state(q, v)
        # Reference: Pinocchio's frame placements.
        pin.framesForwardKinematics(model, data, q)
        for name, site in scene.sites.items():
            assert np.allclose(scene.data.site_xpos[site], data.oMf[model.getFrameId(name)].translation, atol=1e-12)
        # Reference: Pinocchio's articulated-body algorithm with the same torques.
        scene.data.qfrc_applied[:] = 0.0
        scene.data.qfrc_applied[scene.joint_dof] = tau
        mujoco.mj_forward(scene.model, scene.data)
        assert scene.data.ncon == 0
        a = pin.aba(model, data, q, v, np.concatenate([np.zeros(6), tau]))
        rot = data.oMi[1].rotation
        # MuJoCo's base linear acceleration is the world-frame derivative of the world velocity.
        assert np.allclose(scene.data.qacc[:3], rot @ (a[:3] + np.cross(v[3:6], v[:3])), atol=1e-8)
        assert np.allclose(scene.data.qacc[3:6], a[3:6], atol=1e-8)
        assert np.allclose(scene.data.qacc[scene.joint_dof], a[6:], atol=1e-7 * max(1.0, np.abs(a).max()))
        back_q, back_v = scene.pinocchio_state()
        assert np.allclose(back_q, q) and np.allclose(back_v, v)


def test_standing_robot_rests_on_its_footholds_with_its_weight():
    plan = standing(6)  # 0.5 s of standing still
    sim = simulator(plan)
    report = sim.nominal()
    # Newton: at rest the surface carries the whole weight.
    weight = pin.computeTotalMass(sim.scene.pin_model) * 9.81
    sim._restart()
    rec = sim.rollout("blind").run(0.5)
    assert abs(rec.normal_force[-50:].sum(axis=1).mean() - weight) < 0.01 * weight
    assert max(f["distance_m"] for f in report["feet"]) < 5e-4
    assert report["base_error_m"] < 1e-3 and report["ok"]


@pytest.mark.parametrize("task_name", TASKS)
def test_every_foothold_lies_on_a_terrain_surface_facing_its_normal(robust_plans, task_name):
    plan = robust_plans[task_name]
    scene = build_scene(plan, scene_surfaces(plan)[0])
    terrain = {i for i in range(scene.model.ngeom) if scene.model.geom(i).name.startswith("terrain:")}
    geomid = np.zeros(1, np.int32)
    for foothold, normal in zip(plan.contact_targets[0], plan.meta["contact_normals"]):
        # Reference: MuJoCo's ray casting against the terrain geoms alone (group 0; feet are group 1).
        start = foothold + 0.05 * np.asarray(normal)
        distance = mujoco.mj_ray(scene.model, scene.data, start, -np.asarray(normal),
                                 np.array([1, 0, 0, 0, 0, 0], np.uint8), 1, -1, geomid)
        assert geomid[0] in terrain
        assert distance == pytest.approx(0.05, abs=1e-9)


@pytest.mark.slow
@pytest.mark.parametrize("task_name", TASKS)
def test_nominal_replay_keeps_feet_and_reaches_hand_targets(robust_plans, task_name):
    assert_tracks(simulator(robust_plans[task_name]).nominal())


def assert_tracks(report):
    """Nominal replay acceptance: every foot within 5 mm of its foothold, no contact lost, every
    hand target within 2 cm (MuJoCo's contact dynamics are the outside reference)."""
    for foot in report["feet"]:
        assert foot["distance_m"] <= 0.005, foot
        assert foot["contact_losses"] == 0, foot
    assert report["targets"], "the demo tasks have hand targets"
    for target in report["targets"]:
        assert target["error_m"] <= 0.02, target


@pytest.mark.slow
def test_the_steep_ramp_torque_plan_keeps_its_feet_with_the_friction_reserve():
    # The torque-optimal plan puts the front feet on the edges of their pyramids; planned on the
    # full mu they slid 17-24 mm in MuJoCo at 20 knots. With the task's friction_reserve the plan
    # meets mu (1 - r) and the scene keeps the terrain's mu. Reference: MuJoCo's replay.
    task = load_task("tasks/steep_ramp.yaml")
    assert task.friction_reserve > 0.0
    outcome = solve(task, "torque", knots=SIM_KNOTS)
    assert outcome.success, [(s.objective, s.status) for s in outcome.stages]
    assert outcome.plan.meta["friction_reserve"] == task.friction_reserve
    np.testing.assert_allclose(outcome.plan.meta["friction"],
                               (1.0 - task.friction_reserve) * task.raw["stance"]["terrain"]["friction"])
    assert_tracks(simulator(outcome.plan).nominal())


@pytest.mark.slow
def test_the_crawl_space_torque_plan_keeps_its_ceiling_feet_with_their_preload():
    # The torque-optimal plan pressed its ceiling feet with the minimum normal force (4.9 N) on a
    # friction facet and the replay lost them. With the task's preload the planned normal force of
    # each such foot is at least its preload at every stance knot (read from the plan file's forces
    # against the task file read as plain YAML; the ceiling's normal points down), the torque
    # objective presses no harder than it must, and MuJoCo's replay keeps every foot.
    raw = yaml.safe_load(Path("tasks/crawl_space.yaml").read_text(encoding="utf-8"))
    preloads = {frame: float(spec["preload"]) for frame, spec in raw["stance"]["feet"].items()
                if isinstance(spec, dict) and "preload" in spec}
    assert preloads, "the crawl space's ceiling feet carry a preload"
    outcome = solve(load_task("tasks/crawl_space.yaml"), "torque", knots=SIM_KNOTS)
    assert outcome.success, [(s.objective, s.status) for s in outcome.stages]
    plan = outcome.plan
    for frame, preload in preloads.items():
        c = plan.meta["contact_frames"].index(frame)
        normal = np.asarray(plan.meta["contact_normals"][c], float)
        np.testing.assert_allclose(normal, [0.0, 0.0, -1.0], atol=1e-12)
        push = (plan.contact_forces[:, c] @ normal)[plan.contact_active[:, c]]
        assert push.min() >= preload - 1e-6, (frame, push.min())
        assert push.min() <= preload + 1.0, (frame, push.min())
    assert_tracks(simulator(plan).nominal())


@pytest.mark.slow
@pytest.mark.parametrize("task_name", TASKS)
def test_half_the_certified_margin_is_survived_at_the_weakest_knot(robust_plans, task_name):
    plan = robust_plans[task_name]
    sim = simulator(plan)
    k = int(np.argmin(plan.margin))
    assert plan.margin[k] > 0.0
    push = sim.push_at(k, 0.5 * plan.margin[k])
    assert sim.survives(push, "informed") == ""
    # The rules can fail: eight times the exact figure is more than any response can reject.
    cert, _ = sim.certified_direction(k)
    assert sim.survives(sim.push_at(k, 8.0 * max(cert.rho, 1.0)), "informed") != ""


@pytest.mark.slow
def test_the_crawl_space_keeps_its_torque_reserve_for_the_controller(robust_plans):
    # Without a reserve this plan held both rear hip torques on their limit for over a second and
    # the joint PD's corrections were clipped even with no push. With the task's torque_reserve
    # the plan meets the robot file's limits times (1 - reserve), and the replay, which clips at
    # the robot's own limits, never clips. Reference: the robot file loaded on its own.
    plan = robust_plans["crawl_space"]
    reserve = plan.meta["torque_reserve"]
    assert reserve == load_task("tasks/crawl_space.yaml").raw["torque_reserve"] > 0.0
    robot = load_robot("models/stilt.yaml")
    sim = simulator(plan)
    np.testing.assert_allclose(sim.limits[1], robot.torque_upper, rtol=1e-9)
    np.testing.assert_allclose(sim.limits[0], robot.torque_lower, rtol=1e-9)
    assert (plan.tau <= (1.0 - reserve) * robot.torque_upper + 1e-6).all()
    assert (plan.tau >= (1.0 - reserve) * robot.torque_lower - 1e-6).all()
    assert sim.nominal()["torque_clipped_s"] == {}


def test_a_friction_reserve_plan_is_replayed_on_the_full_friction():
    # A plan made with friction_reserve r stores (and is certified against) mu (1 - r); the scene
    # must carry the terrain's own mu. Reference: the friction of every contact pair as MuJoCo
    # compiled it (model.pair_friction).
    plan = standing(1)
    plan.meta["friction"] = [0.8 * 0.85] * len(plan.meta["contact_frames"])
    plan.meta["friction_reserve"] = 0.15
    scene = build_scene(plan, scene_surfaces(plan)[0])
    assert scene.model.npair > 0
    np.testing.assert_allclose(scene.model.pair_friction[:, :2], 0.8, rtol=1e-9)
    plan.meta["friction_reserve"] = 1.0
    with pytest.raises(PlanFileError, match="meta.friction_reserve"):
        build_scene(plan, scene_surfaces(plan)[0])


def test_cli_writes_the_nominal_report_and_refuses_bad_options(tmp_path, capsys):
    plan = standing(6)
    path = tmp_path / "standing.npz"
    save_plan(plan, path)
    out = tmp_path / "sim.json"
    assert main(["simulate", str(path), "--knots", "none", "--json", str(out)]) == 0
    text = capsys.readouterr().out
    assert "nominal replay within limits" in text and "Safety" in text
    document = json.loads(out.read_text())
    assert document["format"] == "brace-simulation/1" and document["nominal"]["ok"]
    figure = tmp_path / "pushes.png"
    assert main(["simulate", str(path), "--knots", "2", "--mode", "informed", "--json", str(out),
                 "--figure", str(figure), "--quiet"]) == 0
    capsys.readouterr()
    pushed = json.loads(out.read_text())["pushes"]
    assert len(pushed) == 1 and pushed[0]["largest_survived_N"] > 0.0
    # Reference: matplotlib's own PNG reader; the figure has the size the report module states.
    image = matplotlib.image.imread(figure)
    assert image.shape[:2] == tuple(round(x * FIGURE_DPI) for x in reversed(SIZE))
    assert main(["simulate", str(path), "--figure", str(tmp_path / "pushes.jpg")]) == 2
    assert "--figure" in capsys.readouterr().err
    assert main(["simulate", str(path), "--slip", "-1"]) == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "--slip" in err
    assert main(["simulate", str(tmp_path / "nope.npz")]) == 2
    assert "nope.npz" in capsys.readouterr().err
