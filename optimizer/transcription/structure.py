"""What fixes the shape of the NLP, apart from the numbers that fill it.

Two tasks with equal :class:`Structure` produce NLPs with identical sparsity:
one built solver serves both, with the numbers (footholds, normals, friction,
targets, limits, shape matrices, time step) passed as parameters
(:func:`parameter_values`). Batches over terrain variants rely on this.
"""
from __future__ import annotations

from dataclasses import dataclass

from ..problem.point_weights import DEFAULT_COMBINATION
from ..problem.schedule import swing_rows
from ..problem.timing import window_knots


@dataclass(frozen=True)
class TargetSlot:
    """A hand-target constraint at one knot.

    ``target`` indexes ``task.hand_targets``; ``orientation`` adds the
    rotation constraint.
    """

    knot: int
    target: int
    frame: str
    orientation: bool


@dataclass(frozen=True)
class DisturbanceSlot:
    """A disturbance point: frame name and kind, ``"force"`` (d=3) or ``"wrench"`` (d=6)."""

    frame: str
    kind: str

    @property
    def dim(self) -> int:
        return 3 if self.kind == "force" else 6


@dataclass(frozen=True)
class Structure:
    """The shape of one transcription.

    Attributes
    ----------
    knots : int
        Number of knots K (times ``linspace(0, duration, K)``).
    contact_frames : tuple of str
        The nc contact frames, all in stance over the whole horizon.
    facets : int
        Facets per friction pyramid.
    targets : tuple of TargetSlot
        Hand constraints, at most one per (knot, frame).
    disturbances : tuple of DisturbanceSlot
        P >= 1 disturbance points; each gets gains and a margin per knot.
    fixed_start : bool
        The start configuration is fixed (task ``initial_posture``).
    clearance_rows : tuple of (int, int)
        Per clearance row (shape, point index within the shape); the plane
        of each row and knot is a parameter (:mod:`optimizer.problem.clearance`).
    clearance_labels : tuple of str
        Per clearance row ``"<link> vs <surface>"``, for reports.
    combine_points : str
        How robust objectives combine the points' margins at a knot
        (``smallest`` adds one variable per knot); with one point always the
        default, so single-point tasks share one built solver.
    self_pairs : tuple of (int, int)
        Per self-collision pair its two shapes (indices into the robot's
        shapes); each pair has a separating plane per clearance knot and its
        distance is a parameter.
    self_labels : tuple of str
        Per self pair ``"<shape> vs <shape>"``, for reports.
    activity : tuple of tuple of bool
        (K, nc): contact in stance and carrying force at the knot
        (:meth:`~optimizer.problem.schedule.Schedule.loaded`: not at a
        lift-off knot); empty means every contact at every knot. Other
        contacts carry no force, gains or limit rows.
    swings : tuple of Swing
        Each swing's lift-off, touchdown and mid-swing knots
        (:mod:`optimizer.problem.schedule`).
    swing_rows : tuple of SwingRow
        The approach rows of the swings (a swinging foot kept off the plane
        of the surface it left or lands on, at one knot); each row's plane
        and clearance are a parameter.
    load_caps : tuple of (int, int, int)
        The load-ramp rows, ``(contact, knot, steps)``
        (:meth:`~optimizer.problem.schedule.Schedule.load_caps`).
    load_ramp : float
        Their ramp time [s]; with the rows, structure.
    preloaded : tuple of int
        Contacts whose preload exceeds their minimum normal force: each gets
        a ``preload`` row per stance knot (the plan's own force only, not its
        certified response); the values are a parameter.
    """

    knots: int
    contact_frames: tuple
    facets: int
    targets: tuple
    disturbances: tuple
    fixed_start: bool
    clearance_rows: tuple = ()
    clearance_labels: tuple = ()
    combine_points: str = DEFAULT_COMBINATION
    self_pairs: tuple = ()
    self_labels: tuple = ()
    activity: tuple = ()
    swings: tuple = ()
    swing_rows: tuple = ()
    preloaded: tuple = ()
    load_caps: tuple = ()
    load_ramp: float = 0.0

    def active(self, k: int) -> tuple:
        """Contacts in stance at knot ``k`` (bools, length nc)."""
        return self.activity[k] if self.activity else (True,) * self.nc

    def patterns(self, knots) -> list[tuple[tuple, list]]:
        """``knots`` grouped by stance pattern: ``[(pattern, [knots])]``, first appearance order."""
        out: dict = {}
        for k in knots:
            out.setdefault(self.active(k), []).append(k)
        return list(out.items())

    @property
    def clearance_knots(self) -> range:
        """Knots with clearance rows: not a fixed start (checked before the solve), not the last
        (at rest it repeats knot K-2)."""
        return range(1 if self.fixed_start else 0, self.knots - 1)

    @property
    def nc(self) -> int:
        return len(self.contact_frames)

    @property
    def intervals(self) -> int:
        return self.knots - 1


def structure_of(task) -> Structure:
    """The :class:`Structure` of a loaded task."""
    times = task.times
    slots, taken = [], set()
    for i, target in enumerate(task.hand_targets):
        for k in window_knots(target.t_start, target.t_end, times):
            if (k, target.frame) not in taken:
                taken.add((k, target.frame))
                slots.append(TargetSlot(k, i, target.frame, target.orientation is not None))
    # At rest q[K-1] equals q[K-2]: a target binding both would be a repeated equality.
    last = task.knots - 1
    slots = [s for s in slots if not (s.knot == last and (last - 1, s.frame) in taken)]
    activity = task.schedule.loaded(times)
    swings = tuple(task.schedule.swings(times))
    return Structure(
        activity=tuple(tuple(bool(x) for x in row) for row in activity) if not activity.all() else (),
        swings=swings,
        swing_rows=tuple(swing_rows(swings)),
        load_caps=tuple(task.schedule.load_caps(times)),
        load_ramp=float(task.schedule.load_ramp),
        preloaded=tuple(c for c, contact in enumerate(task.contacts) if contact.preload > contact.min_normal_force),
        knots=task.knots,
        contact_frames=tuple(c.frame for c in task.contacts),
        facets=task.facets,
        targets=tuple(sorted(slots, key=lambda s: (s.knot, s.frame))),
        disturbances=tuple(DisturbanceSlot(d.frame, d.kind) for d in task.disturbances),
        fixed_start=task.initial_posture is not None,
        clearance_rows=tuple((shape, point) for _, shape, point in task.clearance.rows),
        clearance_labels=tuple(" vs ".join(task.clearance.row_label(r)) for r in range(len(task.clearance.rows))),
        combine_points=task.combine_points if len(task.disturbances) > 1 else DEFAULT_COMBINATION,
        self_pairs=tuple((p.first, p.second) for p in task.clearance.self_pairs),
        self_labels=tuple(task.clearance.self_label(i) for i in range(len(task.clearance.self_pairs))),
    )
