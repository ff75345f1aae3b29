"""Plan files (``plan/1``, the contract in docs/plan-files.md): one self-contained ``.npz``.

``save_plan`` writes the arrays and the ``meta`` JSON (a 0-d unicode array)
atomically and without pickle; ``load_plan`` reads any file that follows the
contract, whoever wrote it, and checks it: missing keys, dtypes, shapes
consistent with the URDF in ``meta`` (K knots, nq, nv, nj = nv - 6, nc
contacts), the ``meta`` fields readers rely on. Every problem is a
:class:`~optimizer.errors.PlanFileError` naming the file and the field.
"""
from __future__ import annotations

import json
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pinocchio as pin

from .capture import captured_stderr
from .errors import PlanFileError
from .files import atomic_output
from .schema import Fields

PLAN_FORMAT = "plan/1"
INFEASIBLE_FORMAT = "infeasible-point/1"   # where a failed solve stopped: same arrays, never a plan

# key -> (dtype kind, shape in symbols)
ARRAYS = {
    "t": ("f", ("K",)),
    "q": ("f", ("K", "nq")),
    "v": ("f", ("K", "nv")),
    "a": ("f", ("K", "nv")),
    "tau": ("f", ("K", "nj")),
    "contact_forces": ("f", ("K", "nc", 3)),
    "contact_active": ("b", ("K", "nc")),
    "contact_targets": ("f", ("K", "nc", 3)),
    "margin": ("f", ("K",)),
}
FINITE = ("t", "q", "v", "a", "tau", "contact_forces")
RESPONSE_GAINS = "response_gains_"   # + point index: the gains that certify ``margins[:, p]``, (K, 3 nc, d)
# what each axis of an array counts, for messages ("knot 0, coordinate 5")
AXES = {"t": ("knot",), "q": ("knot", "coordinate"), "v": ("knot", "coordinate"), "a": ("knot", "coordinate"),
        "tau": ("knot", "joint"), "contact_forces": ("knot", "contact", "axis"),
        "contact_active": ("knot", "contact"), "contact_targets": ("knot", "contact", "axis"), "margin": ("knot",)}
RESERVED = set(ARRAYS) | {"meta", "margins"}


@dataclass
class Plan:
    """A solved plan: per-knot arrays and the metadata that makes them readable.

    Attributes
    ----------
    t : ndarray, shape (K,)
        Knot times [s].
    q : ndarray, shape (K, nq)
        Configurations, Pinocchio layout with a free-flyer root.
    v, a : ndarray, shape (K, nv)
        Generalized velocities and accelerations (Pinocchio convention).
    tau : ndarray, shape (K, nj)
        Joint torques [N m], order of ``meta["joint_names"]``.
    contact_forces : ndarray, shape (K, nc, 3)
        Force of the environment on the robot, world frame [N].
    contact_active : ndarray of bool, shape (K, nc)
        In stance and carrying force (false while swinging and at a lift-off knot).
    contact_targets : ndarray, shape (K, nc, 3)
        Footholds, world frame [m]; NaN where not active.
    margin : ndarray, shape (K,)
        Smallest unrejectable force from linear gains [N], first disturbance.
    meta : dict
        The ``meta`` JSON (format, urdf, joint_names, contact_frames, ...).
    margins : ndarray, shape (K, P), optional
        One column per disturbance point.
    extras : dict of str to ndarray
        Further float or bool arrays, saved under their own keys.
    """

    t: np.ndarray
    q: np.ndarray
    v: np.ndarray
    a: np.ndarray
    tau: np.ndarray
    contact_forces: np.ndarray
    contact_active: np.ndarray
    contact_targets: np.ndarray
    margin: np.ndarray
    meta: dict
    margins: np.ndarray | None = None
    extras: dict = field(default_factory=dict)

    @property
    def knots(self) -> int:
        return self.t.shape[0]

    def arrays(self) -> dict:
        """Every array of the file, keyed as in the file (``meta`` excluded)."""
        out = {key: getattr(self, key) for key in ARRAYS}
        if self.margins is not None:
            out["margins"] = self.margins
        out.update(self.extras)
        return out


def response_gains_key(point: int) -> str:
    """The optional plan key holding the certifying response gains of disturbance point ``point``."""
    return f"{RESPONSE_GAINS}{point}"


def response_gains(plan: Plan, point: int = 0):
    """The certifying gains of ``point``, shape (K, 3 nc, d) [N per N of disturbance], or None when absent."""
    gains = plan.extras.get(response_gains_key(point))
    return None if gains is None else np.asarray(gains, float)


