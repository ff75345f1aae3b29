"""``brace certify``: table, summary, JSON, replay, exit codes and input errors."""
import io
import json
import math
import re

import numpy as np
import pytest

from certify_checks import demo_standing, least_squares_margin, standing_plan
from optimizer.cli import main
from optimizer.cli.certify import ProgressLine, parse_knots
from optimizer.planfile import save_plan


@pytest.fixture(scope="module")
def plan_path(tmp_path_factory):
    path = tmp_path_factory.mktemp("plans") / "stand.npz"
    save_plan(standing_plan(**demo_standing(sweep=0.6, knots=4)), path)
    return path


def test_table_summary_and_json(plan_path, tmp_path, capsys):
    out = tmp_path / "cert.json"
    assert main(["certify", str(plan_path), "--json", str(out)]) == 0
    text = capsys.readouterr().out
    assert "exact [N]" in text and "planned/exact" in text and "weakest direction (world)" in text
    assert "smallest exact margin:" in text and "most frequent bottleneck:" in text
    assert "result: certified" in text
    doc = json.loads(out.read_text())
    assert doc["plan"] == str(plan_path) and doc["format"] == "brace-certificate/2"
    assert doc["certified"] is True and doc["problems"] == [] and len(doc["points"]) == 1
    point = doc["points"][0]
    assert point["disturbance"]["index"] == 0
    knots = point["knots"]
    assert [k["knot"] for k in knots] == [0, 1, 2, 3]
    smallest = min(knots, key=lambda k: k["rho_exact_N"])
    assert point["summary"]["smallest_rho_N"] == smallest["rho_exact_N"]
    assert point["summary"]["smallest_at_knot"] == smallest["knot"]
    for k in knots:
        assert math.isclose(np.linalg.norm(k["weakest_direction"]), 1.0, rel_tol=1e-9)
        assert k["planned_over_exact"] == pytest.approx(k["planned_margin_N"] / k["rho_exact_N"])
        assert k["bottleneck"] and k["facets"] >= 4 and k["status"] == "ok"
    # the most frequent bottleneck is counted over knots from the per-knot lists
    name = point["summary"]["most_frequent_bottleneck"]
    assert point["summary"]["bottleneck_knots"] == sum(name in k["bottleneck"] for k in knots)


def test_knot_selection_full_projection_and_replay(plan_path, capsys):
    assert main(["certify", str(plan_path), "--knots", "1,3", "--full", "--replay", "25"]) == 0
    text = capsys.readouterr().out
    lines = [ln for ln in text.splitlines() if ln[:5].strip().isdigit()]
    assert [int(ln.split()[0]) for ln in lines] == [1, 3]
    assert "whole polytope" in text
    assert "replay: 50 of 50 disturbances within the planned margin rejected; 2 of 2 pushes" in text


def test_margin_above_exact_fails_with_exit_code_one(tmp_path, capsys):
    args = demo_standing()
    honest = standing_plan(**args)
    inflated = standing_plan(**args, margin=[3.0 * least_squares_margin(honest, 0)])
    save_plan(inflated, tmp_path / "bad.npz")
    assert main(["certify", str(tmp_path / "bad.npz"), "--replay", "100", "--quiet"]) == 1
    text = capsys.readouterr().out
    assert "result: NOT certified" in text and "knot 0: margin above exact" in text
    assert "weakest direction (world)" not in text  # --quiet: no table
    assert "draws not rejectable" in text


@pytest.mark.parametrize("argv, pattern", [
    (["--knots", "2-9"], r"field '--knots': expected knot indices from 0 to 3, got '2-9'"),
    (["--knots", "first"], r"field '--knots': expected 'all' or a list like"),
    (["--tol", "0"], r"field '--tol': expected a number in \(0, 0.1\]"),
    (["--cap", "-5"], r"field '--cap': expected a positive number of newtons"),
    (["--replay", "-1"], r"field '--replay': expected a whole number >= 0"),
    (["--disturbance", "1"], r"field '--disturbance': expected an index from 0 to 0"),
])
def test_bad_options_exit_2_with_a_clear_message(plan_path, capsys, argv, pattern):
    assert main(["certify", str(plan_path), *argv]) == 2
    err = capsys.readouterr().err
    assert err.startswith("brace certify: error: ") and "Traceback" not in err
    assert re.search(pattern, err)


def test_bad_plan_file_exits_2_naming_the_field(tmp_path, capsys):
    path = tmp_path / "broken.npz"
    with open(path, "wb") as stream:
        np.savez(stream, t=np.zeros(2), meta=np.array('{"format": "plan/1"}'))
    assert main(["certify", str(path)]) == 2
    err = capsys.readouterr().err
    assert "broken.npz: field 'meta.urdf': expected this required field" in err


def test_no_json_written_when_the_plan_is_rejected(tmp_path, capsys):
    out = tmp_path / "cert.json"
    assert main(["certify", str(tmp_path / "absent.npz"), "--json", str(out)]) == 2
    assert not out.exists()
    assert "expected an existing plan file" in capsys.readouterr().err


def test_parse_knots_sorts_and_merges():
    assert parse_knots("5,0-2,1", 6) == [0, 1, 2, 5]
    assert parse_knots("all", 3) == [0, 1, 2]


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_line_on_a_terminal_and_silent_elsewhere():
    class Cert:
        rho, exact = 53.6, True

    class Bounded:
        rho, exact = 41.2, False

    tty, pipe = _Terminal(), io.StringIO()
    for stream in (tty, pipe):
        line = ProgressLine(stream)
        line(1, 3, 60, Cert())
        line(0, 4, 60, Bounded())
        line.clear()
    assert "\rcertifying point 1, knot 3/60: exact 53.6 N" in tty.getvalue()
    assert "\rcertifying point 0, knot 4/60: lower bound 41.2 N" in tty.getvalue()   # named by what it is
    assert pipe.getvalue() == ""


def test_report_ends_with_the_model_caveat_and_the_safety_note(plan_path, capsys):
    assert main(["certify", str(plan_path), "--quiet"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[-2].startswith("These figures hold for the robot model")
    assert out[-1].startswith("Safety:") and "emergency stop" in out[-1] and "simulation" in out[-1]
