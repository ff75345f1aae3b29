"""Task files: what the robot must do, where it stands, what may push it.

A task file is a YAML mapping (schema in docs/task-files.md). :func:`load_task`
validates every field and returns a :class:`Task`, the problem description the
transcription consumes. Mistakes raise ``TaskError`` naming the file, the
dotted field and what was expected. Relative paths resolve against the folder
of the task file.
"""
from __future__ import annotations

import copy
import dataclasses
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pinocchio as pin

from ..errors import InfeasibleTask, TaskError
from ..files import read_yaml_mapping
from ..memory import SIZE_TEXT, parse_size
from ..robot.derived import with_torque_scale
from ..robot.model import load_robot
from ..schema import Fields
from .clearance import DEFAULT_CLEARANCE, ClearanceSpec, clearance_spec
from .friction import tangent_basis
from .geometry import ground_planes
from .point_weights import COMBINATIONS, DEFAULT_COMBINATION
from .push_shape import shape_from_directions, wrench_shape
from .requirement import horizon_requirement, read_requirements
from .reserve import planned_value, read_reserve
from .schedule import (DEFAULT_APPROACH_CLEARANCE, DEFAULT_SWING_HEIGHT, DEFAULT_TOUCHDOWN_SPEED, Schedule,
                       StanceInterval)
from .stance import foot_residuals, solve_stance
from .terrain import build_terrain

OBJECTIVES = ("feasible", "robust", "robust-min", "robust-sum", "torque")
DISTURBANCE_DIMS = {"force": 3, "wrench": 6}
UNIT_TOLERANCE = 1e-3      # |n| may differ from 1 by this much before it counts as a mistake
MAX_KNOTS = 2000           # more knots than this is a typo, not a plan (the NLP grows linearly)
MAX_FACETS = 64            # a pyramid finer than this adds rows without changing the answer
TOP_LEVEL = {"name", "description", "robot", "horizon", "stance", "hand_targets", "disturbances",
             "combine_points", "objective", "pyramid_facets", "min_normal_force", "initial_posture", "solver", "require",
             "clearance", "torque_reserve", "friction_reserve"}


@dataclass
class ContactSpec:
    """A stance contact.

    Attributes
    ----------
    frame : str
        Contact frame of the robot; the contact point is its origin.
    foothold : ndarray, shape (3,)
        Where the frame origin must stay, m, world frame.
    normal : ndarray, shape (3,)
        Unit surface normal, world frame, pointing into the robot.
    tangents : ndarray, shape (2, 3)
        Unit tangents ``t1, t2`` of the surface (``t2 = n x t1``).
    friction : float
        Coulomb friction coefficient mu > 0.
    surface : str
        Name of the terrain surface the contact stands on (its own points
        are exempt from it in the clearance checks).
    min_normal_force : float
        Smallest normal force the contact keeps while in stance, N: its own
        (``min_normal_force`` of its stance entry) or the task's. A limit:
        the certified response to a push keeps it too.
    preload : float
        Normal force the planned motion keeps at the contact while in stance,
        N (``preload`` of its stance entry, default 0): room for the tracking
        controller, not a limit of the certified response, which may unload
        the contact down to ``min_normal_force``.
    """

    frame: str
    foothold: np.ndarray
    normal: np.ndarray
    tangents: np.ndarray
    friction: float
    surface: str = ""
    min_normal_force: float = 0.0
    preload: float = 0.0

    @property
    def least_normal_force(self) -> float:
        """The smallest normal force of the planned motion at this contact, N: its minimum or its preload."""
        return max(float(self.min_normal_force), float(self.preload))


@dataclass
class HandTarget:
    """Where a frame must be, at one time or over a window.

    Attributes
    ----------
    frame : str
        Robot frame (default the robot's hand frame).
    position : ndarray, shape (3,)
        m, world frame.
    orientation : ndarray, shape (3, 3), or None
        Rotation matrix of the frame in the world, None when free.
    t_start, t_end : float
        s; equal for a single time, ``t_start < t_end`` for a hold.
    label : str
        Name for reports (e.g. ``pick``); may be empty.
    """

    frame: str
    position: np.ndarray
    orientation: np.ndarray | None
    t_start: float
    t_end: float
    label: str = ""


@dataclass
class DisturbanceSpec:
    """A disturbance point: ``{W u : |u| <= rho}`` acting at ``frame``'s origin.

    ``kind`` is ``"force"`` (W shape (3, 3)) or ``"wrench"`` (W shape (6, 6),
    ordered [force; moment]); axes are world-aligned. ``objective_weight``
    (>= 0) is the point's weight in robust objectives
    (:mod:`optimizer.problem.point_weights`).
    """

    frame: str
    kind: str
    shape: np.ndarray
    objective_weight: float = 1.0


