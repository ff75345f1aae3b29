"""Every class of bad input in docs/bad-input.md: exit code 2, one line naming file and field, no traceback.

Each row of the table in docs/bad-input.md is one case of
``test_bad_input_exits_2`` (its id is the row's id). The cases run the
``brace`` command line in-process (robot files through ``check-model``, task
files through ``solve --check-only``, plan files through ``certify``).
References: the YAML 1.1 spec (keys unique within a mapping), UTF-8 (RFC 3629),
Ipopt's own option checks, the plan/1 contract (docs/plan-files.md).
"""
from __future__ import annotations

import json
import os
import re
from pathlib import Path

import numpy as np
import pytest
import yaml

from certify_checks import demo_standing, standing_plan
from optimizer.cli import main
from optimizer.files import atomic_output

ROOT = Path(__file__).resolve().parents[1]
ROBOT_FILE = ROOT / "models" / "stilt.yaml"
URDF = (ROOT / "models" / "stilt.urdf").read_text(encoding="utf-8")
ROBOT = yaml.safe_load(ROBOT_FILE.read_text(encoding="utf-8"))
FOOT = {"normal": [0, 0, 1], "friction": 0.8}
TASK = {
    "robot": str(ROBOT_FILE),
    "horizon": {"duration": 2.0, "knots": 8},
    "stance": {"contacts": {
        "foot_fl": {"position": [0.25, 0.18, 0.0], **FOOT},
        "foot_fr": {"position": [0.25, -0.18, 0.0], **FOOT},
        "foot_rl": {"position": [-0.25, 0.18, 0.0], **FOOT},
        "foot_rr": {"position": [-0.25, -0.18, 0.0], **FOOT},
    }},
    "hand_targets": [{"position": [0.6, 0.0, 0.4], "window": [0.8, 1.2], "label": "pick"}],
}


PLACED_STANCE = {"terrain": {"kind": "flat", "friction": 0.8},
                 "feet": {"foot_fl": {"xy": [0.25, 0.18]}, "foot_fr": [0.25, -0.18], "foot_rl": [-0.25, 0.18],
                          "foot_rr": [-0.25, -0.18]}}


def changed(data: dict, **changes) -> dict:
    """A deep copy of ``data`` with ``a__b__0__c=value`` set (``value=DROP`` removes the key)."""
    out = json.loads(json.dumps(data))
    for dotted, value in changes.items():
        *path, last = dotted.split("__")
        node = out
        for key in path:
            node = node[int(key)] if isinstance(node, list) else node[key]
        if value is DROP:
            del node[last]
        else:
            node[int(last) if isinstance(node, list) else last] = value
    return out


DROP = object()


def write_task(tmp, data=None, text=None, raw=None) -> Path:
    path = tmp / "task.yaml"
    if raw is not None:
        path.write_bytes(raw)
    else:
        path.write_text(text if text is not None else yaml.safe_dump(data), encoding="utf-8")
    return path


def write_robot(tmp, data=None, text=None, urdf=URDF, raw=None) -> Path:
    (tmp / "robot.urdf").write_text(urdf, encoding="utf-8")
    path = tmp / "robot.yaml"
    if raw is not None:
        path.write_bytes(raw)
    else:
        path.write_text(text if text is not None else yaml.safe_dump({**ROBOT, "urdf": "robot.urdf", **(data or {})}),
                        encoding="utf-8")
    return path


def robot_case(**kw):
    return lambda tmp: ["check-model", str(write_robot(tmp, **kw))]


def task_case(data=None, text=None, raw=None, extra=()):
    return lambda tmp: ["solve", str(write_task(tmp, data, text, raw)), "--check-only", *extra]


def plan_case(edit):
    return lambda tmp: ["certify", str(edit(tmp))]


# ---------------------------------------------------------------- plan files

def _plan_arrays():
    plan = standing_plan(**demo_standing(sweep=0.2, knots=2))
    arrays = {k: np.asarray(v) for k, v in plan.arrays().items()}
    return arrays, dict(plan.meta)


def _save(tmp, arrays, meta, name="plan.npz") -> Path:
    path = tmp / name
    with open(path, "wb") as stream:
        np.savez(stream, **arrays, meta=np.array(json.dumps(meta)))
    return path


def plan_without_tau(tmp):
    arrays, meta = _plan_arrays()
    del arrays["tau"]
    return _save(tmp, arrays, meta)


def plan_with_short_q(tmp):
    arrays, meta = _plan_arrays()
    arrays["q"] = arrays["q"][:, :-1]
    return _save(tmp, arrays, meta)


def plan_with_bad_urdf(tmp):
    arrays, meta = _plan_arrays()
    return _save(tmp, arrays, {**meta, "urdf": "<robot name='x'></robot>"})


