"""``brace simulate PLAN.npz``: replay a plan in MuJoCo and push it at the hand.

Prints the nominal replay's tracking (base, hand, targets, feet, clipped
torques) and, for each chosen knot and mode, the largest push along the
certified weakest direction the robot survives, beside the certified margin.
``--json OUT`` writes the same for machines, ``--figure OUT.png`` the
survived pushes against the certified margins as a figure. Exit code 0 when the nominal
replay stays within its limits (feet, hand targets, contacts), 1 when not,
2 on bad input or when MuJoCo is not installed.
"""
from __future__ import annotations

import dataclasses
import json
import math
import sys

import numpy as np

from ..errors import InputError
from ..files import atomic_output
from ..planfile import build_model, load_plan
from .certify import parse_knots
from .notices import SAFETY

HELP = "replay a plan in MuJoCo with a tracking controller and find the largest push it survives"
CLI = "command line"
SIM_ONLY = ("A simulation is a model too: rigid links, ideal actuators, soft point contacts and exact force "
            "sensing in informed mode. Surviving here does not rate the real machine.")


def add_arguments(parser) -> None:
    parser.add_argument("plan", metavar="PLAN.npz", help="plan file (plan/1)")
    parser.add_argument("--task", metavar="TASK.yaml",
                        help="task file for the terrain and hand targets (default: the task stored in the plan)")
    parser.add_argument("--mode", choices=("informed", "blind", "both"), default="both",
                        help="informed: the controller adds the plan's response to the push; blind: PD only "
                             "(default both)")
    parser.add_argument("--knots", default="smallest", metavar="LIST",
                        help="knots to push at: 'smallest' (the smallest certified margin, default), 'none', "
                             "'all' or e.g. '0,5,10-20'")
    parser.add_argument("--json", metavar="OUT", help="also write the results as JSON to OUT")
    parser.add_argument("--figure", metavar="OUT.png",
                        help="also draw the survived pushes against the certified margins (PNG or SVG)")
    parser.add_argument("--disturbance", type=int, default=0, metavar="INDEX",
                        help="which disturbance point of the plan (default 0)")
    parser.add_argument("--hold", type=float, default=0.2, metavar="S", help="push held at full size, s (default 0.2)")
    parser.add_argument("--settle", type=float, default=0.3, metavar="S",
                        help="time watched after the push, s (default 0.3)")
    parser.add_argument("--slip", type=float, default=0.005, metavar="M",
                        help="largest foot slip a push may cause, m (default 0.005)")
    parser.add_argument("--touchdown", type=float, default=0.05, metavar="S",
                        help="settling time after a planned touchdown before the foot is judged, s (default 0.05)")
    parser.add_argument("--timestep", type=float, default=0.0005, metavar="S",
                        help="simulation step, s (default 0.0005)")
    parser.add_argument("--quiet", action="store_true", help="print only the summary lines")


