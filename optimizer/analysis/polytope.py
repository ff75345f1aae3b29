"""Exact residual-force polytopes by iterative projection (docs/formulation.md section 7).

The residual set ``P = {u : exists y, A_u u + A_y y <= b, E_u u + E_y y = 0}``
is the projection of a lifted polytope onto the disturbance coordinates
``u``. Its support function ``h(d) = max {d . u : u in P}`` is one LP. From
support points (an inner hull, ``conv`` of points of P) and support planes
(an outer hull, ``{u : d . u <= h(d)}``) the projection is refined until the
two agree within a tolerance.

The figure of interest is ``rho = min over unit d of h(d)``: for an origin
inside P it is the radius of the largest origin-centred ball in P (the
smallest unrejectable disturbance); for an origin outside P it is minus the
distance from the origin to P (a plan that already violates its limits).
Both bounds are kept: ``min h`` over queried directions is an upper bound,
the same quantity for the inner hull a lower bound.

Unbounded directions are capped by the box ``|u_i| <= cap``; the result says
whether the cap was reached. LPs run in HiGHS through SciPy: a resident model
whose cost alone changes between directions (SciPy's bundled HiGHS binding,
about five times faster than a fresh ``linprog`` call) or ``linprog`` itself.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import linprog, minimize
from scipy.spatial import ConvexHull, HalfspaceIntersection, QhullError

try:  # SciPy's own HiGHS binding (private module; ``linprog`` is the fallback)
    from scipy.optimize._highspy import _core as _highs
except ImportError:  # pragma: no cover - depends on the SciPy build
    _highs = None


class EmptyResidualSet(Exception):
    """No response keeps the knot within its limits, whatever the disturbance."""


@dataclass
class Support:
    """Result of one support LP ``max d . u`` over the residual set.

    Attributes
    ----------
    direction : ndarray, shape (dim,)
        Unit direction d.
    value : float
        ``h(d)``, same unit as u.
    point : ndarray, shape (dim,)
        A maximizer u.
    binding : ndarray of int
        Indices of the limit rows (``A_ub``, caps last) with a non-zero dual:
        the limits that stop the push along d.
    """

    direction: np.ndarray
    value: float
    point: np.ndarray
    binding: np.ndarray


class SupportLP:
    """Support and membership LPs of one residual set, built once.

    Parameters
    ----------
    a_ub : ndarray, shape (r, dim + ny)
    b_ub : ndarray, shape (r,)
    a_eq : ndarray, shape (e, dim + ny)
        Right side zero.
    dim : int
        Number of leading columns that are the disturbance coordinates u.
    cap : float
        Box ``|u_i| <= cap`` keeping every LP bounded; rows ``r .. r + 2 dim``
        are the cap rows (``+u_i <= cap`` then ``-u_i <= cap``).
    backend : {"auto", "resident", "linprog"}
        ``resident`` keeps one HiGHS model and changes only its cost.
    names : list of str, optional
        Names of the ``r`` limit rows.
    """

    def __init__(self, a_ub, b_ub, a_eq, dim: int, cap: float, backend: str = "auto", names=None):
        width = a_ub.shape[1] if a_ub.size else max(a_eq.shape[1], dim)
        caps = np.zeros((2 * dim, width))
        caps[:dim, :dim] = np.eye(dim)
        caps[dim:, :dim] = -np.eye(dim)
        self.a_ub = np.vstack([np.reshape(a_ub, (-1, width)), caps])
        self.b_ub = np.concatenate([b_ub, np.full(2 * dim, float(cap))])
        self.a_eq = np.reshape(a_eq, (-1, width))
        self.dim, self.cap, self.width = dim, float(cap), width
        self.rows = a_ub.shape[0]
        self.names = list(names) if names is not None else [f"limit {i}" for i in range(self.rows)]
        self.solved = 0
        if backend == "auto":
            backend = "resident" if _highs is not None else "linprog"
        self.backend = backend
        self._model = _ResidentModel(self) if backend == "resident" else _LinprogModel(self)

    def support(self, direction) -> Support:
        """Solve ``max d . u``; raises :class:`EmptyResidualSet` if infeasible."""
        d = np.asarray(direction, dtype=float)
        d = d / np.linalg.norm(d)
        self.solved += 1
        x, duals = self._model.maximize(d)
        slack = self.b_ub - self.a_ub @ x
        tight = np.abs(slack) <= 1e-7 * (1.0 + np.abs(self.b_ub))
        binding = np.flatnonzero((np.abs(duals) > 1e-9) & tight)
        u = x[: self.dim]
        return Support(d, float(d @ u), u, binding)

    def contains(self, u) -> bool:
        """True if some response keeps the knot within its limits under ``u``."""
        self.solved += 1
        return self._model.feasible(np.asarray(u, dtype=float))

    def is_cap_row(self, index: int) -> bool:
        return index >= self.rows


class _LinprogModel:
    """Support LPs through ``scipy.optimize.linprog(method="highs")``."""

    def __init__(self, lp: SupportLP):
        self.lp = lp

    def _solve(self, cost, bounds):
        lp = self.lp
        eq = lp.a_eq if lp.a_eq.shape[0] else None
        return linprog(cost, A_ub=lp.a_ub, b_ub=lp.b_ub, A_eq=eq,
                       b_eq=np.zeros(lp.a_eq.shape[0]) if eq is not None else None,
                       bounds=bounds, method="highs")

    def maximize(self, d):
        cost = np.zeros(self.lp.width)
        cost[: d.size] = -d
        res = self._solve(cost, (None, None))
        if res.status == 2:
            raise EmptyResidualSet("the response LP is infeasible")
        if res.status != 0:
            raise RuntimeError(f"support LP failed: {res.message}")
        return res.x, res.ineqlin.marginals

    def feasible(self, u):
        lp = self.lp
        bounds = [(ui, ui) for ui in u] + [(None, None)] * (lp.width - lp.dim)
        return self._solve(np.zeros(lp.width), bounds).status == 0


class _ResidentModel:
    """One HiGHS model kept in memory; only the cost (or u's bounds) change."""

    def __init__(self, lp: SupportLP):
        self.lp = lp
        self.support_model = self._build()
        self.member_model = None
        self.columns = np.arange(lp.width, dtype=np.int32)

    def _build(self):
        lp, inf = self.lp, _highs.kHighsInf
        matrix = np.vstack([lp.a_ub, lp.a_eq])
        model = _highs.HighsLp()
        model.num_col_, model.num_row_ = lp.width, matrix.shape[0]
        model.col_cost_ = np.zeros(lp.width)
        model.col_lower_ = np.full(lp.width, -inf)
        model.col_upper_ = np.full(lp.width, inf)
        model.row_lower_ = np.concatenate([np.full(lp.a_ub.shape[0], -inf), np.zeros(lp.a_eq.shape[0])])
        model.row_upper_ = np.concatenate([lp.b_ub, np.zeros(lp.a_eq.shape[0])])
        nz = matrix != 0.0
        model.a_matrix_.format_ = _highs.MatrixFormat.kColwise
        model.a_matrix_.num_col_, model.a_matrix_.num_row_ = lp.width, matrix.shape[0]
        model.a_matrix_.start_ = np.concatenate([[0], np.cumsum(nz.sum(axis=0))]).astype(np.int32)
        rows, cols = np.nonzero(nz.T)
        model.a_matrix_.index_ = cols.astype(np.int32)
        model.a_matrix_.value_ = matrix.T[rows, cols]
        highs = _highs._Highs()
        for key, value in (("output_flag", False), ("presolve", "off"),
                           ("primal_feasibility_tolerance", 1e-9),
                           ("dual_feasibility_tolerance", 1e-9)):
            highs.setOptionValue(key, value)
        highs.passModel(model)
        return highs

    def maximize(self, d):
        highs = self.support_model
        cost = np.zeros(self.lp.width)
        cost[: d.size] = -d
        highs.changeColsCost(self.lp.width, self.columns, cost)
        highs.run()
        status = highs.getModelStatus()
        if status == _highs.HighsModelStatus.kInfeasible:
            raise EmptyResidualSet("the response LP is infeasible")
        if status != _highs.HighsModelStatus.kOptimal:
            raise RuntimeError(f"support LP failed: {highs.modelStatusToString(status)}")
        solution = highs.getSolution()
        duals = np.asarray(solution.row_dual)[: self.lp.a_ub.shape[0]]
        return np.asarray(solution.col_value), duals

    def feasible(self, u):
        if self.member_model is None:
            self.member_model = self._build()
        highs, dim = self.member_model, self.lp.dim
        highs.changeColsBounds(dim, self.columns[:dim], u, u)
        highs.run()
        return highs.getModelStatus() == _highs.HighsModelStatus.kOptimal


@dataclass
class Projection:
    """The residual set's figure and the polytope found on the way.

    Attributes
    ----------
    rho : float
        ``min over unit d of h(d)`` (the exact figure within ``tol``): the
        inscribed-ball radius if positive, minus the distance from the
        origin to the set if negative, 0 for a flat set through the origin.
    lower, upper : float
        Bounds on rho from the inner and the outer hull.
    weakest : Support
        The support LP along the weakest direction (``weakest.direction``).
    vertices : ndarray, shape (nv, dim)
        Support points found (inner hull vertices).
    facets : int
        Distinct facet planes of the inner hull (0 if flat).
    lps : int
        Support and membership LPs solved.
    method : str
        ``"projection"`` (adaptive, refined where rho is decided),
        ``"projection-full"`` (the whole polytope) or ``"sampled"``.
    flat, capped, unbounded, complete : bool
        The set has no interior; the weakest direction is stopped by the
        cap (rho is then the cap); some asked direction reached the cap (the
        true set is unbounded there); refinement met the tolerance (not
        stopped by ``max_lps``).
    gap : float
        Largest distance between outer and inner hull (full projection) or
        ``upper - lower`` otherwise.
    """

    rho: float
    lower: float
    upper: float
    weakest: Support
    vertices: np.ndarray
    facets: int
    lps: int
    method: str
    flat: bool = False
    capped: bool = False
    unbounded: bool = False
    complete: bool = True
    gap: float = 0.0
    notes: list = field(default_factory=list)


def axis_directions(dim: int) -> np.ndarray:
    """The ``2 dim`` unit directions ``+-e_i``, shape (2 dim, dim)."""
    eye = np.eye(dim)
    return np.vstack([eye, -eye])


def sphere_directions(dim: int, count: int, seed: int = 0) -> np.ndarray:
    """``count`` seeded random unit directions, shape (count, dim)."""
    g = np.random.default_rng(seed).normal(size=(count, dim))
    return g / np.linalg.norm(g, axis=1, keepdims=True)


class _Queries:
    """Support LPs asked so far, with a cache by direction."""

    def __init__(self, lp: SupportLP):
        self.lp, self.items = lp, []
        self._directions = np.zeros((0, lp.dim))

    def ask(self, d) -> Support:
        d = np.asarray(d, float) / np.linalg.norm(d)
        s = self.asked(d)
        if s is None:
            s = self.lp.support(d)
            self.items.append(s)
            self._directions = np.vstack([self._directions, s.direction])
        return s

    def asked(self, d) -> Support | None:
        if not self.items:
            return None
        hits = np.flatnonzero(self._directions @ np.asarray(d, float) > 1.0 - 1e-12)
        return self.items[hits[0]] if hits.size else None

    def points(self) -> np.ndarray:
        return np.array([s.point for s in self.items])

    def best(self) -> Support:
        return min(self.items, key=lambda s: s.value)


def _facet_planes(hull: ConvexHull):
    """Unit outward normals (F, dim) and offsets (F,) of ``n . x <= o``."""
    return hull.equations[:, :-1], -hull.equations[:, -1]


def count_distinct_planes(normals, offsets, scale: float) -> int:
    """Number of distinct planes among qhull's (triangulated) facets.

    Two facets lie on one plane when their normals agree within 1e-6 and
    their offsets within ``1e-6 scale``; each facet is compared with the
    planes kept so far in one vectorized step (a 6-D hull has thousands).
    """
    normals, offsets = np.asarray(normals, float), np.asarray(offsets, float)
    kept_n = np.zeros((0, normals.shape[1] if normals.ndim == 2 else 0))
    kept_o = np.zeros(0)
    for n, o in zip(normals, offsets):
        same = (np.abs(kept_n - n).max(axis=1, initial=0.0) < 1e-6) & (np.abs(kept_o - o) < 1e-6 * scale)
        if not same.any():
            kept_n, kept_o = np.vstack([kept_n, n]), np.append(kept_o, o)
    return len(kept_o)


def nearest_point(points) -> np.ndarray:
    """Point of ``conv(points)`` nearest to the origin, shape (dim,).

    A small QP in the convex weights (SLSQP) on points scaled to unit size;
    the optimality condition ``p . x >= |x|^2`` for every point is the check.
    """
    pts = np.asarray(points, dtype=float)
    size = max(np.abs(pts).max(), 1e-300)
    unit = pts / size
    k = unit.shape[0]
    gram = unit @ unit.T
    start = np.zeros(k)
    start[np.argmin(np.einsum("ij,ij->i", unit, unit))] = 1.0
    res = minimize(lambda w: w @ gram @ w, start, jac=lambda w: 2.0 * gram @ w,
                   bounds=[(0.0, None)] * k, method="SLSQP",
                   constraints=[{"type": "eq", "fun": lambda w: w.sum() - 1.0, "jac": lambda w: np.ones(k)}],
                   options={"ftol": 1e-16, "maxiter": 1000})
    w = np.clip(res.x, 0.0, None)
    return (w / w.sum()) @ unit * size


def _lowest_inner(hull: ConvexHull, points):
    """``min over unit d`` of the inner hull's support and the minimizing d."""
    normals, offsets = _facet_planes(hull)
    if offsets.min() > 0.0:
        i = int(np.argmin(offsets))
        return float(offsets[i]), normals[i]
    x = nearest_point(points[hull.vertices])
    dist = np.linalg.norm(x)
    if dist < 1e-12 * max(1.0, np.abs(points).max()):
        i = int(np.argmin(np.abs(offsets)))
        return float(min(offsets[i], 0.0)), normals[i]
    return -float(dist), -x / dist


class HullFailed(Exception):
    """Qhull could not build the hull of full-dimensional support points."""


def _hull(points, scale: float):
    """Convex hull of the support points, or None if they are (nearly) flat.

    Flatness is decided by the singular values alone. Full-dimensional
    points on which Qhull's default merging fails (near-coplanar facets in
    5-D and 6-D, depending on which of several optimal vertices each LP
    returned) are tried again with wide merges allowed (``Q12``), the hull
    kept only if every point lies on the inner side of every facet;
    otherwise :class:`HullFailed` (never "flat": that would report a zero
    figure for a set with interior).
    """
    centred = points - points.mean(axis=0)
    sv = np.linalg.svd(centred, compute_uv=False) if len(points) > 1 else np.zeros(1)
    if len(points) <= points.shape[1] or sv[-1] <= 1e-9 * scale:
        return None
    try:
        return ConvexHull(points)
    except QhullError:
        pass
    try:
        hull = ConvexHull(points, qhull_options="Qx Q12")
    except QhullError as exc:
        raise HullFailed(str(exc).splitlines()[0]) from None
    normals, offsets = _facet_planes(hull)
    if (points @ normals.T - offsets).max() > 1e-9 * scale:
        raise HullFailed("merged facets leave support points outside the hull")
    return hull


def _null_directions(points, scale: float) -> np.ndarray:
    """Unit directions normal to the affine span of ``points``, shape (k, dim)."""
    centred = points - points.mean(axis=0)
    _, sv, vt = np.linalg.svd(centred)
    rank = int(np.sum(sv > 1e-9 * scale))
    return vt[rank:]


def project(lp: SupportLP, tol: float = 1e-6, full: bool = False, max_lps: int = 400) -> Projection:
    """Iterative projection of the residual set, refined until inner and outer agree.

    Parameters
    ----------
    lp : SupportLP
    tol : float
        Relative tolerance: refinement stops when the bounds on rho (or, with
        ``full``, every facet of the inner hull) agree within
        ``tol * size``, size being the norm of the largest support point
        not stopped by the cap.
    full : bool
        Refine the whole polytope (true facet count) instead of only where
        rho is decided.
    max_lps : int
        Safety stop; ``complete`` is False when it is reached.

    Raises
    ------
    EmptyResidualSet
        If no response keeps the knot within its limits.
    """
    q = _Queries(lp)
    for d in axis_directions(lp.dim):
        q.ask(d)
    last = None
    while True:
        points = q.points()
        scale = max(np.abs(points).max(), 1e-12)
        atol = tol * _size(lp, q) + 1e-12
        try:
            hull = _hull(points, scale)
        except HullFailed as exc:
            return _unfinished(lp, q, last, atol, str(exc))
        last = hull
        if hull is None:
            widened = _widen_flat(q, points, scale, atol)
            if widened:
                continue
            return _flat_result(lp, q, points, scale)
        if full:
            if _refine_all_facets(q, hull, atol) and lp.solved < max_lps:
                continue
            return _result(lp, q, hull, "projection-full", atol, lp.solved < max_lps)
        lower, d_star = _lowest_inner(hull, points)
        s = q.asked(d_star)
        if s is None:
            s = q.ask(d_star)
        elif s.value - lower > atol:  # asked before and the hull did not move: numerical stall
            return _result(lp, q, hull, "projection", atol, False)
        if s.value - lower <= atol or lp.solved >= max_lps:
            try:
                hull = _hull(q.points(), scale)
            except HullFailed as exc:
                return _unfinished(lp, q, last, atol, str(exc))
            return _result(lp, q, hull, "projection", atol, lp.solved < max_lps)


def _unfinished(lp: SupportLP, q: _Queries, hull, atol: float, why: str) -> Projection:
    """Bound pair when Qhull fails: the last inner hull built (sound: its points lie in the set), if any."""
    note = f"the inner hull could not be built ({why}): the figure is a bound pair"
    if hull is not None:
        proj = _result(lp, q, hull, "projection", atol, False)
    else:  # not even the first hull: the nominal point alone bounds the figure from below
        best = q.best()
        lower = 0.0 if lp.contains(np.zeros(lp.dim)) else -np.inf
        proj = Projection(rho=lower, lower=lower, upper=best.value, weakest=best, vertices=q.points(), facets=0,
                          lps=lp.solved, method="projection", capped=_hit_cap(lp, best),
                          unbounded=_unbounded(lp, q), complete=False, gap=best.value - lower)
    proj.notes.append(note)
    return proj


def _size(lp: SupportLP, q: _Queries) -> float:
    """Extent of the set: largest support point not stopped by the cap."""
    free = [np.linalg.norm(s.point) for s in q.items if not _hit_cap(lp, s)]
    return max(free) if free else lp.cap


def _refine_all_facets(q: _Queries, hull: ConvexHull, atol: float) -> bool:
    """Ask every facet normal not yet certified; True if a point was added."""
    normals, offsets = _facet_planes(hull)
    added = False
    for n, o in zip(normals, offsets):
        if q.asked(n) is not None:
            continue  # its support point is in the hull already: asking again adds nothing
        added |= q.ask(n).value - o > atol
    return added


def _widen_flat(q: _Queries, points, scale: float, atol: float) -> bool:
    """Ask the normals of a flat point set; True if the set turned out wider."""
    widened = False
    for n in _null_directions(points, scale):
        for d in (n, -n):
            if q.asked(d) is None:
                q.ask(d)
                widened = True
    if not widened:
        return False
    return _null_directions(q.points(), scale).shape[0] < _null_directions(points, scale).shape[0]


def _result(lp: SupportLP, q: _Queries, hull: ConvexHull, method: str, atol: float, complete: bool) -> Projection:
    points = q.points()
    lower, d_star = _lowest_inner(hull, points)
    weakest = q.ask(d_star)
    upper = q.best().value
    normals, offsets = _facet_planes(hull)
    scale = max(np.abs(points).max(), 1e-12)
    gap = outer_inner_gap(q, hull) if method == "projection-full" else upper - lower
    return Projection(
        rho=lower, lower=lower, upper=upper, weakest=weakest,
        vertices=points[hull.vertices], facets=count_distinct_planes(normals, offsets, scale),
        lps=lp.solved, method=method, capped=_hit_cap(lp, weakest), unbounded=_unbounded(lp, q),
        complete=complete, gap=float(gap),
    )


def _flat_result(lp: SupportLP, q: _Queries, points, scale: float) -> Projection:
    """A set without interior: rho is 0 if it holds the origin, negative if not."""
    normals = _null_directions(points, scale)
    if lp.contains(np.zeros(lp.dim)):
        d = normals[0] if normals.shape[0] else np.eye(lp.dim)[0]
        weakest = min((q.ask(d), q.ask(-d)), key=lambda s: s.value)
        rho = 0.0
    else:
        x = nearest_point(points)
        weakest = q.ask(-x / np.linalg.norm(x))
        rho = -float(np.linalg.norm(x))
    return Projection(
        rho=rho, lower=rho, upper=min(q.best().value, 0.0) if rho == 0.0 else q.best().value,
        weakest=weakest, vertices=points, facets=0, lps=lp.solved, method="projection",
        flat=True, capped=_hit_cap(lp, weakest), unbounded=_unbounded(lp, q),
        notes=["the residual set is flat: some direction admits no disturbance at all"],
    )


def _hit_cap(lp: SupportLP, s: Support) -> bool:
    """The push along ``s.direction`` is stopped by the cap, not by a limit."""
    return any(lp.is_cap_row(i) for i in s.binding)


def _unbounded(lp: SupportLP, q: _Queries) -> bool:
    """Some asked direction reached the cap: the true set is unbounded there."""
    return any(_hit_cap(lp, s) for s in q.items)


def outer_inner_gap(q: _Queries, hull: ConvexHull) -> float:
    """Largest distance from a vertex of the outer hull to the inner hull."""
    normals, offsets = _facet_planes(hull)
    dirs = np.array([s.direction for s in q.items])
    values = np.array([s.value for s in q.items])
    centre = q.points()[hull.vertices].mean(axis=0)
    try:
        outer = HalfspaceIntersection(np.hstack([dirs, -values[:, None]]), centre)
    except (QhullError, ValueError):
        return float("nan")
    excess = outer.intersections @ normals.T - offsets
    return float(max(excess.max(), 0.0))


def sample_support(lp: SupportLP, count: int = 400, seed: int = 0) -> Projection:
    """Fallback for dim > 3: support LPs along ``2 dim + count`` directions.

    ``rho`` is then the smallest sampled support value: an upper bound of the
    true figure; ``lower`` comes from the inner hull of the support points
    when qhull can build it (NaN otherwise).
    """
    q = _Queries(lp)
    for d in np.vstack([axis_directions(lp.dim), sphere_directions(lp.dim, count, seed)]):
        q.ask(d)
    points = q.points()
    scale = max(np.abs(points).max(), 1e-12)
    try:
        hull = _hull(points, scale)
    except HullFailed:
        hull = None
    lower = _lowest_inner(hull, points)[0] if hull is not None else float("nan")
    weakest = q.best()
    return Projection(
        rho=weakest.value, lower=lower, upper=weakest.value, weakest=weakest,
        vertices=points, facets=0 if hull is None else len(hull.equations), lps=lp.solved,
        method="sampled", capped=_hit_cap(lp, weakest), unbounded=_unbounded(lp, q), complete=False,
        gap=weakest.value - lower if np.isfinite(lower) else float("nan"),
        notes=[f"{lp.dim}-D disturbance: figure from {len(q.items)} sampled directions (an upper bound)"],
    )