def save_plan(plan: Plan, path) -> None:
    """Write ``plan`` to ``path`` atomically as an uncompressed ``.npz`` (no pickle)."""
    for key, value in plan.extras.items():
        if key in RESERVED or np.asarray(value).dtype.kind not in "fb":
            raise PlanFileError(path, f"extras.{key}", "a float or bool array under a key the contract does not use",
                                f"{key!r} with dtype {np.asarray(value).dtype}")
    arrays = {key: np.asarray(value) for key, value in plan.arrays().items()}
    for key, (kind, _) in ARRAYS.items():
        arrays[key] = arrays[key].astype(bool if kind == "b" else np.float64)
    arrays["meta"] = np.array(json.dumps(plan.meta))
    with atomic_output(path, suffix=".npz") as tmp, open(tmp, "wb") as stream:
        np.savez(stream, **arrays)


def infeasible_path(out) -> Path:
    """Where the stopping point of a failed solve for plan ``out`` goes: ``plans/x.npz`` -> ``plans/x.infeasible.npz``."""
    out = Path(out)
    stem = out.name[:-4] if out.name.endswith(".npz") else out.name
    return out.with_name(stem + ".infeasible.npz")


def save_infeasible_point(plan: Plan, path) -> None:
    """Write where a failed solve stopped, in the plan layout but marked as no plan.

    ``meta.format`` becomes ``INFEASIBLE_FORMAT`` and ``meta.infeasible`` true,
    so :func:`load_plan` refuses the file with a clear message.
    """
    meta = dict(plan.meta, format=INFEASIBLE_FORMAT, infeasible=True)
    arrays = {key: np.asarray(value) for key, value in plan.arrays().items()}
    arrays["meta"] = np.array(json.dumps(meta))
    with atomic_output(path, suffix=".npz") as tmp, open(tmp, "wb") as stream:
        np.savez(stream, **arrays)


def load_plan(path) -> Plan:
    """Read and check a ``plan/1`` file.

    Raises
    ------
    PlanFileError
        If the file is missing, not an ``.npz`` archive, lacks a key, or has
        a dtype, shape or ``meta`` field that breaks the contract.
    """
    path = Path(path)
    raw = _read_archive(path)
    meta = _parse_meta(path, raw)
    sizes = _sizes_from_meta(path, meta)
    sizes["K"] = _knot_count(path, raw)
    for key, (kind, shape) in ARRAYS.items():
        _check_array(path, key, raw, kind, shape, sizes)
    margins = raw.get("margins")
    if margins is not None:
        _check_array(path, "margins", raw, "f", ("K", "P"), sizes)
    if "contact_knot_surfaces" in meta:
        _check_knot_surfaces(Fields(meta, path, "meta", PlanFileError).sub("contact_knot_surfaces"), sizes)
    _check_finite(path, raw)
    extras = {k: v for k, v in raw.items() if k not in RESERVED}
    return Plan(**{k: raw[k] for k in ARRAYS}, meta=meta, margins=margins, extras=extras)


def _read_archive(path: Path) -> dict:
    if not path.is_file():
        raise PlanFileError(path, "", "an existing plan file (.npz)", "no such file")
    if not zipfile.is_zipfile(path):
        raise PlanFileError(path, "", "a NumPy .npz archive", "a file that is not a zip archive")
    try:
        with np.load(path, allow_pickle=False) as archive:
            return {key: archive[key] for key in archive.files}
    except (zipfile.BadZipFile, OSError, EOFError) as exc:
        raise PlanFileError(path, "", "a NumPy .npz archive", str(exc) or type(exc).__name__) from None
    except ValueError as exc:  # object arrays need pickle, which a plan never uses
        raise PlanFileError(path, "", "arrays readable without pickle", str(exc)) from None


def _parse_meta(path: Path, raw: dict) -> dict:
    if "meta" not in raw:
        raise PlanFileError(path, "meta", "a 0-d unicode array holding JSON", "missing key")
    meta = raw["meta"]
    if meta.dtype.kind != "U" or meta.ndim != 0:
        raise PlanFileError(path, "meta", "a 0-d unicode array holding JSON",
                            f"dtype {meta.dtype}, shape {meta.shape}")
    try:
        data = json.loads(str(meta))
    except json.JSONDecodeError as exc:
        raise PlanFileError(path, "meta", "valid JSON", f"{exc.msg} at character {exc.pos}") from None
    except RecursionError:
        raise PlanFileError(path, "meta", "JSON nested fewer than a few hundred levels deep", "deeper nesting") from None
    if not isinstance(data, dict):
        raise PlanFileError(path, "meta", "a JSON object", type(data).__name__)
    if data.get("format") == INFEASIBLE_FORMAT:
        raise PlanFileError(path, "meta.format", f"'{PLAN_FORMAT}' (a plan)", data.get("format"),
                            "this file holds the point where a failed solve stopped, kept for diagnosis; "
                            "it is not a plan and must not be executed")
    if data.get("format") != PLAN_FORMAT:
        raise PlanFileError(path, "meta.format", f"'{PLAN_FORMAT}'", data.get("format"))
    return data


