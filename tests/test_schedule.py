"""Contact schedules: stepping demo tasks, swings, and the checks of a schedule before solving."""
from __future__ import annotations

import copy
import dataclasses

import numpy as np
import pinocchio as pin
import pytest

from certify_checks import check_plan_against_sampled_lps
from optimizer.analysis.export import resample
from optimizer.analysis.plan_check import check_plan
from optimizer.analysis.presolve import run_checks
from optimizer.errors import PlanFileError, TaskError
from optimizer.files import read_yaml_mapping
from optimizer.planfile import load_plan, save_plan
from optimizer.planner import Planner
from optimizer.problem.task import load_task, task_from_mapping
from optimizer.transcription.structure import structure_of
from stepping_plans import OBJECTIVES, STEPPING, stepping_plan


def foot_kinematics(plan, k: int, frame: str):
    """Position (3,) and linear velocity (3,) of ``frame`` at knot k, by Pinocchio from the plan file."""
    model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
    data = model.createData()
    pin.forwardKinematics(model, data, plan.q[k], plan.v[k])
    pin.updateFramePlacements(model, data)
    fid = model.getFrameId(frame)
    velocity = pin.getFrameVelocity(model, data, fid, pin.ReferenceFrame.LOCAL_WORLD_ALIGNED).linear
    return np.array(data.oMf[fid].translation), np.array(velocity)


@pytest.mark.parametrize("objective", OBJECTIVES)
@pytest.mark.parametrize("name", STEPPING)
def test_stepping_plan_passes_the_pinocchio_recheck(name, objective):
    # Reference: Pinocchio (rnea, frame placements, integrate) in analysis/plan_check.py, which
    # reads only the plan file: equations of motion, stance feet on their per-knot footholds,
    # friction, zero force on swinging feet, limits, terrain clearance.
    task, plan = stepping_plan(name, objective)
    report = check_plan(plan)
    assert report.passed, report
    assert (~plan.contact_active).any(), "the demo must swing a foot"
    assert np.all(np.isnan(plan.contact_targets[~plan.contact_active]))


# The surfaces the stepping demos' front feet leave and land on, read from the task files'
# numbers: (unit normal into the robot, a point of the plane) [m]. Both lift off the floor
# (z = 0); landing_pick lands on the landing's top (z = 0.12), wall_brace on the wall's
# face (y = 0.40, block0 centred at y = 0.55, 0.30 deep).
FLOOR = (np.array([0.0, 0.0, 1.0]), np.zeros(3))
LANDING_PLANES = {"landing_pick": (np.array([0.0, 0.0, 1.0]), np.array([0.0, 0.0, 0.12])),
                  "wall_brace": (np.array([0.0, -1.0, 0.0]), np.array([0.0, 0.40, 0.0]))}
DEFAULT_APPROACH = 0.02   # m, stance.schedule.approach_clearance's default (docs/task-files.md)


DEFAULT_TOUCHDOWN_SPEED = 0.1  # m/s, stance.schedule.touchdown_speed's default (docs/task-files.md)


def approach_distances(name, task, plan):
    """Per swing knot with an approach row: (side, knot, the foot's distance [m] off that plane), by
    Pinocchio forward kinematics of the plan file (tests/test_schedule.py:foot_kinematics); ``final``
    rows are the final approach's, measured off the landing plane."""
    out = []
    for swing in structure_of(task).swings:
        frame = plan.meta["contact_frames"][swing.contact]
        for side, knots, (normal, point) in (("lift-off", swing.leaving, FLOOR),
                                             ("landing", swing.approaching, LANDING_PLANES[name]),
                                             ("final", swing.settling, LANDING_PLANES[name])):
            out += [(side, k, float(normal @ (foot_kinematics(plan, k, frame)[0] - point))) for k in knots]
    return out


def assert_soft_landings(name, task, plan):
    """The approach rule by Pinocchio forward kinematics against the task files' planes: the clearance
    off the lift-off and landing surfaces, never through the landing surface on the final approach,
    and at touchdown at most the touchdown speed along the landing surface's normal."""
    clearance, speed = task.schedule.approach_clearance, task.schedule.touchdown_speed
    rows = approach_distances(name, task, plan)
    assert any(side == "landing" for side, _, _ in rows)
    for side, k, distance in rows:
        assert distance >= (0.0 if side == "final" else clearance) - 1e-7, (side, k, distance)
    for swing in structure_of(task).swings:
        _, velocity = foot_kinematics(plan, swing.touch, plan.meta["contact_frames"][swing.contact])
        assert abs(velocity @ LANDING_PLANES[name][0]) <= speed + 1e-7, (swing, velocity)
    return rows