def plan_with_object_array(tmp):
    arrays, meta = _plan_arrays()
    arrays["notes"] = np.array([{"a": 1}], dtype=object)
    path = tmp / "plan.npz"
    with open(path, "wb") as stream:
        np.savez(stream, **arrays, meta=np.array(json.dumps(meta)))  # np.savez pickles object arrays
    return path


def plan_with_short_minimum_list(tmp):
    arrays, meta = _plan_arrays()
    return _save(tmp, arrays, {**meta, "min_normal_force": [5.0, 5.0, 30.0]})


def plan_with_negative_preload(tmp):
    arrays, meta = _plan_arrays()
    return _save(tmp, arrays, {**meta, "contact_preload": [0.0, -30.0, 0.0, 0.0]})


def plan_not_npz(tmp):
    path = tmp / "plan.npz"
    path.write_text("not an archive", encoding="utf-8")
    return path


def infeasible_point(tmp):
    arrays, meta = _plan_arrays()
    return _save(tmp, arrays, {**meta, "format": "infeasible-point/1", "infeasible": True})


BAD_URDF_JOINT = URDF.replace('<limit', '<nolimit', 1)

CASES = {
    # robot files
    "robot-unknown-field": (robot_case(data={"standin": {}}), r"robot.yaml: field 'standin'.*did you mean 'standing'"),
    "robot-wrong-type": (robot_case(data={"contacts": "foot_fl"}), r"field 'contacts'.*a non-empty list of frame names"),
    "robot-unknown-frame": (robot_case(data={"hand": "grip_pont"}), r"field 'hand'.*a frame name.*close names: grip_point"),
    "robot-non-finite": (robot_case(data={"standing": {"base_height": float("nan")}}),
                         r"field 'standing.base_height'.*a finite number"),
    "robot-limit-shape": (robot_case(data={"limits": {"torque": {"fl_knee": [5.0]}}}),
                          r"field 'limits.torque.fl_knee'.*a list of 2 numbers"),
    "robot-self-pair-unknown": (robot_case(data={"collision": {**ROBOT["collision"], "self_pairs": [
        {"between": "grippr", "and": "body"}]}}), r"field 'collision.self_pairs\[0\].between'.*a link with collision "
        r"shapes or a shape name.*close names: gripper"),
    "robot-repeated-key": (robot_case(text="urdf: robot.urdf\nhand: grip_point\nhand: grip_point\n"),
                           r"robot.yaml: expected valid YAML, got .*'hand'.* given twice"),
    "robot-not-utf8": (robot_case(raw=b"name: st\xffilt\n"), r"robot.yaml: expected UTF-8 text.*undecodable byte at offset 8"),
    "robot-missing-file": (lambda tmp: ["check-model", str(tmp / "nothing.yaml")],
                           r"nothing.yaml: expected an existing readable file"),
    "robot-directory": (lambda tmp: ["check-model", str(tmp)], r"expected a file, got 'a directory'"),
    "robot-unsafe-yaml": (robot_case(text="urdf: !!python/object/apply:os.system ['echo unsafe']\n"),
                          r"robot.yaml: expected valid YAML.*could not determine a constructor"),
    # URDF
    "urdf-malformed-xml": (robot_case(urdf="<robot name='x'><link name='a'>"), r"robot.urdf: expected well-formed URDF XML"),
    "urdf-unparsable": (robot_case(urdf=BAD_URDF_JOINT), r"robot.urdf: expected a URDF model Pinocchio can read.*limits"),
    "urdf-non-finite": (robot_case(urdf=URDF.replace('effort="90', 'effort="nan', 1)), r"robot.urdf: field .*effort.*finite numbers"),
    # task files
    "task-unknown-field": (task_case(changed(TASK, horizn={"duration": 1.0})), r"task.yaml: field 'horizn'.*did you mean 'horizon'"),
    "task-missing-field": (task_case(changed(TASK, horizon__duration=DROP)), r"field 'horizon.duration'.*this required field"),
    "task-wrong-type": (task_case(changed(TASK, horizon__duration="long")), r"field 'horizon.duration'.*a number, got 'long'"),
    "task-wrong-shape": (task_case(changed(TASK, stance__contacts__foot_fl__position=[0.25, 0.18])),
                         r"field 'stance.contacts.foot_fl.position'.*a list of 3 numbers"),
    "task-zero-normal": (task_case(changed(TASK, stance__contacts__foot_fl__normal=[0, 0, 0])),
                         r"field 'stance.contacts.foot_fl.normal'.*a unit vector.*length 0"),
    "task-non-unit-normal": (task_case(changed(TASK, stance__contacts__foot_fl__normal=[0, 0, 2])),
                             r"field 'stance.contacts.foot_fl.normal'.*a unit vector.*length 2"),
    "task-friction-zero": (task_case(changed(TASK, stance__contacts__foot_fl__friction=0)),
                           r"field 'stance.contacts.foot_fl.friction'.*a number > 0"),
    "task-friction-negative": (task_case(changed(TASK, stance__contacts__foot_fl__friction=-0.4)),
                               r"field 'stance.contacts.foot_fl.friction'.*a number > 0, got -0.4"),
    "task-contact-min-normal-force-negative": (task_case(changed(TASK, stance__contacts__foot_fl__min_normal_force=-5)),
                                               r"field 'stance.contacts.foot_fl.min_normal_force'.*a number >= 0, got -5"),
    "task-foot-min-normal-force-text": (task_case(changed(TASK, stance=PLACED_STANCE, stance__feet__foot_fl__min_normal_force="firm")),
                                        r"field 'stance.feet.foot_fl.min_normal_force'.*a number, got 'firm'"),
    "task-preload-negative": (task_case(changed(TASK, stance__contacts__foot_fr__preload=-30)),
                              r"field 'stance.contacts.foot_fr.preload'.*a number >= 0, got -30"),
    "task-knots-below-2": (task_case(changed(TASK, horizon__knots=1)), r"field 'horizon.knots'.*a whole number >= 2"),
    "task-knots-huge": (task_case(changed(TASK, horizon__knots=10 ** 7)), r"field 'horizon.knots'.*a whole number <= 2000"),
    "cli-knots-below-2": (task_case(TASK, extra=("--knots", "1")), r"command line: field '--knots'.*from 2 to 2000"),
    "cli-threads-zero": (task_case(TASK, extra=("--threads", "0")),
                         r"command line: field '--threads': expected a whole number from 1 to 512, got 0"),
    "cli-memory-limit-no-unit": (task_case(TASK, extra=("--memory-limit", "8")),
                                 r"command line: field '--memory-limit': expected a size with a unit, like 8G or 512M, got '8'"),
    "task-target-outside-horizon": (task_case(changed(TASK, hand_targets__0__window=[1.5, 2.5])),
                                    r"field 'hand_targets\[0\].window'.*within the horizon \[0, 2.0\] s"),
    "task-unknown-frame": (task_case(changed(TASK, hand_targets__0__frame="grip_pint")),
                           r"field 'hand_targets\[0\].frame'.*a frame of robot 'stilt'"),
    "task-frame-key-not-text": (task_case(text=yaml.safe_dump(TASK).replace("foot_fl:", "1:")),
                                r"field 'stance.contacts.1'.*a frame name \(text\) as the key"),
    "task-nan": (task_case(text=yaml.safe_dump(TASK).replace("- 0.6\n", "- .nan\n", 1)),
                 r"field 'hand_targets\[0\].position'.*all finite"),
    "task-inf": (task_case(text=yaml.safe_dump(TASK).replace("duration: 2.0", "duration: .inf")),
                 r"field 'horizon.duration'.*a finite number"),
    "task-huge-number": (task_case(changed(TASK, hand_targets__0__position=[1e12, 0, 0.4])),
                         r"field 'hand_targets\[0\].position'.*sensible size"),
    "task-facets-huge": (task_case(changed(TASK, pyramid_facets=1000)), r"field 'pyramid_facets'.*a whole number <= 64"),
    "task-robot-missing": (task_case(changed(TASK, robot="nowhere.yaml")), r"field 'robot'.*an existing robot file"),
    "task-not-utf8": (task_case(raw=b"name: \xe9t\xe9\n"), r"task.yaml: expected UTF-8 text"),
    "task-empty": (task_case(text=""), r"task.yaml: expected a YAML mapping at the top level, got 'NoneType'"),
    "task-top-level-list": (task_case(text="- robot\n- horizon\n"), r"expected a YAML mapping at the top level, got 'list'"),
    "task-yaml-syntax": (task_case(text="horizon: {duration: 2\n"), r"task.yaml: expected valid YAML.*line 2"),
    "task-repeated-key": (task_case(text=yaml.safe_dump(TASK) + "horizon: {duration: 3.0}\n"),
                          r"expected valid YAML, got .*'horizon'.* given twice"),
    "task-solver-unknown-option": (task_case(changed(TASK, solver={"max_itr": 5})),
                                   r"field 'solver.max_itr'.*No such IPOPT option: max_itr"),
    "task-solver-wrong-type": (task_case(changed(TASK, solver={"max_iter": "many"})),
                               r"field 'solver.max_iter'.*got 'many' \(type mismatch\)"),
    "task-memory-limit-no-unit": (task_case(changed(TASK, solver={"memory_limit": 4})),
                                  r"field 'solver.memory_limit': expected a size with a unit, like 8G or 512M, got 4"),
    "task-solver-out-of-range": (task_case(changed(TASK, solver={"tol": -1})),
                                 r"field 'solver.tol'.*not a valid setting for Option: tol"),
    "task-approach-clearance-negative": (task_case(changed(TASK, stance__schedule={"approach_clearance": -0.01})),
                                         r"field 'stance.schedule.approach_clearance'.*a number >= 0"),
    "task-touchdown-speed-zero": (task_case(changed(TASK, stance__schedule={"touchdown_speed": 0.0})),
                                  r"field 'stance.schedule.touchdown_speed'.*a number > 0"),
    "cli-out-is-directory": (lambda tmp: ["solve", str(write_task(tmp, TASK)), "--check-only", "--out", str(tmp)],
                             r"command line: field '--out'.*a file path for the plan"),
    # plan files
    "plan-missing-key": (plan_case(plan_without_tau), r"plan.npz: field 'tau'.*missing key"),
    "plan-preload-negative": (plan_case(plan_with_negative_preload),
                              r"field 'meta.contact_preload'.*4 numbers >= 0 N"),
    "plan-min-normal-force-length": (plan_case(plan_with_short_minimum_list),
                                     r"field 'meta.min_normal_force'.*a list of 4 numbers"),
    "plan-wrong-shape": (plan_case(plan_with_short_q), r"plan.npz: field 'q'.*shape \(K=2, nq=25\)"),
    "plan-urdf-unparsable": (plan_case(plan_with_bad_urdf), r"field 'meta.urdf'.*a URDF that Pinocchio can load"),
    "plan-needs-pickle": (plan_case(plan_with_object_array), r"plan.npz: expected arrays readable without pickle"),
    "plan-not-npz": (plan_case(plan_not_npz), r"plan.npz: expected a NumPy .npz archive"),
    "plan-infeasible-point": (plan_case(infeasible_point),
                              r"field 'meta.format'.*got 'infeasible-point/1'.*not a plan"),
}


