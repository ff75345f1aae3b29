"""``brace certify PLAN.npz``: the exact smallest unrejectable force, knot by knot.

Prints a table (exact figure, planned margin, their ratio, weakest direction,
facet count, bottleneck) and a summary; ``--json OUT`` writes the same for
machines; ``--replay N`` adds the disturbance replay. Exit code 0 when the plan
is certified (no limit broken, planned margin never above the exact figure,
replay passed), 1 when not, 2 on bad input.
"""
from __future__ import annotations

import json
import math
import sys

from .. import supervisor
from ..analysis.certify import DEFAULT_CAP, DEFAULT_MAX_LPS, DEFAULT_TOL, Settings, certify_points
from ..analysis.model_change import ModelChange
from ..analysis.plan_check import CHECKS
from ..analysis.margin_flags import DEFAULT_WARN_FRACTION, certificate_shortfalls, plan_requirements, unmet
from ..problem.requirement import horizon_requirement
from ..errors import InputError
from ..files import atomic_output
from ..planfile import load_plan

from ..notices import MODEL_ONLY, SAFETY
from .shortfalls import shortfall_lines, use_colour

HELP = "compute the exact smallest unrejectable force of a plan, knot by knot"
CLI = "command line"


def add_arguments(parser) -> None:
    parser.add_argument("plan", metavar="PLAN.npz", help="plan file (plan/1)")
    parser.add_argument("--knots", default="all", metavar="LIST",
                        help="knots to certify: 'all' (default) or e.g. '0,5,10-20'")
    parser.add_argument("--json", metavar="OUT", help="also write the results as JSON to OUT")
    parser.add_argument("--replay", type=int, default=0, metavar="N",
                        help="draw N random disturbances per knot within the planned margin and check each")
    parser.add_argument("--seed", type=int, default=0, help="seed of the replay's draws (default 0)")
    parser.add_argument("--disturbance", type=int, default=None, metavar="INDEX",
                        help="certify only this disturbance point of the plan (default: every point)")
    parser.add_argument("--tol", type=float, default=DEFAULT_TOL,
                        help=f"relative agreement of inner and outer polytope (default {DEFAULT_TOL:g})")
    parser.add_argument("--cap", type=float, default=DEFAULT_CAP, metavar="NEWTON",
                        help=f"largest disturbance considered, N (default {DEFAULT_CAP:g}); "
                             "directions resisted without bound are reported as capped")
    parser.add_argument("--full", action="store_true",
                        help="project the whole polytope (exact facet count), not only around the figure")
    parser.add_argument("--samples", type=int, default=400, metavar="N",
                        help="sampled directions that tighten the upper bound where the projection stops "
                             "before --max-lps (default 400)")
    parser.add_argument("--max-lps", type=int, default=DEFAULT_MAX_LPS, metavar="N",
                        help=f"support LPs per knot before the projection stops and reports a bound pair "
                             f"instead of an exact figure (default {DEFAULT_MAX_LPS})")
    parser.add_argument("--no-check", action="store_true",
                        help="skip the plan's physics checks (the report warns that they were skipped)")
    defaults = ", ".join(f"{c.name} {c.tolerance:g}{' ' + c.unit if c.unit else ''}" for c in CHECKS)
    parser.add_argument("--check-tol", action="append", default=[], metavar="NAME=VALUE",
                        help=f"tolerance of one physics check, repeatable (defaults: {defaults})")
    changed = parser.add_argument_group("changed model (the plan fixed; reported beside the planned figures)")
    changed.add_argument("--friction-scale", type=float, default=None, metavar="S",
                         help="multiply every contact's friction coefficient by S (> 0)")
    changed.add_argument("--torque-scale", type=float, default=None, metavar="S",
                         help="multiply every torque limit by S (> 0)")
    changed.add_argument("--payload", type=float, default=None, metavar="KG",
                         help="a mass of KG kg hanging at the disturbance point (a constant force m g there)")
    changed.add_argument("--min-normal-force", type=float, default=None, metavar="N",
                         help="minimum normal force of every stance contact, N")
    parser.add_argument("--quiet", action="store_true", help="print only the summary")
    parser.add_argument("--require-margin", type=float, metavar="NEWTON",
                        help="also require this exact margin at every certified knot, N (besides the "
                             "requirements the plan was made under)")
    parser.add_argument("--warn-below", type=float, metavar="NEWTON",
                        help="flag knots whose exact margin is below this, N, where nothing is required "
                             f"(default {100 * DEFAULT_WARN_FRACTION:.0f} %% of the robot's weight)")


