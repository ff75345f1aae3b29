"""Self-collision pairs named in the robot file: shapes of one robot that must keep apart.

``collision.self_pairs`` is a list of entries ``{between: names, and: names,
distance: m}``; each side is one name or a list of names, a name being a
link (all of its collision shapes) or a shape (``link/kind<index>``, e.g.
``gripper/capsule0``, the names :mod:`optimizer.robot.collision` gives).
Every shape of one side is paired with every shape of the other, except
shapes moved by the same joint (their distance never changes).
``distance`` defaults to ``collision.self_distance`` (m, 0.02 when absent).
A shape pair named twice keeps the larger distance. No entry, no pair: the
robot then has no self-collision rows at all.
"""
from __future__ import annotations

import difflib
from dataclasses import dataclass

from ..schema import Fields

DEFAULT_SELF_DISTANCE = 0.02   # m
ENTRY_FIELDS = ("between", "and", "distance")
EXPECTED_NAME = "a link with collision shapes or a shape name (link/kind<index>)"


@dataclass(frozen=True)
class SelfPair:
    """Shapes ``first`` and ``second`` (indices into the robot's shapes) at least ``distance`` m apart."""

    first: int
    second: int
    distance: float


def _side(entry: Fields, key: str, shapes) -> list[int]:
    """Shape indices named by one side of an entry."""
    value = entry.raw(key)
    names = [value] if isinstance(value, str) else value
    if not isinstance(names, list) or not names:
        entry.fail(key, f"{EXPECTED_NAME}, or a non-empty list of them", value)
    out = []
    for i, name in enumerate(names):
        found = [s for s, shape in enumerate(shapes) if name in (shape.link, shape.name)]
        if not isinstance(name, str) or not found:
            known = sorted({s.link for s in shapes} | {s.name for s in shapes})
            close = difflib.get_close_matches(str(name), known, n=3, cutoff=0.5)
            entry.fail(f"{key}[{i}]" if isinstance(value, list) else key, EXPECTED_NAME, name,
                       "close names: " + ", ".join(close) if close else None)
        out += [s for s in found if s not in out]
    return out


def read_self_pairs(section: Fields, shapes) -> tuple:
    """The :class:`SelfPair` tuple of a robot file's ``collision`` section (see the module doc)."""
    default = section.number("self_distance", DEFAULT_SELF_DISTANCE, lo=0.0, hi=1.0)
    entries = section.raw("self_pairs", [])
    if not isinstance(entries, list):
        section.fail("self_pairs", "a list of {between, and, distance} entries", entries)
    chosen: dict[tuple[int, int], SelfPair] = {}
    for i, raw in enumerate(entries):
        entry = Fields(raw, section.file, section.at(f"self_pairs[{i}]"), section.error)
        if not isinstance(raw, dict):
            entry.fail("", "a mapping {between: names, and: names, distance: m}", raw)
        entry.allow_only(ENTRY_FIELDS)
        first, second = _side(entry, "between", shapes), _side(entry, "and", shapes)
        distance = entry.number("distance", default, lo=0.0, hi=1.0)
        both = sorted(set(first) & set(second))
        if both:
            entry.fail("and", "shapes other than those of 'between'", shapes[both[0]].name)
        pairs = [(a, b) for a in first for b in second if shapes[a].joint != shapes[b].joint]
        if not pairs:
            entry.fail("", "shapes on bodies that move against each other (not one rigid body)",
                       [shapes[s].link for s in first + second])
        for a, b in pairs:
            key = (min(a, b), max(a, b))
            if key not in chosen or chosen[key].distance < distance:
                chosen[key] = SelfPair(a, b, distance)
    return tuple(chosen.values())
