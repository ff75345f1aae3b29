"""``brace sweep SWEEP.yaml --out DIR``: solve a task over many variants; ``--report DIR`` redraws.

Runs on a local process pool (``--workers N``, default one per core) or on an
existing Dask cluster (``--scheduler tcp://HOST:PORT``). Every result is
stored as it arrives; rerunning the same command resumes. Prints a progress
line (done, failed, remaining, time left) and, at the end, the counts, the
summary files and the figures. Exit codes: 0 the sweep ran to the end (some
variants may have failed: that is data, see summary.csv), 2 bad input or a
results folder of another sweep, 130 interrupted (what finished is stored and
summarized).
"""
from __future__ import annotations

import argparse
import contextlib
import signal
import sys
from pathlib import Path

from ..errors import InputError
from .cache import (add_cache_option, add_evaluation_option, add_threads_option, apply_cache_option,
                    compiler_note, threads_option)
from .notices import SAFETY

# Stopping: the supervisor passes Ctrl-C / SIGTERM on and waits this long [s] for the sweep to
# stop its workers and write the summary of what finished (optimizer.supervisor).
STOP_GRACE = 30.0

HELP = "solve a task over a grid or sample of variants; resumable, on a local pool or a Dask cluster"
CLI = "command line"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("sweep", metavar="SWEEP.yaml", nargs="?", help="sweep file")
    parser.add_argument("--out", metavar="DIR", help="results folder (default: sweeps/<sweep name>)")
    parser.add_argument("--workers", type=int, help="local worker processes (default: one per core)")
    parser.add_argument("--scheduler", metavar="ADDRESS", help="run on the Dask cluster at tcp://HOST:PORT")
    parser.add_argument("--report", metavar="DIR", help="only redraw the summary and figures of a results folder")
    parser.add_argument("--quiet", action="store_true", help="no progress line")
    add_cache_option(parser)
    add_evaluation_option(parser)
    add_threads_option(parser, "1 per worker (the workers already share the cores)")


def run(args) -> int:
    apply_cache_option(args)
    if args.report:
        if args.sweep or args.out:
            raise InputError(CLI, "--report", "a results folder alone (no sweep file, no --out)", args.sweep or args.out)
        return report(Path(args.report))
    if not args.sweep:
        raise InputError(CLI, "SWEEP.yaml", "a sweep file (or --report DIR)", "nothing")
    from ..sweep.engines import engine_for
    from ..sweep.runner import run_sweep
    from ..sweep.spec import load_sweep

    threads = 1 if args.threads is None else threads_option(args)
    sweep = load_sweep(args.sweep)
    out = Path(args.out) if args.out else Path("sweeps") / sweep.name
    engine = engine_for(args.workers, args.scheduler)
    count = len(sweep.variants)
    print(f"brace sweep: '{sweep.name}', {count} variant{'s' if count != 1 else ''} x "
          f"{len(sweep.objectives)} objective(s) ({', '.join(sweep.objectives)}), on a {engine.describe()}; "
          f"results in {out}", flush=True)
    note = compiler_note() if args.evaluation == "compiled" else None
    if note:
        print(note, flush=True)
    line = ProgressLine(quiet=args.quiet)
    with _sigterm_interrupts():
        outcome = run_sweep(sweep, out, engine, report=line, evaluation=args.evaluation,
                             threads=threads)
    line.finish()
    figures = _figures(out, outcome.rows)
    print("\n".join(summary_lines(outcome, out, figures)))
    print(SAFETY)
    if outcome.interrupted:
        print("brace sweep: interrupted; finished results are stored and summarized, rerun the same command "
              "to resume", file=sys.stderr)
        return 130
    return 0


def report(out: Path) -> int:
    """Summary and figures from the results folder alone."""
    from ..sweep import store

    manifest = store.read_manifest(out)
    rows = store.records(out, manifest)
    written = store.write_summary(out, manifest, rows)
    figures = _figures(out, rows)
    print(f"brace sweep: {len(rows)} result(s) of '{manifest['name']}' in {out}")
    for path in written + figures:
        print(f"  {path}")
    for line in warm_start_lines(rows):
        print(line)
    return 0