@dataclass
class Task:
    """A validated task (see docs/task-files.md for the file behind each field).

    Attributes
    ----------
    duration : float
        Horizon length, s.
    knots : int
        Knot count K >= 2; knot times ``linspace(0, duration, K)``.
    contacts : list of ContactSpec
        Stance contacts, all active over the whole horizon.
    hand_targets : list of HandTarget
    disturbances : list of DisturbanceSpec
        At least one (default: a force at the robot's hand frame, W = I).
    combine_points : str
        How robust objectives combine the points' margins at a knot:
        ``smallest`` or ``weighted-sum`` (:mod:`optimizer.problem.point_weights`).
    objective : str
        One of ``OBJECTIVES``.
    facets : int
        Facets of each inscribed friction pyramid.
    min_normal_force : float
        N, the task-wide minimum normal force (top-level
        ``min_normal_force``); a contact may keep a larger or smaller one of
        its own (:attr:`ContactSpec.min_normal_force` holds each contact's,
        :meth:`min_normal_forces` lists them).
    solver_options : dict
        Passed to the solver adapter as given (without ``memory_limit``).
    initial_posture : ndarray, shape (nq,), or None
        Fixed start configuration; None leaves it free (at rest).
    clearance : ClearanceSpec
        Collision shapes, terrain surfaces and the required clearance (m)
        (:mod:`optimizer.problem.clearance`); no pairs when switched off.
    raw : dict
        The task mapping as read (JSON-serializable), ``horizon.knots``
        updated by :meth:`with_knots`.
    requirements : list of MarginRequirement
        Margins the plan must keep (``require``; see
        :mod:`optimizer.problem.requirement`); empty when none is stated.
    memory_limit : int or None
        Bytes a solve may use (``solver.memory_limit``); None: what the
        machine has available.
    schedule : Schedule
        Stance intervals per contact (``stance.schedule``); one interval over
        the whole horizon for every contact the schedule does not name. The
        ``foothold`` of each entry of ``contacts`` is that of its first interval.
    torque_reserve : float
        Fraction of every joint's torque limit kept for the tracking
        controller (``torque_reserve``): ``robot`` already carries the
        limits times ``1 - torque_reserve``, which the plan meets and is
        certified against.
    friction_reserve : float
        Fraction of every friction coefficient kept for the tracking
        controller (``friction_reserve``): each of ``contacts`` (and each
        stance interval with its own surface) already carries its surface's
        coefficient times ``1 - friction_reserve``,
        which the plan meets and is certified against.
    """

    name: str
    path: Path
    robot_path: Path
    robot: object
    duration: float
    knots: int
    contacts: list
    hand_targets: list
    disturbances: list
    objective: str
    facets: int
    min_normal_force: float
    solver_options: dict
    initial_posture: np.ndarray | None
    raw: dict
    requirements: list = field(default_factory=list)
    clearance: ClearanceSpec = None
    memory_limit: int | None = None
    combine_points: str = DEFAULT_COMBINATION
    schedule: Schedule = None
    torque_reserve: float = 0.0
    friction_reserve: float = 0.0

    def __post_init__(self):
        if self.schedule is None:
            self.schedule = Schedule([[StanceInterval(0.0, self.duration, c.foothold.copy(), c.surface)]
                                      for c in self.contacts], path=self.path, frames=[c.frame for c in self.contacts])

    def with_knots(self, knots: int) -> "Task":
        """A copy with ``knots`` knots (>= 2); the robot object is shared."""
        if isinstance(knots, bool) or not isinstance(knots, (int, np.integer)) or knots < 2:
            raise TaskError(self.path, "horizon.knots", "a whole number >= 2", knots)
        if knots > MAX_KNOTS:
            raise TaskError(self.path, "horizon.knots", f"a whole number <= {MAX_KNOTS}", knots)
        raw = copy.deepcopy(self.raw)
        raw.setdefault("horizon", {})["knots"] = int(knots)
        return dataclasses.replace(self, knots=int(knots), raw=raw)

    def with_required_margin(self, newtons: float) -> "Task":
        """A copy that also requires ``newtons`` N (> 0) at every knot and disturbance point."""
        if not (isinstance(newtons, (int, float)) and math.isfinite(newtons) and newtons > 0):
            raise TaskError(self.path, "require", "a required margin > 0 N", newtons)
        return dataclasses.replace(self, requirements=[*self.requirements,
                                                       horizon_requirement(newtons, self.duration)])

    def min_normal_forces(self, contacts=None) -> np.ndarray:
        """Each contact's minimum normal force, N, shape (nc,): of ``contacts`` (default the task's)."""
        return np.array([float(c.min_normal_force) for c in (self.contacts if contacts is None else contacts)])

    @property
    def own_normal_forces(self) -> bool:
        """True when some contact keeps a minimum normal force other than the task-wide one."""
        return bool(np.any(self.min_normal_forces() != self.min_normal_force))

    @property
    def weight(self) -> float:
        """The robot's weight m g, N."""
        return self.robot.mass * float(np.linalg.norm(self.robot.gravity))

    @property
    def times(self) -> np.ndarray:
        """Knot times, shape (K,), s."""
        return np.linspace(0.0, self.duration, self.knots)


