"""The limits a plan respects at one knot, defined once.

Every limit is a *row* with a *room*: a number that is >= 0 exactly when the
limit holds, and that is affine in the knot's joint torques ``tau`` (nj,)
[N m or N] and contact forces ``lam`` (3 nc,) [N, world frame, stacked per
contact]:

====================  =====================  ===========================  ==============
kind                  owner                  room                         scale
====================  =====================  ===========================  ==============
``torque``            joint, side upper      ``tau_upper_i - tau_i``      max(|lo|, |up|)
``torque``            joint, side lower      ``tau_i - tau_lower_i``      max(|lo|, |up|)
``friction``          contact, facet ``j``   ``-g_cj . lam_c``            ``m g / nc``
``normal force``      contact, minimum       ``n_c . lam_c - f_min``      ``m g / nc``
====================  =====================  ===========================  ==============

``g_cj`` are the rows of the contact's inscribed friction pyramid
(:func:`optimizer.problem.friction.pyramid_facets`), ``n_c`` its unit normal
(into the robot) and ``f_min`` its smallest normal force [N] (one number for
every contact, or one per contact: a foot braced against a ceiling may need
a larger preload than a foot standing on the floor). The scale of a
row is what one unit of its room means in the NLP's scaled rows.

:class:`KnotLimits` lists the rows in one order (all torque upper sides, all
torque lower sides, every contact's facets, every contact's normal force)
and evaluates their rooms on numbers (NumPy) or on symbols (any array
library given as :class:`ArrayOps`, e.g. CasADi's by the transcription).
Every consumer takes its rows from here: the transcription's limit rooms,
certification's response rows, the static support LP, the pre-solve checks
and failure diagnosis. A new kind of limit row is a :class:`LimitKind`
registered in :data:`LIMIT_KINDS`.
"""
from __future__ import annotations

import functools
import numbers
from dataclasses import dataclass
from typing import Callable

import numpy as np

TORQUE, FRICTION, NORMAL_FORCE = "torque", "friction", "normal force"


@dataclass(frozen=True)
class LimitName:
    """Which limit a row is: ``kind``, the joint or contact it belongs to, and its side or facet.

    ``side`` is ``"upper"``/``"lower"`` for a torque, ``"facet j"`` for a
    pyramid facet, ``"minimum"`` for the normal force. ``str()`` gives the
    one spelling every output uses, e.g. ``fl_knee torque (upper)``,
    ``foot_fl friction facet 2``, ``foot_fl minimum normal force``.
    """

    kind: str
    owner: str
    side: str

    def __str__(self) -> str:
        return LIMIT_KINDS[self.kind].spell(self)


@dataclass(frozen=True)
class ArrayOps:
    """The few array operations the rooms need, so NumPy and symbolic libraries share one definition.

    ``stack(parts)`` concatenates row blocks; ``dot(a, b)`` is the inner
    product of a 3-vector with a force; ``maximum``, ``absolute`` act entry-wise;
    ``ones(n)`` is a column of ``n`` ones.
    """

    stack: Callable
    dot: Callable
    maximum: Callable
    absolute: Callable
    ones: Callable


def _numpy_stack(parts):
    parts = [np.asarray(part, float) for part in parts]
    columns = max((part.shape[1] for part in parts if part.ndim == 2), default=None)
    if columns is None:
        return np.concatenate([part.reshape(-1) for part in parts])
    return np.concatenate([part.reshape(-1, columns) for part in parts], axis=0)


NUMPY_OPS = ArrayOps(stack=_numpy_stack, dot=lambda a, b: np.asarray(a) @ b, maximum=np.maximum,
                     absolute=np.abs, ones=np.ones)


@dataclass
class LimitValues:
    """The numbers (or symbols) the rooms read.

    ``tau_lower``, ``tau_upper`` (nj,) [N m or N]; ``facets`` per contact an
    (m, 3) matrix of pyramid rows; ``normals`` per contact a 3-vector;
    ``min_normal_force`` [N]; ``weight`` the robot's ``m g`` [N].
    """

    tau_lower: object
    tau_upper: object
    facets: list
    normals: list
    min_normal_force: object
    weight: float


