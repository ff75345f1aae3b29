"""The ``brace`` command line.

Each subcommand lives in its own module of this package and provides
``HELP`` (one line), ``add_arguments(parser)`` and ``run(args) -> int``.
The registry below maps command names to module names; modules are imported
only when their command runs, so ``brace --help`` stays fast.
"""
from __future__ import annotations

import argparse
import importlib
import sys
import traceback

from ..errors import BraceError

INTERNAL_ERROR = 70  # exit code of an unexpected exception (a bug); bad input is 2, a failed solve 1

COMMANDS = {
    "check-model": "optimizer.cli.check_model",
    "solve": "optimizer.cli.solve",
    "certify": "optimizer.cli.certify",
    "compare": "optimizer.cli.compare",
    "report": "optimizer.cli.report",
    "simulate": "optimizer.cli.simulate",
    "sweep": "optimizer.cli.sweep",
    "export": "optimizer.cli.export",
}

COMMAND_HELP = {
    "check-model": "inspect a robot file: mass, frames, limits, standing statics",
    "solve": "plan a whole-body motion for a task file and write a plan file",
    "certify": "compute the exact smallest unrejectable force of a plan, knot by knot",
    "compare": "plan a task with several objectives and compare them: table, figures, motion preview, HTML page",
    "report": "draw and compare existing plan files: figures, motion preview and an HTML page",
    "simulate": "replay a plan in MuJoCo with a tracking controller and push it at the hand",
    "sweep": "solve a task over a grid or sample of variants; resumable, on a local pool or a Dask cluster",
    "export": "resample a plan at a fixed rate for a tracking controller (CSV or NPZ)",
}


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="brace",
        description="Robustness-aware whole-body planning for legged robots with an arm.",
    )
    parser.add_argument("--debug", action="store_true", help="show full tracebacks on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for name in COMMANDS:
        sub.add_parser(name, help=COMMAND_HELP[name], add_help=False)
    return parser


def main(argv=None) -> int:
    """Entry point of the ``brace`` console script; returns the exit code."""
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    top, rest = parser.parse_known_args(argv)
    module = importlib.import_module(COMMANDS[top.command])
    sub = argparse.ArgumentParser(prog=f"brace {top.command}", description=COMMAND_HELP[top.command])
    sub.add_argument("--debug", action="store_true", help="show full tracebacks on errors")
    module.add_arguments(sub)
    args = sub.parse_args(rest)
    args.debug = args.debug or top.debug
    try:
        return int(module.run(args) or 0)
    except BraceError as exc:
        if args.debug:
            traceback.print_exc()
        print(f"brace {top.command}: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print(f"brace {top.command}: interrupted; no output was written", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug in brace, not in the input: say so in one line
        if args.debug:
            traceback.print_exc()
        print(f"brace {top.command}: internal error: {type(exc).__name__}: {exc}".splitlines()[0][:300]
              + " (a bug in brace; run with --debug for the traceback and report it)", file=sys.stderr)
        return INTERNAL_ERROR


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