# ---------------------------------------------------------------- loader


def load_task(path) -> Task:
    """Read and validate the task file at ``path``."""
    path = Path(path)
    return task_from_mapping(read_yaml_mapping(path, TaskError), path)


def task_from_mapping(data: dict, path) -> Task:
    """Validate a task mapping as if read from ``path`` (relative paths resolve against its folder)."""
    path = Path(path)
    top = Fields(data, path, "", TaskError)
    top.allow_only(TOP_LEVEL)
    if top.has("description"):
        top.string("description")
    robot_path, robot = read_robot(top)
    reserve = read_reserve(top, "torque_reserve")
    robot = with_torque_scale(robot, planned_value(1.0, reserve))
    duration, knots = read_horizon(top.sub("horizon"))
    contacts, surfaces, schedule = read_stance(top.sub("stance"), robot, duration)
    weight = robot.mass * float(np.linalg.norm(robot.gravity))
    min_normal_force = top.number("min_normal_force", 0.05 * weight / len(contacts), lo=0.0)
    contacts = [c if c.min_normal_force is not None else dataclasses.replace(c, min_normal_force=min_normal_force)
                for c in contacts]
    friction_reserve = read_reserve(top, "friction_reserve")
    contacts = with_friction_reserve(contacts, schedule, friction_reserve)
    clearance = read_clearance(top, robot, schedule_contacts(contacts, schedule), surfaces)
    hand_targets = read_hand_targets(top, robot, duration)
    disturbances = read_disturbances(top, robot)
    return Task(
        name=top.string("name", path.stem),
        path=path,
        robot_path=robot_path,
        robot=robot,
        duration=duration,
        knots=knots,
        contacts=contacts,
        hand_targets=hand_targets,
        disturbances=disturbances,
        combine_points=top.string("combine_points", DEFAULT_COMBINATION, choices=list(COMBINATIONS)),
        objective=top.string("objective", "robust", choices=OBJECTIVES),
        facets=top.integer("pyramid_facets", 4, lo=3, hi=MAX_FACETS),
        min_normal_force=min_normal_force,
        solver_options=read_solver_options(top),
        memory_limit=read_memory_limit(top),
        initial_posture=read_initial_posture(top, robot, contacts, clearance),
        raw=json_copy(data, path),
        clearance=clearance,
        torque_reserve=reserve,
        friction_reserve=friction_reserve,
        requirements=read_requirements(top, weight=weight, duration=duration,
                                       hand_targets=hand_targets, disturbances=disturbances),
        schedule=schedule,
    )


def read_robot(top: Fields):
    """Robot file path (resolved against the task's folder) and the loaded robot."""
    robot_path = (Path(top.file).parent / top.string("robot")).resolve()
    if not robot_path.is_file():
        top.fail("robot", "an existing robot file (path relative to the task file's folder)", str(robot_path))
    return robot_path, load_robot(robot_path)


def read_horizon(horizon: Fields) -> tuple[float, int]:
    """Duration (s, > 0) and knot count (2 .. MAX_KNOTS, default 60)."""
    horizon.allow_only({"duration", "knots"})
    return horizon.number("duration", lo=0.0, lo_open=True), horizon.integer("knots", 60, lo=2, hi=MAX_KNOTS)


def check_frame(fields: Fields, key: str, robot, name: str) -> str:
    """``name`` if the robot has such a frame, else a TaskError at ``key``."""
    if not isinstance(name, str) or not robot.model.existFrame(name):
        fields.fail(key, f"a frame of robot '{robot.name}'", name,
                    "contact frames: " + ", ".join(robot.contact_frames) + f"; hand: {robot.hand_frame}")
    return name


def require_text_key(fields: Fields, key) -> None:
    """Keys naming frames must be text (YAML reads ``1:`` or ``true:`` as other types)."""
    if not isinstance(key, str):
        fields.fail(str(key), "a frame name (text) as the key", key)


def unit_vector(fields: Fields, key: str, default=...) -> np.ndarray:
    """A 3-vector of length 1 (within ``UNIT_TOLERANCE``), returned normalized."""
    v = fields.vector(key, 3, default)
    norm = float(np.linalg.norm(v))
    if abs(norm - 1.0) > UNIT_TOLERANCE:
        fields.fail(key, f"a unit vector (length 1 within {UNIT_TOLERANCE})", f"{v.tolist()} of length {norm:.6g}")
    return v / norm