@pytest.mark.parametrize("case", list(CASES))
def test_bad_input_exits_2(case, tmp_path, capsys):
    make_argv, pattern = CASES[case]
    code = main(make_argv(tmp_path))
    out, err = capsys.readouterr()
    assert code == 2, err
    assert "Traceback" not in out + err
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("brace ") and ": error: " in lines[0], err
    assert re.search(pattern, lines[0]), lines[0]


def test_debug_shows_the_traceback(tmp_path, capsys):
    argv = CASES["task-zero-normal"][0](tmp_path)
    assert main(["--debug", *argv]) == 2
    assert "Traceback" in capsys.readouterr().err


def test_unexpected_exception_is_one_line_with_its_own_exit_code(tmp_path, capsys, monkeypatch):
    import optimizer.cli.solve as solve_cli

    def broken(path):
        raise ZeroDivisionError("simulated bug")

    monkeypatch.setattr(solve_cli, "load_task", broken)
    code = main(["solve", str(write_task(tmp_path, TASK)), "--check-only"])
    err = capsys.readouterr().err
    assert code == 70 and "Traceback" not in err
    assert re.search(r"internal error: ZeroDivisionError: simulated bug \(a bug in brace", err)


def test_the_valid_base_task_passes(tmp_path, capsys):
    # guards the table: every case above differs from a task that is accepted
    assert main(["solve", str(write_task(tmp_path, TASK)), "--check-only"]) == 0
    assert "is valid; pre-solve checks passed" in capsys.readouterr().out


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0, reason="root reads files without permission")
def test_unreadable_file(tmp_path, capsys):
    path = write_task(tmp_path, TASK)
    path.chmod(0)
    assert main(["solve", str(path), "--check-only"]) == 2
    assert re.search(r"task.yaml: expected a readable file, got 'Permission denied'", capsys.readouterr().err)


def test_atomic_output_leaves_nothing_on_interrupt(tmp_path):
    target = tmp_path / "out.npz"
    with pytest.raises(KeyboardInterrupt):
        with atomic_output(target) as tmp:
            tmp.write_bytes(b"half")
            raise KeyboardInterrupt
    assert list(tmp_path.iterdir()) == []


def test_docs_table_lists_every_case():
    text = (ROOT / "docs" / "bad-input.md").read_text(encoding="utf-8")
    ids = set(re.findall(r"`test_bad_input_exits_2\[([a-z0-9-]+)\]`", text))
    assert ids == set(CASES)
