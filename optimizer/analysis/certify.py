"""Exact certification of a plan's smallest unrejectable force, knot by knot.

For each knot: the exact figure ``rho`` of the residual force polytope
(:mod:`.polytope`), the weakest direction (world frame), the bottleneck (the
limits that stop a push that way, by name), the plan's own margin and the
ratio of the two. A disturbance replay draws random forces within the
planned margin and checks each is rejectable, then pushes just beyond
``rho`` along the weakest direction and checks that push is not.
"""
from __future__ import annotations

import collections
import math
import time
from dataclasses import dataclass, field

import numpy as np

from .knot_response import knot_responses
from .model_change import ChangedKnots, ModelChange, feasible_at_rest
from .plan_check import CheckReport, check_plan
from .polytope import EmptyResidualSet, SupportLP, project, sample_support
from .response import KnotResponse

DEFAULT_TOL = 1e-7
DEFAULT_CAP = 1e6
DEFAULT_MAX_LPS = 400
MARGIN_RTOL = 1e-6   # a planned margin may exceed the figure by MARGIN_ATOL + MARGIN_RTOL |figure|
MARGIN_ATOL = 1e-6   # [N]: the support LPs' and hulls' rounding, which a relative term alone misses near 0 N


def figure_name(exact: int, total: int) -> str:
    """What ``total`` knots' certified figures are when ``exact`` of them are exact.

    ``"exact"``, ``"lower bound"`` (the proven lower bound of a bound pair) or
    ``"exact or lower bound"``: the word every table and page heads these
    figures with.
    """
    return "exact" if exact == total else ("lower bound" if exact == 0 else "exact or lower bound")


def common_figure(names) -> str:
    """One heading for figures of several plans (names from :func:`figure_name`; empty: ``"exact"``)."""
    kinds = set(names)
    return kinds.pop() if len(kinds) == 1 else ("exact" if not kinds else "exact or lower bound")


def margin_within(planned: float, figure: float) -> bool:
    """``planned`` does not exceed ``figure`` [N] by more than the stated tolerance."""
    return planned <= figure + MARGIN_ATOL + MARGIN_RTOL * abs(figure)


@dataclass
class Settings:
    """How to certify.

    Attributes
    ----------
    tol : float
        Relative agreement of inner and outer hull at which refinement stops.
    cap : float
        Largest disturbance looked at [N]; directions the robot can resist
        without bound stop there and are reported as capped.
    full : bool
        Project the whole polytope (true facet count), not only around rho.
    samples : int
        Sampled directions that tighten the upper bound of a knot whose
        projection stopped (``max_lps``) before inner and outer hull agreed.
    backend : str
        ``"auto"``, ``"resident"`` or ``"linprog"`` (see :class:`SupportLP`).
    max_lps : int
        Support LPs per knot after which the projection stops; the knot then
        carries a bound pair instead of an exact figure.
    """

    tol: float = DEFAULT_TOL
    cap: float = DEFAULT_CAP
    full: bool = False
    samples: int = 400
    backend: str = "auto"
    max_lps: int = DEFAULT_MAX_LPS


@dataclass
class ReplayCounts:
    """Outcome of the disturbance replay (counts over knots).

    ``drawn`` forces within the planned margin, of which ``rejected`` had an
    admissible response; ``beyond_tried`` pushes just beyond rho along the
    weakest direction, of which ``beyond_unrejectable`` had none.
    """

    drawn: int = 0
    rejected: int = 0
    beyond_tried: int = 0
    beyond_unrejectable: int = 0
    skipped: list = field(default_factory=list)

    def add(self, other: "ReplayCounts") -> None:
        self.drawn += other.drawn
        self.rejected += other.rejected
        self.beyond_tried += other.beyond_tried
        self.beyond_unrejectable += other.beyond_unrejectable
        self.skipped += other.skipped

    @property
    def passed(self) -> bool:
        return self.rejected == self.drawn and self.beyond_unrejectable == self.beyond_tried