@pytest.mark.parametrize("objective", OBJECTIVES)
@pytest.mark.parametrize("name", STEPPING)
def test_swinging_feet_keep_the_approach_clearance_and_land_softly(name, objective):
    # Reference: Pinocchio forward kinematics and frame velocity of the plan's URDF against the
    # planes read from the task files (LANDING_PLANES); the rule is docs/task-files.md's
    # stance.schedule.approach_clearance and touchdown_speed.
    task, plan = stepping_plan(name, objective)
    assert task.schedule.approach_clearance == DEFAULT_APPROACH
    assert task.schedule.touchdown_speed == DEFAULT_TOUCHDOWN_SPEED
    assert_soft_landings(name, task, plan)


def test_the_final_approach_is_a_time_not_a_knot():
    # At 20 knots wall_brace's knot step (3.5 / 19 = 0.184 s) is shorter than its final approach
    # (0.02 m / 0.1 m/s = 0.2 s, the task-file defaults), so the knot before touchdown may come
    # closer than the clearance, but never through the wall (the task file's face, y = 0.40 m);
    # the landing stays at most 0.1 m/s along the face's normal (Pinocchio frame velocity).
    task = load_task("tasks/wall_brace.yaml").with_knots(20)
    swing = structure_of(task).swings[0]
    assert list(swing.settling) == [swing.touch - 1]
    assert task.times[swing.touch] - task.times[swing.approaching[-1]] >= task.schedule.final_approach
    with Planner() as planner:  # the rows hold for every objective: the feasibility plan is enough
        outcome = planner.solve_from_seed(planner.seed(task), "feasible")
    assert outcome.success
    rows = assert_soft_landings("wall_brace", task, outcome.plan)
    assert any(side == "final" for side, _, _ in rows)
    assert check_plan(outcome.plan).passed


def test_without_an_approach_rule_the_foot_reaches_the_wall_a_knot_early():
    # The same check can fail: with no approach clearance and (nearly) no touchdown speed, the
    # feasibility plan of wall_brace puts the foot on the wall's face at the knot before touchdown
    # (Pinocchio forward kinematics against the task file's wall plane): under the integrator
    # q[k+1] = q[k] + h v[k+1], a still foot at touchdown did not move over the step into it
    # (to first order: the joint-linear step's curvature leaves about a millimetre, a twentieth
    # of the approach clearance the rule keeps).
    path = "tasks/wall_brace.yaml"
    data = copy.deepcopy(read_yaml_mapping(path, TaskError))
    data["stance"]["schedule"]["approach_clearance"] = 0.0
    data["stance"]["schedule"]["touchdown_speed"] = 1e-6
    task = task_from_mapping(data, path).with_knots(10)
    with Planner() as planner:
        outcome = planner.solve_from_seed(planner.seed(task), "feasible")
    assert outcome.success
    swing = structure_of(task).swings[0]
    last = [d for side, k, d in approach_distances("wall_brace", task, outcome.plan) if k == swing.touch - 1]
    assert len(last) == 1 and abs(last[0]) < 0.1 * DEFAULT_APPROACH, last


def _claimed(plan, tmp_path, **meta):
    path = tmp_path / "claimed.npz"
    save_plan(plan, path)
    claimed = load_plan(path)
    claimed.meta.update(meta)
    return claimed


def test_the_plan_check_names_a_swing_foot_that_reaches_its_landing_surface_early(tmp_path):
    # The plan check's approach rule, on a plan whose meta claims more clearance than it keeps:
    # the wall_brace robust plan keeps 20-40 mm before touchdown; claiming 0.5 m with a final
    # approach of 5 ms (touchdown speed 100 m/s) must fail at the knot before touchdown, naming
    # the swinging foot.
    _, plan = stepping_plan("wall_brace", "robust")
    assert check_plan(plan).passed
    claimed = _claimed(plan, tmp_path, approach_clearance=0.5, touchdown_speed=100.0)
    result = next(r for r in check_plan(claimed).results if r.name == "approach")
    touch = int(np.flatnonzero(~plan.contact_active[:-1, 0] & plan.contact_active[1:, 0])[0]) + 1
    assert not result.passed and result.knot == touch - 1 and result.where == "foot_fl", result


