"""brace sweep: one small sweep on the local pool and on a Dask LocalCluster, resume after a kill, bad input.

Solves are kept few and tiny (4 knots; the engine sweep has five solvable
variants of the torque objective and one that cannot stand; the resume
sweep uses the feasibility objective only). The robust objective runs in
the demo sweep and the benchmark, not here.
"""
from __future__ import annotations

import contextlib
import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pinocchio as pin
import psutil
import pytest
import yaml

from page_refs import PageRefs
from optimizer.cli import main
from optimizer.planfile import load_plan
from optimizer.sweep import store

ROOT = Path(__file__).resolve().parents[1]
RAMP = ROOT / "tasks" / "steep_ramp.yaml"
STEEP, SLIPPERY = 22.0, 0.15     # tan(22 deg) = 0.40 > 0.15: that variant cannot stand


def write_sweep(folder: Path, **fields) -> Path:
    data = {"task": str(RAMP), "knots": 4, "time_limit_s": 300, "warm_start": "none",
            "axes": {"slope_deg": {"field": "stance.terrain.slope_deg"},
                     "friction": {"field": "stance.terrain.friction"}}}
    data.update(fields)
    path = folder / "sweep.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


SMALL_SWEEP = dict(objectives=["torque"], combinations=[
    {"slope_deg": 14.0, "friction": 0.75}, {"slope_deg": 18.0, "friction": 0.75}, {"slope_deg": 22.0, "friction": 0.75},
    {"slope_deg": 14.0, "friction": 0.9}, {"slope_deg": STEEP, "friction": SLIPPERY}, {"slope_deg": 18.0, "friction": 0.9},
])


def summary_rows(out: Path) -> list[dict]:
    return store.read_summary(out / "summary.csv")


@pytest.fixture(scope="module")
def pool_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("pool")
    sweep = write_sweep(folder, **SMALL_SWEEP)
    code = main(["sweep", str(sweep), "--out", str(folder / "out"), "--workers", "2", "--quiet"])
    return code, folder / "out"


@pytest.mark.slow
def test_local_pool_solves_every_variant_and_records_the_impossible_one(pool_run):
    code, out = pool_run
    assert code == 0
    rows = summary_rows(out)
    assert [r["variant"] for r in rows] == [f"v000{i}" for i in range(1, 7)]
    for row in rows:
        if float(row["friction"]) == SLIPPERY:
            assert row["status"] == "failed" and row["plan"] == ""
            # Textbook inclined plane: a body at rest on a slope of angle theta needs mu >= tan(theta).
            needed = float(row["reason"].split("mu >= ")[1].split()[0])
            assert needed == pytest.approx(math.tan(math.radians(STEEP)), abs=0.01), row["reason"]
            continue
        assert row["status"] == "solved", row
        # The planned margin is a sound lower bound of the exact figure (certified linear response <= exact).
        assert float(row["margin_min_planned_N"]) <= float(row["margin_min_exact_N"]) * (1 + 1e-4) + 1e-6
        plan = load_plan(out / row["plan"])
        # Low-margin knots are those under 5 % of m g (m from Pinocchio's total mass of the plan's URDF).
        model = pin.buildModelFromXML(plan.meta["urdf"], pin.JointModelFreeFlyer())
        level = 0.05 * pin.computeTotalMass(model) * np.linalg.norm(plan.meta["gravity"])
        assert (int(row["low_margin_knots"]) > 0) == (float(row["margin_min_exact_N"]) < level)
        assert row["requirement_met"] in ("True", "true", "1")
        # Coulomb's law, recomputed here from the plan file alone: |f_t| <= mu f_n at every foot and knot.
        normals = np.array(plan.meta["contact_normals"])
        f_n = np.einsum("knj,nj->kn", plan.contact_forces, normals)
        f_t = np.linalg.norm(plan.contact_forces - f_n[..., None] * normals, axis=-1)
        use = f_t / (float(row["friction"]) * f_n)
        assert use.max() == pytest.approx(float(row["peak_friction_use"]), rel=1e-4) and use.max() <= 1.0
        assert plan.meta["friction"] == [float(row["friction"])] * 4
        # The slope reached the plan: each foot's normal tilts by the ramp angle (cos = n . z).
        tilt = math.degrees(math.acos(normals[0, 2]))
        assert tilt == pytest.approx(float(row["slope_deg"]), abs=1e-9)
    assert sorted(os.listdir(out / "figures")) == ["margin_friction.png", "margin_map.png",
                                                   "margin_slope_deg.png", "solved_share.png"]


