"""The Ipopt backend (through CasADi): the first entry of the solver registry.

The adapter knows nothing of robots: it takes ``{'x','p','f','g'}``, builds
the solver once, and solves for any parameter vector, bounds and start.
Ipopt's return codes map to the neutral statuses of
:mod:`optimizer.solver.backend`; user options override the defaults.
"""
from __future__ import annotations

import contextlib
import signal
import threading
import time
import casadi as ca
import numpy as np

from ..capture import captured_output
from .backend import SUCCESS, SolverResult, max_excess

STATUS = {
    "Solve_Succeeded": "solved",
    "Solved_To_Acceptable_Level": "acceptable",
    "Infeasible_Problem_Detected": "infeasible",
    "Maximum_Iterations_Exceeded": "iteration-limit",
    "Maximum_CpuTime_Exceeded": "time-limit",
    "Maximum_WallTime_Exceeded": "time-limit",
    "User_Requested_Stop": "interrupted",
    "Restoration_Failed": "stalled",
    "Search_Direction_Becomes_Too_Small": "stalled",
    "Error_In_Step_Computation": "stalled",
    "Diverging_Iterates": "diverged",
    "Invalid_Number_Detected": "numerical-error",
}

# Memory a solver built with ``expand=True`` takes per node of the expanded NLP
# (constraints and cost as one SX graph): its Jacobian and Hessian graphs,
# their work vectors and Ipopt's factorization together [bytes]. Measured on
# the demo robot as the growth of the peak resident size per knot divided by
# the growth of the expanded NLP's nodes per knot (benchmarks/memory.py,
# results in benchmarks/RESULTS.md); re-measure when the build changes.
BUILD_BYTES_PER_NODE = 2400
# The same for a solver built with ``expand=False`` (the compiled and mapped
# evaluations: the knot functions stay mapped over the knots, derivatives per
# knot), still per node of the expanded NLP, which the estimate counts either
# way. Measured the same way on the compiled evaluation, steep ramp, robust,
# 60 and 240 knots: 317 bytes per node, 4.8 MB per knot (benchmarks/memory.py
# --evaluation compiled, benchmarks/RESULTS.md "Memory, compiled evaluation").
# The mapped evaluation is not measured separately and uses the same figure.
COMPILED_BUILD_BYTES_PER_NODE = 320

DEFAULT_OPTIONS = {
    "tol": 1e-6,
    "constr_viol_tol": 1e-7,
    "acceptable_tol": 1e-4,
    "acceptable_constr_viol_tol": 1e-6,
    "acceptable_iter": 10,
    "max_iter": 1500,
    "mu_strategy": "adaptive",
    "linear_solver": "mumps",
    "hessian_approximation": "exact",
    "print_level": 0,
    "sb": "yes",                     # no banner on standard output
    "honor_original_bounds": "yes",  # the final point lies inside the bounds, not 1e-8 outside
}

# A solver built with ``warm_start``: the start's multipliers are used, the start and the bound
# multipliers pushed at least 1e-3 inside, and the barrier begins at 1e-3 (1e-6 pushes took 3 times the
# iterations, 1e-2 more on the steep ramp; benchmarks/RESULTS.md, "Robust-stage iterations").
WARM_START_OPTIONS = {
    "warm_start_init_point": "yes",
    "warm_start_bound_push": 1e-3,
    "warm_start_mult_bound_push": 1e-3,
    "mu_init": 1e-3,
}


class _Progress(ca.Callback):
    """Ipopt iteration callback: hands (iteration, x, f, g) to a Python function."""

    def __init__(self, nx, ng, np_, report):
        ca.Callback.__init__(self)
        self.nx, self.ng, self.np_, self.report = nx, ng, np_, report
        self.iteration = 0
        self.interrupted = False
        self.construct("brace_progress", {})

    def get_n_in(self):
        return ca.nlpsol_n_out()

    def get_n_out(self):
        return 1

    def get_name_in(self, i):
        return ca.nlpsol_out(i)

    def get_name_out(self, i):
        return "ret"

    def get_sparsity_in(self, i):
        n = ca.nlpsol_out(i)
        if n in ("f",):
            return ca.Sparsity.dense(1)
        if n in ("x", "lam_x"):
            return ca.Sparsity.dense(self.nx)
        if n in ("g", "lam_g"):
            return ca.Sparsity.dense(self.ng)
        if n == "lam_p":
            return ca.Sparsity.dense(self.np_)
        return ca.Sparsity(0, 0)

    def eval(self, arg):
        try:
            self.report(self.iteration, np.array(arg[0]).ravel(), float(arg[1]), np.array(arg[2]).ravel())
            self.iteration += 1
        except KeyboardInterrupt:
            self.interrupted = True
        return [1 if self.interrupted else 0]


@contextlib.contextmanager
def _ctrl_c_stops(callback):
    """While Ipopt runs, Ctrl-C asks the iteration callback to stop cleanly.

    Without this, the interrupt surfaces inside CasADi and Ipopt reports a
    generic failure; with it, Ipopt ends at the next iteration and
    :meth:`IpoptSolver.solve` raises ``KeyboardInterrupt``.
    """
    if callback is None or threading.current_thread() is not threading.main_thread():
        yield
        return

    def request_stop(signum, frame):
        callback.interrupted = True

    previous = signal.signal(signal.SIGINT, request_stop)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