def test_the_plan_check_names_a_foot_that_lands_faster_than_claimed(tmp_path):
    # Its touchdown-speed rule: the foot's speed along the wall's normal at touchdown, by
    # Pinocchio's frame Jacobian, against a claimed limit of 1 mm/s (the plan lands at up to
    # 0.1 m/s); the check must fail at the touchdown knot and name the foot.
    task, plan = stepping_plan("wall_brace", "robust")
    swing = structure_of(task).swings[0]
    _, velocity = foot_kinematics(plan, swing.touch, "foot_fl")
    claimed = _claimed(plan, tmp_path, touchdown_speed=1e-3)
    result = next(r for r in check_plan(claimed).results if r.name == "touchdown-speed")
    assert not result.passed and result.knot == swing.touch and result.where == "foot_fl", result
    assert result.worst == pytest.approx(abs(velocity @ LANDING_PLANES["wall_brace"][0]) - 1e-3, abs=1e-9)


@pytest.mark.parametrize("objective", OBJECTIVES)
@pytest.mark.parametrize("name", STEPPING)
def test_swing_feet_carry_no_force_and_clear_the_terrain(name, objective):
    # Reference: Pinocchio forward kinematics of the plan's own URDF (not the NLP's functions).
    # The height to clear is read from the task file's numbers here: the top of what lies
    # under the straight path between the two footholds (the landing block's top where the
    # path crosses its front edge at x = 0.50 m; the floor, z = 0, beside the wall).
    task, plan = stepping_plan(name, objective)
    tops = {"landing_pick": 0.12, "wall_brace": 0.0}
    swing_height = read_yaml_mapping(task.path, TaskError)["stance"]["schedule"]["swing_height"]
    swings = structure_of(task).swings
    assert swings
    for swing in swings:
        frame = plan.meta["contact_frames"][swing.contact]
        # no force at any swing knot, exactly (the plan contract)
        assert np.all(plan.contact_forces[list(swing.knots), swing.contact] == 0.0)
        assert not plan.contact_active[list(swing.knots), swing.contact].any()
        height = max(foot_kinematics(plan, k, frame)[0][2] for k in swing.knots)
        assert height >= tops[name] + swing_height - 1e-6, (frame, height)
        # touchdown: on its new foothold, without velocity along the landing surface (it comes
        # in along the normal: the landing top faces +z, the wall's face -y, from the task files)
        position, velocity = foot_kinematics(plan, swing.touch, frame)
        normal = LANDING_PLANES[name][0]
        assert np.linalg.norm(velocity - (velocity @ normal) * normal) < 1e-5
        assert np.allclose(position, plan.contact_targets[swing.touch, swing.contact], atol=1e-5)
        # lift-off: the foot is still on the foothold it leaves at the lift-off knot, without force
        # there (that knot's force would act over the step in which the foot leaves)
        leaving = plan.contact_targets[swing.lift - 1, swing.contact]
        at, _ = foot_kinematics(plan, swing.lift, frame)
        assert np.linalg.norm(at - leaving) < 1e-5
        assert plan.contact_active[swing.lift - 1, swing.contact] and not plan.contact_active[swing.lift, swing.contact]
        assert np.all(plan.contact_forces[swing.lift, swing.contact] == 0.0)


@pytest.mark.parametrize("name", STEPPING)
def test_stepping_margins_lie_between_independent_lp_bounds(name):
    # Reference: SciPy HiGHS support LPs of the residual force set (tests/certify_checks.py),
    # built from the plan file with only the contacts in stance at each knot: the exact
    # figure lies between the inner and outer sampled bounds, and the planned (linear-gain)
    # margin never exceeds it (margin soundness).
    # wall_brace's last knot has the front-left foot braced on the wall (its pyramid about -y).
    _, plan = stepping_plan(name, "robust")
    swing_knot = int(np.flatnonzero((~plan.contact_active).any(axis=1))[0])
    knots = [0, swing_knot] + ([plan.q.shape[0] - 1] if name == "wall_brace" else [])
    rows = check_plan_against_sampled_lps(plan, n_dirs=80, knots=knots)
    for row in rows:
        assert row["planned"] <= row["rho"] * (1 + 1e-6) + 1e-9, row


