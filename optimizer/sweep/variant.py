"""One variant's task: the base task mapping with the axis values applied.

Field axes write into a deep copy of the base task mapping; the sweep's
knots and per-variant time limit go into ``horizon.knots`` and
``solver.max_wall_time`` (with Ipopt's banner off); the result is validated like a task file read from
the base task's path. Model axes then derive the robot (payload at the hand,
scaled torque limits; :mod:`optimizer.robot.derived`).
"""
from __future__ import annotations

import copy
import dataclasses
import hashlib
import json
from pathlib import Path

from .. import __version__
from ..problem.task import task_from_mapping
from ..robot.derived import with_payload, with_torque_scale


def variant_mapping(base: dict, axes, values: dict, knots: int | None, time_limit: float) -> dict:
    """The task mapping of one variant (JSON data; ``base`` is not changed)."""
    data = copy.deepcopy(base)
    for axis in axes:
        if axis.field:
            node = data
            for step in axis.field[:-1]:
                node = node[step]
            node[axis.field[-1]] = copy.deepcopy(values[axis.name])
    if knots is not None:
        data.setdefault("horizon", {})["knots"] = int(knots)
    solver = dict(data.get("solver") or {})
    solver["max_wall_time"] = float(time_limit)
    solver["sb"] = "yes"   # no Ipopt banner from every worker
    data["solver"] = solver
    return data


def model_values(axes, values: dict) -> dict:
    """``{quantity: value}`` of the model axes (defaults: no payload, unscaled limits)."""
    out = {"payload_mass": 0.0, "torque_scale": 1.0}
    out.update({axis.model: float(values[axis.name]) for axis in axes if axis.model})
    return out


def build_task(mapping: dict, task_path, model: dict):
    """The validated :class:`~optimizer.problem.task.Task` of one variant, robot derived per ``model``.

    Raises ``TaskError`` (a value the task schema refuses, footholds out of
    reach) like a task file would.
    """
    task = task_from_mapping(copy.deepcopy(mapping), Path(task_path))
    robot = with_torque_scale(with_payload(task.robot, model["payload_mass"]), model["torque_scale"])
    return task if robot is task.robot else dataclasses.replace(task, robot=robot)


def inputs_digest(mapping: dict, model: dict, objective: str, robot_texts: str) -> str:
    """Hash of everything a variant's result for ``objective`` depends on.

    The task mapping (with knots and time limit), the model quantities, the
    robot and URDF file texts and brace's version. A stored result whose
    digest differs was made from other inputs and is solved again.
    """
    data = {"task": mapping, "model": model, "objective": objective, "brace": __version__,
            "robot": hashlib.sha256(robot_texts.encode()).hexdigest()}
    return hashlib.sha256(json.dumps(data, sort_keys=True, separators=(",", ":")).encode()).hexdigest()
