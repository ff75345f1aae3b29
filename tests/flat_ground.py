"""The demo robot's stance on flat ground, shared by the tests that write task files.

``FEET`` holds each foot's foothold (x, y) [m] on the plane z = 0 (the
robots' ``standing`` postures put the feet there); :func:`flat_stance` is
the task file's ``stance`` section for them, normals +z.
"""
from __future__ import annotations

FEET = {"foot_fl": (0.25, 0.18), "foot_fr": (0.25, -0.18), "foot_rl": (-0.25, 0.18), "foot_rr": (-0.25, -0.18)}


def flat_stance(friction: float = 0.8) -> dict:
    """``{"contacts": {foot: {position, normal, friction}}}`` for every foot of :data:`FEET`."""
    return {"contacts": {f: {"position": [x, y, 0.0], "normal": [0.0, 0.0, 1.0], "friction": friction}
                         for f, (x, y) in FEET.items()}}
