"""A plan's contact schedule as stance intervals, the unit the replay judges feet by.

A stance interval is a run of consecutive knots where the plan has a contact
in stance (``contact_active``) on one foothold (``contact_targets``): from its
first knot's time to its last knot's time, with that foothold, the surface
normal and the friction coefficient the plan stores for it
(``meta.contact_knot_surfaces`` when present, else the contact's own
``contact_normals`` and ``friction``; see :func:`optimizer.planfile.knot_surfaces`).
Outside its intervals a contact swings: the replay leaves it free.

A foot is *judged* (its distance from the foothold, its slip and its normal
force count) from ``settle`` seconds after a touchdown until the interval's
last knot; an interval that begins at the first knot is a foot planted from
the start and is judged at once; a foot in stance at the last knot stays in
stance after it (the reference holds the last knot). World frame, m, s.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..planfile import knot_surfaces


@dataclass
class Stance:
    """One stance interval of one contact.

    Attributes
    ----------
    contact : int
        Index into ``meta.contact_frames``.
    first, last : int
        First and last knot in stance.
    start, end : float
        Their times [s]; ``end`` is infinite for an interval that lasts to the
        plan's last knot (the reference holds the last knot after it).
    foothold : ndarray, shape (3,)
        The plan's foothold [m], world frame.
    normal : ndarray, shape (3,)
        Unit normal of the surface pressed on, into the robot.
    friction : float
        The plan's friction coefficient on that surface (as stored: reduced by
        any ``friction_reserve``).
    """

    contact: int
    first: int
    last: int
    start: float
    end: float
    foothold: np.ndarray
    normal: np.ndarray
    friction: float

    def judged_from(self, settle: float) -> float:
        """Time [s] from which the foot is judged: at once for a foot planted at the first knot,
        else ``settle`` seconds after its touchdown (never after the interval's end)."""
        return self.start if self.first == 0 else min(self.start + settle, self.end)


def stance_intervals(plan) -> list:
    """Every stance interval of ``plan``, ordered by contact then time."""
    active = np.asarray(plan.contact_active, bool)
    targets = np.asarray(plan.contact_targets, float)
    K, nc = active.shape
    surfaces = knot_surfaces(plan.meta, K)
    t = np.asarray(plan.t, float)
    out = []
    for c in range(nc):
        k = 0
        while k < K:
            if not active[k, c]:
                k += 1
                continue
            first = k
            while k + 1 < K and active[k + 1, c] and np.allclose(targets[k + 1, c], targets[first, c], atol=1e-9):
                k += 1
            end = np.inf if k == K - 1 else float(t[k])
            out.append(Stance(c, first, k, float(t[first]), end, targets[first, c].copy(),
                              surfaces.normals[first, c].copy(), float(surfaces.friction[first, c])))
            k += 1
    return out


class StanceSchedule:
    """The stance intervals of a plan, looked up by time.

    Parameters
    ----------
    intervals : list of Stance
    contacts : int
        Number of contacts (nc).
    """

    def __init__(self, intervals, contacts: int):
        self.intervals = list(intervals)
        self.contacts = contacts
        self.by_contact = [[s for s in self.intervals if s.contact == c] for c in range(contacts)]

    @classmethod
    def of(cls, plan) -> "StanceSchedule":
        return cls(stance_intervals(plan), np.asarray(plan.contact_active).shape[1])

    @property
    def steps(self) -> bool:
        """True when some contact swings (a contact has no interval, or more than one, or one
        that does not span the whole plan)."""
        return any(len(own) != 1 for own in self.by_contact) or any(s.first != 0 for s in self.intervals)

    def current(self, t: float, settle: float) -> list:
        """Per contact, the interval judged at time ``t`` [s] (``settle`` after touchdowns), or None."""
        out = []
        for own in self.by_contact:
            found = None
            for s in own:
                if s.judged_from(settle) - 1e-9 <= t <= s.end + 1e-9:
                    found = s
                    break
            out.append(found)
        return out

    def judged_series(self, times, settle: float) -> np.ndarray:
        """(n, nc) index into ``intervals`` of the interval judged at each time, -1 where none."""
        times = np.asarray(times, float)
        out = np.full((times.size, self.contacts), -1, int)
        for i, s in enumerate(self.intervals):
            inside = (times >= s.judged_from(settle) - 1e-9) & (times <= s.end + 1e-9)
            out[inside, s.contact] = i
        return out

    def in_stance_at_knot(self, k: int) -> np.ndarray:
        """(nc,) bool: contacts in stance at knot ``k``."""
        out = np.zeros(self.contacts, bool)
        for s in self.intervals:
            if s.first <= k <= s.last:
                out[s.contact] = True
        return out