def build_model(path, urdf: str):
    """Pinocchio model of ``urdf`` with a free-flyer root (the contract's layout)."""
    try:
        with captured_stderr() as messages:
            return pin.buildModelFromXML(urdf, pin.JointModelFreeFlyer())
    except (ValueError, RuntimeError, TypeError) as exc:
        errors = [m.split("Error:", 1)[1].strip() for m in messages if "Error:" in m]
        text = errors[0] if errors else str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise PlanFileError(path, "meta.urdf", "a URDF that Pinocchio can load", text) from None


def _sizes_from_meta(path: Path, meta: dict) -> dict:
    """nq, nv, nj, nc, P from ``meta`` after checking the fields readers use."""
    f = Fields(meta, path, "meta", PlanFileError)
    model = build_model(path, f.string("urdf"))
    nj = model.nv - 6
    joints = _names(f, "joint_names")
    if joints != list(model.names[2:]):
        f.fail("joint_names", f"the {nj} actuated joints in Pinocchio's order {list(model.names[2:])}", joints)
    contacts = _names(f, "contact_frames")
    for i, name in enumerate(contacts):
        if not model.existFrame(name):
            f.fail(f"contact_frames[{i}]", "a frame of the URDF", name)
    nc = len(contacts)
    f.vector("gravity", 3)
    if nc:
        f.matrix("contact_normals", (nc, 3))
    f.vector("friction", nc)
    _check_pyramid(f.sub("friction_pyramid"), nc)
    _check_min_normal_force(f, nc)
    if f.has("contact_preload"):
        _check_preload(f, nc)
    if f.has("approach_clearance"):
        f.number("approach_clearance", lo=0.0)
    if f.has("touchdown_speed"):
        f.number("touchdown_speed", lo=0.0, lo_open=True)
    if f.has("load_ramp"):
        f.number("load_ramp", lo=0.0)
    limits = f.sub("torque_limits")
    for side in ("lower", "upper"):
        _limit_vector(limits, side, nj)
    count = _check_disturbances(f, model)
    if f.has("clearance"):
        _check_clearance(f.sub("clearance"), model)
    return {"nq": model.nq, "nv": model.nv, "nj": nj, "nc": nc, "P": count}


def _check_min_normal_force(f: Fields, nc: int) -> None:
    """``meta.min_normal_force``: one number >= 0 (N, every contact) or a list of nc such numbers (one per contact)."""
    if isinstance(f.raw("min_normal_force"), list):
        values = f.vector("min_normal_force", nc)
        if np.any(values < 0):
            f.fail("min_normal_force", f"{nc} numbers >= 0 N (one per contact)", values.tolist())
    else:
        f.number("min_normal_force", lo=0.0)


def _check_preload(f: Fields, nc: int) -> None:
    """``meta.contact_preload``: nc numbers >= 0, N (the planned normal force each contact keeps)."""
    values = f.vector("contact_preload", nc)
    if np.any(values < 0):
        f.fail("contact_preload", f"{nc} numbers >= 0 N (one per contact)", values.tolist())


def preloads(meta: dict) -> np.ndarray:
    """Each contact's preload in a plan's ``meta``, N, shape (nc,); zeros when the plan has none."""
    return np.asarray(meta.get("contact_preload") or [0.0] * len(meta["contact_frames"]), float)


def preload_meta(task) -> dict:
    """The plan ``meta`` entry of ``task``'s preloads (``contact_preload``), empty when no contact has one."""
    values = [float(c.preload) for c in task.contacts]
    return {"contact_preload": values} if any(values) else {}


def min_normal_forces(meta: dict) -> np.ndarray:
    """Each contact's minimum normal force in a plan's ``meta``, N, shape (nc,) (one number means every contact's)."""
    value = np.asarray(meta["min_normal_force"], float)
    return np.broadcast_to(value, (len(meta["contact_frames"]),)).copy()


def min_normal_force_meta(values) -> float | list:
    """``meta.min_normal_force`` for per-contact ``values`` [N]: one number when they are all equal, else the list."""
    values = [float(v) for v in values]
    return values[0] if values and all(v == values[0] for v in values) else values