@pytest.mark.slow
def test_dask_cluster_on_loopback_gives_the_same_rows(pool_run, tmp_path):
    distributed = pytest.importorskip("distributed")
    psutil = pytest.importorskip("psutil")
    _, pool_out = pool_run
    sweep = write_sweep(tmp_path, **SMALL_SWEEP)
    import dask

    with dask.config.set({"temporary-directory": str(tmp_path / "dask")}), \
            distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                     local_directory=str(tmp_path / "dask"),
                                     dashboard_address="127.0.0.1:0", worker_dashboard_address=None) as cluster:
        pids = [os.getpid()] + [p.pid for p in psutil.Process().children(recursive=True)]
        listening = [c.laddr.ip for pid in pids for c in psutil.Process(pid).net_connections("inet")
                     if c.status == psutil.CONN_LISTEN]
        assert listening and set(listening) == {"127.0.0.1"}, listening   # nothing reachable from elsewhere
        code = main(["sweep", str(sweep), "--out", str(tmp_path / "out"), "--scheduler",
                     cluster.scheduler_address, "--quiet"])
    assert code == 0
    here, there = summary_rows(tmp_path / "out"), summary_rows(pool_out)
    assert [(r["variant"], r["status"]) for r in here] == [(r["variant"], r["status"]) for r in there]
    for a, b in zip(here, there):
        for column in ("margin_min_planned_N", "margin_mean_planned_N", "margin_min_exact_N", "margin_mean_exact_N"):
            if a["status"] == "solved":  # same NLP, same start: equal within Ipopt's tolerance (tol 1e-6)
                assert float(a[column]) == pytest.approx(float(b[column]), rel=1e-4, abs=1e-3), (a["variant"], column)


@pytest.mark.slow
def test_report_rebuilds_summary_and_figures_from_the_folder(pool_run, tmp_path):
    import shutil

    _, pool_out = pool_run
    copy = tmp_path / "copy"
    shutil.copytree(pool_out, copy)
    before = (copy / "summary.csv").read_text()
    shutil.rmtree(copy / "figures")
    (copy / "summary.csv").unlink()
    (copy / "report.html").unlink()
    assert main(["sweep", "--report", str(copy)]) == 0
    assert (copy / "summary.csv").read_text() == before
    assert len(list((copy / "figures").glob("*.png"))) == 4
    # The page, parsed with the standard library's HTML parser: every referenced file is in the folder,
    # nothing is fetched from elsewhere, and every stored result has its row.
    page = (copy / "report.html").read_text()
    refs = PageRefs()
    refs.feed(page)
    assert refs.images and all((copy / src).is_file() for src in refs.images + refs.links)
    assert not [r for r in refs.images + refs.links if "://" in r]
    assert refs.rows == 1 + len(summary_rows(copy)) and "Safety" in page


# ---------------------------------------------------------------- resume after a crash


