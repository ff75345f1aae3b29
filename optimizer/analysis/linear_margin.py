"""The best margin a linear response can certify at a fixed knot (docs/formulation.md section 6).

With the knot's state, torques and forces fixed, the response problem reads
``A_ub x <= b_ub, A_eq x = 0`` in ``x = (u, dlambda)`` (see
:mod:`optimizer.analysis.response`). A linear response ``dlambda = K u``
rejects every ``|u| <= rho`` exactly when

    A_eq,u + A_eq,lambda K = 0   and   rho |a_u,i + K^T a_lambda,i| <= b_i  for all rows i,

so for fixed ``K`` the certified margin is ``min_i b_i / |a_u,i + K^T a_lambda,i|``
(:func:`certify_gains`). The best ``K`` solves a small convex problem in the
homogenized gains ``G = rho K`` (:func:`best_linear_margin`), solved with a
backend of the solver registry (Ipopt); the reported figure is always re-certified from the gains, so it is a
sound lower bound of the exact margin whatever the solver's tolerance.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import casadi as ca
import numpy as np

from ..solver.registry import backend_named
from .response import LimitRows

MARGIN_BACKEND = "ipopt"   # the registry's backend for the per-knot convex problem

EQUALITY_TOL = 1e-9  # relative residual of the base balance accepted as exact


@dataclass
class LinearMargin:
    """A certified linear-gain margin at one knot.

    Attributes
    ----------
    rho : float
        Certified margin [N] (negative: the plan already violates a limit by
        that much in force terms; 0: no linear response balances the base).
    gains : ndarray, shape (3 na, d)
        Response gains ``K``: contact-force change per unit disturbance, active
        contacts stacked, world frame.
    note : str
        Empty, or why the figure is 0 or negative.
    limiting : str
        Name of the limit that sets the figure (empty when none does).
    """

    rho: float
    gains: np.ndarray
    note: str = ""
    limiting: str = ""


def project_gains(rows: LimitRows, gains) -> tuple[np.ndarray, float]:
    """Closest gains to ``gains`` that balance the base exactly, and the balance residual.

    Returns ``(K, residual)`` with ``K`` shape (3 na, d) and ``residual`` the
    largest entry of ``A_eq,u + A_eq,lambda K`` after projection (0 when exact).
    """
    d = rows.dim
    a_u, a_lam = rows.a_eq[:, :d], rows.a_eq[:, d:]
    K = np.asarray(gains, float).reshape(a_lam.shape[1], d)
    if a_lam.shape[1] == 0:
        return K, float(np.abs(a_u).max(initial=0.0))
    K = K - np.linalg.pinv(a_lam) @ (a_u + a_lam @ K)
    return K, float(np.abs(a_u + a_lam @ K).max(initial=0.0))


def certify_gains(rows: LimitRows, gains) -> LinearMargin:
    """The margin linear gains ``gains`` certify at this knot (exact, no solver).

    Parameters
    ----------
    rows : LimitRows
        The knot's response problem.
    gains : array-like, shape (3 na, d)
        Candidate gains; projected onto the base balance first.
    """
    d = rows.dim
    K, residual = project_gains(rows, gains)
    scale = max(1.0, float(np.abs(rows.a_eq[:, :d]).max(initial=0.0)))
    if residual > EQUALITY_TOL * scale:
        return LinearMargin(0.0, K, "no linear response balances the floating base")
    reach = np.linalg.norm(rows.a_ub[:, :d] + rows.a_ub[:, d:] @ K, axis=1)
    room = rows.b_ub
    if (room < 0).any():
        worst = np.argmin(room / np.maximum(reach, 1e-12))
        return LinearMargin(float(room[worst] / max(reach[worst], 1e-12)), K,
                            f"limit already violated at the plan's point: {rows.names[worst]}", str(rows.names[worst]))
    with np.errstate(divide="ignore"):
        ratios = np.where(reach > 0, room / np.maximum(reach, 1e-300), np.inf)
    rho = float(ratios.min(initial=np.inf))
    if not np.isfinite(rho):
        return LinearMargin(float("inf"), K)
    return LinearMargin(rho, K, limiting=str(rows.names[int(np.argmin(ratios))]))


@lru_cache(maxsize=32)
def _margin_solver(n_rows: int, n_eq: int, d: int, n_gain: int):
    """A solver for ``max rho`` over homogenized gains, for one problem shape (built once).

    Each limit row arrives divided by its room, so the constraint reads
    ``|rho a_u + G^T a_lambda|^2 <= 1`` whatever the room: a nearly active
    limit is enforced as tightly as a slack one.
    """
    G = ca.SX.sym("G", n_gain, d)
    rho = ca.SX.sym("rho")
    a_u, a_lam = ca.SX.sym("a_u", n_rows, d), ca.SX.sym("a_lam", n_rows, n_gain)
    e_u, e_lam = ca.SX.sym("e_u", n_eq, d), ca.SX.sym("e_lam", n_eq, n_gain)
    reach = rho * a_u + ca.mtimes(a_lam, G)
    g = ca.vertcat(ca.vec(rho * e_u + ca.mtimes(e_lam, G)), ca.sum2(reach * reach))
    x = ca.vertcat(ca.vec(G), rho)
    p = ca.vertcat(ca.vec(a_u), ca.vec(a_lam), ca.vec(e_u), ca.vec(e_lam))
    f = -rho + 1e-8 * ca.sumsqr(G)
    options = {"print_level": 0, "tol": 1e-10, "max_iter": 300}
    return backend_named(MARGIN_BACKEND).build({"x": x, "p": p, "f": f, "g": g}, options, expand=False, defaults=False)


def best_linear_margin(rows: LimitRows, initial_gains=None) -> LinearMargin:
    """Largest margin any linear response certifies at this knot.

    Rows are normalized and forces scaled to order one before the convex
    solve; the result is re-certified with :func:`certify_gains`. When the
    solve fails the least-squares gains are certified instead, so the answer
    is always a sound (possibly poor) lower bound.
    """
    d, n_gain = rows.dim, rows.a_ub.shape[1] - rows.dim
    fallback = certify_gains(rows, np.zeros((n_gain, d)) if initial_gains is None else initial_gains)
    if (rows.b_ub < 0).any() or fallback.note.startswith("no linear"):
        return fallback
    room = np.maximum(rows.b_ub, 1e-12 * max(1.0, float(rows.b_ub.max(initial=0.0))))
    scale = max(float(np.median(room)), 1e-9)       # forces in units of a typical room
    a = rows.a_ub * (scale / room)[:, None]
    solver = _margin_solver(a.shape[0], rows.a_eq.shape[0], d, n_gain)
    p = np.concatenate([a[:, :d].reshape(-1, order="F"), a[:, d:].reshape(-1, order="F"),
                        rows.a_eq[:, :d].reshape(-1, order="F"), rows.a_eq[:, d:].reshape(-1, order="F")])
    start = min(max(fallback.rho, 0.0) / scale, 1e3)
    x0 = np.concatenate([(start * fallback.gains).reshape(-1, order="F"), [start]])
    lbx = np.concatenate([np.full(n_gain * d, -np.inf), [0.0]])
    n_eq = rows.a_eq.shape[0] * d
    ubx = np.full(x0.size, np.inf)
    out = solver.solve(x0, p, lbx, ubx, np.concatenate([np.zeros(n_eq), np.full(a.shape[0], -np.inf)]),
                       np.concatenate([np.zeros(n_eq), np.ones(a.shape[0])]))
    x = out.x
    rho = x[-1]
    if not np.isfinite(rho) or rho <= 1e-12:
        return fallback
    candidate = certify_gains(rows, x[:-1].reshape((n_gain, d), order="F") / rho)
    return candidate if candidate.rho >= fallback.rho else fallback


def plan_margin(rows: LimitRows, stored_gains=None) -> LinearMargin:
    """The figure a plan's own certifying gains give at a knot, or the best linear one when it has none.

    ``stored_gains`` (3 na, d) are the knot's entry of the plan's ``response_gains_<p>``
    (:func:`optimizer.planfile.response_gains`), or None.
    """
    return best_linear_margin(rows) if stored_gains is None else certify_gains(rows, stored_gains)