def _check_knot_surfaces(f: Fields, sizes: dict) -> None:
    """``meta.contact_knot_surfaces``: per-knot normals (K, nc, 3) unit, tangents (K, nc, 2, 3), friction (K, nc) > 0."""
    K, nc = sizes["K"], sizes["nc"]
    for key, shape in (("normals", (K, nc, 3)), ("tangents", (K, nc, 2, 3)), ("friction", (K, nc))):
        try:
            value = np.array(f.raw(key), dtype=float)
        except (TypeError, ValueError):
            value = None
        if value is None or value.shape != shape or not np.all(np.isfinite(value)):
            f.fail(key, f"finite numbers of shape {shape}", "missing" if value is None else f"shape {value.shape}")
    if np.any(np.abs(np.linalg.norm(np.array(f.raw("normals"), float), axis=-1) - 1.0) > 1e-6):
        f.fail("normals", "unit vectors (length 1 within 1e-6)", "a vector of another length")
    if np.any(np.array(f.raw("friction"), float) <= 0.0):
        f.fail("friction", "friction coefficients > 0", "a coefficient <= 0")


@dataclass
class KnotSurfaces:
    """The surface every contact presses on at every knot (world frame).

    normals (K, nc, 3) unit, into the robot; tangents (K, nc, 2, 3); friction (K, nc).
    """

    normals: np.ndarray
    tangents: np.ndarray
    friction: np.ndarray


def knot_surfaces(meta: dict, knots: int) -> KnotSurfaces:
    """Per-knot contact surfaces of a plan: ``meta.contact_knot_surfaces`` when present, else the
    per-contact ``contact_normals``, ``friction_pyramid.tangents`` and ``friction`` at every knot."""
    per_knot = meta.get("contact_knot_surfaces")
    if per_knot is not None:
        return KnotSurfaces(*(np.array(per_knot[k], float) for k in ("normals", "tangents", "friction")))
    nc = len(meta["contact_frames"])
    normals = np.array(meta["contact_normals"], float).reshape(nc, 3)
    tangents = np.array(meta["friction_pyramid"]["tangents"], float).reshape(nc, 2, 3)
    friction = np.array(meta["friction"], float).reshape(nc)
    return KnotSurfaces(np.repeat(normals[None], knots, 0), np.repeat(tangents[None], knots, 0),
                        np.repeat(friction[None], knots, 0))


def meta_at_knot(meta: dict, k: int) -> dict:
    """``meta`` with knot ``k``'s contact normals, tangents and friction in the per-contact fields
    (for readers that work one knot at a time); ``meta`` itself when the plan has one surface per contact."""
    per_knot = meta.get("contact_knot_surfaces")
    if per_knot is None:
        return meta
    out = dict(meta, contact_normals=per_knot["normals"][k], friction=per_knot["friction"][k])
    out["friction_pyramid"] = dict(meta["friction_pyramid"], tangents=per_knot["tangents"][k])
    return out


def _names(f: Fields, key: str) -> list:
    value = f.raw(key)
    if not isinstance(value, list) or not all(isinstance(x, str) for x in value):
        f.fail(key, "a list of names", value)
    return value


def _check_pyramid(f: Fields, nc: int) -> None:
    f.integer("facets", lo=3)
    f.boolean("inscribed")
    tangents = f.raw("tangents")
    if not isinstance(tangents, list) or len(tangents) != nc:
        f.fail("tangents", f"a list of {nc} pairs of tangent vectors", tangents)
    for c, pair in enumerate(tangents):
        key = f"tangents[{c}]"
        Fields({key: pair}, f.file, f.path, f.error).matrix(key, (2, 3))


def _limit_vector(f: Fields, key: str, size: int) -> np.ndarray:
    """Torque limits; ``null`` or +-Infinity mean no limit."""
    value = f.raw(key)
    if not isinstance(value, list) or len(value) != size:
        f.fail(key, f"a list of {size} numbers", value)
    sign = -1.0 if key == "lower" else 1.0
    out = [sign * np.inf if x is None else x for x in value]
    if not all(isinstance(x, (int, float)) and not isinstance(x, bool) and not np.isnan(x) for x in out):
        f.fail(key, f"a list of {size} numbers (null for no limit)", value)
    return np.array(out, dtype=float)