def run(args) -> int:
    settings = _settings(args)
    supervisor.phase("loading the plan")
    plan = load_plan(args.plan)
    knots = parse_knots(args.knots, plan.t.shape[0])
    points = chosen_points(args.disturbance, len(plan.meta["disturbances"]))
    tolerances = parse_check_tolerances(args.check_tol)
    change = model_change(args)
    supervisor.phase(f"certifying {len(knots)} knot(s) at {len(points)} disturbance point(s)")
    entries = [plan.meta["disturbances"][p] for p in points]
    print(head_line(str(args.plan), entries, len(knots), settings), flush=True)
    progress = ProgressLine(sys.stderr) if len(knots) > 1 else None
    cert = certify_points(plan, knots, points, settings, args.replay, args.seed, progress,
                          check=not args.no_check, tolerances=tolerances, change=change)
    if progress is not None:
        progress.clear()
    needed = requirements(args, plan)
    shortfalls = [certificate_shortfalls(c, plan, needed, args.warn_below) for c in cert.points]
    colour = use_colour(sys.stdout)
    flat = [s for found in shortfalls for s in found]
    print(points_text(cert, quiet=args.quiet, flags=[shortfall_lines(found, colour) for found in shortfalls],
                      unmet=bool(unmet(flat))))
    if args.json:
        supervisor.phase("writing the JSON report")
        document = {"plan": str(args.plan), **cert.to_json(), "margin_flags": [s.to_json() for s in flat]}
        with atomic_output(args.json, suffix=".json") as tmp:
            tmp.write_text(json.dumps(document, indent=2) + "\n", encoding="utf-8")
    return 0 if not cert.problems() and not unmet(flat) else 1


def chosen_points(index: int | None, count: int) -> list:
    """Every disturbance point of the plan, or the one ``--disturbance`` names."""
    if index is None:
        return list(range(count))
    if not 0 <= index < count:
        raise InputError(CLI, "--disturbance", f"an index from 0 to {count - 1}", index)
    return [index]


def requirements(args, plan) -> list:
    """The plan's own required margins plus ``--require-margin`` over its whole horizon."""
    own = plan_requirements(plan.meta)
    if args.require_margin is None:
        return own
    return own + [horizon_requirement(args.require_margin, float(plan.t[-1]))]


def _settings(args) -> Settings:
    if not (math.isfinite(args.tol) and 0.0 < args.tol <= 0.1):
        raise InputError(CLI, "--tol", "a number in (0, 0.1]", args.tol)
    if not (math.isfinite(args.cap) and args.cap > 0.0):
        raise InputError(CLI, "--cap", "a positive number of newtons", args.cap)
    for name in ("require_margin", "warn_below"):
        value = getattr(args, name)
        if value is not None and not (math.isfinite(value) and value > 0):
            raise InputError(CLI, "--" + name.replace("_", "-"), "a positive number of newtons", value)
    for name in ("replay", "samples"):
        if getattr(args, name) < 0:
            raise InputError(CLI, f"--{name}", "a whole number >= 0", getattr(args, name))
    if args.max_lps < 1:
        raise InputError(CLI, "--max-lps", "a whole number >= 1", args.max_lps)
    return Settings(tol=args.tol, cap=args.cap, full=args.full, samples=args.samples, max_lps=args.max_lps)


def model_change(args) -> ModelChange | None:
    """The changed model the options ask for, or None when no option is given."""
    given = {"friction_scale": args.friction_scale, "torque_scale": args.torque_scale,
             "payload_kg": args.payload, "min_normal_force": args.min_normal_force}
    if all(v is None for v in given.values()):
        return None
    for key, option in (("friction_scale", "--friction-scale"), ("torque_scale", "--torque-scale")):
        value = given[key]
        if value is not None and not (math.isfinite(value) and value > 0.0):
            raise InputError(CLI, option, "a number > 0", value)
    for key, option, what in (("payload_kg", "--payload", "kg"), ("min_normal_force", "--min-normal-force", "N")):
        value = given[key]
        if value is not None and not (math.isfinite(value) and value >= 0.0):
            raise InputError(CLI, option, f"a number of {what} >= 0", value)
    return ModelChange(friction_scale=1.0 if given["friction_scale"] is None else given["friction_scale"],
                       torque_scale=1.0 if given["torque_scale"] is None else given["torque_scale"],
                       payload_kg=given["payload_kg"] or 0.0, min_normal_force=given["min_normal_force"])