def wall_face():
    """(y of the wall's face [m], its outward unit normal, z of its top [m], mu), from the task file's block."""
    terrain = read_yaml_mapping("tasks/wall_brace.yaml", TaskError)["stance"]["terrain"]
    block = terrain["blocks"][0]
    face_y = block["center"][1] - block["size"][1] / 2      # the side facing the robot (-y)
    return face_y, np.array([0.0, -1.0, 0.0]), block["height"], terrain["friction"]


@pytest.mark.parametrize("objective", OBJECTIVES)
def test_the_braced_foot_stands_on_the_wall_face_and_pushes_inside_its_friction_cone(objective):
    # References: Pinocchio forward kinematics of the plan's URDF (where the foot is); the wall
    # face and its outward normal from the task file's block (axis-aligned box geometry); textbook
    # Coulomb friction: a contact force f is admissible when |f - (f.n) n| <= mu (f.n) (the
    # plan's inscribed pyramid lies inside this cone).
    task, plan = stepping_plan("wall_brace", objective)
    face_y, n, top, mu = wall_face()
    c = plan.meta["contact_frames"].index("foot_fl")
    braced = [k for k in range(plan.q.shape[0]) if plan.contact_active[k, c] and task.times[k] >= 1.4]
    assert braced, "the front-left foot must stand on the wall after its swing"
    min_force = plan.meta["min_normal_force"]
    for k in braced:
        position, _ = foot_kinematics(plan, k, "foot_fl")
        assert position[1] == pytest.approx(face_y, abs=1e-5), (k, position)
        assert 0.0 < position[2] < top, (k, position)
        f = plan.contact_forces[k, c]
        push = f @ n
        assert push >= min_force - 1e-6, (k, f)
        assert np.linalg.norm(f - push * n) <= mu * push + 1e-6, (k, f)
    # the feet still on the floor press up (floor normal +z): the wall foot's normal is its own
    for k in braced:
        for other in range(plan.contact_active.shape[1]):
            if other != c and plan.contact_active[k, other]:
                assert plan.contact_forces[k, other, 2] >= min_force - 1e-6


def test_per_knot_normals_round_trip_and_a_plan_with_per_contact_normals_still_loads(tmp_path):
    # Reference: the plan-file contract (docs/plan-files.md): meta.contact_knot_surfaces holds per
    # knot the normal, tangents and friction of every contact; without it the per-contact
    # contact_normals / friction / friction_pyramid.tangents hold at every knot.
    task, plan = stepping_plan("wall_brace", "robust")
    surfaces = plan.meta["contact_knot_surfaces"]
    c, last = plan.meta["contact_frames"].index("foot_fl"), plan.q.shape[0] - 1
    assert np.allclose(surfaces["normals"][0][c], [0.0, 0.0, 1.0])       # on the floor at the start
    assert np.allclose(surfaces["normals"][last][c], wall_face()[1])    # on the wall at the end
    save_plan(plan, tmp_path / "braced.npz")
    again = load_plan(tmp_path / "braced.npz")
    for key in ("normals", "tangents", "friction"):
        assert np.array_equal(np.array(again.meta["contact_knot_surfaces"][key]), np.array(surfaces[key]))
    # an older plan (one normal per contact) loads and keeps passing the Pinocchio re-check
    _, floor_plan = stepping_plan("landing_pick", "robust")
    assert "contact_knot_surfaces" not in floor_plan.meta
    save_plan(floor_plan, tmp_path / "per_contact.npz")
    assert check_plan(load_plan(tmp_path / "per_contact.npz")).passed
    # a per-knot field of the wrong shape names the field
    bad = copy.deepcopy(plan)
    bad.meta["contact_knot_surfaces"]["normals"] = surfaces["normals"][:-1]
    save_plan(bad, tmp_path / "bad.npz")
    with pytest.raises(PlanFileError, match=r"contact_knot_surfaces\.normals"):
        load_plan(tmp_path / "bad.npz")


def test_the_plan_check_notices_a_braced_force_outside_the_wall_pyramid(tmp_path):
    # Reference: textbook Coulomb friction on the wall (normal -y, mu from the task file): a
    # force pointing along the wall's normal into the wall (+y, pulling) is outside every cone
    # about -y. The Pinocchio re-check must read the per-knot normal to see it.
    _, plan = stepping_plan("wall_brace", "robust")
    c, k = plan.meta["contact_frames"].index("foot_fl"), plan.q.shape[0] - 1
    bad = copy.deepcopy(plan)
    bad.contact_forces[k, c] = -bad.contact_forces[k, c]
    report = check_plan(bad)
    assert not report.passed
    failed = {r.name for r in report.results if not r.passed}
    assert {"friction", "normal-force"} <= failed, failed