# ---------------------------------------------------------------- stance


def read_stance(stance: Fields, robot, duration: float) -> tuple[list[ContactSpec], list, Schedule]:
    """Contacts from ``stance.contacts`` (explicit) or ``stance.terrain`` + ``stance.feet``, the surfaces,
    and the contact schedule (``stance.schedule``).

    Surfaces (:class:`~optimizer.problem.geometry.Surface`) are the terrain's
    geometry, or for explicit contacts a ground plane through each distinct
    foothold plane that no other foothold lies below.
    """
    stance.allow_only({"contacts", "terrain", "feet", "schedule"})
    explicit, placed = stance.has("contacts"), stance.has("terrain") or stance.has("feet")
    if explicit == placed:
        raise TaskError(stance.file, stance.path, "either 'contacts' or 'terrain' with 'feet'", sorted(stance.data))
    terrain = None
    if explicit:
        contacts = read_explicit_contacts(stance.sub("contacts"))
        surfaces, names = ground_planes(contacts) if contacts else ([], {})
        for c in contacts:
            c.surface = names[c.frame]
    else:
        terrain = build_terrain(stance.sub("terrain"))
        contacts, surfaces = read_placed_feet(stance, terrain)
    if not contacts:
        stance.fail("contacts" if explicit else "feet", "at least one contact", "none")
    for c in contacts:
        check_frame(stance, ("contacts." if explicit else "feet.") + c.frame, robot, c.frame)
    return contacts, surfaces, read_schedule(stance, contacts, terrain, duration)


def with_friction_reserve(contacts, schedule: Schedule, reserve: float) -> list[ContactSpec]:
    """``contacts`` on friction times ``1 - reserve``; ``schedule``'s intervals with their own friction likewise."""
    schedule.intervals[:] = [[iv if iv.friction is None else
                              dataclasses.replace(iv, friction=planned_value(iv.friction, reserve)) for iv in ivs]
                             for ivs in schedule.intervals]
    return [dataclasses.replace(c, friction=planned_value(c.friction, reserve)) for c in contacts]


# stance.schedule keys that are not contact frames
SCHEDULE_NUMBERS = {"swing_height", "approach_clearance", "touchdown_speed", "load_ramp"}


def read_schedule(stance: Fields, contacts, terrain, duration: float) -> Schedule:
    """``stance.schedule``: ``{swing_height: m, approach_clearance: m, touchdown_speed: m/s, load_ramp: s,
    <frame>: [{window: [t0, t1] s, xy | position}, ...]}``.

    Each entry is a stance interval; a foothold is ``xy`` on the terrain (with
    an optional ``surface``) or an explicit ``position`` (explicit contacts);
    without either the contact stays where its previous interval was (the
    first interval: its foothold from ``feet``/``contacts``). Intervals must
    lie in the horizon, the first start at 0 and the last end at the end
    (rest at both ends) and follow each other without overlap. An interval
    may stand on another surface: ``{surface: block<i>, side: +x|-x|+y|-y,
    at: [along, z]}`` on a block's side face (a wall), or an explicit
    ``position`` with its own ``normal`` and ``friction``; the plan then
    stores the normal and friction per knot.
    """
    intervals = [[StanceInterval(0.0, duration, c.foothold.copy(), c.surface)] for c in contacts]
    schedule = Schedule(intervals, path=stance.file, field_name=stance.at("schedule"),
                        frames=[c.frame for c in contacts])
    if not stance.has("schedule"):
        return schedule
    section = stance.sub("schedule")
    frames = {c.frame: i for i, c in enumerate(contacts)}
    section.allow_only(set(frames) | SCHEDULE_NUMBERS)
    schedule.swing_height = section.number("swing_height", DEFAULT_SWING_HEIGHT, lo=0.0, hi=1.0)
    schedule.approach_clearance = section.number("approach_clearance", DEFAULT_APPROACH_CLEARANCE, lo=0.0, hi=0.5)
    schedule.touchdown_speed = section.number("touchdown_speed", DEFAULT_TOUCHDOWN_SPEED, lo=0.0, hi=5.0,
                                              lo_open=True)
    schedule.load_ramp = section.number("load_ramp", 0.0, lo=0.0, hi=10.0)
    for key in section.data:
        require_text_key(section, key)
        if key not in SCHEDULE_NUMBERS:
            c = frames[key]
            intervals[c] = read_intervals(section, key, contacts[c], terrain, duration)
    return schedule