@dataclass(frozen=True)
class LimitKind:
    """One kind of limit row.

    ``names(joints, contacts, facets)`` lists its rows; ``rooms(tau, lam,
    values, ops)`` gives their rooms as blocks for ``ops.stack``;
    ``scales(values, rows, nc, ops)`` one scale for each of its ``rows`` rows; ``spell(name)`` the text
    of one row.
    """

    kind: str
    names: Callable
    rooms: Callable
    scales: Callable
    spell: Callable


def _torque_names(joints, contacts, facets):
    return ([LimitName(TORQUE, j, "upper") for j in joints] + [LimitName(TORQUE, j, "lower") for j in joints])


def _torque_rooms(tau, lam, v: LimitValues, ops: ArrayOps):
    return [v.tau_upper - tau, tau - v.tau_lower]


def _torque_scales(v: LimitValues, rows: int, nc: int, ops: ArrayOps):
    limit = ops.maximum(ops.absolute(v.tau_lower), ops.absolute(v.tau_upper))
    return [limit, limit]


def _facet_names(joints, contacts, facets):
    return [LimitName(FRICTION, c, f"facet {j}") for c in contacts for j in range(facets)]


def _facet_rooms(tau, lam, v: LimitValues, ops: ArrayOps):
    return [-(v.facets[c] @ lam[3 * c:3 * c + 3]) for c in range(len(v.facets))]


def _contact_scales(v: LimitValues, rows: int, nc: int, ops: ArrayOps):
    return [ops.ones(rows) * (v.weight / nc)] if rows else []


def _normal_names(joints, contacts, facets):
    return [LimitName(NORMAL_FORCE, c, "minimum") for c in contacts]


def contact_minimum(min_normal_force, c: int):
    """Contact ``c``'s minimum normal force [N] from one number for every contact or a per-contact vector
    (NumPy or a symbolic column)."""
    if isinstance(min_normal_force, numbers.Real) or (isinstance(min_normal_force, np.ndarray)
                                                      and min_normal_force.ndim == 0):
        return min_normal_force
    return min_normal_force[c]


def per_contact_minimum(min_normal_force, nc: int) -> np.ndarray:
    """Numeric minimum normal forces as a vector of one per contact, shape (nc,) [N]."""
    value = np.asarray(min_normal_force, float)
    if value.ndim and value.shape != (nc,):
        raise ValueError(f"minimum normal forces: one number or {nc} (one per contact), got shape {value.shape}")
    return np.broadcast_to(value, (nc,)).copy()


def _normal_rooms(tau, lam, v: LimitValues, ops: ArrayOps):
    return [ops.dot(v.normals[c], lam[3 * c:3 * c + 3]) - contact_minimum(v.min_normal_force, c)
            for c in range(len(v.normals))]


LIMIT_KINDS: dict[str, LimitKind] = {}


@functools.lru_cache(maxsize=64)
def _names_by_kind(joints: tuple, contacts: tuple, facets: int) -> tuple[tuple[LimitName, ...], ...]:
    """Each registered kind's row names, in registry order (listed once per argument triple)."""
    return tuple(tuple(kind.names(joints, contacts, facets)) for kind in LIMIT_KINDS.values())


@functools.lru_cache(maxsize=64)
def _row_names(joints: tuple, contacts: tuple, facets: int) -> tuple[LimitName, ...]:
    """Every row's name, the kinds' lists one after the other."""
    return tuple(n for names in _names_by_kind(joints, contacts, facets) for n in names)


def register_limit_kind(kind: LimitKind) -> LimitKind:
    """Add a kind of limit row; rows of registered kinds follow in registration order."""
    LIMIT_KINDS[kind.kind] = kind
    _names_by_kind.cache_clear()
    _row_names.cache_clear()
    return kind


