"""``brace check-model ROBOT.yaml``: inspect a robot file before planning with it.

Prints mass, sizes, frames, the joint limits, the statics of the standing
posture and its self-collision pairs, then lists problems. Exit codes: 0 no problem, 1 problems flagged,
2 bad input (raised as ModelError and reported by the CLI entry point).
"""
from __future__ import annotations

import argparse

import numpy as np

from ..analysis.statics import StaticsResult, standing_statics
from ..problem.clearance import clearance_spec, self_shortfall
from ..robot.model import RobotModel, load_robot

HELP = "inspect a robot file: mass, frames, limits, standing statics"
GROUND_TOLERANCE = 0.005  # m, contact height accepted as "on the ground"
UNITS = {  # joint kind: (position, velocity, torque)
    "revolute": ("rad", "rad/s", "N m"),
    "continuous": ("rad", "rad/s", "N m"),
    "prismatic": ("m", "m/s", "N"),
}


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("robot", metavar="ROBOT.yaml", help="robot file (YAML naming a URDF)")


def run(args) -> int:
    robot = load_robot(args.robot)
    statics = standing_statics(robot, robot.standing_posture)
    lines = summary_lines(robot) + limit_lines(robot) + statics_lines(robot, statics) + self_pair_lines(robot)
    problems = find_problems(robot, statics) + self_pair_problems(robot)
    lines.append("")
    lines.append(f"problems: {len(problems)}" if problems else "problems: none")
    lines.extend(f"  ! {text}" for text in problems)
    print("\n".join(lines))
    return 1 if problems else 0


def summary_lines(robot: RobotModel) -> list[str]:
    return [
        f"robot '{robot.name}'  ({robot.yaml_path})",
        f"  urdf            {robot.urdf_path}",
        f"  mass            {robot.mass:.3f} kg",
        f"  weight          {robot.mass * np.linalg.norm(robot.gravity):.2f} N "
        f"(gravity {np.linalg.norm(robot.gravity):.3f} m/s^2)",
        f"  sizes           nq {robot.nq}, nv {robot.nv}, actuated joints nj {robot.nj}",
        f"  contact frames  {', '.join(robot.contact_frames)}",
        f"  hand frame      {robot.hand_frame}",
    ]


def self_pair_lines(robot: RobotModel) -> list[str]:
    """How many self-collision pairs the robot file names and the one with the least room when standing."""
    pairs = robot.collision.self_pairs
    if not pairs:
        return ["", "self-collision pairs: none"]
    distance, required, pair = self_shortfall(clearance_spec(robot, [], [], 0.0), robot, robot.standing_posture)
    return ["", f"self-collision pairs: {len(pairs)}; least room standing: {pair} {distance * 100:.1f} cm apart "
            f"({required * 100:.1f} cm required)"]


def self_pair_problems(robot: RobotModel) -> list[str]:
    """A self-collision pair closer than its distance in the standing posture."""
    if not robot.collision.self_pairs:
        return []
    distance, required, pair = self_shortfall(clearance_spec(robot, [], [], 0.0), robot, robot.standing_posture)
    if distance >= required:
        return []
    return [f"standing posture brings {pair} {distance * 100:.1f} cm apart; the robot file asks for "
            f"{required * 100:.1f} cm"]


def joint_position_range(robot: RobotModel, i: int) -> tuple[float, float]:
    """Lower and upper position of actuated joint ``i`` (continuous: -inf, inf)."""
    if robot.joint_kinds[i] == "continuous":
        return -np.inf, np.inf
    start = robot.model.idx_qs[i + 2] - 7
    return robot.joint_lower[start], robot.joint_upper[start]


def tidy(value: float, digits: int = 2) -> float:
    """``value`` rounded for printing, without a minus sign on zero."""
    return round(float(value), digits) + 0.0