def test_a_foothold_off_the_wall_face_or_on_a_top_is_refused_with_the_field():
    # The wall face spans x in [-0.5, 1.5] m and z in [0, 0.8] m (task file's block); feet keep
    # edge_clearance (0.03 m by default) from its edges, the floor among them.
    data = copy.deepcopy(read_yaml_mapping("tasks/wall_brace.yaml", TaskError))
    entry = data["stance"]["schedule"]["foot_fl"][1]
    entry["at"] = [0.40, 0.01]
    with pytest.raises(TaskError, match=r"stance\.schedule\.foot_fl\[1\]\.at.*0\.03 m from its edges"):
        task_from_mapping(data, "tasks/wall_brace.yaml")
    entry["at"], entry["surface"] = [0.40, 0.20], "floor"
    with pytest.raises(TaskError, match=r"stance\.schedule\.foot_fl\[1\]\.surface.*a block"):
        task_from_mapping(data, "tasks/wall_brace.yaml")


def test_support_before_solving_uses_the_wall_normal_of_an_interval():
    # Newton and Coulomb: a foot pressing on a vertical wall (normal -y, mu 0.7) alone cannot carry
    # the weight (vertical force at most 0.7 times a horizontal push nothing balances). With only
    # that foot in stance in a window, the support check must refuse the schedule; with the floor
    # normal it would not.
    data = copy.deepcopy(read_yaml_mapping("tasks/wall_brace.yaml", TaskError))
    for frame in ("foot_fr", "foot_rl", "foot_rr"):
        data["stance"]["schedule"][frame] = [{"window": [0.0, 1.6]}, {"window": [2.4, 3.5]}]
    findings = [f for f in run_checks(task_from_mapping(data, "tasks/wall_brace.yaml")) if f.check == "support"]
    assert findings and findings[0].impossible
    assert "only foot_fl is in stance" in findings[0].what


# ---------------------------------------------------------------- validation before solving


def landing_mapping():
    path = "tasks/landing_pick.yaml"
    return copy.deepcopy(read_yaml_mapping(path, TaskError)), path


def test_overlapping_stance_intervals_are_refused_with_the_field():
    data, path = landing_mapping()
    data["stance"]["schedule"]["foot_fl"][1]["window"] = [0.4, 4.0]   # starts before [0, 0.5] ends
    with pytest.raises(TaskError, match=r"stance\.schedule\.foot_fl\[1\]\.window.*must not overlap"):
        task_from_mapping(data, path)


def test_a_window_beyond_the_horizon_is_refused():
    data, path = landing_mapping()
    data["stance"]["schedule"]["foot_fr"][1]["window"] = [2.4, 4.5]
    with pytest.raises(TaskError, match=r"stance\.schedule\.foot_fr\[1\]\.window.*within the horizon"):
        task_from_mapping(data, path)


def test_a_swing_between_two_knots_is_refused_at_that_knot_count():
    task = load_task("tasks/landing_pick.yaml").with_knots(6)   # a step of 0.8 s: one knot in a 0.9 s swing
    with pytest.raises(TaskError, match=r"stance\.schedule\.foot_\w+\[1\]\.window.*at least 2 knots"):
        structure_of(task)


def test_a_window_with_every_foot_in_the_air_is_too_little_support():
    # Newton: no contact force means nothing balances gravity.
    data, path = landing_mapping()
    for frame in ("foot_rl", "foot_rr"):
        data["stance"]["schedule"][frame] = [{"window": [0.0, 0.4]}, {"window": [1.5, 4.0]}]
    data["stance"]["schedule"]["foot_fr"] = [{"window": [0.0, 0.4]}, {"window": [1.5, 4.0]}]
    findings = [f for f in run_checks(task_from_mapping(data, path)) if f.check == "support"]
    assert findings and findings[0].impossible
    assert "from 0.50 s to 1.40 s only no contact" in findings[0].what