def run(args) -> int:
    try:
        import mujoco
    except ImportError:
        raise InputError(CLI, "", "the optional package 'mujoco' for brace simulate",
                         "not installed", "pip install 'brace-planner[sim]'") from None
    from ..problem.task import load_task
    from ..simulation.inputs import simulation_inputs
    from ..simulation.pushes import Settings, Simulator
    from ..simulation.rollout import SurvivalRules
    from ..simulation.scene import ContactSettings

    settings = Settings(contact=ContactSettings(timestep=_positive(args.timestep, "--timestep", 0.01)),
                        rules=SurvivalRules(slip=_positive(args.slip, "--slip", 1.0),
                                            touchdown=_positive(args.touchdown, "--touchdown", 1.0)),
                        hold=_positive(args.hold, "--hold", 10.0), settle=_positive(args.settle, "--settle", 10.0))
    if args.figure and not str(args.figure).lower().endswith((".png", ".svg")):
        raise InputError(CLI, "--figure", "a file name ending in .png or .svg", args.figure)
    plan = load_plan(args.plan)
    count = len(plan.meta["disturbances"])
    if not 0 <= args.disturbance < count:
        raise InputError(CLI, "--disturbance", f"an index from 0 to {count - 1}", args.disturbance)
    knots = push_knots(args.knots, plan, args.disturbance)
    task = load_task(args.task) if args.task else None
    inputs = simulation_inputs(plan, build_model(args.plan, plan.meta["urdf"]), task)
    sim = Simulator(plan, inputs.surfaces, inputs.targets, inputs.hand_frame, settings, args.disturbance)
    inputs.notes.extend(reserve_notes(plan.meta))
    nominal = sim.nominal()
    modes = ("informed", "blind") if args.mode == "both" else (args.mode,)
    pushes = []
    for k in knots:
        for mode in modes:
            _progress(f"pushing at knot {k} ({mode})")
            pushes.append(sim.largest_push(k, mode))
    _progress("")
    raw_task = plan.meta.get("task")
    document = {"format": "brace-simulation/1", "plan": str(args.plan),
                "task": (task.name if task is not None else
                         raw_task.get("name", "") if isinstance(raw_task, dict) else ""),
                "objective": str(plan.meta.get("objective", "")),
                "engine": {"name": "mujoco", "version": mujoco.__version__},
                "settings": _settings_json(settings), "scene": inputs.notes,
                "disturbance": plan.meta["disturbances"][args.disturbance]["frame"],
                "nominal": nominal, "pushes": [p.to_json() for p in pushes]}
    print(report_text(document, quiet=args.quiet))
    if args.json:
        with atomic_output(args.json, suffix=".json") as tmp:
            tmp.write_text(json.dumps(document, indent=2) + "\n", encoding="utf-8")
    if args.figure:
        from ..report.simulation import write_push_figure

        write_push_figure([document], args.figure)
    return 0 if nominal["ok"] else 1


def reserve_notes(meta: dict) -> list:
    """Scene notes on the reserves a plan kept for the controller (the replay uses the full limits)."""
    from ..problem.reserve import meta_reserve

    notes = []
    reserve = meta_reserve(meta, "torque_reserve")
    if reserve > 0:
        notes.append(f"torques: the plan keeps {100 * reserve:g} % of every limit for the controller; "
                     "the replay clips at the full limits")
    reserve = meta_reserve(meta, "friction_reserve")
    if reserve > 0:
        notes.append(f"friction: the plan keeps {100 * reserve:g} % of every coefficient for the controller; "
                     "the scene uses the full coefficients")
    return notes


def _positive(value: float, option: str, most: float) -> float:
    if not (math.isfinite(value) and 0.0 < value <= most):
        raise InputError(CLI, option, f"a number in (0, {most:g}]", value)
    return float(value)


def push_knots(spec: str, plan, disturbance: int) -> list:
    """Knots to push at: 'smallest', 'none', 'all' or a list (see ``brace certify --knots``)."""
    spec = spec.strip()
    if spec == "none":
        return []
    if spec == "smallest":
        margin = plan.margin if disturbance == 0 else plan.margins[:, disturbance]
        return [int(np.nanargmin(margin))]
    return parse_knots(spec, plan.t.shape[0])


def _progress(text: str) -> None:
    if sys.stderr.isatty():
        sys.stderr.write("\r" + text.ljust(60) + ("\r" if not text else ""))
        sys.stderr.flush()


def _settings_json(s) -> dict:
    out = dataclasses.asdict(s)
    out["contact"]["impedance"] = list(out["contact"]["impedance"])
    return out


def _mm(x) -> str:
    return "-" if x is None else f"{1e3 * x:.1f} mm"


def _n(x) -> str:
    return "-" if x is None else f"{x:.1f}"


