"""Shared by the replay tests: a plan's MuJoCo simulator and the nominal replay's acceptance."""
from __future__ import annotations

from optimizer.planfile import build_model
from optimizer.simulation.inputs import simulation_inputs
from optimizer.simulation.pushes import Settings, Simulator


def simulator(plan, settings: Settings | None = None) -> Simulator:
    """The replay of ``plan`` in MuJoCo, its scene built from the plan file alone."""
    inputs = simulation_inputs(plan, build_model("plan", plan.meta["urdf"]))
    return Simulator(plan, inputs.surfaces, inputs.targets, inputs.hand_frame, settings)


def assert_tracks(report):
    """Nominal replay acceptance: every foot within 5 mm of its foothold, no contact lost, every
    hand target within 2 cm (MuJoCo's contact dynamics are the outside reference)."""
    for foot in report["feet"]:
        assert foot["distance_m"] <= 0.005, foot
        assert foot["contact_losses"] == 0, foot
    assert report["targets"], "the demo tasks have hand targets"
    for target in report["targets"]:
        assert target["error_m"] <= 0.02, target