def read_intervals(section: Fields, key: str, contact: ContactSpec, terrain, duration: float) -> list:
    """The stance intervals of one contact (see :func:`read_schedule`)."""
    items = section.raw(key)
    if not isinstance(items, list) or not items:
        section.fail(key, "a non-empty list of stance intervals {window: [start, end] s, xy or position}", items)
    out, foothold, surface = [], contact.foothold.copy(), contact.surface
    pressing = (None, None, None)
    for i, item in enumerate(items):
        entry = Fields(item, section.file, section.at(f"{key}[{i}]"), TaskError)
        entry.allow_only({"window", "xy", "surface", "position", "side", "at", "normal", "friction"})
        t0, t1 = (float(x) for x in entry.vector("window", 2))
        if not 0.0 <= t0 < t1 <= duration:
            entry.fail("window", f"a window [start, end] within the horizon [0, {duration}] s, start < end", [t0, t1])
        if out and t0 <= out[-1].t_end:
            entry.fail("window", f"a window starting after the previous interval of {key} ends "
                       f"({out[-1].t_end} s): stance intervals must not overlap", [t0, t1])
        if entry.has("xy") or entry.has("position") or entry.has("side"):
            foothold, surface, normal, mu = read_interval_foothold(entry, contact, terrain)
            changed = not np.allclose(normal, contact.normal, atol=1e-6) or abs(mu - contact.friction) > 1e-9
            pressing = (normal, tangent_basis(normal), mu) if changed else (None, None, None)
        out.append(StanceInterval(t0, t1, foothold.copy(), surface, *pressing))
    if out[0].t_start > 0.0 or out[-1].t_end < duration:
        section.fail(key, f"intervals covering the start (0 s) and the end ({duration} s): the plan starts and "
                     "ends at rest on every contact", [[iv.t_start, iv.t_end] for iv in out])
    return out


def read_interval_foothold(entry: Fields, contact: ContactSpec, terrain) -> tuple:
    """Foothold (3,) m, surface name, unit normal (3,) and friction of one interval.

    On a terrain: ``xy`` (with an optional ``surface``) on a surface facing
    up, or ``surface``, ``side`` and ``at`` on a block's side face. Explicit
    contacts: ``position`` with an optional ``normal`` and ``friction``
    (default: the contact's own).
    """
    if terrain is None:
        for key in ("xy", "side", "at"):
            if entry.has(key):
                entry.fail(key, "'position': [x, y, z] m (the task gives explicit contacts, no terrain)", key)
        normal = unit_vector(entry, "normal") if entry.has("normal") else contact.normal
        mu = entry.number("friction", contact.friction, lo=0.0, lo_open=True)
        return entry.vector("position", 3), contact.surface, normal, mu
    for key in ("position", "normal", "friction"):
        if entry.has(key):
            entry.fail(key, "'xy': [x, y] m on the terrain, or 'surface', 'side' and 'at' on a block's side face "
                       "(the terrain gives normal and friction)", key)
    if entry.has("side"):
        where = terrain.place_side(entry.string("surface"), entry.string("side", choices=("+x", "-x", "+y", "-y")),
                                   entry.vector("at", 2), entry.path)
    else:
        if entry.has("at"):
            entry.fail("at", "'at' only with 'side' (a foothold on a block's side face)", "at")
        surface = entry.string("surface") if entry.has("surface") else None
        where = terrain.place(entry.vector("xy", 2), surface, entry.at("xy"))
    return where.foothold, where.surface, where.normal, where.friction


def schedule_contacts(contacts, schedule: Schedule) -> list[ContactSpec]:
    """One ContactSpec per (contact, surface it stands on in some interval): the clearance exemptions."""
    out = []
    for c, intervals in zip(contacts, schedule.intervals):
        for surface in dict.fromkeys(iv.surface for iv in intervals):
            out.append(dataclasses.replace(c, surface=surface))
    return out


def read_clearance(top: Fields, robot, contacts, surfaces) -> ClearanceSpec:
    """``clearance: {distance: m (default 0.03), surfaces: true|false}``: the shape-to-terrain rows.

    ``surfaces: false`` switches the clearance rows off (no surface is checked).
    """
    section = top.sub("clearance", {})
    section.allow_only({"distance", "surfaces"})
    distance = section.number("distance", DEFAULT_CLEARANCE, lo=0.0, hi=1.0)
    used = surfaces if section.boolean("surfaces", True) else []
    return clearance_spec(robot, contacts, used, distance)


def make_contact(frame, foothold, normal, friction, surface: str = "", min_normal_force=0.0,
                 preload: float = 0.0) -> ContactSpec:
    """A ContactSpec; ``min_normal_force`` [N] None until the task's is filled in (:func:`task_from_mapping`)."""
    return ContactSpec(frame, np.asarray(foothold, float), np.asarray(normal, float), tangent_basis(normal), friction,
                       surface, min_normal_force, preload)


