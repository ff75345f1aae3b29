"""How robust objectives weigh several disturbance points.

Each disturbance point ``p`` has its own margin ``rho_p`` per knot and an
objective weight ``w_p >= 0`` (``objective_weight`` in the task file, default
1; at least one point weighs more than 0). The task's ``combine_points``
turns the P margins of a knot into the one number the robust objectives
maximize (then combined over knots as each objective does):

- ``smallest`` (default): ``min_p rho_p / w_p`` over the points with
  ``w_p > 0``. Margins are kept in proportion to the weights at the knot's
  weakest point: weights 1 and 0.5 ask the second point for half the first
  one's margin. No point is traded away for another.
- ``weighted-sum``: ``sum_p w_p rho_p / sum_p w_p``. A point with a larger
  weight counts more; the objective may leave a light point little margin
  when that buys more at a heavy one.

A point with weight 0 is left out of the objective (it still has its
margin, its required margins and its certification). With one point both
reduce to ``rho_0``: the weights are normalized (largest 1 for ``smallest``,
sum 1 for ``weighted-sum``), so a single-point task plans as before.
"""
from __future__ import annotations

import numpy as np

COMBINATIONS = ("smallest", "weighted-sum")
DEFAULT_COMBINATION = "smallest"


def normalized_weights(weights, combine: str) -> np.ndarray:
    """The objective weights as the NLP uses them, shape (P,): largest 1 (``smallest``) or sum 1."""
    w = np.asarray(weights, float).reshape(-1)
    if combine not in COMBINATIONS:
        raise ValueError(f"unknown point combination '{combine}'; known: {', '.join(COMBINATIONS)}")
    return w / (w.max() if combine == "smallest" else w.sum())


def combined_margin(margins, weights, combine: str) -> np.ndarray:
    """The objective's margin per knot from per-point margins ``margins`` (K, P) [N], shape (K,)."""
    margins = np.asarray(margins, float).reshape(-1, len(np.atleast_1d(weights)))
    w = normalized_weights(weights, combine)
    if combine == "weighted-sum":
        return margins @ w
    used = w > 0
    return np.min(margins[:, used] / w[used], axis=1)
