"""How much memory a solve will need, measured on the problem before anything is built.

Building a solver dominates a solve's memory (the NLP is expanded into one
expression graph, then differentiated twice), and it grows linearly with
the knot count. The estimate measures the transcription itself: it builds
the NLP of each stage at two tiny knot counts (a fraction of a second),
expands it and counts its nodes, which gives the nodes per knot and the
nodes independent of knots; each node costs the solver backend's
``build_bytes_per_node`` once built, which depends on whether the planner's
evaluation expands the NLP (Ipopt: ``solver.ipopt.BUILD_BYTES_PER_NODE``
for ``expanded``, ``COMPILED_BUILD_BYTES_PER_NODE`` for ``compiled`` and
``mapped``, whose solvers keep the knot functions mapped and need several
times less). A solve keeps every stage's
solver (the feasibility seed and the objective), so the stages add up, on
top of what the process holds already.
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import casadi as ca

from .errors import TaskError
from .memory import format_size, resident_size
from .planner import Planner, shared_planner
from .transcription.nlp import Transcription
from .transcription.objectives import objective_named
from .transcription.structure import structure_of

PROBE_KNOTS = (6, 8)  # two small knot counts; the difference gives the nodes per knot
_MEASURED: dict = {}  # the probes' transcription keys -> StageSize, measured once per process
_MEASURED_MAX = 256


@dataclass(frozen=True)
class StageSize:
    """Size of one stage's NLP: expanded nodes per knot and independent of knots.

    ``nodes_fixed`` is the intercept of the line through the two probes; it may
    be negative (rows at every knot but the first and the last, such as the
    clearance rows, count K - 2 times), which keeps the line exact instead of
    overestimating every larger knot count.
    """

    objective: str
    nodes_per_knot: float
    nodes_fixed: float
    variables_per_knot: float


@dataclass(frozen=True)
class MemoryEstimate:
    """Peak memory of a solve [bytes] as a function of the knot count.

    ``baseline`` is what the process holds before building; each stage adds
    ``bytes_per_node`` per node of its expanded NLP.
    """

    knots: int
    baseline: int
    stages: tuple
    bytes_per_node: float

    def at(self, knots: int) -> int:
        """Estimated peak [bytes] with ``knots`` knots."""
        nodes = sum(s.nodes_fixed + knots * s.nodes_per_knot for s in self.stages)
        return int(self.baseline + self.bytes_per_node * nodes)

    @property
    def total(self) -> int:
        return self.at(self.knots)

    def largest_knots(self, ceiling: float) -> int:
        """The largest knot count whose estimate stays within ``ceiling`` bytes (0 if none, even 2)."""
        per_knot = self.bytes_per_node * sum(s.nodes_per_knot for s in self.stages)
        spare = ceiling - self.at(0)
        return max(int(spare // per_knot), 0) if per_knot > 0 else self.knots

    def built_at(self, bytes_per_node: float) -> "MemoryEstimate":
        """The same NLP sizes counted at another build's ``bytes_per_node`` (another evaluation's solvers)."""
        return replace(self, bytes_per_node=bytes_per_node)

    def describe(self) -> str:
        stages = " + ".join(s.objective for s in self.stages)
        nodes = sum(s.nodes_per_knot for s in self.stages)
        return (f"about {format_size(self.total)} for {self.knots} knots "
                f"({stages} solver{'s' if len(self.stages) > 1 else ''}, {nodes:,.0f} expression nodes per knot)")


def stages_of(objective: str) -> list:
    """The stages a solve of ``objective`` builds: the feasibility seed, then the objective."""
    return ["feasible"] if objective == "feasible" else ["feasible", objective]


def probe_knots(task) -> tuple[int, int]:
    """Two knot counts two apart, :data:`PROBE_KNOTS` or the smallest larger pair at which every swing
    of the task's contact schedule keeps its knots (a TaskError when the task's own count does not)."""
    structure_of(task)
    for k in range(PROBE_KNOTS[0], task.knots + 1):
        try:
            structure_of(task.with_knots(k)), structure_of(task.with_knots(k + 2))
        except TaskError:
            continue
        return k, k + 2
    return PROBE_KNOTS


def stage_size(task, objective: str, planner: Planner | None = None) -> StageSize:
    """Measure one stage's NLP at two small knot counts (:func:`probe_knots`), split nodes into per-knot
    and fixed.

    The sizes depend only on what the transcription reads besides its
    parameters (:meth:`Planner.transcription_key` of both probes), so tasks
    that differ in numbers alone are measured once per process.
    """
    planner = planner or shared_planner()
    knots = probe_knots(task)
    probes = [task.with_knots(k) for k in knots]
    key = tuple(planner.transcription_key(small, objective) for small in probes)
    if key not in _MEASURED:
        if len(_MEASURED) >= _MEASURED_MAX:
            _MEASURED.clear()
        _MEASURED[key] = _measure(knots, probes, objective, planner)
    return _MEASURED[key]


def _measure(knots, probes, objective: str, planner: Planner) -> StageSize:
    """Expand each probe's NLP (at ``knots``) and count its nodes."""
    counts = []
    for small in probes:
        transcription = Transcription(small.robot, planner.symbolic_robot(small.robot), structure_of(small),
                                      objective_named(objective), torque_gains=planner.torque_gains)
        nlp = transcription.nlp
        expanded = ca.Function("nlp", [nlp["x"], nlp["p"]], [nlp["f"], nlp["g"]]).expand()
        counts.append((expanded.n_nodes(), transcription.variables.size))
    (k0, k1), ((n0, x0), (n1, x1)) = knots, counts
    per_knot = (n1 - n0) / (k1 - k0)
    return StageSize(objective, per_knot, n0 - k0 * per_knot, (x1 - x0) / (k1 - k0))


def estimate_memory(task, objective: str | None = None, planner: Planner | None = None) -> MemoryEstimate:
    """Estimated peak memory [bytes] of solving ``task`` for ``objective`` with ``planner``.

    ``planner`` defaults to the one :func:`optimizer.solve` uses (its
    symbolic robot is reused by the solve); solvers it has built already are
    counted again (the estimate is for a fresh process, as ``brace solve``).
    """
    planner = planner or shared_planner()
    objective = objective or task.objective
    stages = tuple(stage_size(task, name, planner) for name in stages_of(objective))
    return MemoryEstimate(task.knots, resident_size(), stages, planner.backend.build_bytes_per_node(planner.expands))
