"""brace simulate: the MuJoCo scene and replays, checked against outside references.

References: Pinocchio (frame placements and forward dynamics ``aba`` of the
plan's URDF), MuJoCo's own ray casting (every foothold lies on a terrain
surface, the plan's normal facing out), Newton's statics (the normal forces
of a robot standing still add up to its weight), and the plans themselves
(nominal replay acceptance: feet within 5 mm, hand targets within 2 cm; a
push of half the certified margin survived in informed mode).

Robust demo plans are solved once per module at 20 knots: coarser plans
(8 or 12 knots, a step of 0.2-0.36 s) do not describe a motion a controller
can track closely (see benchmarks/RESULTS.md, "Simulation"). The stepping
demo landing_pick is replayed at 20 knots too (at 10 or 14 knots its feet
land 1-5 cm off); wall_brace's scene is checked on the 10-knot plan the
schedule tests share (tests/stepping_plans.py).
"""
from __future__ import annotations

import copy
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
from optimizer.cli.simulate import underload_lines
from optimizer.errors import PlanFileError
from optimizer.planfile import save_plan
from optimizer.planner import solve
from optimizer.problem.task import load_task
from optimizer.robot.model import load_robot
from optimizer.report.palette import FIGURE_DPI
from optimizer.report.simulation import SIZE
from optimizer.simulation.rollout import SurvivalRules
from optimizer.simulation.scene import build_scene
from optimizer.simulation.surfaces import scene_surfaces
from replay_checks import assert_tracks, simulator
from stepping_plans import stepping_plan

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
    assert main(["simulate", str(path), "--touchdown", "0"]) == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "--touchdown" in err
    assert main(["simulate", str(tmp_path / "nope.npz")]) == 2
    assert "nope.npz" in capsys.readouterr().err


@pytest.fixture(scope="module")
def landing_pick_plan():
    """landing_pick's robust plan at SIM_KNOTS knots: the front feet step up onto the landing one at a
    time (three feet in stance while one swings)."""
    outcome = solve(load_task("tasks/landing_pick.yaml"), "robust", knots=SIM_KNOTS)
    assert outcome.success, [(s.objective, s.status) for s in outcome.stages]
    assert (~outcome.plan.contact_active).any()
    return outcome.plan


def plan_intervals(plan):
    """(contact, first knot, last knot, foothold) of every run of stance knots, read from the plan's
    own arrays (contact_active, contact_targets)."""
    out = []
    for c in range(plan.contact_active.shape[1]):
        k = 0
        while k < plan.t.shape[0]:
            if plan.contact_active[k, c]:
                first = k
                while k + 1 < plan.t.shape[0] and plan.contact_active[k + 1, c]:
                    k += 1
                out.append((c, first, k, plan.contact_targets[first, c]))
            k += 1
    return out


def test_a_stepping_replay_keeps_stance_feet_on_their_footholds_and_reaches_the_target(landing_pick_plan):
    plan = landing_pick_plan
    sim = simulator(plan)
    sim._restart()
    rec = sim.rollout("blind").run(sim.reference.duration + sim.settings.contact.timestep)
    assert not rec.diverged
    settle, last = sim.settings.rules.touchdown, plan.t.shape[0] - 1
    intervals = plan_intervals(plan)
    assert len(intervals) == 6, "each front foot has two stance intervals, each rear foot one"
    for c, first, k_last, foothold in intervals:
        begin = plan.t[first] + (settle if first > 0 else 0.0)
        end = np.inf if k_last == last else plan.t[k_last]
        rows = (rec.time >= begin) & (rec.time <= end)
        # Reference: MuJoCo's own site positions of the contact frames (d.site_xpos, recorded each step).
        gap = np.linalg.norm(rec.sites[rows, c] - foothold, axis=1)
        assert rows.any() and gap.max() <= 0.005, (plan.meta["contact_frames"][c], first, gap.max())
    # The two front feet end on the landing's top (0.12 m), as the task file says.
    assert np.allclose(rec.sites[-1, :2, 2], 0.12, atol=0.005)
    for target in sim.targets:
        column = rec.site_names.index(target.frame)
        for k in range(plan.t.shape[0]):
            if target.t_start - 1e-9 <= plan.t[k] <= target.t_end + 1e-9:
                i = int(np.argmin(np.abs(rec.time - plan.t[k])))
                # Reference: MuJoCo's site position of the target frame against the task file's target.
                assert np.linalg.norm(rec.sites[i, column] - target.position) <= 0.02
    report = sim.nominal()
    assert report["ok"], report
    assert [f["stances"] for f in report["feet"]][:2] == [[[a, b] for c, a, b, _ in intervals if c == f]
                                                          for f in (0, 1)]


