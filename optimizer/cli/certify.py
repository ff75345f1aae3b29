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
from ..analysis.certify import DEFAULT_CAP, DEFAULT_TOL, Settings, certify_plan
from ..analysis.margin_flags import DEFAULT_WARN_FRACTION, certificate_shortfalls, plan_requirements, unmet
from ..problem.requirement import horizon_requirement
from ..errors import InputError
from ..files import atomic_output
from ..planfile import load_plan

from .notices import MODEL_ONLY, SAFETY
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
    parser.add_argument("--disturbance", type=int, default=0, metavar="INDEX",
                        help="which disturbance point of the plan (default 0)")
    parser.add_argument("--tol", type=float, default=DEFAULT_TOL,
                        help=f"relative agreement of inner and outer polytope (default {DEFAULT_TOL:g})")
    parser.add_argument("--cap", type=float, default=DEFAULT_CAP, metavar="NEWTON",
                        help=f"largest disturbance considered, N (default {DEFAULT_CAP:g}); "
                             "directions resisted without bound are reported as capped")
    parser.add_argument("--full", action="store_true",
                        help="project the whole polytope (exact facet count), not only around the figure")
    parser.add_argument("--samples", type=int, default=400, metavar="N",
                        help="sampled directions for 6-D wrench disturbances (default 400)")
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
    count = len(plan.meta["disturbances"])
    if not 0 <= args.disturbance < count:
        raise InputError(CLI, "--disturbance", f"an index from 0 to {count - 1}", args.disturbance)
    entry = plan.meta["disturbances"][args.disturbance]
    supervisor.phase(f"certifying {len(knots)} knot(s)")
    print(head_line(str(args.plan), entry["kind"], entry["frame"], len(knots), settings), flush=True)
    progress = ProgressLine(sys.stderr) if len(knots) > 1 else None
    cert = certify_plan(plan, knots, args.disturbance, settings, args.replay, args.seed, progress)
    if progress is not None:
        progress.clear()
    shortfalls = certificate_shortfalls(cert, plan, requirements(args, plan), args.warn_below)
    print(report_text(cert, str(args.plan), quiet=args.quiet, head=False,
                      flags=shortfall_lines(shortfalls, use_colour(sys.stdout)), unmet=bool(unmet(shortfalls))))
    if args.json:
        supervisor.phase("writing the JSON report")
        document = {"plan": str(args.plan), **cert.to_json(), "margin_flags": [s.to_json() for s in shortfalls]}
        with atomic_output(args.json, suffix=".json") as tmp:
            tmp.write_text(json.dumps(document, indent=2) + "\n", encoding="utf-8")
    return 0 if not cert.problems() and not unmet(shortfalls) else 1


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
    return Settings(tol=args.tol, cap=args.cap, full=args.full, samples=max(args.samples, 1))


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

    def __call__(self, done: int, total: int, cert) -> None:
        if self.live:
            self.stream.write(f"\rcertifying knot {done}/{total}: exact {cert.rho:.4g} N   ")
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


def knot_table(cert, unit: str) -> list:
    """Lines of the per-knot table."""
    head = (f"{'knot':>5} {'t [s]':>8} {'exact [' + unit + ']':>12} {'planned [' + unit + ']':>13} "
            f"{'planned/exact':>14}  {'weakest direction (world)':<27} {'facets':>6}  bottleneck")
    lines = [head]
    for c in cert.knots:
        flag = "" if c.status == "ok" else f"  [{c.status}]"
        cap = " (capped)" if c.capped else ""
        lines.append(f"{c.knot:>5} {c.time:>8.3f} {_fmt(c.rho):>12} {_fmt(c.planned):>13} {_fmt(c.ratio):>14}  "
                     f"{_direction(c.direction):<27} {c.facets:>6}  {_names(c.bottleneck)}{cap}{flag}")
    return lines


def summary_lines(cert, unit: str, flags=(), unmet: bool = False) -> list:
    s = cert.summary()
    n = s["knots"]
    lines = [f"smallest exact margin: {_fmt(cert.smallest().rho)} {unit} at knot {s['smallest_at_knot']} "
             f"(t = {cert.smallest().time:.3f} s)"]
    if s["most_frequent_bottleneck"]:
        lines.append(f"most frequent bottleneck: {s['most_frequent_bottleneck']} "
                     f"({s['bottleneck_knots']} of {n} knots)")
    if s["planned_over_exact_min"] is not None:
        lines.append(f"planned/exact: {s['planned_over_exact_min']:.3f} .. {s['planned_over_exact_max']:.3f} "
                     "(1 = the linear-gain margin is tight)")
    notes = sorted({note for c in cert.knots for note in c.notes})
    if any(c.unbounded for c in cert.knots):
        notes.append(f"some directions are resisted without bound; they were capped at {cert.settings.cap:g} {unit}")
    lines += [f"note: {note}" for note in notes]
    lines.append(f"time: {s['median_ms_per_knot']:.1f} ms per knot (median), "
                 f"{sum(c.lps for c in cert.knots)} LPs")
    if cert.replay is not None:
        r = cert.replay
        lines.append(f"replay: {r.rejected} of {r.drawn} disturbances within the planned margin rejected; "
                     f"{r.beyond_unrejectable} of {r.beyond_tried} pushes 0.01% beyond the exact margin not rejectable")
    problems = s["problems"] + (["a required margin is not met (see the !! lines above)"] if unmet else [])
    lines += list(flags)
    lines.append("result: certified" if not problems else "result: NOT certified")
    lines += [f"  {p}" for p in problems]
    lines += [MODEL_ONLY, SAFETY]
    return lines


def head_line(plan_name: str, kind: str, frame: str, count: int, settings) -> str:
    """The report's first line (``brace certify`` prints it before certification starts)."""
    mode = "whole polytope" if settings.full else "refined around the figure"
    return f"certify {plan_name}: {kind} at {frame}, {count} knots, projection {mode}, tol {settings.tol:g}"


def report_text(cert, plan_name: str, quiet: bool = False, flags=(), unmet: bool = False, head: bool = True) -> str:
    d = cert.disturbance
    unit = "N" if d["kind"] == "force" else "N|Nm"
    first = [head_line(plan_name, d["kind"], d["frame"], len(cert.knots), cert.settings)] if head else []
    body = [] if quiet else knot_table(cert, unit) + [""]
    return "\n".join(first + body + summary_lines(cert, unit, flags, unmet))