@dataclass
class KnotCertificate:
    """Certification of one knot.

    Attributes
    ----------
    knot : int
    time : float
        Knot time [s].
    rho : float
        Smallest unrejectable disturbance [N]: exact within the tolerance
        when ``exact``, else the sound lower bound (negative: the plan
        already breaks a limit and no response repairs it; ``-inf``: no
        response exists at all).
    lower, upper : float
        Sound bounds [N]: the inner hull's inscribed radius (points of the
        residual set) and the smallest support value of any LP asked.
    direction : ndarray, shape (d,)
        Weakest direction, unit, world frame (``[force; moment]`` for a wrench).
    bottleneck : list of str
        Limits active when pushing along ``direction``.
    planned : float
        The plan's margin at this knot [N] (NaN if absent).
    ratio : float
        ``planned / rho`` (rho the lower bound when not exact): 1 means the
        linear-gain bound is tight.
    facets, vertices, lps : int
        Distinct facets and vertices of the (inner) polytope, LPs solved.
    method : str
    flat, capped, unbounded, complete : bool
        See :class:`~optimizer.analysis.polytope.Projection`.
    violations : list of str
        Limits the plan's own point already breaks, with the excess.
    seconds : float
        Wall time of this knot [s].
    notes : list of str
    replay : ReplayCounts or None
        This knot's replay counts.
    weakest_u : ndarray, shape (d,) or None
        Weakest direction in the coordinates u of ``F = W u``.
    weakest_support : float
        Support value along ``weakest_u`` [N]: a push just beyond it that way
        is unrejectable (equal to rho within the tolerance when exact).
    """

    knot: int
    time: float
    rho: float
    lower: float
    upper: float
    direction: np.ndarray
    bottleneck: list
    planned: float
    ratio: float
    facets: int
    vertices: int
    lps: int
    method: str
    flat: bool = False
    capped: bool = False
    unbounded: bool = False
    complete: bool = True
    violations: list = field(default_factory=list)
    seconds: float = 0.0
    notes: list = field(default_factory=list)
    replay: ReplayCounts | None = None
    weakest_u: np.ndarray | None = None
    weakest_support: float = math.nan
    changed: "ChangedFigure | None" = None

    @property
    def exact(self) -> bool:
        """Inner and outer hull agreed within the tolerance: ``rho`` is the exact figure."""
        return self.complete

    @property
    def margin_ok(self) -> bool:
        """The planned margin is proven not to exceed the figure (within :func:`margin_within`)."""
        if not math.isfinite(self.planned):
            return True
        return margin_within(self.planned, self.rho)

    @property
    def status(self) -> str:
        if self.rho == -math.inf:
            return "no admissible response"
        if self.violations or self.rho < 0.0:
            return "violation"
        if not self.margin_ok:
            if self.exact:
                return "margin above exact"
            above = not margin_within(self.planned, self.upper)
            return "margin above upper bound" if above else "margin not proven (between the bounds)"
        return "ok"

    def to_json(self) -> dict:
        return {
            "knot": self.knot, "time_s": _num(self.time), "figure": "exact" if self.exact else "bounds",
            "rho_exact_N": _num(self.rho) if self.exact else None,
            "rho_lower_N": _num(self.lower), "rho_upper_N": _num(self.upper),
            "weakest_direction": [_num(x) for x in self.direction],
            "bottleneck": list(self.bottleneck), "planned_margin_N": _num(self.planned),
            "planned_over_exact": _num(self.ratio), "status": self.status,
            "facets": self.facets, "vertices": self.vertices, "lps": self.lps, "method": self.method,
            "flat": self.flat, "capped": self.capped, "unbounded_directions": self.unbounded,
            "converged": self.complete, "violations": list(self.violations),
            "seconds": _num(self.seconds), "notes": list(self.notes),
            "replay": None if self.replay is None else _replay_json(self.replay),
            "changed_model": None if self.changed is None else self.changed.to_json(),
        }


def _num(x):
    """JSON number or null for NaN / infinities."""
    x = float(x)
    return x if math.isfinite(x) else None


def _replay_json(r: ReplayCounts) -> dict:
    return {"drawn": r.drawn, "rejected": r.rejected, "beyond_tried": r.beyond_tried,
            "beyond_unrejectable": r.beyond_unrejectable, "skipped": list(r.skipped), "passed": r.passed}


def support_lp(resp: KnotResponse, settings: Settings) -> SupportLP:
    """The knot's support LP, built once (only the cost changes per direction)."""
    rows = resp.limit_rows()
    return SupportLP(rows.a_ub, rows.b_ub, rows.a_eq, rows.dim, settings.cap, settings.backend, rows.names)


