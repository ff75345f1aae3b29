"""Which knots a time or a time window of a task binds.

One rule for every timed entry of a task (hand targets, required margins):
all knots inside ``[t_start, t_end]``, or the nearest knot when the window is
shorter than a step, so an entry never disappears when the knot count is
reduced.
"""
from __future__ import annotations

import numpy as np


def window_knots(t_start: float, t_end: float, times: np.ndarray) -> list[int]:
    """Knots with ``t_start <= t <= t_end`` (s), or the one nearest the window's middle.

    ``times`` are the knot times [s], shape (K,), increasing with a uniform step.
    """
    step = times[1] - times[0]
    inside = [k for k, t in enumerate(times) if t_start - 1e-9 * step <= t <= t_end + 1e-9 * step]
    if inside:
        return inside
    return [int(np.argmin(np.abs(times - 0.5 * (t_start + t_end))))]