def _start(sweep: Path, out: Path, tmpdir: Path | None = None) -> subprocess.Popen:
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", MPLBACKEND="Agg", PYTHONPATH=str(ROOT))
    if tmpdir is not None:
        tmpdir.mkdir(exist_ok=True)
        env["TMPDIR"] = str(tmpdir)
    # A terminal's Ctrl-C reaches a process whose SIGINT is at its default; an ignored SIGINT would be
    # inherited from the test process (some tools ignore it), so the child starts with the default.
    return subprocess.Popen([sys.executable, "-m", "optimizer", "sweep", str(sweep), "--out", str(out),
                             "--workers", "1"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env,
                            start_new_session=True, preexec_fn=_default_sigint)


def _default_sigint() -> None:
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def _wait_for_records(out: Path, count: int, process, limit: float = 300.0) -> int:
    deadline = time.monotonic() + limit
    while time.monotonic() < deadline and process.poll() is None:
        found = len(list((out / "results").glob("v*.json"))) if (out / "results").is_dir() else 0
        if found >= count:
            return found
        time.sleep(0.02)
    raise AssertionError(f"no {count} records before the process ended: {process.communicate()}")


@pytest.mark.slow
def test_interrupt_then_kill_then_resume_solves_each_variant_once(tmp_path):
    slopes = [10.0, 12.0, 14.0, 16.0, 18.0, 20.0, 22.0, 24.0]
    sweep = write_sweep(tmp_path, objectives=["feasible"], grid={"slope_deg": slopes, "friction": [0.8]})
    out = tmp_path / "out"
    # Ctrl-C, as a terminal sends it to the whole process group: exit 130, summary of what finished.
    first = _start(sweep, out)
    _wait_for_records(out, 1, first)
    os.killpg(first.pid, signal.SIGINT)
    _, err = first.communicate(timeout=120)
    assert first.returncode == 130, err
    stored = sorted(p.stem for p in (out / "results").glob("v*.json"))
    assert len(stored) < len(slopes), "the sweep finished before the interrupt; the test proves nothing"
    assert [f"{r['variant']}-{r['objective']}" for r in summary_rows(out)] == stored
    # SIGKILL of the supervisor, the coordinator and its workers: nothing runs any cleanup (so this run
    # gets a temporary folder of its own: the supervisor's run folder is left behind by design).
    second = _start(sweep, out, tmp_path / "killed-tmp")
    _wait_for_records(out, len(stored) + 1, second)
    everything = psutil.Process(second.pid).children(recursive=True)
    os.killpg(second.pid, signal.SIGKILL)
    for process in everything:
        with contextlib.suppress(psutil.NoSuchProcess):
            process.kill()
    second.communicate(timeout=60)
    killed_with = len(list((out / "results").glob("v*.json")))
    assert killed_with < len(slopes), "the sweep finished before the kill; the test proves nothing"
    third = _start(sweep, out)
    output, err = third.communicate(timeout=600)
    assert third.returncode == 0, err
    assert f"({killed_with} from earlier runs)" in output
    rows = summary_rows(out)
    assert sorted(float(r["slope_deg"]) for r in rows) == slopes            # every variant exactly once
    # Each variant ends with an outcome: a plan, or a recorded reason (a steep ramp variant may fail its
    # feasibility stage at 4 knots once the gripper must keep clear of the slope).
    assert all(r["status"] == "solved" or (r["status"] == "failed" and r["reason"]) for r in rows), rows
    assert sum(r["status"] == "solved" for r in rows) >= len(slopes) - 2
    for folder in ("results", "plans"):
        assert not [p.name for p in (out / folder).iterdir() if p.name.startswith(".")]   # no partial files
    for row in rows:
        if row["status"] == "solved":
            load_plan(out / row["plan"])                                      # every plan complete and valid



def test_a_changed_sweep_file_is_refused_not_mixed_in(tmp_path, capsys):
    from optimizer.sweep.spec import load_sweep

    first = load_sweep(write_sweep(tmp_path, objectives=["feasible"], grid={"slope_deg": [10.0], "friction": [0.8]}))
    store.open_results(tmp_path / "out", first)
    write_sweep(tmp_path, objectives=["feasible"], grid={"slope_deg": [10.0], "friction": [0.7]})
    assert main(["sweep", str(tmp_path / "sweep.yaml"), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert "different sweep (changed: grid.friction)" in err and err.count("\n") == 1
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == ["plans", "results", "sweep.json"]


# ---------------------------------------------------------------- sweep files and model quantities


@pytest.mark.parametrize("change, field", [
    ({"axes": {"slope_deg": {"field": "stance.terrain.slope"}}}, "axes.slope_deg.field"),
    ({"axes": {"slope_deg": {"field": "stance.terrain.slope_deg", "model": "torque_scale"}}}, "axes.slope_deg.field"),
    ({"grid": {"slope_deg": [10, "steep"]}}, "grid.slope_deg[1]"),
    ({"grid": {"slope_deg": [10]}, "samples": {"count": 3, "seed": 1, "ranges": {"slope_deg": [5, 9]}}}, "grid"),
    ({"objectives": ["robust", "fastest"]}, "objectives[1]"),
    ({"samples": {"count": 3, "seed": 1, "ranges": {"slope_deg": [9, 5]}}, "grid": None}, "samples.ranges.slope_deg"),
])
def test_bad_sweep_files_get_one_line_naming_the_field(tmp_path, capsys, change, field):
    data = {"task": str(RAMP), "objectives": ["robust"], "axes": {"slope_deg": {"field": "stance.terrain.slope_deg"}},
            "grid": {"slope_deg": [10, 20]}}
    data.update(change)
    data = {k: v for k, v in data.items() if v is not None}
    path = tmp_path / "bad.yaml"
    path.write_text(yaml.safe_dump(data), encoding="utf-8")
    assert main(["sweep", str(path), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and f"bad.yaml: field '{field}': expected" in err, err
    assert not (tmp_path / "out").exists()


def test_seeded_samples_repeat_and_stay_in_range(tmp_path):
    from optimizer.sweep.spec import load_sweep

    ranges = {"slope_deg": [5.0, 25.0], "friction": [0.6, 1.1]}
    first = load_sweep(write_sweep(tmp_path, objectives=["robust"], samples={"count": 40, "seed": 3, "ranges": ranges}))
    again = load_sweep(write_sweep(tmp_path, objectives=["robust"], samples={"count": 40, "seed": 3, "ranges": ranges}))
    other = load_sweep(write_sweep(tmp_path, objectives=["robust"], samples={"count": 40, "seed": 4, "ranges": ranges}))
    values = np.array([[v.values["slope_deg"], v.values["friction"]] for v in first.variants])
    assert [v.values for v in first.variants] == [v.values for v in again.variants]
    assert [v.values for v in first.variants] != [v.values for v in other.variants]
    assert (values[:, 0] >= 5).all() and (values[:, 0] <= 25).all() and (values[:, 1] >= 0.6).all()
    # NumPy's PCG64 stream with that seed, drawn here directly: the sweep adds nothing of its own.
    expected = 5.0 + 20.0 * np.random.default_rng(3).uniform(size=(40, 2))[:, 0]
    assert values[:, 0] == pytest.approx(expected)


def test_payload_at_the_hand_adds_its_weight_at_the_hand(tmp_path):
    from optimizer.problem.task import load_task
    from optimizer.robot.derived import with_payload, with_torque_scale

    robot = load_task(RAMP).robot
    heavier = with_payload(robot, 2.5)
    q = robot.standing_posture
    zero = np.zeros(robot.nv)
    # Statics (virtual work): a point mass m at the hand adds J_hand^T (0, 0, m g) to the gravity torques.
    frame = robot.model.getFrameId(robot.hand_frame)
    data = robot.model.createData()
    pin.computeJointJacobians(robot.model, data, q)
    pin.updateFramePlacements(robot.model, data)
    jac = pin.getFrameJacobian(robot.model, data, frame, pin.LOCAL_WORLD_ALIGNED)[:3]
    expected = jac.T @ (2.5 * -robot.model.gravity.linear)
    added = pin.rnea(heavier.model, heavier.model.createData(), q, zero, zero) - \
        pin.rnea(robot.model, robot.model.createData(), q, zero, zero)
    assert added == pytest.approx(expected, abs=1e-9)
    assert heavier.mass == pytest.approx(robot.mass + 2.5)
    assert heavier.urdf_text != robot.urdf_text       # the plan file carries the payload
    weaker = with_torque_scale(robot, 0.8)
    assert weaker.torque_upper == pytest.approx(0.8 * robot.torque_upper)
    assert weaker.torque_lower == pytest.approx(0.8 * robot.torque_lower)


def test_the_demo_sweep_file_is_valid():
    from optimizer.sweep.spec import load_sweep

    demo = load_sweep(ROOT / "tasks" / "sweeps" / "ramp.yaml")
    assert demo.task_path == RAMP.resolve() and demo.objectives == ["robust", "torque"]
    assert len(demo.variants) == 20 and demo.variants[0].values == {"slope_deg": 10.0, "friction": 0.55}