register_limit_kind(LimitKind(TORQUE, _torque_names, _torque_rooms, _torque_scales,
                              lambda n: f"{n.owner} torque ({n.side})"))
register_limit_kind(LimitKind(FRICTION, _facet_names, _facet_rooms, _contact_scales,
                              lambda n: f"{n.owner} friction {n.side}"))
register_limit_kind(LimitKind(NORMAL_FORCE, _normal_names, _normal_rooms, _contact_scales,
                              lambda n: f"{n.owner} minimum normal force"))


@dataclass(frozen=True)
class KnotLimits:
    """The limit rows of one knot for given joints, contacts and pyramid size.

    Attributes
    ----------
    joints : tuple of str
        The nj actuated joints, in the robot's order.
    contacts : tuple of str
        The nc contact frames.
    facets : int
        Facets per friction pyramid (m).
    """

    joints: tuple
    contacts: tuple
    facets: int

    @property
    def names(self) -> tuple[LimitName, ...]:
        """Every row's name, in the order of :meth:`rooms` (listed once per joints, contacts and facets)."""
        return _row_names(self.joints, self.contacts, self.facets)

    @property
    def size(self) -> int:
        return len(self.names)

    def index(self, name: LimitName) -> int:
        """Position of ``name`` among the rows."""
        return self.names.index(name)

    def rooms(self, tau, lam, values: LimitValues, ops: ArrayOps = NUMPY_OPS):
        """Room left at every limit, shape (rows,) or (rows, n) for n columns of ``tau``, ``lam``.

        ``tau`` (nj,) [N m], ``lam`` (3 nc,) [N]. With NumPy, 2-D inputs give
        one column of rooms per input column (limits as columns too).
        """
        blocks = [block for kind in LIMIT_KINDS.values() for block in kind.rooms(tau, lam, values, ops)]
        return ops.stack(blocks)

    def scales(self, values: LimitValues, ops: ArrayOps = NUMPY_OPS):
        """Scale of each row's room: the joint's largest torque limit [N m], or ``m g / nc`` [N]."""
        nc, blocks = len(self.contacts), []
        for kind, names in zip(LIMIT_KINDS.values(), _names_by_kind(self.joints, self.contacts, self.facets)):
            blocks += kind.scales(values, len(names), nc, ops)
        return ops.stack(blocks)

    def linear(self, values: LimitValues) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(A_tau, A_lam, b)`` with ``room = b + A_tau tau + A_lam lam`` for numeric ``values``.

        Shapes (rows, nj), (rows, 3 nc), (rows,). Read off :meth:`rooms` (which
        is affine) at zero and at unit torques and forces, so the coefficients
        are the rooms' own. An infinite limit gives an infinite ``b`` entry.
        """
        nj, n_lam = len(self.joints), 3 * len(self.contacts)
        columns = 1 + nj + n_lam
        tau = np.zeros((nj, columns))
        tau[:, 1:1 + nj] = np.eye(nj)
        lam = np.zeros((n_lam, columns))
        lam[:, 1 + nj:] = np.eye(n_lam)
        facets = [np.asarray(f, float) for f in values.facets]
        normals = [np.asarray(n, float) for n in values.normals]
        zero_limits = LimitValues(np.zeros((nj, 1)), np.zeros((nj, 1)), facets, normals, 0.0, values.weight)
        rooms = np.asarray(self.rooms(tau, lam, zero_limits), float).reshape(self.size, columns)
        coefficients = rooms[:, 1:] - rooms[:, :1]
        own = LimitValues(np.asarray(values.tau_lower, float), np.asarray(values.tau_upper, float), facets, normals,
                          per_contact_minimum(values.min_normal_force, len(normals)), values.weight)
        b = np.asarray(self.rooms(np.zeros(nj), np.zeros(n_lam), own), float).reshape(-1)
        return coefficients[:, :nj], coefficients[:, nj:], b
