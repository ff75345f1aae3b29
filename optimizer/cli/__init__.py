"""The ``brace`` command line.

Each subcommand lives in its own module of this package and provides
``HELP`` (one line), ``add_arguments(parser)`` and ``run(args) -> int``.
The registry below maps command names to module names; modules are imported
only when their command runs, so ``brace --help`` stays fast.

Run as a program (``brace ...``, ``python -m optimizer ...``), every command's
work runs under :mod:`optimizer.supervisor`: SIGINT, SIGTERM or SIGHUP stop
it at any moment (exit 128 + signal), with one line naming what was stopped
and no temporary file left. Called from Python with an explicit ``argv``
(tests), the command runs in-process unless ``supervise=True``.
"""
from __future__ import annotations

import argparse
import importlib
import sys
import traceback

from .. import supervisor
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
    "cache": "optimizer.cli.cache",
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
    "cache": "show or clear the cache folder of compiled solver parts",
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


def main(argv=None, supervise: bool | None = None) -> int:
    """Entry point of the ``brace`` console script; returns the exit code.

    ``supervise`` (default: only when ``argv`` is None, i.e. run as a program)
    runs the command's work in a supervised child process.
    """
    supervise = argv is None if supervise is None else supervise
    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    top, rest = parser.parse_known_args(argv)
    module = importlib.import_module(COMMANDS[top.command])
    sub = argparse.ArgumentParser(prog=f"brace {top.command}", description=COMMAND_HELP[top.command])
    sub.add_argument("--debug", action="store_true", help="show full tracebacks on errors")
    module.add_arguments(sub)
    args = sub.parse_args(rest)
    args.debug = args.debug or top.debug
    if supervise:
        return supervisor.run(lambda: run_command(top.command, module, args), command=top.command,
                              grace=getattr(module, "STOP_GRACE", 0.0))
    return run_command(top.command, module, args)


def run_command(name: str, module, args) -> int:
    """Run one parsed command in this process, turning errors into one line and an exit code."""
    try:
        return int(module.run(args) or 0)
    except BraceError as exc:
        if args.debug:
            traceback.print_exc()
        print(f"brace {name}: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print(f"brace {name}: interrupted; no output was written", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug in brace, not in the input: say so in one line
        if args.debug:
            traceback.print_exc()
        print(f"brace {name}: internal error: {type(exc).__name__}: {exc}".splitlines()[0][:300]
              + " (a bug in brace; run with --debug for the traceback and report it)", file=sys.stderr)
        return INTERNAL_ERROR


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