def parse_check_tolerances(items) -> dict:
    """``{"dynamics": 1e-5, ...}`` from ``["dynamics=1e-5", ...]``; names must be known checks."""
    names = [c.name for c in CHECKS]
    out = {}
    for item in items:
        name, _, value = item.partition("=")
        if name.strip() not in names:
            raise InputError(CLI, "--check-tol", f"NAME=VALUE with NAME one of {', '.join(names)}", item)
        try:
            number = float(value)
        except ValueError:
            number = math.nan
        if not (math.isfinite(number) and number >= 0.0):
            raise InputError(CLI, "--check-tol", "NAME=VALUE with VALUE a number >= 0", item)
        out[name.strip()] = number
    return out


def parse_knots(spec: str, count: int) -> list:
    """Knot indices from ``'all'`` or ``'0,5,10-20'`` (ranges inclusive), sorted, unique."""
    if spec.strip() == "all":
        return list(range(count))
    chosen = set()
    for part in spec.split(","):
        first, _, last = part.strip().partition("-")
        try:
            lo, hi = int(first), int(last or first)
        except ValueError:
            raise InputError(CLI, "--knots", "'all' or a list like '0,5,10-20'", spec) from None
        if not 0 <= lo <= hi < count:
            raise InputError(CLI, "--knots", f"knot indices from 0 to {count - 1}", part.strip())
        chosen.update(range(lo, hi + 1))
    return sorted(chosen)


class ProgressLine:
    """One self-overwriting status line on a terminal; silent otherwise."""

    def __init__(self, stream):
        self.stream = stream
        self.live = hasattr(stream, "isatty") and stream.isatty()

    def __call__(self, point: int, done: int, total: int, cert) -> None:
        if self.live:
            self.stream.write(f"\rcertifying point {point}, knot {done}/{total}: "
                              f"{'exact' if cert.exact else 'lower bound'} {cert.rho:.4g} N   ")
            self.stream.flush()

    def clear(self) -> None:
        if self.live:
            self.stream.write("\r" + " " * 60 + "\r")
            self.stream.flush()


def _direction(vec) -> str:
    return "(" + ", ".join(f"{x:+.2f}" for x in vec) + ")"


def _names(names, shown: int = 2) -> str:
    if not names:
        return "-"
    text = ", ".join(names[:shown])
    return text + (f" (+{len(names) - shown} more)" if len(names) > shown else "")


def _fmt(x, spec=".3f") -> str:
    return format(x, spec) if math.isfinite(x) else ("-" if math.isnan(x) else ("-inf" if x < 0 else "inf"))


def _figure_columns(cert, unit: str):
    """Head and cell function of the figure columns: one ``exact`` column when every knot's
    figure is exact, else ``lower`` and ``upper`` bound columns (exact knots show both equal)."""
    if all(c.exact for c in cert.knots):
        return (f"{'exact [' + unit + ']':>12}", f"{'planned/exact':>14}",
                lambda c: f"{_fmt(c.rho):>12}")
    return (f"{'lower [' + unit + ']':>12} {'upper [' + unit + ']':>12}", f"{'planned/lower':>14}",
            lambda c: f"{_fmt(c.lower):>12} {_fmt(c.upper):>12}")


def knot_table(cert, unit: str) -> list:
    """Lines of the per-knot table; columns headed by what they hold (exact figure or bounds)."""
    if cert.change is not None:
        return changed_table(cert, unit)
    figure, ratio, cells = _figure_columns(cert, unit)
    head = (f"{'knot':>5} {'t [s]':>8} {figure} {'planned [' + unit + ']':>13} "
            f"{ratio}  {'weakest direction (world)':<27} {'facets':>6}  bottleneck")
    lines = [head]
    for c in cert.knots:
        flag = "" if c.status == "ok" else f"  [{c.status}]"
        cap = " (capped)" if c.capped else ""
        lines.append(f"{c.knot:>5} {c.time:>8.3f} {cells(c)} {_fmt(c.planned):>13} {_fmt(c.ratio):>14}  "
                     f"{_direction(c.direction):<27} {c.facets:>6}  {_names(c.bottleneck)}{cap}{flag}")
    return lines


def _changed_cell(c) -> str:
    """The changed model's figure: exact, a bound pair, or why there is none."""
    if c.rho == -math.inf:
        return "no response"
    return _fmt(c.rho) if c.exact else f"{_fmt(c.lower)}..{_fmt(c.upper)}"