def test_a_foot_given_less_than_half_its_planned_load_is_named_with_its_knot():
    plan = standing(6)
    report = simulator(plan).nominal()
    # Newton: standing still, each foot carries about its planned share of the weight.
    assert all(foot["underloaded"] is None for foot in report["feet"]), report["feet"]
    # The same torques with foot 1's planned force claimed 2.5 times larger: the replay (MuJoCo's contact
    # forces, which follow the torques, not the claim) gives that foot under half of it from the first knot.
    claimed = copy.deepcopy(plan)
    claimed.contact_forces[:, 1] *= 2.5
    doc = simulator(claimed).nominal()
    marked = {foot["frame"]: foot["underloaded"] for foot in doc["feet"] if foot["underloaded"]}
    assert list(marked) == [plan.meta["contact_frames"][1]], marked
    at = marked[plan.meta["contact_frames"][1]]
    planned = float(claimed.contact_forces[at["knot"], 1, 2])   # a flat floor: the normal is world z
    assert at["planned_n"] == pytest.approx(planned) and at["replayed_n"] < 0.5 * planned
    assert at["replayed_n"] == pytest.approx(planned / 2.5, rel=0.05)
    assert at["certified_margin_n"] == pytest.approx(float(plan.margin[at["knot"]]))
    line, = underload_lines(doc["feet"])
    assert line.startswith(f"  loads    {plan.meta['contact_frames'][1]} first carried under 50 % of its planned "
                           f"load at knot {at['knot']} ")


def test_a_swinging_foot_is_free_but_a_lifted_stance_foot_is_lost(landing_pick_plan):
    rules = SurvivalRules(slip=1.0)     # slip left out: this test is about contact loss alone
    sim = simulator(landing_pick_plan)
    sim._restart()
    watched = sim.rollout("blind").run(sim.reference.duration, rules=rules, watch_from=0.0)
    assert watched.failure == ""
    # The same motion, with the plan claiming foot_fl stays in stance on its first foothold through
    # its first swing: the replay lifts that foot (MuJoCo then reports no contact force on it).
    claimed = copy.deepcopy(landing_pick_plan)
    swing = np.flatnonzero(~claimed.contact_active[:, 0])
    swing = swing[: np.argmax(np.diff(swing) > 1) + 1] if (np.diff(swing) > 1).any() else swing
    claimed.contact_active[swing, 0] = True
    claimed.contact_targets[swing, 0] = claimed.contact_targets[0, 0]
    sim = simulator(claimed)
    sim._restart()
    record = sim.rollout("blind").run(sim.reference.duration, rules=rules, watch_from=0.0)
    assert record.failure.startswith("foot_fl lost contact"), record.failure


def test_a_wall_foothold_is_touched_along_the_wall_normal_with_the_wall_friction():
    _, plan = stepping_plan("wall_brace", "robust")
    plan = copy.deepcopy(plan)
    k = plan.t.shape[0] - 1                     # foot_fl braced on the wall's side (y = 0.40 m)
    assert plan.contact_active[k, 0] and plan.contact_targets[k, 0, 1] == pytest.approx(0.40)
    surfaces = plan.meta["contact_knot_surfaces"]
    wall = [k for k in range(plan.t.shape[0]) if plan.contact_active[k, 0] and plan.contact_targets[k, 0, 2] > 0.1]
    for j in wall:                              # another coefficient on the wall than on the floor
        surfaces["friction"][j][0] = 0.5
    scene = build_scene(plan, scene_surfaces(plan)[0])
    scene.set_state(plan.q[k], np.zeros_like(plan.v[k]))
    model, data = scene.model, scene.data
    mine = {g for g, c in zip(scene.foot_geoms, scene.foot_contacts) if c == 0}
    wall_geom = mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_GEOM, "terrain:block0")
    floor_geom = mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_GEOM, "terrain:floor")
    touching = [data.contact[i] for i in range(data.ncon)
                if {int(data.contact[i].geom1), int(data.contact[i].geom2)} & mine]
    # Reference: MuJoCo's collision detection at the plan's configuration: foot_fl meets the wall
    # alone, along the wall's normal (contact frame's first row, pointing from geom1 to geom2).
    assert [sorted({int(c.geom1), int(c.geom2)} - mine) for c in touching] == [[wall_geom]]
    assert abs(touching[0].frame[:3] @ np.array([0.0, 1.0, 0.0])) == pytest.approx(1.0, abs=1e-6)
    assert abs(touching[0].dist) < 1e-4
    # Reference: the friction of each contact pair as MuJoCo compiled it (model.pair_friction).
    reserve = plan.meta.get("friction_reserve", 0.0)
    pairs = [({int(model.pair_geom1[i]), int(model.pair_geom2[i])}, model.pair_friction[i, 0])
             for i in range(model.npair)]
    on_wall = [mu for geoms, mu in pairs if geoms & mine and wall_geom in geoms]
    on_floor = [mu for geoms, mu in pairs if geoms & mine and floor_geom in geoms]
    assert on_wall == pytest.approx([0.5 / (1.0 - reserve)]) and on_floor == pytest.approx([0.7 / (1.0 - reserve)])