def row_name(lp: SupportLP, index: int) -> str:
    """Name of limit row ``index``, cap rows included (``"cap +u0"``)."""
    if index < lp.rows:
        return lp.names[index]
    k = index - lp.rows
    return f"cap {'+' if k < lp.dim else '-'}u{k % lp.dim}"


def nominal_violations(lp: SupportLP, tol: float = 1e-9) -> list:
    """Limits broken at the plan's own point (no disturbance, no change)."""
    b = lp.b_ub[: lp.rows]
    bad = np.flatnonzero(b < -tol * (1.0 + np.abs(b).max(initial=0.0)))
    return [f"{lp.names[i]} exceeded by {-b[i]:.4g}" for i in bad]


def certify_response(resp: KnotResponse, planned: float = math.nan, settings: Settings | None = None,
                     knot: int = 0, t: float = 0.0) -> tuple[KnotCertificate, SupportLP]:
    """Certify one knot's response problem; returns the certificate and its LP."""
    settings = settings or Settings()
    start = time.perf_counter()
    lp = support_lp(resp, settings)
    violations = nominal_violations(lp)
    try:
        proj = project(lp, settings.tol, settings.full, settings.max_lps)
        if not proj.complete and settings.samples > 0:
            proj = _tighten_upper(lp, proj, settings.samples)
    except EmptyResidualSet:
        return _empty_certificate(resp, lp, planned, knot, t, violations, start), lp
    direction = resp.shape @ proj.weakest.direction
    rho = proj.rho
    cert = KnotCertificate(
        knot=knot, time=t, rho=rho, lower=proj.lower, upper=proj.upper,
        direction=direction / np.linalg.norm(direction),
        bottleneck=[row_name(lp, i) for i in proj.weakest.binding],
        planned=float(planned), ratio=planned / rho if rho > 0.0 else math.nan,
        facets=proj.facets, vertices=len(proj.vertices), lps=lp.solved, method=proj.method,
        flat=proj.flat, capped=proj.capped, unbounded=proj.unbounded, complete=proj.complete,
        violations=violations, notes=list(proj.notes), weakest_u=proj.weakest.direction,
        weakest_support=proj.weakest.value,
    )
    if not proj.complete:
        cert.notes.append(f"{lp.dim}-D projection stopped after {settings.max_lps} LPs before inner and outer "
                          "hull agreed: the figure is a bound pair (sound lower, sampled upper)")
    cert.seconds = time.perf_counter() - start
    return cert, lp


def _tighten_upper(lp: SupportLP, proj, samples: int):
    """Lower the projection's upper bound with ``samples`` sampled support LPs (never its lower bound)."""
    sampled = sample_support(lp, samples)
    if sampled.upper < proj.upper:
        proj.upper = sampled.upper
    return proj


def _empty_certificate(resp, lp, planned, knot, t, violations, start) -> KnotCertificate:
    return KnotCertificate(
        knot=knot, time=t, rho=-math.inf, lower=-math.inf, upper=-math.inf,
        direction=np.full(resp.dim, math.nan), bottleneck=[], planned=float(planned), ratio=math.nan,
        facets=0, vertices=0, lps=lp.solved, method="projection", violations=violations,
        seconds=time.perf_counter() - start,
        notes=["no change of torques and contact forces satisfies the limits, even without disturbance"],
    )


def replay_knot(lp: SupportLP, cert: KnotCertificate, draws: int, rng) -> ReplayCounts:
    """Random disturbances within the planned margin, and one push just beyond rho.

    Draws are uniform in the ball ``|u| <= planned`` (directions uniform on
    the sphere). The push beyond is ``(rho + delta) d`` along the weakest
    direction with ``delta = 1e-4 rho``; it is skipped when rho is not
    positive or is the cap.
    """
    counts = ReplayCounts()
    planned = cert.planned
    if draws > 0 and math.isfinite(planned) and planned > 0.0:
        dirs = rng.normal(size=(draws, lp.dim))
        dirs /= np.linalg.norm(dirs, axis=1, keepdims=True)
        radii = planned * rng.uniform(size=draws) ** (1.0 / lp.dim)
        for u in dirs * radii[:, None]:
            counts.drawn += 1
            counts.rejected += lp.contains(u)
    elif draws > 0:
        counts.skipped.append(f"knot {cert.knot}: no positive planned margin to replay")
    if cert.rho > 0.0 and not cert.capped and cert.weakest_u is not None:
        beyond = max(cert.rho, cert.weakest_support if math.isfinite(cert.weakest_support) else cert.rho)
        counts.beyond_tried += 1
        counts.beyond_unrejectable += not lp.contains(beyond * (1.0 + 1e-4) * cert.weakest_u)
    else:
        counts.skipped.append(f"knot {cert.knot}: no push beyond rho (rho not positive or capped)")
    return counts


