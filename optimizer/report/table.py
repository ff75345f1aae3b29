"""The comparison table: one row per plan, as text, CSV and HTML cells.

A row holds what a planner reads first: status, smallest and mean margin
(planned by the plan's linear gains, and certified: exact, or the proven
lower bound where only bounds were computed), when the smallest happens, the peak torque and friction use and where,
solver iterations and time. A plan that could not be made is a row with its
reason and no figures.
"""
from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field

import numpy as np

from ..analysis.certify import common_figure
from ..analysis.limit_use import LimitUse, limit_use
from ..analysis.margin_flags import certificate_shortfalls, plan_requirements


@dataclass
class Entry:
    """One plan of a comparison, or the reason it is missing.

    Attributes
    ----------
    name : str
        Label in reports (the objective for ``brace compare``).
    plan : Plan or None
    certificate : PlanCertificate or None
        Certification of every knot.
    failure : str
        Why there is no plan (empty when there is one).
    source : str
        Plan file name, relative to the report (empty when none).
    others : list of PlanCertificate
        Exact certification of the plan's further disturbance points (1, 2,
        ...); ``certificate`` is point 0's, which the figures and the margin
        columns show.
    """

    name: str
    plan: object = None
    certificate: object = None
    failure: str = ""
    source: str = ""
    others: list = field(default_factory=list)
    _use: LimitUse | None = field(default=None, repr=False)

    @property
    def ok(self) -> bool:
        return self.plan is not None and self.certificate is not None

    @property
    def points(self) -> list:
        """Every certified disturbance point's certificate, point 0 first."""
        return [self.certificate, *self.others] if self.certificate is not None else []

    def problems(self) -> list:
        """What keeps the plan from being certified, at any of its disturbance points."""
        if self.certificate is None:
            return []
        out = self.certificate.problems()
        for cert in self.others:
            d = cert.disturbance
            out += [f"point {d['index']} ({d['frame']}): {p}" for p in cert.point_problems()]
        return out

    @property
    def use(self) -> LimitUse:
        if self._use is None:
            self._use = limit_use(self.plan)
        return self._use

    @property
    def exact(self) -> np.ndarray:
        """Certified smallest unrejectable force per knot [N], shape (K,): exact, or the
        proven lower bound where only bounds were computed (see :attr:`figure`)."""
        return np.array([c.rho for c in self.certificate.knots])

    @property
    def figure(self) -> str:
        """What :attr:`exact` holds: ``"exact"``, ``"lower bound"`` or ``"exact or lower bound"``."""
        return self.certificate.figure

    @property
    def smallest(self):
        """The certificate of the knot with the smallest certified margin."""
        return self.certificate.smallest()


COLUMNS = (
    ("objective", "objective", ""),
    ("status", "status", ""),
    ("margin_planned_min_N", "planned min [N]", ".2f"),
    ("margin_planned_mean_N", "planned mean [N]", ".2f"),
    ("margin_exact_min_N", "{figure} min [N]", ".2f"),
    ("margin_exact_mean_N", "{figure} mean [N]", ".2f"),
    ("margin_figure", "certified figure", ""),
    ("margin_exact_min_by_point_N", "{figure} min per point [N]", ""),
    ("smallest_at_s", "smallest at [s]", ".2f"),
    ("peak_torque_use_pct", "peak torque [%]", ".0f"),
    ("peak_torque_joint", "torque joint", ""),
    ("peak_friction_use_pct", "peak friction [%]", ".0f"),
    ("peak_friction_contact", "friction contact", ""),
    ("iterations", "iterations", "d"),
    ("solve_time_s", "solve time [s]", ".1f"),
)
"""(CSV key, column title with unit, number format) of every column, in order.

The margin columns are disturbance point 0's (``meta.disturbances[0]``);
the per-point column names every point with its smallest certified margin.
``{figure}`` in a title stands for what the certified columns hold
(:func:`titles`); the CSV keys stay as they are, ``margin_figure`` says per row.
"""


def titles(rows: list[dict]) -> list[str]:
    """Column titles for ``rows``, the certified columns headed by what they hold."""
    figure = common_figure(r["margin_figure"] for r in rows if r.get("margin_figure"))
    return [title.format(figure=figure) for _, title, _ in COLUMNS]


