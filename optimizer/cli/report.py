"""``brace report PLAN.npz [PLAN2.npz ...] [--out DIR]``: the comparison page from existing plans.

Nothing is solved: every plan is loaded, certified exactly knot by knot and
drawn. Plans of one task are compared on one set of figures; plans of
different tasks get one section each, one after another, with their files
in a sub-folder per task. Everything is written to a staging folder first
and moved into DIR at the end, so an interrupted or failed run leaves DIR as
it was. Exit codes: 0 every plan certified, 1 some plan not certified, 2 bad
input, 130 interrupted.
"""
from __future__ import annotations

import contextlib
import os
import re
import shutil
import sys
import tempfile
from pathlib import Path

from .. import supervisor
from ..errors import InputError, OutputError
from ..notices import SAFETY

HELP = "draw and compare existing plan files: figures, motion preview and an HTML page"
CLI = "command line"


def add_arguments(parser) -> None:
    parser.add_argument("plans", nargs="+", metavar="PLAN.npz", help="plan files (plan/1)")
    parser.add_argument("--out", metavar="DIR",
                        help="folder for the page and its files (default: reports/<first plan's name>)")
    add_drawing_arguments(parser)


def add_drawing_arguments(parser) -> None:
    parser.add_argument("--frames", type=int, metavar="N",
                        help="animation frames (default: one per knot)")


def run(args) -> int:
    from ..planfile import load_plan
    from ..report.build import Comparison

    check_frames(args.frames)
    out = output_folder(args.out or f"reports/{Path(args.plans[0]).stem}")
    plans = [(Path(p), load_plan(p)) for p in args.plans]
    groups: dict[str, list] = {}
    for path, plan in plans:
        groups.setdefault(task_name(plan, path), []).append((path, plan))
    status = StatusLine(sys.stderr)
    comparisons = []
    for title, members in groups.items():
        members.sort(key=lambda item: objective_rank(item[1]))
        entries = certified_entries([(entry_name(plan, path, members), plan, str(path)) for path, plan in members],
                                    status)
        folder = "" if len(groups) == 1 else safe_folder(title)
        links = tuple(os.path.relpath(path.resolve(), (out / folder).resolve()) for path, _ in members)
        comparisons.append(Comparison(title, members[0][1].meta, entries, folder, links))
    with staged(out) as stage:
        write_outputs(comparisons, stage, status, args.frames, f"{len(plans)} plan file(s)")
    status.clear()
    print_summary(comparisons, out)
    return 0 if all(e.ok and not e.problems() for c in comparisons for e in c.entries) else 1


def check_frames(frames) -> None:
    if frames is not None and frames < 2:
        raise InputError(CLI, "--frames", "a whole number >= 2", frames)


def output_folder(text: str) -> Path:
    """The output folder, checked to be a folder or creatable as one."""
    out = Path(text)
    if out.exists() and not out.is_dir():
        raise InputError(CLI, "--out", "a folder for the report", f"{out} is a file")
    return out


def task_name(plan, path: Path) -> str:
    task = plan.meta.get("task")
    name = task.get("name") if isinstance(task, dict) else None
    return str(name) if name else path.stem


def entry_name(plan, path: Path, members) -> str:
    """The plan's objective, or objective and file name when two plans of a task share it."""
    objective = str(plan.meta.get("objective") or path.stem)
    same = [p for p, other in members if str(other.meta.get("objective") or p.stem) == objective]
    return objective if len(same) == 1 else f"{objective} ({path.name})"


def objective_rank(plan) -> int:
    """Objectives in their usual order (feasible, robust, robust-min, torque), others after."""
    from ..problem.task import OBJECTIVES

    objective = plan.meta.get("objective")
    return OBJECTIVES.index(objective) if objective in OBJECTIVES else len(OBJECTIVES)


def safe_folder(title: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", title).strip("._") or "task"


def certified_entries(items, status) -> list:
    """Entries ``(name, plan, source)`` with every knot of every disturbance point certified exactly."""
    from ..analysis.certify import certify_points
    from ..report.table import Entry

    entries = []
    for name, plan, source in items:
        certificate = certify_points(plan, progress=lambda p, done, total, _c, n=name:
                                     status(f"certifying {n}" + (f" point {p}" if p else ""), done, total))
        entries.append(Entry(name, plan, certificate.points[0], source=source, others=certificate.points[1:]))
    return entries


def write_outputs(comparisons, folder: Path, status, frames, subtitle: str) -> None:
    """Files of every comparison, then the page, into ``folder``."""
    from ..report.build import write_comparison, write_page

    for comparison in comparisons:
        write_comparison(comparison, folder, status, frames)
    write_page(comparisons, folder, subtitle)


@contextlib.contextmanager
def staged(out: Path):
    """A staging folder beside ``out``; on success its files move into ``out``, else it is removed."""
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
        prefix = f".{out.name}.{os.getpid()}."
        supervisor.will_create(out.parent, prefix)  # removed by the supervisor if the command is stopped
        stage = Path(tempfile.mkdtemp(prefix=prefix, dir=out.parent))
    except OSError as exc:
        raise OutputError(out, "", "a writable place for the report", exc.strerror or str(exc)) from None
    try:
        yield stage
        for source in sorted(p for p in stage.rglob("*") if p.is_file()):
            target = out / source.relative_to(stage)
            target.parent.mkdir(parents=True, exist_ok=True)
            os.replace(source, target)
    finally:
        shutil.rmtree(stage, ignore_errors=True)


class StatusLine:
    """Progress on a terminal: one self-overwriting line; elsewhere one line per step."""

    def __init__(self, stream):
        self.stream = stream
        self.live = hasattr(stream, "isatty") and stream.isatty()
        self.last = None

    def __call__(self, message: str, done: int | None = None, total: int | None = None) -> None:
        text = message if done is None else f"{message} {done}/{total}"
        if self.live:
            self.stream.write("\r" + text[:100].ljust(100))
            self.stream.flush()
        elif message != self.last:
            self.stream.write(f"{message}{f' ({total} steps)' if total else ''}\n")
            self.stream.flush()
        self.last = message

    def clear(self) -> None:
        if self.live:
            self.stream.write("\r" + " " * 100 + "\r")
            self.stream.flush()


def print_summary(comparisons, out: Path) -> None:
    from ..report.build import PAGE
    from ..report.table import row, text_table

    from ..report.table import entry_shortfalls
    from .shortfalls import shortfall_lines, use_colour

    for c in comparisons:
        print(f"{c.title}:")
        print("\n".join("  " + line for line in text_table([row(e) for e in c.entries])))
        for entry in c.entries:
            flags = shortfall_lines(entry_shortfalls(entry), use_colour(sys.stdout))
            if flags:
                print(f"  {entry.name}:")
                print("\n".join("  " + line for line in flags))
    print(f"report written: {out / PAGE}")
    print(SAFETY)
