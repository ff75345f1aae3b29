"""``brace compare`` and ``brace report`` on the demo tasks, checked from outside.

Each task is compared once per module at the knot count of the demo-task
solve tests, and the solves themselves are shared with those tests (the same
task file, objective and knot count give the same plan): the command runs
for real, only a solve already made in this session is not made twice. The
table's numbers are recomputed here from the plan files with NumPy alone
and from an independent certification; the friction use against the
textbook form of a four-facet pyramid (|f.t1|, |f.t2| <= (mu / sqrt 2) f.n);
the images' pixel sizes with Pillow; the page's references with Python's
HTML parser; the page itself in headless Chromium (skipped only when no
browser can be had).
"""
from __future__ import annotations

import contextlib
import csv
import html
import io
import json
import math
import os
import shutil
from pathlib import Path

import numpy as np
import pinocchio as pin
import pytest
from PIL import Image

import optimizer.cli.compare as compare_cli
import optimizer.planner as planner
import test_solve_demo_tasks as demo
from browser import Browser, find_browser
from page_refs import PageRefs
from optimizer.analysis import margin_flags
from optimizer.analysis.certify import certify_plan
from optimizer.cli import main
from optimizer.planfile import load_plan
from optimizer.report import figures, motion
from optimizer.report.build import KEYFRAMES, MOVIE, PAGE, SUMMARY, comparison_files

KNOTS = demo.KNOTS   # the demo-task solve tests' knot count: their solves are reused
FRAMES = 2           # animation frames in tests
# One task per kind of terrain drawing the report must handle: a ceiling above a floor, blocks,
# an inclined plane (the trench's walls are inclined planes too, drawn like the ramp).
OBJECTIVES = {
    "crawl_space": ["feasible", "robust", "robust-min", "torque"],
    "stair_landing": ["robust", "torque"],
    "steep_ramp": ["robust", "torque"],
}
_RUNS: dict = {}