def row(entry: Entry) -> dict:
    """The table row of ``entry``, keyed by the CSV keys of :data:`COLUMNS` (None: no value)."""
    out = {key: None for key, _, _ in COLUMNS}
    out["objective"] = entry.name
    if not entry.ok:
        out["status"] = f"failed: {entry.failure}"
        return out
    plan, use = entry.plan, entry.use
    exact = entry.exact
    low = entry.smallest
    torque, _, joint = use.peak_torque()
    friction, _, contact = use.peak_friction()
    solver = plan.meta.get("solver") or {}
    out.update(
        status="certified" if not entry.problems() else "NOT certified",
        margin_planned_min_N=float(np.min(plan.margin)), margin_planned_mean_N=float(np.mean(plan.margin)),
        margin_exact_min_N=float(np.min(exact)), margin_exact_mean_N=float(np.mean(exact)),
        margin_figure=entry.figure,
        margin_exact_min_by_point_N=by_point(entry.points),
        smallest_at_s=float(low.time),
        peak_torque_use_pct=100.0 * torque, peak_torque_joint=use.joint_names[joint],
        peak_friction_use_pct=100.0 * friction if math.isfinite(friction) else None,
        peak_friction_contact=use.contact_names[contact] if math.isfinite(friction) else None,
        iterations=_int_or_none(solver.get("iterations")),
        solve_time_s=_float_or_none(solver.get("wall_time")),
    )
    return out


def by_point(certificates) -> str:
    """``"grip_point 115.50, body 140.63"``: each point's frame and smallest exact margin [N]."""
    return ", ".join(f"{c.disturbance['frame']} {cell(c.smallest().rho, '.2f')}" for c in certificates)


def _int_or_none(x):
    return int(x) if isinstance(x, (int, float)) and not isinstance(x, bool) else None


def _float_or_none(x):
    return float(x) if isinstance(x, (int, float)) and not isinstance(x, bool) else None


def cell(value, spec: str) -> str:
    """One value formatted for people: '-' for missing, the column's format for numbers."""
    if value is None:
        return "-"
    if spec and isinstance(value, (int, float)):
        if isinstance(value, float) and not math.isfinite(value):
            return "-inf" if value < 0 else ("inf" if value > 0 else "-")
        return format(value, spec)
    return str(value)


def csv_text(rows: list[dict]) -> str:
    """CSV of ``rows`` with the keys of :data:`COLUMNS` as header; numbers at full precision."""
    stream = io.StringIO()
    writer = csv.writer(stream, lineterminator="\n")
    writer.writerow([key for key, _, _ in COLUMNS])
    for r in rows:
        writer.writerow(["" if r[key] is None else (repr(r[key]) if isinstance(r[key], float) else r[key])
                         for key, _, _ in COLUMNS])
    return stream.getvalue()


def text_table(rows: list[dict]) -> list[str]:
    """The table as aligned text lines for a terminal (failed rows carry their reason at the end)."""
    shown = [c for c in COLUMNS if c[0] != "status"]
    heads = dict(zip((key for key, _, _ in COLUMNS), titles(rows)))
    cells = [[heads[key] for key, _, _ in shown]]
    for r in rows:
        cells.append([cell(r[key], spec) for key, _, spec in shown])
    widths = [max(len(line[i]) for line in cells) for i in range(len(shown))]
    lines = []
    for i, line in enumerate(cells):
        text = "  ".join(c.ljust(w) if j == 0 or shown[j][2] == "" else c.rjust(w)
                         for j, (c, w) in enumerate(zip(line, widths)))
        status = "status" if i == 0 else rows[i - 1]["status"]
        lines.append(f"{text}  {status}")
    return lines


def entry_shortfalls(entry) -> list:
    """Low-margin ranges and unmet requirements of a plan's certified figures, every point (none without a plan)."""
    if entry.plan is None or entry.certificate is None:
        return []
    needed = plan_requirements(entry.plan.meta)
    return [s for cert in entry.points for s in certificate_shortfalls(cert, entry.plan, needed)]