def changed_table(cert, unit: str) -> list:
    """Per-knot table with the planned model's figure beside the changed model's."""
    figure, _, cells = _figure_columns(cert, unit)
    lines = [f"changed model: {cert.change_text}",
             f"{'knot':>5} {'t [s]':>8} {figure} {'changed [' + unit + ']':>17} {'feasible':>9} "
             f"{'friction floor':>15}  changed-model bottleneck"]
    for c in cert.knots:
        ch = c.changed
        flag = "" if c.status == "ok" else f"  [planned model: {c.status}]"
        lines.append(f"{c.knot:>5} {c.time:>8.3f} {cells(c)} {_changed_cell(ch.cert):>17} "
                     f"{'yes' if ch.feasible else 'NO':>9} {'x' + _fmt(ch.friction_floor, '.4f'):>15}  "
                     f"{_names(ch.cert.bottleneck)}{flag}")
    return lines


def changed_summary_lines(cert, unit: str) -> list:
    """What the changed model leaves: smallest margin beside the planned one, infeasible knots, friction floor."""
    if cert.change is None:
        return []
    s = cert.summary()
    low = min((c.changed.cert for c in cert.knots), key=lambda c: c.rho)
    planned = cert.smallest()
    lines = [f"changed model ({cert.change_text}): smallest margin {_changed_cell(low)} {unit} at knot {low.knot} "
             f"(planned model: {_fmt(planned.rho)} {unit} at knot {planned.knot})"]
    bad = s["changed_infeasible_knots"]
    lines.append("  feasible at every knot" if not bad else
                 f"  NOT feasible at all (no response keeps every limit, even undisturbed) at knots "
                 + ", ".join(map(str, bad)))
    floor = s["friction_floor_scale"]
    mus = sorted({float(m) for m in cert.plan_friction})
    mu_text = f" (mu {floor * mus[0]:.4g})" if len(mus) == 1 and floor is not None else ""
    lines.append(f"  friction floor: the plan stays feasible down to friction x{_fmt(floor if floor is not None else math.inf, '.4f')}"
                 f"{mu_text} of the planned coefficients; first knot to fail below it: {s['friction_floor_at_knot']}")
    return lines


def _amount(x: float, unit: str) -> str:
    if not math.isfinite(x):
        return "-" if x < 0 else "inf"
    return f"{x:.3g} {unit}".rstrip()


def check_table(report) -> list:
    """Lines of the physics-check table: worst excess (<= 0 means inside), where, tolerance."""
    lines = ["plan checks (Pinocchio, from the plan file alone; worst excess, 0 or less = inside the limit):",
             f"  {'check':<15} {'worst':>16} {'tolerance':>16}  {'result':<6}  where"]
    for r in report.results:
        place = f"knot {r.knot}, {r.where}" if r.knot is not None else r.where
        lines.append(f"  {r.name:<15} {_amount(r.worst, r.unit):>16} {_amount(r.tolerance, r.unit):>16}  "
                     f"{'ok' if r.passed else 'FAILED':<6}  {place}")
    return lines


def check_lines(cert, quiet: bool) -> list:
    """The check table (or, quiet, its one-line verdict), or the warning that checks were skipped."""
    if cert.checks is None:
        return ["WARNING: the plan's physics was not checked (--no-check): the margins below assume "
                "that its equations of motion, contacts, limits and integrator hold", ""]
    if quiet:
        failed = len(cert.checks.failures())
        return [f"plan checks: {len(cert.checks.results) - failed} of {len(cert.checks.results)} passed"]
    return check_table(cert.checks) + [""]


def point_summary_lines(cert, unit: str) -> list:
    """One point's summary: smallest figure, bottleneck, planned over exact, notes, changed model, time, replay."""
    s = cert.summary()
    n = s["knots"]
    low = cert.smallest()
    if low.exact:
        lines = [f"smallest exact margin: {_fmt(low.rho)} {unit} at knot {s['smallest_at_knot']} "
                 f"(t = {low.time:.3f} s)"]
    else:
        lines = [f"smallest margin: between {_fmt(low.lower)} and {_fmt(low.upper)} {unit} (proven lower bound, "
                 f"sampled upper bound) at knot {s['smallest_at_knot']} (t = {low.time:.3f} s)"]
    if s["most_frequent_bottleneck"]:
        lines.append(f"most frequent bottleneck: {s['most_frequent_bottleneck']} "
                     f"({s['bottleneck_knots']} of {n} knots)")
    if s["planned_over_exact_min"] is not None:
        name = "planned/exact" if s["exact_knots"] == n else "planned/lower"
        lines.append(f"{name}: {s['planned_over_exact_min']:.3f} .. {s['planned_over_exact_max']:.3f} "
                     "(1 = the linear-gain margin is tight)")
    notes = sorted({note for c in cert.knots for note in c.notes})
    if any(c.unbounded for c in cert.knots):
        notes.append(f"some directions are resisted without bound; they were capped at {cert.settings.cap:g} {unit}")
    lines += [f"note: {note}" for note in notes]
    lines += changed_summary_lines(cert, unit)
    lines.append(f"time: {s['median_ms_per_knot']:.1f} ms per knot (median), "
                 f"{sum(c.lps for c in cert.knots)} LPs")
    if cert.replay is not None:
        r = cert.replay
        lines.append(f"replay: {r.rejected} of {r.drawn} disturbances within the planned margin rejected; "
                     f"{r.beyond_unrejectable} of {r.beyond_tried} pushes 0.01% beyond the exact margin not rejectable")
    return lines