def nominal_lines(doc: dict) -> list:
    n, s = doc["nominal"], doc["settings"]
    feet = n["feet"]
    worst = max(feet, key=lambda f: f["distance_m"]) if feet else None
    lines = ["nominal replay (plan torques + joint PD, no push):",
             f"  base     largest error {_mm(n['base_error_m'])}, {n['base_turn_deg']:.2f} deg",
             f"  hand     {n['hand_frame']}: largest error against the plan {_mm(n['hand_error_m'])} "
             f"(knot {n['hand_error_knot']})"]
    if n["targets"]:
        lines.append("  targets  " + ", ".join(f"{t['label'] or t['frame']} {_mm(t['error_m'])}" for t in n["targets"])
                     + f" (limit {_mm(s['target_tolerance'])})")
    if worst is not None:
        losses = sum(f["contact_losses"] for f in feet)
        intervals = sum(len(f["stances"]) for f in feet)
        if intervals > len(feet):
            lines.append(f"  stances  {intervals} stance intervals; feet judged only in stance, from "
                         f"{1e3 * s['rules']['touchdown']:.0f} ms after a touchdown")
        lines.append(f"  feet     largest distance of a stance foot from its foothold {_mm(worst['distance_m'])} "
                     f"({worst['frame']}, limit {_mm(s['foot_tolerance'])}); contact losses: {losses or 'none'}")
    if not n["ok"]:
        lines += underload_lines(feet)
    clipped = n["torque_clipped_s"]
    lines.append("  torques  " + ("never clipped" if not clipped else
                                  "clipped: " + ", ".join(f"{k} {1e3 * v:.0f} ms" for k, v in clipped.items())))
    verdict = "within limits" if n["ok"] else "NOT within limits (" + ", ".join(
        w for w, ok in (("feet", n["feet_ok"]), ("hand targets", n["targets_ok"]), ("contacts", n["contacts_kept"]))
        if not ok) + ")"
    lines.append(f"  result: nominal replay {verdict}")
    return lines


def underload_lines(feet) -> list:
    """The stance foot that first carried under the report's share (``share``) of its planned load, with the certified
    margin there."""
    first = [(f["underloaded"]["t_s"], f["frame"], f["underloaded"]) for f in feet if f.get("underloaded")]
    if not first:
        return []
    _, name, at = min(first, key=lambda item: item[0])
    return [f"  loads    {name} first carried under {100 * at['share']:.0f} % of its planned load at knot {at['knot']} "
            f"(t = {at['t_s']:.2f} s): "
            f"{at['replayed_n']:.1f} N against {at['planned_n']:.1f} N; certified margin there {at['certified_margin_n']:.1f} N"]


def push_lines(doc: dict) -> list:
    s, rules = doc["settings"], doc["settings"]["rules"]
    if not doc["pushes"]:
        return []
    head = (f"pushes at {doc['disturbance']} along the certified weakest direction, held {s['hold']:.2f} s "
            f"(ramps {s['ramp']:.2f} s), watched until {s['settle']:.2f} s after;")
    rule = (f"survived = no stance foot slips over {_mm(rules['slip'])}, no stance foot without force over "
            f"{1e3 * rules['contact_loss']:.0f} ms, no torque clipped over {1e3 * rules['saturation']:.0f} ms "
            f"(swinging feet free; {1e3 * rules['touchdown']:.0f} ms after a touchdown not judged)")
    table = [f"{'knot':>5} {'t [s]':>6} {'certified [N]':>14} {'exact [N]':>10} {'mode':>9} "
             f"{'survived [N]':>13} {'/certified':>11}  ended by"]
    for p in doc["pushes"]:
        ratio = "-" if p["survived_over_certified"] is None else f"{p['survived_over_certified']:.2f}"
        survived = _n(p["largest_survived_N"])
        if p["smallest_failed_N"] is None and p["largest_survived_N"] is not None:
            survived = ">=" + survived
        table.append(f"{p['knot']:>5} {p['time_s']:>6.3f} {_n(p['certified_margin_N']):>14} "
                     f"{_n(p['exact_margin_N']):>10} {p['mode']:>9} {survived:>13} {ratio:>11}  {p['failure']}")
    return [head, "  " + rule] + table


def report_text(doc: dict, quiet: bool = False) -> str:
    s = doc["settings"]["contact"]
    head = [f"simulate {doc['plan']} in MuJoCo {doc['engine']['version']}: step {1e3 * s['timestep']:.2f} ms, "
            f"{s['cone']} friction cones, foot spheres {1e3 * s['foot_radius']:.0f} mm"]
    head += [f"  {note}" for note in doc["scene"]]
    body = nominal_lines(doc) + push_lines(doc)
    if quiet:
        body = [line for line in body if line.lstrip().startswith("result")] + push_lines(doc)[2:]
    return "\n".join(head + body + [SIM_ONLY, SAFETY])
