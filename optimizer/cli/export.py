"""``brace export PLAN.npz --rate HZ``: the plan resampled for a tracking controller.

Writes states, feed-forward torques, contact forces, stance flags, footholds,
response gains and the margin per sample, as CSV (one header row of
``name [unit]``) or NPZ (one array per quantity, plus ``columns``, ``units``
and an ``info`` JSON). Columns, units and frames: docs/export.md.
"""
from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from ..analysis.export import csv_columns, csv_rows, resample
from ..errors import InputError
from ..files import atomic_output
from ..planfile import load_plan
from ..notices import SAFETY

HELP = "resample a plan at a fixed rate for a tracking controller (CSV or NPZ)"
CLI = "command line"
FORMATS = ("csv", "npz")
MAX_RATE = 10000.0    # Hz; above this the file grows without helping any controller
DEFAULT_RATE = 200.0  # Hz: a common rate for whole-body tracking loops (common practice, not a standard)


def add_arguments(parser) -> None:
    parser.add_argument("plan", metavar="PLAN.npz", help="plan file (plan/1)")
    parser.add_argument("--rate", type=float, default=DEFAULT_RATE, metavar="HZ",
                        help=f"samples per second (default {DEFAULT_RATE:g})")
    parser.add_argument("--format", choices=FORMATS, default="csv", help="csv (default) or npz")
    parser.add_argument("--out", metavar="FILE", help="output file (default: beside the plan, <plan>-<rate>hz.<format>)")
    parser.add_argument("--disturbance", type=int, default=0, metavar="INDEX",
                        help="disturbance point whose response gains are exported (default 0)")


def run(args) -> int:
    if not (math.isfinite(args.rate) and 0.0 < args.rate <= MAX_RATE):
        raise InputError(CLI, "--rate", f"a sample rate in (0, {MAX_RATE:g}] Hz", args.rate)
    plan = load_plan(args.plan)
    points = len(plan.meta["disturbances"])
    if not 0 <= args.disturbance < points:
        raise InputError(CLI, "--disturbance", f"an index from 0 to {points - 1}", args.disturbance)
    out = output_path(args)
    trajectory = resample(plan, args.rate, args.disturbance)
    if args.format == "csv":
        write_csv(trajectory, out)
    else:
        write_npz(trajectory, out)
    print(f"brace export: {len(trajectory.t)} samples at {args.rate:g} Hz over {trajectory.t[-1]:.3f} s -> {out}")
    print(SAFETY)
    return 0


def output_path(args) -> Path:
    if args.out:
        out = Path(args.out)
    else:
        plan = Path(args.plan)
        out = plan.with_name(f"{plan.stem}-{args.rate:g}hz.{args.format}")
    if out.is_dir():
        raise InputError(CLI, "--out", "a file path", f"{out} is a directory")
    return out


def write_csv(trajectory, out: Path) -> None:
    header = ",".join(f"{name} [{unit}]" for name, unit in csv_columns(trajectory))
    with atomic_output(out, suffix=".csv") as tmp:
        np.savetxt(tmp, csv_rows(trajectory), delimiter=",", header=header, comments="", fmt="%.17g")


def write_npz(trajectory, out: Path) -> None:
    columns = csv_columns(trajectory)
    arrays = {name: getattr(trajectory, name) for name in
              ("t", "q", "v", "a", "tau", "contact_forces", "contact_active", "contact_targets", "contact_normals",
               "gain_tau", "gain_force", "margin")}
    with atomic_output(out, suffix=".npz") as tmp:
        with open(tmp, "wb") as handle:
            np.savez(handle, **arrays, columns=np.array([c[0] for c in columns]),
                     units=np.array([c[1] for c in columns]), info=np.array(json.dumps(trajectory.info)))
