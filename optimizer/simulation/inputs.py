"""What a simulation needs beyond the plan's arrays: terrain, hand frame, hand targets.

All of it comes from the plan file when it carries it: ``meta.task`` (the
task mapping as loaded: terrain and hand targets) and ``meta.hand_frame``.
A task file given with ``--task`` takes precedence (for plans written by
other tools, or without ``meta.task``). A plan with neither a hand frame nor
a task uses its first disturbance frame as the hand (tasks default their
disturbance to the hand) and says so.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import TaskError
from ..problem.task import read_hand_targets
from ..schema import Fields
from .pushes import Target
from .surfaces import scene_surfaces


@dataclass
class SimulationInputs:
    """Terrain shapes, hand frame and targets, and notes on where each came from."""

    surfaces: list
    hand_frame: str
    targets: list
    notes: list = field(default_factory=list)


class _PlanFrames:
    """The little of a robot that reading hand targets needs: frames and the hand's name."""

    def __init__(self, model, hand_frame: str, contact_frames, name="plan robot"):
        self.model, self.hand_frame, self.contact_frames, self.name = model, hand_frame, list(contact_frames), name


def simulation_inputs(plan, pin_model, task=None) -> SimulationInputs:
    """Surfaces, hand frame and targets of ``plan`` (``task``: a loaded Task, optional)."""
    notes = []
    surfaces, source = scene_surfaces(plan, task)
    notes.append(f"scene: {source}")
    if task is not None:
        hand = task.robot.hand_frame
        targets = [Target(t.frame, np.asarray(t.position, float), t.t_start, t.t_end, t.label)
                   for t in task.hand_targets]
        return SimulationInputs(surfaces, hand, targets, notes)
    hand = plan.meta.get("hand_frame")
    if not isinstance(hand, str) or not pin_model.existFrame(hand):
        hand = plan.meta["disturbances"][0]["frame"]
        notes.append(f"the plan names no hand frame; the first disturbance frame '{hand}' is taken as the hand")
    raw = plan.meta.get("task")
    if not isinstance(raw, dict):
        notes.append("the plan carries no task: no hand targets checked (give --task)")
        return SimulationInputs(surfaces, hand, [], notes)
    top = Fields({"hand_targets": raw.get("hand_targets", [])}, "plan meta.task", "", TaskError)
    read = read_hand_targets(top, _PlanFrames(pin_model, hand, plan.meta["contact_frames"]), float(plan.t[-1]))
    targets = [Target(t.frame, np.asarray(t.position, float), t.t_start, t.t_end, t.label) for t in read]
    return SimulationInputs(surfaces, hand, targets, notes)