def test_a_swing_faster_than_the_legs_can_move_is_refused():
    # Bound: the foot travels at least |goal - start| = hypot(0.40, 0.12) m (onto the landing); the leg moves it at most
    # sum_i w_i r_i (joint speed limits times chain lengths, from the robot file), i.e.
    # 17.2 m/s on the demo robot, so a 0.01 s swing is too short.
    data, path = landing_mapping()
    data["stance"]["schedule"]["foot_fl"] = [{"window": [0.0, 0.6]},
                                             {"window": [0.61, 4.0], "xy": [0.66, 0.19]}]
    findings = [f for f in run_checks(task_from_mapping(data, path)) if f.check == "swing time"]
    assert findings and findings[0].impossible
    assert "stance.schedule.foot_fl[1]" in findings[0].what
    assert findings[0].shortfall == pytest.approx(np.hypot(0.40, 0.12) / 17.2 - 0.01, rel=1e-3)


def test_export_flags_every_sample_with_its_step_and_keeps_swing_forces_at_zero():
    # Reference: the plan file's own contact_active (docs/plan-files.md) and the export rule
    # (docs/export.md): a sample between knots k and k + 1 carries knot k's stance flags, and
    # a contact out of stance pushes with nothing.
    _, plan = stepping_plan("landing_pick", "robust")
    trajectory = resample(plan, 50.0)
    step = np.clip(np.searchsorted(plan.t, trajectory.t + 1e-9, side="right") - 1, 0, len(plan.t) - 1)
    assert np.array_equal(trajectory.contact_active, plan.contact_active[step])
    assert (~trajectory.contact_active).any()
    assert np.all(trajectory.contact_forces[~trajectory.contact_active] == 0.0)
    assert np.all(trajectory.gain_force[~trajectory.contact_active] == 0.0)


def test_load_ramp_rows_sit_within_the_ramp_time_of_each_swing():
    # Hand arithmetic from the task file: landing_pick at 60 knots steps every 4 / 59 = 0.0678 s, so a
    # 0.4 s ramp holds 5 knot steps (5 x 0.0678 = 0.339 s < 0.4 <= 6 x 0.0678); each of its two swings
    # gets rows at the 5 loaded knots before its lift-off knot and the 5 from its touchdown on.
    task = load_task("tasks/landing_pick.yaml")
    assert task.schedule.load_ramp == pytest.approx(0.4) and task.knots == 60
    swings, caps = task.schedule.swings(task.times), task.schedule.load_caps(task.times)
    expected = set()
    for swing in swings:
        expected |= {(swing.contact, swing.lift - s, s) for s in range(1, 6)}
        expected |= {(swing.contact, swing.touch - 1 + s, s) for s in range(1, 6)}
    assert set(caps) == expected


def test_a_load_ramp_caps_a_stepping_foots_normal_force():
    # Reference: the plan file's own forces along the surface normal (+z: floor and landing top in the
    # task file; plain arithmetic), the robot's weight by Pinocchio (computeTotalMass times |g|).
    # landing_pick at 20 knots (a 0.21 s step) with a 1 s ramp: each stepping foot carries at most its
    # floor plus steps x 0.21 / 1 of the weight within 4 steps of its lift-off and touchdown knots;
    # without the ramp the torque plan carries more at one of those knots at least (the check can fail).
    ramp = 1.0
    ramped_task = with_load_ramp(load_task("tasks/landing_pick.yaml").with_knots(20), ramp)
    weight = pin.computeTotalMass(ramped_task.robot.model) * 9.81
    caps = ramped_task.schedule.load_caps(ramped_task.times)
    assert caps and max(s for _, _, s in caps) == 4
    step = ramped_task.times[1] - ramped_task.times[0]
    up = np.array([0.0, 0.0, 1.0])
    floor = [max(c.min_normal_force, c.preload) for c in ramped_task.contacts]

    def excess(plan):
        return max(plan.contact_forces[k, c] @ up - (floor[c] + weight * s * step / ramp) for c, k, s in caps)

    with Planner() as planner:
        ramped = planner.solve_from_seed(planner.seed(ramped_task), "torque")
        free_task = with_load_ramp(ramped_task, 0.0)
        free = planner.solve_from_seed(planner.seed(free_task), "torque")
    assert ramped.success and free.success
    assert excess(ramped.plan) <= 1e-6 * weight
    assert excess(free.plan) > 0.02 * weight, excess(free.plan)


def with_load_ramp(task, ramp: float):
    """``task`` with its schedule's load ramp set to ``ramp`` [s] (the structure follows)."""
    return dataclasses.replace(task, schedule=dataclasses.replace(task.schedule, load_ramp=ramp))