class IpoptSolver:
    """Ipopt for one NLP, built once.

    Parameters
    ----------
    nlp : dict
        ``{'x', 'p', 'f', 'g'}`` (CasADi expressions).
    options : dict, optional
        Ipopt options overriding :data:`DEFAULT_OPTIONS`.
    expand : bool
        Evaluate the NLP as one SX graph (faster iterations, slower build).
    log_file : path, optional
        Ipopt's full iteration log is written there.
    progress : callable(iteration, x, f, g), optional
        Called at every Ipopt iteration.
    warm_start : bool
        Start from the multipliers given to :meth:`solve` (:data:`WARM_START_OPTIONS`).
    """

    def __init__(self, nlp, options=None, expand=True, log_file=None, progress=None, defaults=True,
                 warm_start=False):
        ipopt = dict(DEFAULT_OPTIONS) if defaults else {"sb": "yes"}
        ipopt.update(WARM_START_OPTIONS if warm_start else {})
        ipopt.update(options or {})
        if log_file is not None:
            ipopt.update({"output_file": str(log_file), "file_print_level": 5})
        opts = {"ipopt": ipopt, "expand": expand, "print_time": False, "error_on_fail": False}
        self.callback = None
        if progress is not None:
            nx, ng, np_ = nlp["x"].numel(), nlp["g"].numel(), nlp["p"].numel()
            self.callback = _Progress(nx, ng, np_, progress)
            opts["iteration_callback"] = self.callback
        started = time.perf_counter()
        self.solver = ca.nlpsol("brace_nlp", "ipopt", nlp, opts)
        self.build_time = time.perf_counter() - started

    def solve(self, x0, p, lbx, ubx, lbg, ubg, lam_x0=None, lam_g0=None) -> SolverResult:
        """Solve from ``x0`` (and the multipliers ``lam_x0``, ``lam_g0``, used with Ipopt's warm start);
        never raises on solver failure (see ``status``)."""
        if self.callback is not None:
            self.callback.iteration, self.callback.interrupted = 0, False
        started = time.perf_counter()
        multipliers = {name: value for name, value in (("lam_x0", lam_x0), ("lam_g0", lam_g0)) if value is not None}
        with _ctrl_c_stops(self.callback):
            out = self.solver(x0=x0, p=p, lbx=lbx, ubx=ubx, lbg=lbg, ubg=ubg, **multipliers)
        wall = time.perf_counter() - started
        if self.callback is not None and self.callback.interrupted:
            raise KeyboardInterrupt
        stats = self.solver.stats()
        name = stats.get("return_status", "unknown")
        status = STATUS.get(name, "failed")
        x, g = np.array(out["x"]).ravel(), np.array(out["g"]).ravel()
        violation = max(max_excess(g, lbg, ubg), max_excess(x, lbx, ubx))
        split = {key[len("t_wall_nlp_"):]: float(value) for key, value in stats.items()
                 if key.startswith("t_wall_nlp_") and isinstance(value, (int, float))}
        return SolverResult(x, status, status in SUCCESS, int(stats.get("iter_count", 0)), wall,
                            float(out["f"]), violation, name, g, np.array(out["lam_g"]).ravel(),
                            np.array(out["lam_x"]).ravel(), eval_time=sum(split.values()), eval_split=split)


class IpoptBackend:
    """Ipopt as a :class:`~optimizer.solver.backend.SolverBackend`."""

    name = "ipopt"
    title = "Ipopt"

    def build_bytes_per_node(self, expand: bool) -> float:
        """Memory a solver built with or without ``expand`` takes per expanded NLP node [bytes]."""
        return BUILD_BYTES_PER_NODE if expand else COMPILED_BUILD_BYTES_PER_NODE

    def build(self, nlp, options=None, *, expand=True, log_file=None, progress=None, defaults=True,
              warm_start=False) -> IpoptSolver:
        return IpoptSolver(nlp, options, expand=expand, log_file=log_file, progress=progress, defaults=defaults,
                           warm_start=warm_start)

    def check_options(self, options: dict) -> str | None:
        """Try ``options`` on a one-variable NLP: why Ipopt refuses them (a short text), or None.

        Ipopt checks names, types and ranges when a solver is built and
        availability (e.g. of a linear solver) when it runs; both take a few
        milliseconds on a tiny problem, against seconds for the real NLP.
        """
        x = ca.SX.sym("x")
        settings = {"ipopt": dict(DEFAULT_OPTIONS, **options), "print_time": False, "error_on_fail": False}
        try:
            with captured_output(1) as printed, captured_output(2):
                solver = ca.nlpsol("brace_option_probe", "ipopt", {"x": x, "f": x * x}, settings)
                solver(x0=1.0)
        except (RuntimeError, TypeError, NotImplementedError) as exc:
            lines = [line.split(":", 2)[-1].strip() for line in str(exc).splitlines() if line.strip()]
            notes = [line for line in printed if "not a valid setting" in line]
            return (notes or lines or ["rejected"])[-1][:200]
        status = solver.stats().get("return_status", "")
        return "Ipopt stopped at once with status " + status if status in ("Invalid_Option", "Internal_Error") else None