def run_cli(argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


REAL_PLANNED = compare_cli.planned


@pytest.fixture(scope="module", autouse=True)
def shared_demo_solves():
    """``brace compare``'s solves of demo tasks at KNOTS taken from the demo-task tests' session cache."""
    tasks = Path("tasks").resolve()

    def planned(task, objectives):
        stem = Path(task.path).stem
        if task.knots == KNOTS and stem in demo.TASKS and Path(task.path).resolve() == tasks / f"{stem}.yaml":
            for objective in objectives:
                yield objective, demo.solved(stem, objective)[1], 0.0
        else:
            yield from REAL_PLANNED(task, objectives)

    patch = pytest.MonkeyPatch()
    patch.setattr(compare_cli, "planned", planned)
    yield
    patch.undo()


@pytest.fixture(scope="module")
def workspace(tmp_path_factory):
    return tmp_path_factory.mktemp("compare")


def compared(task: str, workspace: Path):
    """(exit code, output folder, stdout) of ``brace compare`` on ``task``, run once per module."""
    if task not in _RUNS:
        out = workspace / task
        code, stdout, stderr = run_cli(["compare", f"tasks/{task}.yaml", "--knots", str(KNOTS), "--frames",
                                        str(FRAMES), "--objectives", ",".join(OBJECTIVES[task]), "--out", str(out)])
        _RUNS[task] = (code, out, stdout, stderr)
    return _RUNS[task]


def summary_rows(folder: Path) -> list[dict]:
    with open(folder / SUMMARY, newline="", encoding="utf-8") as stream:
        return list(csv.DictReader(stream))


@pytest.mark.parametrize("task", list(OBJECTIVES))
def test_compare_writes_every_file_with_expected_sizes(task, workspace):
    code, out, stdout, stderr = compared(task, workspace)
    assert code in (0, 1), stderr
    rows = summary_rows(out)
    assert [r["objective"] for r in rows] == OBJECTIVES[task]
    # exit code 0 exactly when every objective was planned and certified
    assert (code == 0) == all(r["status"] == "certified" for r in rows), stdout
    expected = comparison_files() + [PAGE] + [f"{o}.npz" for o in OBJECTIVES[task]]
    for name in expected:
        assert (out / name).is_file() and (out / name).stat().st_size > 0, name
    assert not [p.name for p in out.parent.iterdir() if p.name.startswith(f".{task}.")], "staging folder left"
    for name in figures.FIGURES:
        with Image.open(out / f"{name}.png") as image:   # Pillow reads the PNG header
            assert image.size == figures.pixel_size(name), name
            assert len(set(image.convert("L").get_flattened_data())) > 20, f"{name}.png looks blank"
        assert (out / f"{name}.svg").read_text(encoding="utf-8").lstrip().startswith("<?xml")
    entries_count = len(OBJECTIVES[task])
    columns = len(motion.key_knots(_FakeEntry(load_plan(out / f"{OBJECTIVES[task][0]}.npz")))) + 1
    with Image.open(out / KEYFRAMES) as strip:
        side = motion.PANEL_INCHES * 100
        assert strip.size == (round(side * columns), round(side * entries_count))
    with Image.open(out / MOVIE) as movie:
        assert movie.n_frames == FRAMES
        side = round(motion.MOVIE_PANEL_INCHES * motion.MOVIE_DPI)
        assert movie.size == (side * entries_count, side)


class _FakeEntry:
    def __init__(self, plan):
        self.plan = plan


def four_facet_friction_use(forces, normals, tangents, mu):
    """max(|f.t1|, |f.t2|) / ((mu / sqrt 2) f.n): textbook four-facet inscribed pyramid (Coulomb)."""
    n = np.einsum("kci,ci->kc", forces, normals)
    t1 = np.abs(np.einsum("kci,ci->kc", forces, tangents[:, 0]))
    t2 = np.abs(np.einsum("kci,ci->kc", forces, tangents[:, 1]))
    return np.maximum(t1, t2) / (mu / math.sqrt(2.0) * n)


@pytest.mark.parametrize("task", list(OBJECTIVES))
def test_table_numbers_equal_plan_files_and_certification(task, workspace):
    _, out, stdout, _ = compared(task, workspace)
    for r in summary_rows(out):
        archive = np.load(out / f"{r['objective']}.npz")          # NumPy alone, no brace reader
        meta = json.loads(str(archive["meta"]))
        margin = archive["margin"]
        assert float(r["margin_planned_min_N"]) == pytest.approx(margin.min(), rel=1e-12)
        assert float(r["margin_planned_mean_N"]) == pytest.approx(margin.mean(), rel=1e-12)
        exact = certify_plan(load_plan(out / f"{r['objective']}.npz"))   # an independent certification run
        rho = np.array([c.rho for c in exact.knots])
        assert float(r["margin_exact_min_N"]) == pytest.approx(rho.min(), rel=1e-9, abs=1e-9)
        assert float(r["margin_exact_mean_N"]) == pytest.approx(rho.mean(), rel=1e-9, abs=1e-9)
        assert float(r["smallest_at_s"]) == pytest.approx(archive["t"][int(np.argmin(rho))])
        assert (r["status"] == "certified") == (not exact.problems())
        tau = archive["tau"]
        upper = np.array(meta["torque_limits"]["upper"], float)
        lower = np.array(meta["torque_limits"]["lower"], float)
        use = np.abs(tau) / np.where(tau >= 0, upper, -lower)
        k, j = np.unravel_index(np.argmax(use), use.shape)
        assert float(r["peak_torque_use_pct"]) == pytest.approx(100 * use[k, j], rel=1e-9)
        assert r["peak_torque_joint"] == meta["joint_names"][j]
        friction = four_facet_friction_use(archive["contact_forces"], np.array(meta["contact_normals"]),
                                           np.array(meta["friction_pyramid"]["tangents"]),
                                           np.array(meta["friction"]))
        k, c = np.unravel_index(np.argmax(friction), friction.shape)
        assert float(r["peak_friction_use_pct"]) == pytest.approx(100 * friction[k, c], rel=1e-9)
        assert r["peak_friction_contact"] == meta["contact_frames"][c]
        assert friction.max() <= 1.0 + 1e-6       # a solved plan keeps every force inside its pyramid
        assert int(r["iterations"]) == meta["solver"]["iterations"]
        assert float(r["solve_time_s"]) == pytest.approx(meta["solver"]["wall_time"])
        # the printed table shows the same numbers, rounded
        line = next(x for x in reversed(stdout.splitlines()) if x.split() and x.split()[0] == r["objective"])
        assert f"{float(r['margin_exact_min_N']):.2f}" in line and r["peak_torque_joint"] in line


@pytest.mark.parametrize("task", list(OBJECTIVES))
def test_page_references_every_file_and_only_local_ones(task, workspace):
    _, out, _, _ = compared(task, workspace)
    parser = PageRefs()
    parser.feed((out / PAGE).read_text(encoding="utf-8"))
    for ref in parser.images + parser.links:
        assert "://" not in ref and not ref.startswith("//"), f"non-local reference {ref}"
        assert (out / ref).is_file(), f"{ref} referenced but missing"
    referenced = set(parser.images) | set(parser.links)
    for name in comparison_files():
        assert name in referenced, f"{name} not on the page"
    for name in figures.FIGURES:
        assert f"{name}.png" in parser.images
    assert {KEYFRAMES, MOVIE} <= set(parser.images)
    rows = summary_rows(out)
    shown = [text for key, text in parser.cells if key == "margin_exact_min_N"]
    assert shown == [f"{float(r['margin_exact_min_N']):.2f}" for r in rows]


@pytest.fixture(scope="module")
def browser():
    path = find_browser()
    if path is None:
        pytest.skip("no Chromium-family browser installed (apt-get install chromium); .ci/run installs it")
    with Browser(path) as session:
        yield session


def test_page_loads_in_headless_chromium(workspace, browser):
    _, out, _, _ = compared("crawl_space", workspace)
    shot = out / "screenshot.png"
    seen = browser.load(out / PAGE, shot)
    assert seen["errors"] == []
    assert len(seen["images"]) == len(figures.FIGURES) + 2
    for src, width, height, complete in seen["images"]:
        assert complete and width > 0 and height > 0, src
        with Image.open(out / src) as image:
            assert (width, height) == image.size, src
    with Image.open(shot) as image:
        assert image.size[0] == 1280 and image.size[1] > 2000
    print(f"screenshot: {shot}")
    if os.environ.get("BRACE_SCREENSHOT"):     # keep a copy where a person can look at it
        shutil.copy(shot, os.environ["BRACE_SCREENSHOT"])


def test_browser_check_sees_a_broken_page(tmp_path, browser):
    # The browser check must be able to fail: a missing image and a console error are reported.
    page = tmp_path / "broken.html"
    page.write_text('<!DOCTYPE html><html><head><link rel="icon" href="data:,"></head><body>'
                    '<img src="missing.png"><script>console.error("boom")</script></body></html>')
    seen = browser.load(page, tmp_path / "shot.png")
    assert seen["images"][0][1] == 0
    assert any("boom" in e for e in seen["errors"])


def test_report_from_plan_files_of_two_tasks(workspace, tmp_path):
    ramp, crawl = compared("steep_ramp", workspace)[1], compared("crawl_space", workspace)[1]
    plans = [str(ramp / "torque.npz"), str(ramp / "robust.npz"), str(crawl / "robust.npz")]
    code, stdout, stderr = run_cli(["report", *plans, "--out", str(tmp_path / "both"), "--frames", "2"])
    assert code in (0, 1), stderr
    page = (tmp_path / "both" / PAGE).read_text(encoding="utf-8")
    assert page.index("steep_ramp") < page.index("crawl_space")   # one section after the other
    parser = PageRefs()
    parser.feed(page)
    for ref in parser.images + parser.links:
        assert (tmp_path / "both" / ref).is_file(), ref
    for task in ("steep_ramp", "crawl_space"):
        for name in comparison_files():
            assert (tmp_path / "both" / task / name).is_file(), (task, name)
    rows = summary_rows(tmp_path / "both" / "steep_ramp")
    assert [r["objective"] for r in rows] == ["robust", "torque"]   # usual objective order
    assert rows == summary_rows(ramp)                                # same numbers as compare's table


def test_failed_objective_is_a_row_with_its_reason(monkeypatch, tmp_path):
    # The real planning path (one seed, each objective from it), with robust-min made to fail.
    real = planner.Planner.solve_from_seed

    def solve_from_seed(self, seed, objective=None, **options):
        if objective == "robust-min":
            stage = planner.StageReport("robust-min", "iteration-limit", False, 600, 1.0, 0.0, 1e-2,
                                        "Maximum_Iterations_Exceeded")
            return planner.SolveOutcome(seed.task, objective, None, stages=[*seed.outcome.stages, stage])
        return real(self, seed, objective, **options)

    monkeypatch.setattr(compare_cli, "planned", REAL_PLANNED)
    monkeypatch.setattr(planner.Planner, "solve_from_seed", solve_from_seed)
    out = tmp_path / "cmp"
    code, stdout, _ = run_cli(["compare", "tasks/steep_ramp.yaml", "--knots", str(KNOTS), "--objectives",
                               "robust-min,feasible", "--frames", "2", "--out", str(out)])
    assert code == 1
    rows = summary_rows(out)
    assert rows[0]["status"].startswith("failed:") and "iteration-limit" in rows[0]["status"]
    assert rows[0]["margin_exact_min_N"] == ""
    assert rows[1]["status"] in ("certified", "NOT certified") and float(rows[1]["margin_exact_min_N"]) >= 0
    assert not (out / "robust-min.npz").exists() and (out / "feasible.npz").is_file()
    assert "iteration-limit" in (out / PAGE).read_text(encoding="utf-8")
    assert "FAILED" in stdout


def test_interrupted_compare_writes_nothing(monkeypatch, tmp_path):
    real = planner.Planner.solve_from_seed

    def solve_from_seed(self, seed, objective=None, **options):
        if objective == "torque":
            raise KeyboardInterrupt
        return real(self, seed, objective, **options)

    monkeypatch.setattr(compare_cli, "planned", REAL_PLANNED)
    monkeypatch.setattr(planner.Planner, "solve_from_seed", solve_from_seed)
    out = tmp_path / "cmp"
    code, stdout, stderr = run_cli(["compare", "tasks/steep_ramp.yaml", "--knots", str(KNOTS), "--objectives",
                                    "feasible,torque", "--out", str(out)])
    assert "feasible" in stdout and "planned" in stdout       # a plan was made before the interrupt
    assert code == 130 and "interrupted" in stderr
    assert not out.exists() or not any(out.iterdir())
    assert not any(p.name.startswith(".cmp.") for p in tmp_path.iterdir())


@pytest.mark.parametrize("argv, field", [
    (["--objectives", "robust,fastest"], "--objectives"),
    (["--knots", "1"], "--knots"),
    (["--frames", "1"], "--frames"),
])
def test_compare_bad_options_are_one_line_errors(argv, field, tmp_path):
    code, _, stderr = run_cli(["compare", "tasks/steep_ramp.yaml", *argv, "--out", str(tmp_path / "x")])
    assert code == 2 and field in stderr and len(stderr.strip().splitlines()) == 1
    assert not (tmp_path / "x").exists()


def test_report_bad_input_is_a_one_line_error(tmp_path):
    not_a_plan = tmp_path / "notes.npz"
    not_a_plan.write_text("not a plan")
    code, _, stderr = run_cli(["report", str(not_a_plan), "--out", str(tmp_path / "r")])
    assert code == 2 and "notes.npz" in stderr and len(stderr.strip().splitlines()) == 1
    occupied = tmp_path / "file"
    occupied.write_text("x")
    code, _, stderr = run_cli(["report", str(not_a_plan), "--out", str(occupied)])
    assert code == 2 and "--out" in stderr and len(stderr.strip().splitlines()) == 1
    assert not (tmp_path / "r").exists()


def test_low_margins_are_flagged_in_the_terminal_and_on_the_page(workspace, tmp_path, monkeypatch):
    # A plan is flagged exactly where its exact figure is under the warning level (a fraction of m g,
    # m from Pinocchio's total mass of the plan's URDF): checked on the comparison as it is, then with the
    # level raised above every margin (every plan flagged) and lowered to zero (none flagged).
    code, out, stdout, _ = compared("crawl_space", workspace)
    names = OBJECTIVES["crawl_space"]
    plans = {name: load_plan(out / f"{name}.npz") for name in names}
    meta = plans[names[0]].meta
    model = pin.buildModelFromXML(meta["urdf"], pin.JointModelFreeFlyer())
    weight = pin.computeTotalMass(model) * np.linalg.norm(meta["gravity"])
    smallest = {name: min(c.rho for c in certify_plan(plan).knots) for name, plan in plans.items()}
    page = (out / PAGE).read_text(encoding="utf-8")
    for name in names:
        low = smallest[name] < margin_flags.DEFAULT_WARN_FRACTION * weight
        assert (f"{name}:\n  !! LOW MARGIN" in stdout) == low, (name, smallest[name])
        assert (f"low margin</span> for {_html_name(name)}:" in page) == low, name
    files = [str(out / f"{name}.npz") for name in names]
    for fraction, flagged in ((1.0, True), (0.0, False)):
        monkeypatch.setattr(margin_flags, "DEFAULT_WARN_FRACTION", fraction)
        code, text, err = run_cli(["report", *files, "--out", str(tmp_path / f"at-{fraction}"), "--frames", "2"])
        assert code in (0, 1), err
        for name in names:
            assert (f"{name}:\n  !! LOW MARGIN" in text) == flagged, (fraction, name)


def _html_name(name: str) -> str:
    return html.escape(name, quote=True)
