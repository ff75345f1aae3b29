"""The solver backends brace can use, by name (see :mod:`optimizer.solver.backend`)."""
from __future__ import annotations

from .backend import SolverBackend
from .ipopt import IpoptBackend

BACKENDS: dict[str, SolverBackend] = {backend.name: backend for backend in (IpoptBackend(),)}
DEFAULT_BACKEND = "ipopt"


def backend_named(name: str) -> SolverBackend:
    """The registered backend ``name``; ``KeyError`` names the known ones."""
    try:
        return BACKENDS[name]
    except KeyError:
        raise KeyError(f"unknown solver backend '{name}'; known: {', '.join(BACKENDS)}") from None