CONTACT_FORCES = {"min_normal_force", "preload"}   # a stance entry's own normal-force keys


def read_own_normal_force(spec: Fields) -> float | None:
    """A contact's own ``min_normal_force`` (N, >= 0), or None: the task's."""
    return spec.number("min_normal_force", lo=0.0) if spec.has("min_normal_force") else None


def read_preload(spec: Fields) -> float:
    """A contact's ``preload`` (N, >= 0, default 0)."""
    return spec.number("preload", 0.0, lo=0.0)


def read_explicit_contacts(contacts: Fields) -> list[ContactSpec]:
    """``{frame: {position, normal, friction, min_normal_force?, preload?}}``."""
    out = []
    for frame in contacts.data:
        require_text_key(contacts, frame)
        spec = contacts.sub(str(frame))
        spec.allow_only({"position", "normal", "friction"} | CONTACT_FORCES)
        out.append(make_contact(str(frame), spec.vector("position", 3), unit_vector(spec, "normal"),
                                spec.number("friction", lo=0.0, lo_open=True),
                                min_normal_force=read_own_normal_force(spec), preload=read_preload(spec)))
    return out


def read_placed_feet(stance: Fields, terrain) -> tuple[list[ContactSpec], list]:
    """Feet ``{frame: [x, y]}`` or ``{frame: {xy: [x, y], surface: name, min_normal_force: N, preload: N}}``
    placed on ``terrain``."""
    feet = stance.sub("feet")
    out = []
    for frame in feet.data:
        require_text_key(feet, frame)
        key = str(frame)
        own, preload = None, 0.0
        if isinstance(feet.raw(key), dict):
            spec = feet.sub(key)
            spec.allow_only({"xy", "surface"} | CONTACT_FORCES)
            xy, own, preload = spec.vector("xy", 2), read_own_normal_force(spec), read_preload(spec)
            surface = spec.string("surface") if spec.has("surface") else None
        else:
            xy, surface = feet.vector(key, 2), None
        where = terrain.place(xy, surface, feet.at(key))
        out.append(make_contact(key, where.foothold, where.normal, where.friction, where.surface, own, preload))
    return out, terrain.geometry()


# ---------------------------------------------------------------- hand targets


def read_hand_targets(top: Fields, robot, duration: float) -> list[HandTarget]:
    """``hand_targets``: a list of ``{position, time | window, orientation?, frame?, label?}``."""
    items = top.raw("hand_targets", [])
    if not isinstance(items, list):
        top.fail("hand_targets", "a list of hand targets", items)
    targets = [read_hand_target(Fields(item, top.file, top.at(f"hand_targets[{i}]"), TaskError), robot, duration)
               for i, item in enumerate(items)]
    check_no_overlap(top, targets)
    return targets


def read_hand_target(spec: Fields, robot, duration: float) -> HandTarget:
    spec.allow_only({"position", "time", "window", "orientation", "frame", "label"})
    frame = check_frame(spec, "frame", robot, spec.string("frame", robot.hand_frame))
    if spec.has("time") == spec.has("window"):
        spec.fail("time", "exactly one of 'time' (s) or 'window' ([start, end] s)", sorted(spec.data))
    if spec.has("time"):
        t_start = t_end = spec.number("time")
        key = "time"
    else:
        t_start, t_end = spec.vector("window", 2)
        key = "window"
    if not 0.0 <= t_start <= t_end <= duration:
        spec.fail(key, f"times within the horizon [0, {duration}] s, start <= end", [float(t_start), float(t_end)])
    orientation = read_orientation(spec) if spec.has("orientation") else None
    return HandTarget(frame, spec.vector("position", 3), orientation, float(t_start), float(t_end),
                      spec.string("label") if spec.has("label") else "")


def read_orientation(spec: Fields) -> np.ndarray:
    """A rotation matrix: 3 rows of 3, or ``{rpy_deg: [roll, pitch, yaw]}`` (fixed axes x, y, z)."""
    if isinstance(spec.raw("orientation"), dict):
        sub = spec.sub("orientation")
        sub.allow_only({"rpy_deg"})
        return rotation_from_rpy(np.radians(sub.vector("rpy_deg", 3)))
    rot = spec.matrix("orientation", (3, 3))
    if not np.allclose(rot @ rot.T, np.eye(3), atol=1e-6) or np.linalg.det(rot) < 0:
        spec.fail("orientation", "a rotation matrix (orthonormal rows, determinant +1, to 1e-6)", rot.tolist())
    return rot


