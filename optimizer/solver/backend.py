"""What every NLP solver backend offers, and the neutral result it returns.

A backend turns an NLP given as data (``{'x', 'p', 'f', 'g'}``, CasADi
expressions) into a built solver once (:meth:`SolverBackend.build`, the slow
step, keyed by the caller), which then solves many times for any parameter
vector, bounds and start (:meth:`BuiltSolver.solve`). Results use a few
neutral status names (:data:`STATUSES`), so nothing above this layer knows
which solver ran. A backend also says whether it accepts a set of options
before anything is built (:meth:`SolverBackend.check_options`).

Adding a backend: one module in ``optimizer/solver/`` with a class meeting
:class:`SolverBackend`, registered in :mod:`optimizer.solver.registry`.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Protocol

import numpy as np

# The neutral statuses; "solved" and "acceptable" count as success.
STATUSES = ("solved", "acceptable", "infeasible", "iteration-limit", "time-limit", "interrupted", "stalled",
            "diverged", "numerical-error", "failed")
SUCCESS = frozenset({"solved", "acceptable"})


@dataclass
class SolverResult:
    """What a solve reached.

    ``x`` is the last point (in the NLP's own, scaled units), ``status`` one
    of :data:`STATUSES`, ``max_violation`` the largest bound or constraint
    violation at ``x``, ``wall_time`` in s, ``message`` the backend's own
    status text, ``g`` the constraint values at ``x``; ``lam_g`` and
    ``lam_x`` the multipliers of the constraints and of the variable bounds
    at ``x`` (the Lagrangian ``f + lam_g . g + lam_x . x``; None when the
    backend has none); ``eval_time`` the part of ``wall_time`` spent
    evaluating the NLP's functions and derivatives (the rest is the solver's
    own work: factorizations, line search), ``eval_split`` that time per
    function evaluated [s] (``f``, ``grad_f``, ``g``, ``jac_g``, ``hess_l``;
    empty when the backend does not report it).
    """

    x: np.ndarray
    status: str
    success: bool
    iterations: int
    wall_time: float
    objective: float
    max_violation: float
    message: str
    g: np.ndarray = field(repr=False, default=None)
    lam_g: np.ndarray = field(repr=False, default=None)
    lam_x: np.ndarray = field(repr=False, default=None)
    eval_time: float = 0.0
    eval_split: dict = field(repr=False, default_factory=dict)


class BuiltSolver(Protocol):
    """A solver built for one NLP. ``build_time`` [s] is what building it cost."""

    build_time: float

    def solve(self, x0, p, lbx, ubx, lbg, ubg, lam_x0=None, lam_g0=None) -> SolverResult:
        """Solve from ``x0`` (and, for a solver built with ``warm_start``, the multipliers ``lam_x0``,
        ``lam_g0``); never raises on solver failure (see ``status``); Ctrl-C raises KeyboardInterrupt."""


class SolverBackend(Protocol):
    """An NLP solver behind brace's neutral interface."""

    name: str      # registry key
    title: str     # how reports spell it

    def check_options(self, options: dict) -> str | None:
        """Why the backend refuses ``options`` (one short line), or None when it accepts them."""

    def build_bytes_per_node(self, expand: bool) -> float:
        """Memory a solver built with (or without) ``expand`` takes per node of the expanded NLP [bytes]: what
        memory estimates multiply the node count by."""

    def build(self, nlp: dict, options: dict | None = None, *, expand: bool = True, log_file=None,
              progress: Callable | None = None, defaults: bool = True, warm_start: bool = False) -> BuiltSolver:
        """Build once for ``nlp``.

        ``options`` override the backend's defaults (or stand alone with
        ``defaults=False``); ``expand`` evaluates the NLP as one scalar graph;
        ``log_file`` receives the full iteration log; ``progress(iteration, x,
        f, g)`` is called at every iteration; ``warm_start`` starts every
        solve from the multipliers handed to :meth:`BuiltSolver.solve` (the
        backend's own warm-start settings, under ``options``).
        """


def max_excess(values, lower, upper) -> float:
    """Largest amount by which ``values`` leave ``[lower, upper]`` (0 inside)."""
    excess = np.maximum(np.asarray(lower) - values, values - np.asarray(upper))
    return float(max(0.0, excess.max(initial=0.0)))