def verdict_lines(certs, problems, flags=(), unmet: bool = False) -> list:
    """Flag lines, the result line over every certified point, its problems and the notices."""
    problems = list(problems) + (["a required margin is not met (see the !! lines above)"] if unmet else [])
    return [*flags, result_line(certs, problems), *[f"  {p}" for p in problems], MODEL_ONLY, SAFETY]


def summary_lines(cert, unit: str, flags=(), unmet: bool = False) -> list:
    """A one-point certificate's summary and verdict."""
    return point_summary_lines(cert, unit) + verdict_lines([cert], cert.problems(), flags, unmet)


def head_line(plan_name: str, entries, count: int, settings) -> str:
    """The report's first line (``brace certify`` prints it before certification starts).

    ``entries`` are the certified points' ``meta.disturbances`` entries (or one entry).
    """
    entries = [entries] if isinstance(entries, dict) else list(entries)
    mode = "whole polytope" if settings.full else "refined around the figure"
    where = (f"{entries[0]['kind']} at {entries[0]['frame']}" if len(entries) == 1 else
             f"{len(entries)} disturbance points (" + ", ".join(f"{e['kind']} at {e['frame']}" for e in entries) + ")")
    return f"certify {plan_name}: {where}, {count} knots, projection {mode}, tol {settings.tol:g}"


def result_line(certs, problems) -> str:
    """The verdict over every certified point, worded by what was proven."""
    certs = [certs] if not isinstance(certs, (list, tuple)) else list(certs)
    if problems:
        return "result: NOT certified"
    n = sum(len(c.knots) for c in certs)
    exact = sum(c.exact for cert in certs for c in cert.knots)
    where = "every knot" if len(certs) == 1 else f"every knot of each of the {len(certs)} disturbance points"
    if exact == n:
        what = f"exact figures at {where}"
    elif exact == 0:
        what = f"bounds only: at {where} the planned margin is at or below a proven lower bound"
    else:
        what = (f"exact figures at {exact} of {n} knots{'' if len(certs) == 1 else ' (all points)'}; at the others "
                "the planned margin is at or below a proven lower bound")
    if certs[0].checks is None:
        return f"result: margins certified ({what}); the plan's physics was NOT checked (--no-check)"
    return f"result: certified (physics checks passed; {what})"


def _unit(disturbance: dict) -> str:
    return "N" if disturbance["kind"] == "force" else "N|Nm"


def report_text(cert, plan_name: str, quiet: bool = False, flags=(), unmet: bool = False, head: bool = True) -> str:
    """One point's report (a :class:`~optimizer.analysis.certify.PlanCertificate`)."""
    d = cert.disturbance
    unit = _unit(d)
    first = [head_line(plan_name, d, len(cert.knots), cert.settings)] if head else []
    body = [] if quiet else knot_table(cert, unit) + [""]
    return "\n".join(first + check_lines(cert, quiet) + body + summary_lines(cert, unit, flags, unmet))


def points_text(cert, quiet: bool = False, flags=(), unmet: bool = False) -> str:
    """The report of a :class:`~optimizer.analysis.certify.PointsCertificate` after its head line.

    One point reads as before; several get a section each (table and
    summary), then one result line over all of them. ``flags`` holds each
    point's flag lines; ``unmet``: a required margin is not met at some point.
    """
    flags = list(flags) or [[] for _ in cert.points]
    if len(cert.points) == 1:
        return report_text(cert.points[0], "", quiet=quiet, flags=flags[0], unmet=unmet, head=False)
    lines = check_lines(cert.points[0], quiet)
    for point, point_flags in zip(cert.points, flags):
        d = point.disturbance
        unit = _unit(d)
        lines.append(f"point {d['index']}: {d['kind']} at {d['frame']} [{unit}]")
        lines += ([] if quiet else knot_table(point, unit) + [""])
        lines += ["  " + line for line in point_summary_lines(point, unit)] + list(point_flags) + [""]
    return "\n".join(lines + verdict_lines(cert.points, cert.problems(), unmet=unmet))