def rotation_from_rpy(rpy) -> np.ndarray:
    """``Rz(yaw) Ry(pitch) Rx(roll)``, shape (3, 3)."""
    r, p, y = rpy
    rx = np.array([[1, 0, 0], [0, math.cos(r), -math.sin(r)], [0, math.sin(r), math.cos(r)]])
    ry = np.array([[math.cos(p), 0, math.sin(p)], [0, 1, 0], [-math.sin(p), 0, math.cos(p)]])
    rz = np.array([[math.cos(y), -math.sin(y), 0], [math.sin(y), math.cos(y), 0], [0, 0, 1]])
    return rz @ ry @ rx


def check_no_overlap(top: Fields, targets: list[HandTarget]) -> None:
    """Two targets of one frame must not claim the same instant."""
    for i, a in enumerate(targets):
        for j in range(i):
            b = targets[j]
            if a.frame == b.frame and a.t_start <= b.t_end and b.t_start <= a.t_end:
                top.fail(f"hand_targets[{i}]", f"times apart from hand_targets[{j}] of the same frame",
                         f"[{a.t_start}, {a.t_end}] s overlaps [{b.t_start}, {b.t_end}] s")


# ---------------------------------------------------------------- disturbances and the rest


def read_disturbances(top: Fields, robot) -> list[DisturbanceSpec]:
    """``disturbances``: list of ``{frame, kind, shape?}``; default one force at the hand."""
    items = top.raw("disturbances", None)
    if items is None:
        return [DisturbanceSpec(robot.hand_frame, "force", np.eye(3))]
    if not isinstance(items, list) or not items:
        top.fail("disturbances", "a non-empty list of disturbance points", items)
    points = [read_disturbance(Fields(item, top.file, top.at(f"disturbances[{i}]"), TaskError), robot)
              for i, item in enumerate(items)]
    if not any(d.objective_weight > 0 for d in points):
        top.fail("disturbances", "at least one point with objective_weight > 0",
                 [d.objective_weight for d in points])
    return points


def read_disturbance(spec: Fields, robot) -> DisturbanceSpec:
    spec.allow_only({"frame", "kind", "shape", "expected", "length_scale", "objective_weight"})
    frame = check_frame(spec, "frame", robot, spec.string("frame", robot.hand_frame))
    kind = spec.string("kind", "force", choices=list(DISTURBANCE_DIMS))
    given = [key for key in ("shape", "expected", "length_scale") if spec.has(key)]
    if len(given) > 1:
        spec.fail(given[1], "at most one of 'shape', 'expected' (forces) or 'length_scale' (wrenches)", given)
    d = DISTURBANCE_DIMS[kind]
    shape = np.eye(d)
    if spec.has("shape"):
        shape = spec.matrix("shape", (d, d))
    elif spec.has("expected"):
        if kind != "force":
            spec.fail("expected", "expected pushes on a force disturbance (kind: force)", kind)
        shape = read_expected_pushes(spec.sub("expected"))
    elif spec.has("length_scale"):
        if kind != "wrench":
            spec.fail("length_scale", "a length scale on a wrench disturbance (kind: wrench)", kind)
        shape = wrench_shape(spec.number("length_scale", lo=0.0, lo_open=True, hi=100.0))
    if not np.any(shape):
        spec.fail("shape", "a shape matrix with a non-zero entry", shape.tolist())
    return DisturbanceSpec(frame, kind, shape, spec.number("objective_weight", 1.0, lo=0.0, hi=1e3))


def read_expected_pushes(expected: Fields) -> np.ndarray:
    """``{directions: [{along: [x, y, z], weight: w}], others: o}`` -> ``W`` (see problem/push_shape.py)."""
    expected.allow_only({"directions", "others"})
    items = expected.raw("directions")
    if not isinstance(items, list) or not items:
        expected.fail("directions", "a non-empty list of {along: [x, y, z], weight: w}", items)
    directions, weights = [], []
    for i, item in enumerate(items):
        entry = Fields(item, expected.file, expected.at(f"directions[{i}]"), TaskError)
        entry.allow_only({"along", "weight"})
        along = entry.vector("along", 3)
        if np.linalg.norm(along) < 1e-9:
            entry.fail("along", "a direction of non-zero length", along.tolist())
        directions.append(along)
        weights.append(entry.number("weight", 1.0, lo=0.0, lo_open=True))
    return shape_from_directions(directions, weights, expected.number("others", 0.0, lo=0.0))


MEMORY_LIMIT = "memory_limit"  # the one key of ``solver`` that brace reads itself (not an Ipopt option)


def read_solver_options(top: Fields) -> dict:
    """``solver``: a flat mapping of option name -> number, text or true/false (``memory_limit`` apart)."""
    options = top.sub("solver", {})
    for key, value in options.data.items():
        if key == MEMORY_LIMIT:
            continue
        if not isinstance(key, str):
            options.fail(str(key), "an option name (text) as the key", key)
        if not isinstance(value, (bool, int, float, str)) or (isinstance(value, float) and not math.isfinite(value)):
            options.fail(str(key), "a number, text or true/false", value)
    return {key: value for key, value in options.data.items() if key != MEMORY_LIMIT}