@dataclass
class ChangedFigure:
    """One knot under a changed model (the plan fixed).

    Attributes
    ----------
    cert : KnotCertificate
        Certification with the changed limits (and payload); ``cert.rho`` is
        the margin under the changed model [N].
    feasible : bool
        Some response keeps every changed limit with no disturbance.
    friction_floor : float
        Smallest friction scale (times the plan's coefficients, the other
        changes applied) at which the knot stays feasible.
    """

    cert: KnotCertificate
    feasible: bool
    friction_floor: float

    def to_json(self) -> dict:
        c = self.cert
        return {"rho_N": _num(c.rho) if c.exact else None, "rho_lower_N": _num(c.lower),
                "rho_upper_N": _num(c.upper), "figure": "exact" if c.exact else "bounds",
                "feasible": self.feasible, "friction_floor_scale": _num(self.friction_floor),
                "bottleneck": list(c.bottleneck), "violations_at_planned_point": list(c.violations)}


@dataclass
class PlanCertificate:
    """Certificates of the chosen knots of one plan and their summary."""

    knots: list
    disturbance: dict
    settings: Settings
    replay: ReplayCounts | None = None
    checks: CheckReport | None = None
    change: ModelChange | None = None
    change_text: str = ""
    plan_friction: list = field(default_factory=list)

    def infeasible_under_change(self) -> list:
        """Knots where the plan is not feasible at all under the changed model."""
        return [c.knot for c in self.knots if c.changed is not None and not c.changed.feasible]

    def smallest(self) -> KnotCertificate:
        return min(self.knots, key=lambda c: c.rho)

    @property
    def figure(self) -> str:
        """What the knots' ``rho`` are: see :func:`figure_name`."""
        return figure_name(sum(c.exact for c in self.knots), len(self.knots))

    def bottleneck_counts(self) -> collections.Counter:
        """How many knots each limit is part of the bottleneck at.

        Limits are counted in the order they are first met (knot by knot,
        each knot's bottleneck in limit-row order), so ``most_common`` breaks
        ties the same way on every run: the earlier knot, then the earlier row.
        """
        return collections.Counter(name for c in self.knots for name in dict.fromkeys(c.bottleneck))

    def problems(self) -> list:
        """Plain-language list of what failed (empty when the plan is certified)."""
        out = [] if self.checks is None else [r.reason() for r in self.checks.failures()]
        return out + self.point_problems()

    def point_problems(self) -> list:
        """What failed at this disturbance point (the plan's physics checks apart)."""
        out = [f"knot {c.knot}: {c.status}" for c in self.knots if c.status != "ok"]
        bad = self.infeasible_under_change()
        if bad:
            out.append(f"changed model ({self.change_text}): the plan is not feasible at all at knots "
                       + ", ".join(map(str, bad)))
        if self.replay is not None and not self.replay.passed:
            r = self.replay
            out.append(f"replay: {r.drawn - r.rejected} of {r.drawn} draws not rejectable, "
                       f"{r.beyond_tried - r.beyond_unrejectable} of {r.beyond_tried} pushes beyond rho rejectable")
        return out

    def summary(self) -> dict:
        low = self.smallest()
        counts = self.bottleneck_counts()
        name, times = counts.most_common(1)[0] if counts else (None, 0)
        ratios = [c.ratio for c in self.knots if math.isfinite(c.ratio)]
        seconds = [c.seconds for c in self.knots]
        return {
            "knots": len(self.knots), "smallest_rho_N": _num(low.rho), "smallest_at_knot": low.knot,
            "smallest_at_time_s": _num(low.time), "most_frequent_bottleneck": name,
            "bottleneck_knots": times, "planned_over_exact_min": _num(min(ratios)) if ratios else None,
            "planned_over_exact_max": _num(max(ratios)) if ratios else None,
            "margin_above_exact_knots": sum(not c.margin_ok for c in self.knots),
            "exact_knots": sum(c.exact for c in self.knots), "figure": self.figure,
            "smallest_rho_upper_N": _num(low.upper), "smallest_is_exact": low.exact,
            "physics_checked": self.checks is not None,
            **self._changed_summary(),
            "violation_knots": sum(c.status == "violation" for c in self.knots),
            "median_ms_per_knot": _num(1e3 * float(np.median(seconds))),
            "certified": not self.problems(), "problems": self.problems(),
        }

    def _changed_summary(self) -> dict:
        if self.change is None:
            return {}
        figures = [c.changed for c in self.knots]
        low = min(figures, key=lambda f: f.cert.rho)
        floor = max(figures, key=lambda f: -math.inf if math.isnan(f.friction_floor) else f.friction_floor)
        return {"changed_smallest_rho_N": _num(low.cert.rho), "changed_smallest_at_knot": low.cert.knot,
                "changed_smallest_is_exact": low.cert.exact,
                "changed_infeasible_knots": self.infeasible_under_change(),
                "friction_floor_scale": _num(floor.friction_floor), "friction_floor_at_knot": floor.cert.knot}

    def to_json(self) -> dict:
        s = self.settings
        return {
            "format": "brace-certificate/1", "disturbance": self.disturbance,
            "settings": {"tol": s.tol, "cap_N": s.cap, "full": s.full, "samples": s.samples, "max_lps": s.max_lps},
            "plan_checks": {"run": False} if self.checks is None else self.checks.to_json(),
            "model_change": None if self.change is None else {**self.change.to_json(), "text": self.change_text},
            "summary": self.summary(), "knots": [c.to_json() for c in self.knots],
            "replay": None if self.replay is None else _replay_json(self.replay),
        }

    def point_json(self) -> dict:
        """This point's part of a :class:`PointsCertificate`'s JSON: disturbance, summary, knots, replay."""
        return {"disturbance": self.disturbance, "summary": self.summary(),
                "knots": [c.to_json() for c in self.knots],
                "replay": None if self.replay is None else _replay_json(self.replay)}


