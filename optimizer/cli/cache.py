"""``brace cache show|clear``: the folder of built solver parts (compiled knot functions) kept between runs.

Also the ``--cache-dir`` and ``--evaluation`` options of ``brace solve`` and
``brace sweep`` (with ``brace solve``'s automatic choice of evaluation,
:func:`chosen_evaluation`) and the one-line note when no C compiler is
found (plans then use the uncompiled evaluation: same plans, slower
iterations).
"""
from __future__ import annotations

import argparse
import sys

from ..cache import ENVIRONMENT, cache_contents, cache_dir, clear_cache, set_cache_dir
from ..errors import InputError
from ..memory import format_size

HELP = "show or clear the cache folder of compiled solver parts"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("action", metavar="show|clear", help="show: where the cache is and what it holds; "
                        "clear: remove everything in it")
    add_cache_option(parser)


def add_cache_option(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--cache-dir", metavar="DIR",
                        help=f"cache folder of compiled solver parts (default: ${ENVIRONMENT}, else "
                             "$XDG_CACHE_HOME/brace, else ~/.cache/brace)")


# `brace solve --evaluation auto` (its default): the compiled evaluation from this many knots on when a C
# compiler is found, else the expanded one. Steep ramp, robust, one fresh process each on an idle 2-core
# machine (benchmarks/RESULTS.md, "Solve, compiled evaluation and cache"): at 30 knots the first compiled
# plan of a shape, compiler included, took 30.8 s against 34.1 s expanded and later ones 12.7 s; at 60
# knots 59.7 and 35.0 s against 64.2 s; peak memory 0.32 / 0.46 GB against 1.11 / 2.08 GB. Below 30 knots
# the compiler's fixed 20-33 s is not won back on the first plan.
AUTO = "auto"
AUTO_COMPILED_KNOTS = 30


def add_evaluation_option(parser: argparse.ArgumentParser, auto: bool = False) -> None:
    """``--evaluation``; with ``auto`` it also takes (and defaults to) ``auto``, see :func:`chosen_evaluation`."""
    from ..planner import DEFAULT_EVALUATION, EVALUATIONS

    default = AUTO if auto else DEFAULT_EVALUATION
    choices = (*EVALUATIONS, AUTO) if auto else EVALUATIONS
    chooser = (f"auto (compiled from {AUTO_COMPILED_KNOTS} knots on when a C compiler is found, else expanded), "
               if auto else "")
    parser.add_argument("--evaluation", choices=choices, default=default,
                        help=f"how the solver evaluates the problem: {chooser}compiled (C code compiled once per "
                             "robot and task shape, kept in the cache folder: the fastest plan from a fresh "
                             "process), expanded (one graph: slow build, fast iterations) or mapped (fast build, "
                             f"slow iterations); default {default}")


def chosen_evaluation(requested: str, knots: int) -> str:
    """The evaluation a command uses: ``requested``, or for ``auto`` compiled from
    :data:`AUTO_COMPILED_KNOTS` knots on when a C compiler is found, else expanded."""
    from ..transcription.compiled import compiler_found

    if requested != AUTO:
        return requested
    return "compiled" if knots >= AUTO_COMPILED_KNOTS and compiler_found() else "expanded"


MAX_THREADS = 512


def add_threads_option(parser: argparse.ArgumentParser, default_text: str) -> None:
    parser.add_argument("--threads", type=int, metavar="N",
                        help="threads evaluating the knot functions of the compiled and mapped evaluations "
                             f"(1: serial; the expanded evaluation is always serial); default {default_text}")


def threads_option(args) -> int | None:
    """``--threads`` checked (None when not given); a bad ``$BRACE_THREADS`` is reported here too."""
    from ..planner import evaluation_threads

    if args.threads is None:
        evaluation_threads()  # raises InputError naming the variable when it is not a whole number >= 1
        return None
    if not 1 <= args.threads <= MAX_THREADS:
        raise InputError("command line", "--threads", f"a whole number from 1 to {MAX_THREADS}", args.threads)
    return args.threads


def apply_cache_option(args) -> None:
    """Use ``--cache-dir`` when given (for this process and the workers it starts)."""
    if getattr(args, "cache_dir", None):
        set_cache_dir(args.cache_dir)


def compiler_note() -> str | None:
    """One line when no C compiler is found, else None."""
    from ..transcription.compiled import COMPILER_ENVIRONMENT, compiler, compiler_found

    if not compiler_found():
        return (f"note: no C compiler '{compiler()}' found (set {COMPILER_ENVIRONMENT}); the knot functions are "
                "evaluated uncompiled: same plans, slower iterations")
    return None


ACTIONS = ("show", "clear")


def run(args) -> int:
    if args.action not in ACTIONS:
        raise InputError("command line", "ACTION", " or ".join(ACTIONS), args.action)
    apply_cache_option(args)
    folder = cache_dir()
    entries = cache_contents()
    if args.action == "clear":
        freed = clear_cache()
        print(f"brace cache: cleared {folder} ({len(entries)} file(s), {format_size(freed)})")
        return 0
    total = sum(size for _, size in entries)
    libraries = [name for name, _ in entries if name.endswith(".so")]
    print(f"brace cache: {folder}: {len(libraries)} compiled librar{'y' if len(libraries) == 1 else 'ies'}, "
          f"{format_size(total)} in all" + ("" if folder.is_dir() else " (not created yet)"))
    note = compiler_note()
    if note:
        print(note, file=sys.stderr)
    return 0
