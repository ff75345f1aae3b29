"""Reserves: a fraction of a physical limit a plan leaves unused for the controller.

A task's ``torque_reserve`` and ``friction_reserve`` (fractions r in
[0, MAX_RESERVE]) make the plan meet, and be certified against, the limit
times ``1 - r``: torque limits in N m, friction coefficients (dimensionless).
The plan file stores the reduced values (what the plan was made against) and
records r in ``meta`` under the same key, so a replay can rebuild the full
limit (:func:`full_value`).
"""
from __future__ import annotations

from ..errors import PlanFileError

MAX_RESERVE = 0.5   # keeping more than half of a limit for feedback is a typo, not a plan
RESERVES = ("torque_reserve", "friction_reserve")


def read_reserve(fields, key: str) -> float:
    """The reserve ``key`` of a task (a fraction in [0, MAX_RESERVE], default 0)."""
    return fields.number(key, 0.0, lo=0.0, hi=MAX_RESERVE)


def planned_value(full, reserve: float):
    """The limit a plan meets: ``full`` times ``1 - reserve`` (same units)."""
    return full * (1.0 - reserve)


def reserves_meta(task) -> dict:
    """The plan ``meta`` entries of ``task``'s non-zero reserves."""
    return {key: float(getattr(task, key)) for key in RESERVES if getattr(task, key) > 0}


def meta_reserve(meta: dict, key: str) -> float:
    """Reserve ``key`` recorded in a plan's ``meta`` (0 when absent); PlanFileError if not in [0, 1)."""
    reserve = meta.get(key, 0.0)
    if isinstance(reserve, bool) or not isinstance(reserve, (int, float)) or not 0.0 <= reserve < 1.0:
        raise PlanFileError("plan", f"meta.{key}", "a fraction in [0, 1)", reserve)
    return float(reserve)


def full_value(meta: dict, key: str, planned):
    """The full limit behind ``planned`` (what a plan with reserve ``key`` met): ``planned / (1 - r)``."""
    return planned / (1.0 - meta_reserve(meta, key))