def read_memory_limit(top: Fields) -> int | None:
    """``solver.memory_limit``: the most memory a solve may use, e.g. ``8G``; None when absent."""
    options = top.sub("solver", {})
    if MEMORY_LIMIT not in options.data:
        return None
    size = parse_size(options.data[MEMORY_LIMIT])
    if size is None:
        options.fail(MEMORY_LIMIT, SIZE_TEXT, options.data[MEMORY_LIMIT])
    return size


def read_initial_posture(top: Fields, robot, contacts, clearance=None) -> np.ndarray | None:
    """``initial_posture``: absent (free start), ``stance``, a mapping of stance hints, or nq numbers.

    ``stance`` solves the stance IK from the standing posture; the mapping
    ``{base_position: [x, y, z], base_rpy_deg: [r, p, y], joints: {name: angle}}``
    (all optional) solves it with the base pulled toward the given pose and
    the free joints toward the given angles (rad or m; the others toward the
    standing posture), starting from that posture.
    """
    if not top.has("initial_posture"):
        return None
    value = top.raw("initial_posture")
    if value == "stance" or isinstance(value, dict):
        hints = top.sub("initial_posture") if isinstance(value, dict) else Fields({}, top.file, "initial_posture", TaskError)
        return solve_stance_hinted(hints, robot, contacts, clearance)
    if isinstance(value, str):
        top.fail("initial_posture", "'stance', a mapping of stance hints or a list of nq numbers", value)
    return read_posture_list(top, robot, contacts)


def solve_stance_hinted(hints: Fields, robot, contacts, clearance=None) -> np.ndarray:
    """The stance IK with the optional base pose and joint hints of ``hints``."""
    hints.allow_only({"base_position", "base_rpy_deg", "joints"})
    guess, base = np.array(robot.standing_posture, dtype=float), None
    if hints.has("base_position") or hints.has("base_rpy_deg"):
        position = hints.vector("base_position", 3, guess[:3].tolist())
        rotation = rotation_from_rpy(np.radians(hints.vector("base_rpy_deg", 3, [0.0, 0.0, 0.0])))
        base = np.concatenate([position, pin.Quaternion(rotation).coeffs()])
        guess[:7] = base
    joints = hints.sub("joints", {})
    for name in joints.data:
        if name not in robot.joint_names:
            joints.fail(str(name), "an actuated joint of the robot", name)
        joint = robot.model.joints[robot.model.getJointId(name)]
        if joint.nq != 1:
            joints.fail(str(name), "a joint with one coordinate (revolute or prismatic)", name)
        guess[joint.idx_q] = joints.number(str(name))
    try:
        hinted = base is not None or bool(joints.data)
        return solve_stance(robot, contacts, q_guess=guess if hinted else None, nominal=guess, base_pose=base,
                            clearance=clearance)
    except InfeasibleTask as exc:
        raise TaskError(hints.file, hints.path, "footholds the robot reaches within its joint limits",
                        str(exc).split(": ", 2)[-1]) from None


def read_posture_list(top: Fields, robot, contacts) -> np.ndarray:
    """nq numbers: unit base quaternion, joints within limits, feet on their footholds."""
    q = top.vector("initial_posture", robot.nq)
    quat = np.linalg.norm(q[3:7])
    if abs(quat - 1.0) > UNIT_TOLERANCE:
        top.fail("initial_posture", "a unit base quaternion in entries 3..6 [qx qy qz qw]", q[3:7].tolist())
    q[3:7] /= quat
    outside = (q[7:] < robot.joint_lower - 1e-9) | (q[7:] > robot.joint_upper + 1e-9)
    if outside.any():
        top.fail("initial_posture", "joint coordinates within the robot's limits",
                 f"{int(outside.sum())} outside, first at coordinate {7 + int(np.argmax(outside))}")
    gaps = foot_residuals(robot, q, contacts)
    if gaps.max() > 1e-4:
        worst = contacts[int(np.argmax(gaps))].frame
        top.fail("initial_posture", "a posture with every contact frame on its foothold (within 0.1 mm)",
                 f"{worst} {gaps.max():.4f} m away")
    return q


def json_copy(data: dict, path) -> dict:
    """A JSON-round-tripped copy of the task mapping (for a plan's ``meta.task``)."""
    try:
        return json.loads(json.dumps(data, allow_nan=False))
    except (TypeError, ValueError) as exc:
        raise TaskError(path, "", "only numbers, text, lists and mappings (JSON-representable)", str(exc)) from None