@dataclass
class PointsCertificate:
    """Certificates of several disturbance points of one plan, with one run of the physics checks.

    ``points`` holds one :class:`PlanCertificate` per certified point, in
    the order asked; each carries the shared ``checks``.
    """

    points: list
    checks: CheckReport | None = None

    def problems(self) -> list:
        """What failed, checks once, then each point's (named when there are several)."""
        out = [] if self.checks is None else [r.reason() for r in self.checks.failures()]
        for cert in self.points:
            d = cert.disturbance
            prefix = f"point {d['index']} ({d['frame']}): " if len(self.points) > 1 else ""
            out += [prefix + problem for problem in cert.point_problems()]
        return out

    def to_json(self) -> dict:
        """``brace-certificate/2``: shared settings, checks and verdict, then one entry per point."""
        first = self.points[0]
        s = first.settings
        return {
            "format": "brace-certificate/2",
            "settings": {"tol": s.tol, "cap_N": s.cap, "full": s.full, "samples": s.samples, "max_lps": s.max_lps},
            "plan_checks": {"run": False} if self.checks is None else self.checks.to_json(),
            "model_change": None if first.change is None else {**first.change.to_json(), "text": first.change_text},
            "certified": not self.problems(), "problems": self.problems(),
            "points": [cert.point_json() for cert in self.points],
        }


def certify_points(plan, knots=None, points=None, settings: Settings | None = None, replay: int = 0,
                   seed: int = 0, progress=None, check: bool = True, tolerances: dict | None = None,
                   change: ModelChange | None = None, friction_floor: bool = True) -> PointsCertificate:
    """Check the plan's physics once, then certify every disturbance point in ``points`` (all by default).

    Each point is certified as :func:`certify_plan` does (exact figures, or
    bound pairs where the projection stops); the other parameters are its.
    ``progress`` is called as ``progress(point, done, total, certificate)``.
    """
    checks = check_plan(plan, tolerances) if check else None
    chosen = range(len(plan.meta["disturbances"])) if points is None else list(points)
    certs = []
    for p in chosen:
        relay = None if progress is None else (lambda done, total, cert, p=p: progress(p, done, total, cert))
        cert = certify_plan(plan, knots, p, settings, replay, seed, relay, check=False, change=change,
                            friction_floor=friction_floor)
        cert.checks = checks
        certs.append(cert)
    return PointsCertificate(certs, checks)


