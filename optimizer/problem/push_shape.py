"""Shape matrices of expected pushes, from the words a task file uses.

A disturbance point rejects every push ``W u`` with ``|u| <= rho``: an
ellipsoid whose semi-axes are ``rho`` times the singular values of ``W``.
Tasks may give ``W`` outright (``shape``) or describe the pushes they expect:

- ``expected: {directions: [{along: d, weight: w}, ...], others: o}``:
  ``W = (sum_i w_i^2 d_i d_i^T / |d_i|^2 + o^2 (I - P))^(1/2)`` with ``P`` the
  projector onto the span of the ``d_i``: for directions at right angles the
  ellipsoid reaches exactly ``w_i rho`` along ``d_i`` and ``o rho`` in every
  direction at right angles to all of them; a push set is symmetric, so
  ``d`` covers ``-d`` too;
- wrenches: ``length_scale: L`` [m] compares moments with forces,
  ``W = diag(I, L I)``: the push set is ``|f|^2 + |m / L|^2 <= rho^2``.
"""
from __future__ import annotations

import numpy as np


def shape_from_directions(directions, weights, others: float) -> np.ndarray:
    """``W`` (3, 3) for pushes along ``directions`` (n, 3) with ``weights`` (n,) and ``others`` across them."""
    units = np.asarray(directions, float).reshape(-1, 3)
    units = units / np.linalg.norm(units, axis=1, keepdims=True)
    _, singular, rows = np.linalg.svd(units)
    span = rows[: int(np.sum(singular > 1e-9))]
    moment = others ** 2 * (np.eye(3) - span.T @ span)
    for unit, w in zip(units, np.asarray(weights, float)):
        moment += w ** 2 * np.outer(unit, unit)
    values, vectors = np.linalg.eigh(moment)
    return vectors @ np.diag(np.sqrt(np.maximum(values, 0.0))) @ vectors.T


def wrench_shape(length_scale: float) -> np.ndarray:
    """``W = diag(I, L I)`` (6, 6) for ``[force; moment]`` with a length scale ``L`` [m]."""
    return np.diag([1.0, 1.0, 1.0] + [float(length_scale)] * 3)