def limit_lines(robot: RobotModel) -> list[str]:
    width = max(len(n) for n in robot.joint_names)
    lines = ["", "joint limits", f"  {'joint':<{width}}  {'position':<24}  {'velocity':>8}        {'torque':<24}".rstrip()]
    for i, name in enumerate(robot.joint_names):
        pos_unit, vel_unit, tau_unit = UNITS[robot.joint_kinds[i]]
        lo, up = joint_position_range(robot, i)
        lines.append(f"  {name:<{width}}  {lo:+7.3f} .. {up:+7.3f} {pos_unit:<5}"
                     f"  {robot.velocity_limit[i]:8.2f} {vel_unit:<5}"
                     f"  {robot.torque_lower[i]:+7.1f} .. {robot.torque_upper[i]:+7.1f} {tau_unit:<3}")
    return lines


def statics_lines(robot: RobotModel, statics: StaticsResult) -> list[str]:
    lines = ["", f"standing posture (base height {robot.standing_posture[2]:.4f} m), "
                 "smallest contact forces holding it at rest",
             f"  {'contact':<12}  {'height':>10}  {'force x':>10}  {'force y':>10}  {'force z':>10}  (world frame)"]
    for name, height, force in zip(statics.contact_frames, statics.contact_heights, statics.forces):
        lines.append(f"  {name:<12}  {tidy(height * 1000):+7.2f} mm  " + "  ".join(f"{tidy(f):+8.2f} N" for f in force))
    total = statics.forces[:, 2].sum()
    lines.append(f"  sum of vertical forces {total:.2f} N, weight {robot.mass * np.linalg.norm(robot.gravity):.2f} N")
    width = max(len(n) for n in robot.joint_names)
    lines += ["", f"  {'joint':<{width}}  {'torque':>12}  {'of limit':>9}"]
    for i, name in enumerate(robot.joint_names):
        unit = UNITS[robot.joint_kinds[i]][2]
        lines.append(f"  {name:<{width}}  {tidy(statics.torques[i]):+8.2f} {unit:<3}  {100 * statics.torque_use[i]:7.1f} %")
    return lines


def find_problems(robot: RobotModel, statics: StaticsResult) -> list[str]:
    """Plain-text descriptions of what is wrong with the standing posture."""
    problems = []
    for name, height in zip(statics.contact_frames, statics.contact_heights):
        if abs(height) > GROUND_TOLERANCE:
            problems.append(f"contact {name} is {height * 1000:+.1f} mm from the ground "
                            f"(tolerance {GROUND_TOLERANCE * 1000:.0f} mm)")
    for name, force in zip(statics.contact_frames, statics.forces):
        if force[2] < 0:
            problems.append(f"contact {name} would pull the ground ({force[2]:+.2f} N vertical)")
    if statics.base_residual > 1e-6 * robot.mass * np.linalg.norm(robot.gravity):
        problems.append(f"the contacts cannot balance the body at rest (residual {statics.base_residual:.3g} N, N m)")
    for i, name in enumerate(robot.joint_names):
        if statics.torque_use[i] > 1.0:
            unit = UNITS[robot.joint_kinds[i]][2]
            problems.append(f"joint {name} needs {statics.torques[i]:+.2f} {unit}, beyond its limit "
                            f"[{robot.torque_lower[i]:+.1f}, {robot.torque_upper[i]:+.1f}] {unit}")
    problems += posture_limit_problems(robot)
    return problems


def posture_limit_problems(robot: RobotModel) -> list[str]:
    problems = []
    for i, name in enumerate(robot.joint_names):
        if robot.joint_kinds[i] == "continuous":
            continue
        lo, up = joint_position_range(robot, i)
        value = robot.standing_posture[robot.model.idx_qs[i + 2]]
        if not lo <= value <= up:
            unit = UNITS[robot.joint_kinds[i]][0]
            problems.append(f"standing posture puts joint {name} at {value:+.4f} {unit}, "
                            f"outside [{lo:+.3f}, {up:+.3f}] {unit}")
    return problems