def planned_margin(plan, k: int, disturbance: int) -> float:
    """The plan's own margin for a disturbance point at knot k [N]."""
    if disturbance == 0:
        return float(plan.margin[k])
    if plan.margins is None:
        return math.nan
    return float(plan.margins[k, disturbance])


def certify_plan(plan, knots=None, disturbance: int = 0, settings: Settings | None = None,
                 replay: int = 0, seed: int = 0, progress=None, check: bool = True,
                 tolerances: dict | None = None, change: ModelChange | None = None,
                 friction_floor: bool = True) -> PlanCertificate:
    """Check the plan's physics, then certify the chosen knots (all by default) of ``plan``.

    A plan that fails a physics check (:mod:`.plan_check`) is not certified,
    whatever its margins.

    Parameters
    ----------
    plan : optimizer.planfile.Plan
    knots : sequence of int, optional
    disturbance : int
        Index into ``plan.meta["disturbances"]``.
    settings : Settings, optional
    replay : int
        Random draws per knot for the disturbance replay (0: no replay).
    seed : int
        Seed of the replay's random generator.
    progress : callable, optional
        Called as ``progress(done, total, certificate)`` after every knot.
    check : bool
        Run the physics checks first (False: skip them; the report says so).
    tolerances : dict of str to float, optional
        Check tolerances by check name (see :data:`.plan_check.CHECKS`).
    change : ModelChange, optional
        Also certify every chosen knot under this changed model (the plan
        fixed): margin, feasibility and (``friction_floor``) the friction
        floor per knot.
    friction_floor : bool
        Find each knot's friction floor under ``change`` (about 15 LPs per
        knot); False leaves it NaN.
    """
    settings = settings or Settings()
    checks = check_plan(plan, tolerances) if check else None
    chosen = list(range(plan.t.shape[0]) if knots is None else knots)
    rng = np.random.default_rng(seed)
    total = ReplayCounts() if replay else None
    certs = []
    changed = None if change is None else ChangedKnots(plan, change, disturbance)
    for i, (k, resp) in enumerate(knot_responses(plan, chosen, disturbance)):
        cert, lp = certify_response(resp, planned_margin(plan, k, disturbance), settings, k, float(plan.t[k]))
        if changed is not None:
            cert.changed = changed_figure(changed, k, cert, settings, friction_floor)
        if replay:
            cert.replay = replay_knot(lp, cert, replay, rng)
            total.add(cert.replay)
        certs.append(cert)
        if progress is not None:
            progress(i + 1, len(chosen), cert)
    entry = plan.meta["disturbances"][disturbance]
    info = {"index": disturbance, "frame": entry["frame"], "kind": entry["kind"]}
    text = "" if change is None else change.describe(plan.meta, disturbance)
    return PlanCertificate(certs, info, settings, total, checks, change, text, list(plan.meta["friction"]))


def changed_figure(changed: ChangedKnots, k: int, planned: KnotCertificate, settings: Settings,
                   friction_floor: bool = True) -> ChangedFigure:
    """Knot ``k`` certified under the changed model, with its feasibility and friction floor."""
    resp = changed.response(k)
    if not np.isfinite(resp.forces).all():  # the contacts cannot balance the payload at all
        cert = KnotCertificate(k, planned.time, -math.inf, -math.inf, -math.inf, np.full(resp.dim, math.nan), [],
                               planned.planned, math.nan, 0, 0, 0, "projection",
                               notes=["the stance contacts cannot balance the payload"])
        return ChangedFigure(cert, False, math.inf)
    cert, _ = certify_response(resp, planned.planned, settings, k, planned.time)
    floor = changed.friction_floor(resp, k) if friction_floor else math.nan
    return ChangedFigure(cert, feasible_at_rest(resp), floor)