def _check_disturbances(f: Fields, model) -> int:
    entries = f.raw("disturbances")
    if not isinstance(entries, list) or not entries:
        f.fail("disturbances", "a non-empty list of disturbance points", entries)
    for i, entry in enumerate(entries):
        d = Fields(entry, f.file, f.at(f"disturbances[{i}]"), f.error)
        frame = d.string("frame")
        if not model.existFrame(frame):
            d.fail("frame", "a frame of the URDF", frame)
        size = 3 if d.string("kind", choices=("force", "wrench")) == "force" else 6
        d.matrix("shape", (size, size))
    return len(entries)


def _check_clearance(f: Fields, model) -> None:
    """``meta.clearance`` (optional): distance, surfaces, shapes on the URDF's links, pairs naming both,
    optional self pairs naming two shapes and a distance."""
    import pinocchio as pin

    f.number("distance", lo=0.0)
    surfaces, shapes = set(), {}
    for i, entry in enumerate(_list(f, "surfaces")):
        s = Fields(entry, f.file, f.at(f"surfaces[{i}]"), f.error)
        kind = s.string("kind", choices=("plane", "box"))
        if kind == "plane":
            s.vector("normal", 3), s.number("offset")
        else:
            s.vector("lower", 3), s.vector("upper", 3)
        surfaces.add(s.string("name"))
    for i, entry in enumerate(_list(f, "shapes")):
        s = Fields(entry, f.file, f.at(f"shapes[{i}]"), f.error)
        link = s.string("link")
        if not model.existFrame(link, pin.FrameType.BODY):
            s.fail("link", "a link of the URDF", link)
        points = s.raw("points")
        if not isinstance(points, list) or not points:
            s.fail("points", "a non-empty list of [x, y, z] points, m", points)
        s.matrix("points", (len(points), 3))
        s.number("radius", lo=0.0)
        shapes[s.string("name")] = len(points)
    for i, entry in enumerate(_list(f, "pairs")):
        s = Fields(entry, f.file, f.at(f"pairs[{i}]"), f.error)
        shape = s.string("shape", choices=sorted(shapes))
        s.string("surface", choices=sorted(surfaces))
        points = s.raw("points")
        if not isinstance(points, list) or not points or not all(
                isinstance(p, int) and not isinstance(p, bool) and 0 <= p < shapes[shape] for p in points):
            s.fail("points", f"a non-empty list of point indices below {shapes[shape]}", points)
    for i, entry in enumerate(_list(f, "self_pairs") if f.has("self_pairs") else []):
        s = Fields(entry, f.file, f.at(f"self_pairs[{i}]"), f.error)
        s.string("first", choices=sorted(shapes)), s.string("second", choices=sorted(shapes))
        s.number("distance", lo=0.0)


def _list(f: Fields, key: str) -> list:
    value = f.raw(key)
    if not isinstance(value, list):
        f.fail(key, "a list", value)
    return value


def _knot_count(path: Path, raw: dict) -> int:
    t = raw.get("t")
    if t is None:
        raise PlanFileError(path, "t", "float64 array of shape (K,)", "missing key")
    if t.ndim != 1 or t.shape[0] < 1:
        raise PlanFileError(path, "t", "float64 array of shape (K,) with K >= 1", f"shape {t.shape}")
    return t.shape[0]


def _check_array(path: Path, key: str, raw: dict, kind: str, shape, sizes: dict) -> None:
    want = tuple(sizes[s] if isinstance(s, str) else s for s in shape)
    label = "(" + ", ".join(f"{s}={sizes[s]}" if isinstance(s, str) else str(s) for s in shape) + ")"
    dtype = "bool" if kind == "b" else "float64"
    if key not in raw:
        raise PlanFileError(path, key, f"{dtype} array of shape {label}", "missing key")
    arr = raw[key]
    if arr.dtype != np.dtype(dtype):
        raise PlanFileError(path, key, f"dtype {dtype}", f"dtype {arr.dtype}")
    if arr.shape != want:
        raise PlanFileError(path, key, f"shape {label}", f"shape {arr.shape}")


def position_words(key: str, index) -> str:
    """``("q", (0, 5))`` -> ``knot 0, coordinate 5``: an array position in words, plain integers."""
    names = AXES.get(key, ())
    return ", ".join(f"{names[i] if i < len(names) else 'axis'} {int(j)}" for i, j in enumerate(index))


def _check_finite(path: Path, raw: dict) -> None:
    for key in FINITE:
        bad = np.argwhere(~np.isfinite(raw[key]))
        if bad.size:
            raise PlanFileError(path, key, "finite numbers", f"a non-finite value at {position_words(key, bad[0])}")
    if np.any(np.diff(raw["t"]) < 0.0):
        raise PlanFileError(path, "t", "non-decreasing knot times", raw["t"])