def _figures(out: Path, rows: list) -> list:
    """The figures and the page (``report.html``, last) of a results folder."""
    from ..sweep import store
    from ..sweep.figures import draw_figures
    from ..sweep.page import write_sweep_page

    manifest = store.read_manifest(out)
    figures = draw_figures(out, manifest, rows)
    return figures + [write_sweep_page(out, manifest, rows, figures)]


class ProgressLine:
    """``[####------]  12/40  solved 10  failed 2  remaining 28  about 3 min left`` on standard error."""

    WIDTH = 24

    def __init__(self, quiet: bool = False, stream=None):
        self.quiet, self.stream = quiet, stream or sys.stderr
        self.live = hasattr(self.stream, "isatty") and self.stream.isatty()
        self.shown = False

    def __call__(self, progress) -> None:
        if self.quiet:
            return
        filled = int(self.WIDTH * progress.done / max(progress.total, 1))
        left = progress.seconds_left()
        eta = "" if left is None else f"  about {_duration(left)} left"
        failed = progress.failed + progress.reused - progress.reused_solved
        text = (f"[{'#' * filled}{'-' * (self.WIDTH - filled)}] {progress.done:4d}/{progress.total}  solved "
                f"{progress.solved + progress.reused_solved}  failed {failed}  remaining {progress.remaining}{eta}")
        if self.live:
            self.stream.write("\r" + text.ljust(100))
        else:
            self.stream.write(text + "\n")
        self.stream.flush()
        self.shown = True

    def finish(self) -> None:
        if self.live and self.shown:
            self.stream.write("\n")
            self.stream.flush()


def _duration(seconds: float) -> str:
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 5400:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


def summary_lines(outcome, out: Path, figures: list) -> list[str]:
    p = outcome.progress
    failed = [r for r in outcome.rows if r.get("status") != "solved"]
    lines = [f"brace sweep: {p.done} of {p.total} results stored ({p.reused} from earlier runs), "
             f"{sum(r.get('status') == 'solved' for r in outcome.rows)} solved, {len(failed)} not solved, "
             f"{p.remaining} remaining; {_duration(outcome.elapsed)} on a {outcome.engine}"]
    for row in failed[:5]:
        lines.append(f"  {row['variant']} {row['objective']}: {row['status']}: {row.get('reason', '')}"[:200])
    if len(failed) > 5:
        lines.append(f"  ... {len(failed) - 5} more in summary.csv")
    lines += warm_start_lines(outcome.rows)
    lines += [f"  {path}" for path in list(outcome.written) + list(figures)]
    return lines


def warm_start_lines(rows: list) -> list[str]:
    """Mean solver iterations of results started from a neighbour against cold starts (seed + objective)."""
    def total(r):
        return (r.get("seed_iterations") or 0) + (r.get("iterations") or 0)

    solved = [r for r in rows if r.get("status") == "solved"]
    warm = [total(r) for r in solved if r.get("warm_start_from")]
    cold = [total(r) for r in solved if not r.get("warm_start_from")]
    if not warm or not cold:
        return []
    mean_warm, mean_cold = sum(warm) / len(warm), sum(cold) / len(cold)
    change = 100 * (mean_warm / mean_cold - 1) if mean_cold else 0.0
    words = f"{abs(change):.0f} % {'fewer' if change < 0 else 'more'}"
    return [f"  neighbour warm starts: {len(warm)} results, mean {mean_warm:.1f} solver iterations (seed + "
            f"objective) against {mean_cold:.1f} for {len(cold)} cold starts ({words}; other variants, so "
            "indicative only: benchmarks/RESULTS.md compares the same sweep with and without)"]


@contextlib.contextmanager
def _sigterm_interrupts():
    """SIGTERM stops the sweep like Ctrl-C: workers end, finished results stay, the summary is written."""
    def interrupt(signum, frame):
        raise KeyboardInterrupt

    previous = signal.signal(signal.SIGTERM, interrupt)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)
