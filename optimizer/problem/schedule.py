"""Contact schedules: when each contact is in stance, where, and how it swings between.

A task may give, per contact, a list of stance intervals (``stance.schedule``
in docs/task-files.md): time windows [s] with a foothold each. Between two
intervals the contact swings: it carries no force, clears the terrain under
its path by ``swing_height`` at mid-swing, keeps ``approach_clearance`` off
the surface it left (before mid-swing) and off the one it lands on (from
mid-swing until its final approach), and lands along that surface's normal
(no sliding at touchdown) at no more than ``touchdown_speed``. The final
approach is the last ``approach_clearance / touchdown_speed`` seconds before
touchdown: there the foot only stays on the robot's side of the landing
plane, so the rule is a time, not a number of knots. Contacts the schedule does not name stay in stance
over the whole horizon.

Which knots are in stance is structure (it fixes the NLP's sparsity); the
footholds and the heights to clear are numbers (parameters). The knots a
window binds follow the knot times: knot ``k`` is in stance in an interval
when ``t_start <= t_k <= t_end``.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np

from ..errors import TaskError

DEFAULT_SWING_HEIGHT = 0.05   # m above the terrain under the swing path, at mid-swing
DEFAULT_APPROACH_CLEARANCE = 0.02  # m off the lift-off and landing surfaces' planes at the swing's knots
# m/s along the landing surface's normal at touchdown: a soft landing (an order of magnitude common in
# legged-robot practice, from memory; a demo default, not a measured figure).
DEFAULT_TOUCHDOWN_SPEED = 0.1
EDGE_TOUCH = 1e-3             # m: a swing path ending this close to a block's outline does not cross it
MIN_SWING_KNOTS = 2           # the mid-swing knot, and one more to land softly from


@dataclass
class StanceInterval:
    """One stance of a contact: ``[t_start, t_end]`` s on ``foothold`` (3,) m (world), on ``surface``.

    ``normal`` (3,) unit, world, into the robot, ``tangents`` (2, 3) and
    Coulomb ``friction`` are the surface's there; None: the contact's own
    (its first foothold's). An interval may stand on another surface than
    the one before (a foot moving from the floor onto a wall).
    """

    t_start: float
    t_end: float
    foothold: np.ndarray
    surface: str = ""
    normal: np.ndarray | None = None
    tangents: np.ndarray | None = None
    friction: float | None = None

    def on(self, contact):
        """``contact`` (a ContactSpec) with this interval's foothold, surface, normal, tangents and friction."""
        changes = {"foothold": self.foothold.copy(), "surface": self.surface or contact.surface}
        if self.normal is not None:
            changes.update(normal=np.asarray(self.normal, float), tangents=np.asarray(self.tangents, float),
                           friction=float(self.friction))
        return dataclasses.replace(contact, **changes)


@dataclass(frozen=True)
class Swing:
    """A swing between two stance intervals at a given knot count.

    ``contact`` index; ``lift`` the last knot on the foothold before (the
    lift-off knot: on it, without force, :meth:`Schedule.loaded`), ``touch``
    the first stance knot after; ``mid`` the mid-swing knot (nearest the swing's middle time,
    never the last swing knot); ``landing`` the index of the interval it
    lands in (footholds are numbers, not structure: see :meth:`Schedule.ends`);
    ``final`` the first knot of the final approach (less than
    ``approach_clearance / touchdown_speed`` s before touchdown, never
    before mid-swing; ``touch`` when no knot is).
    """

    contact: int
    lift: int
    touch: int
    mid: int
    landing: int
    final: int

    @property
    def knots(self) -> range:
        """The knots in the air."""
        return range(self.lift + 1, self.touch)

    @property
    def leaving(self) -> range:
        """Knots in the air before mid-swing: kept off the lift-off surface."""
        return range(self.lift + 1, self.mid)

    @property
    def approaching(self) -> range:
        """Knots from mid-swing to the final approach: kept off the landing surface by the clearance."""
        return range(self.mid, self.final)

    @property
    def settling(self) -> range:
        """Knots of the final approach before touchdown: on the robot's side of the landing plane."""
        return range(self.final, self.touch)


@dataclass(frozen=True)
class SwingRow:
    """One approach row: the swinging foot of ``swings[swing]`` at knot ``knot`` kept off a surface's plane.

    ``side`` is ``"lift-off"`` (the surface the foot left), ``"landing"``
    (the one it lands on, by the approach clearance) or ``"final"`` (the one
    it lands on, by nothing: the foot may come to it, never through it).
    """

    swing: int
    knot: int
    side: str


def swing_rows(swings) -> list[SwingRow]:
    """The approach rows of ``swings`` (a sequence of :class:`Swing`), in swing then knot order."""
    out = []
    for i, s in enumerate(swings):
        out += [SwingRow(i, k, "lift-off") for k in s.leaving]
        out += [SwingRow(i, k, "landing") for k in s.approaching]
        out += [SwingRow(i, k, "final") for k in s.settling]
    return out


@dataclass
class Schedule:
    """Stance intervals of every contact (one interval over the horizon for unscheduled ones).

    Attributes
    ----------
    intervals : list of list of StanceInterval
        Per contact, in time order, non-overlapping, the first starting at 0
        and the last ending at the horizon's end.
    swing_height : float
        m the swinging foot must be above the terrain under its path at mid-swing.
    approach_clearance : float
        m the swinging foot keeps, along the surface's normal, off the plane
        of the surface it left (knots before mid-swing) and of the one it
        lands on (mid-swing to the final approach), both planes through the
        stance's foothold.
    touchdown_speed : float
        m/s: the largest speed of the foot along the landing surface's
        normal at touchdown; with ``approach_clearance`` it sets the final
        approach, ``approach_clearance / touchdown_speed`` s long.
    load_ramp : float
        s over which a stepping foot's normal force may grow from its floor
        to the robot's weight after touchdown, and shrink back to it before
        lift-off (:meth:`load_caps`); 0: no such rows.
    path : path-like
        The task file (for error messages).
    """

    intervals: list
    swing_height: float = DEFAULT_SWING_HEIGHT
    approach_clearance: float = DEFAULT_APPROACH_CLEARANCE
    touchdown_speed: float = DEFAULT_TOUCHDOWN_SPEED
    load_ramp: float = 0.0
    path: object = None
    field_name: str = "stance.schedule"
    frames: list = field(default_factory=list)

    @property
    def steps(self) -> bool:
        """True when some contact swings."""
        return any(len(i) > 1 for i in self.intervals)

    def activity(self, times) -> np.ndarray:
        """(K, nc) bool: contact in stance at each knot time."""
        out = np.zeros((len(times), len(self.intervals)), dtype=bool)
        step = times[1] - times[0] if len(times) > 1 else 1.0
        for c, intervals in enumerate(self.intervals):
            for iv in intervals:
                out[:, c] |= (times >= iv.t_start - 1e-9 * step) & (times <= iv.t_end + 1e-9 * step)
        return out

    def loaded(self, times) -> np.ndarray:
        """(K, nc) bool: contact in stance and carrying force at each knot.

        :meth:`activity` without each swing's lift-off knot: the foot stays
        on its foothold there but carries no force, since a knot's force acts
        over the step after it (``v[k+1] = v[k] + h a[k]``), which is the step
        in which the foot leaves. Touchdown needs nothing alike: the foot is
        on its foothold at both ends of the step after its touchdown knot.
        """
        out = self.activity(times)
        for swing in self.swings(times):
            out[swing.lift, swing.contact] = False
        return out

    def load_caps(self, times) -> list[tuple[int, int, int]]:
        """The load-ramp rows at these knot times: ``(contact, knot, steps)`` for every loaded knot less
        than ``load_ramp`` s from its foot's nearest unloaded knot of a swing, ``steps`` knot steps away
        (the lift-off knot after it, or the last knot in the air before it). The row caps the foot's
        normal force at its floor plus the robot's weight times ``steps h / load_ramp``."""
        if self.load_ramp <= 0.0 or len(times) < 2:
            return []
        step, loaded, out = times[1] - times[0], self.loaded(times), {}
        for swing in self.swings(times):
            for k in range(len(times)):
                if not loaded[k, swing.contact]:
                    continue
                steps = swing.lift - k if k < swing.lift else k - (swing.touch - 1)
                if steps * step < self.load_ramp - 1e-12:   # steps >= 1: loaded knots are outside the swing
                    key = (swing.contact, k)
                    out[key] = min(out.get(key, steps), steps)
        return sorted((c, k, s) for (c, k), s in out.items())

    def targets(self, times) -> np.ndarray:
        """(K, nc, 3) footholds [m] of the stance interval at each knot it carries force (:meth:`loaded`);
        NaN elsewhere."""
        out = np.full((len(times), len(self.intervals), 3), np.nan)
        active = self.loaded(times)
        for c, intervals in enumerate(self.intervals):
            for k, t in enumerate(times):
                if active[k, c]:
                    out[k, c] = self.interval_at(c, t).foothold
        return out

    def surfaces(self, contacts, times) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per knot the surface each contact presses on (while swinging: the one it lands on).

        Returns normals (K, nc, 3) unit, world; tangents (K, nc, 2, 3); friction (K, nc).
        """
        on = [[self.interval_at(c, t).on(contact) for c, contact in enumerate(contacts)] for t in times]
        return (np.array([[c.normal for c in row] for row in on], float),
                np.array([[c.tangents for c in row] for row in on], float),
                np.array([[c.friction for c in row] for row in on], float))

    def varies(self) -> bool:
        """True when some contact changes its surface normal or friction between intervals."""
        return any(iv.normal is not None for ivs in self.intervals for iv in ivs)

    def interval_at(self, contact: int, t: float) -> StanceInterval:
        """The interval of ``contact`` in stance at ``t``, else the next one to come (the last at the end)."""
        intervals = self.intervals[contact]
        for iv in intervals:
            if t <= iv.t_end + 1e-12:
                return iv
        return intervals[-1]

    def swings(self, times) -> list[Swing]:
        """Every swing at these knot times; a TaskError when a swing holds fewer than MIN_SWING_KNOTS knots."""
        active, out = self.activity(times), []
        for c, intervals in enumerate(self.intervals):
            for i in range(1, len(intervals)):
                before, after = intervals[i - 1], intervals[i]
                air = [k for k in range(len(times)) if before.t_end < times[k] < after.t_start and not active[k, c]]
                if len(air) < MIN_SWING_KNOTS:
                    step = times[1] - times[0]
                    raise TaskError(self.path, f"{self.field_name}.{self.frames[c]}[{i}].window",
                                    f"a swing holding at least {MIN_SWING_KNOTS} knots (knots every {step:.3f} s): "
                                    f"start this stance later or use more knots",
                                    f"{len(air)} knot(s) between {before.t_end} s and {after.t_start} s")
                middle = 0.5 * (before.t_end + after.t_start)
                mid = min(air[:-1], key=lambda k: abs(times[k] - middle))
                touch = air[-1] + 1
                final = next((k for k in air if times[touch] - times[k] < self.final_approach - 1e-12), touch)
                out.append(Swing(c, air[0] - 1, touch, mid, i, max(final, mid)))
        return out

    @property
    def final_approach(self) -> float:
        """Seconds before a touchdown in which the foot may come closer than ``approach_clearance``."""
        return self.approach_clearance / self.touchdown_speed

    def ends(self, swing: Swing) -> tuple[StanceInterval, StanceInterval]:
        """The stance intervals a swing leaves and lands in."""
        intervals = self.intervals[swing.contact]
        return intervals[swing.landing - 1], intervals[swing.landing]

    def side_of(self, swing: Swing, side: str, contacts):
        """The contact (a ContactSpec from ``contacts``, the task's) as it stands on the surface a swing
        leaves (``side`` ``"lift-off"``) or lands on (``"landing"``): foothold, normal, tangents, friction."""
        before, after = self.ends(swing)
        return (before if side == "lift-off" else after).on(contacts[swing.contact])

    def phases(self) -> list[tuple[float, float, tuple]]:
        """Time windows with one set of contacts in stance: ``(t0, t1, (contact indices in stance))``.

        Windows where a contact swings are open at their ends (the stance
        intervals hold the end times); stance sets are listed once per window.
        """
        events = sorted({iv.t_start for ivs in self.intervals for iv in ivs}
                        | {iv.t_end for ivs in self.intervals for iv in ivs})
        out = []
        for t0, t1 in zip(events[:-1], events[1:]):
            middle = 0.5 * (t0 + t1)
            stance = tuple(c for c, ivs in enumerate(self.intervals)
                           if any(iv.t_start <= middle <= iv.t_end for iv in ivs))
            if out and out[-1][2] == stance:
                out[-1] = (out[-1][0], t1, stance)
            else:
                out.append((t0, t1, stance))
        return out


def terrain_top(surfaces, start, goal) -> float:
    """Highest terrain point under the straight horizontal path from ``start`` to ``goal`` (3,), m (z).

    Planes that face up (normal z > 0.1) are linear along the path, so their
    highest point is at an end; a box counts with its top when the path's
    (x, y) segment crosses its footprint by more than ``EDGE_TOUCH`` (a swing
    onto or off a block's side face ends on its outline, not over it).
    Surfaces facing down (ceilings) and walls are not under the path.
    """
    a, b = np.asarray(start, float)[:2], np.asarray(goal, float)[:2]
    top = -np.inf
    for s in surfaces:
        if s.kind == "plane":
            n = s.normal
            if n[2] > 0.1:
                top = max(top, *((s.offset - n[:2] @ p) / n[2] for p in (a, b)))
        elif segment_crosses_box(a, b, s.lower[:2] + EDGE_TOUCH, s.upper[:2] - EDGE_TOUCH):
            top = max(top, float(s.upper[2]))
    return float(top) if np.isfinite(top) else float(max(start[2], goal[2]))


def segment_crosses_box(a, b, lower, upper) -> bool:
    """Does the 2-D segment ``a``-``b`` meet the rectangle ``[lower, upper]``? (slab clipping)"""
    t0, t1, d = 0.0, 1.0, b - a
    for i in range(2):
        if abs(d[i]) < 1e-12:
            if not lower[i] <= a[i] <= upper[i]:
                return False
            continue
        u, w = (lower[i] - a[i]) / d[i], (upper[i] - a[i]) / d[i]
        t0, t1 = max(t0, min(u, w)), min(t1, max(u, w))
        if t0 > t1:
            return False
    return True


def contacts_at(task, t: float) -> list:
    """The task's contacts (ContactSpec) as they stand at ``t`` s (the next stance while swinging):
    foothold, surface, normal, tangents and friction of that interval."""
    return [task.schedule.interval_at(i, t).on(c) for i, c in enumerate(task.contacts)]


def stance_at(task, t: float) -> list:
    """The contacts in stance at ``t`` s, with their footholds then."""
    active = task.schedule.activity(np.array([t, t + 1.0]))[0]
    return [c for c, on in zip(contacts_at(task, t), active) if on]
