"""Sweep files: a base task, the axes to vary, the variants, the objectives.

A sweep file is a YAML mapping (schema in docs/sweep-files.md)::

    task: steep_ramp.yaml              # base task, relative to this file
    objectives: [robust, torque]
    knots: 10                          # optional: override the task's knots
    time_limit_s: 300                  # optional: per variant, all objectives
    warm_start: none                   # or neighbour
    axes:
      slope_deg: {field: stance.terrain.slope_deg}
      friction: {field: stance.terrain.friction}
      payload_kg: {model: payload_mass}
    grid: {slope_deg: [10, 22, 34], friction: [0.5, 1.0], payload_kg: [0, 2]}

Exactly one of ``grid`` (every combination of the listed values),
``combinations`` (a list of ``{axis: value}``) or ``samples`` (``{count,
seed, ranges: {axis: [low, high]}}``, uniform) gives the variants.
:func:`load_sweep` validates all of it and raises ``SweepError`` naming the
file, the field and what was expected.
"""
from __future__ import annotations

import hashlib
import itertools
import json
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import SweepError
from ..files import read_yaml_mapping
from ..schema import Fields, check_number, check_vector
from ..transcription.objectives import OBJECTIVES

TOP_LEVEL = {"name", "description", "task", "objectives", "knots", "time_limit_s", "warm_start", "axes",
             "grid", "combinations", "samples"}
VARIANT_KINDS = ("grid", "combinations", "samples")
WARM_STARTS = ("neighbour", "none")
# model quantities an axis may set: name -> (unit, lower bound, open lower bound)
MODEL_QUANTITIES = {"payload_mass": ("kg", 0.0, False), "torque_scale": ("", 0.0, True)}
MAX_AXES = 6
MAX_VARIANTS = 20_000     # more is a typo in a grid, not a sweep
DEFAULT_TIME_LIMIT = 600.0  # s per variant
_STEP = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*)((?:\[\d+\])*)$")


@dataclass(frozen=True)
class Axis:
    """One swept quantity.

    ``field`` is a path into the task mapping as a tuple of keys and list
    indices (``("stance", "terrain", "slope_deg")``), or ``model`` names a
    model quantity (:data:`MODEL_QUANTITIES`); exactly one is set.
    """

    name: str
    field: tuple = ()
    model: str = ""

    @property
    def sets(self) -> str:
        """What the axis sets: the dotted task field or the model quantity."""
        return self.model or field_text(self.field)

    @property
    def label(self) -> str:
        """The axis name for figures, with the model quantity's unit."""
        unit = MODEL_QUANTITIES[self.model][0] if self.model else ""
        return f"{self.name} [{unit}]" if unit else self.name


@dataclass(frozen=True)
class Variant:
    """One point of the sweep: ``id`` (``v0001``...) and ``{axis name: value}``."""

    id: str
    values: dict

    def numbers(self, axes) -> np.ndarray:
        """One number per axis (a list value counts by its first entry), for distances."""
        out = []
        for axis in axes:
            value = self.values[axis.name]
            out.append(float(value[0] if isinstance(value, list) else value))
        return np.array(out)


@dataclass
class Sweep:
    """A validated sweep file."""

    name: str
    path: Path
    task_path: Path
    objectives: list
    knots: int | None
    time_limit: float
    warm_start: str
    axes: list
    variants: list
    raw: dict = field(repr=False, default_factory=dict)

    @property
    def fingerprint(self) -> str:
        """Hash of the sweep file's content (not its layout or comments)."""
        return fingerprint(self.raw)


def field_text(path: tuple) -> str:
    """``("hand_targets", 0, "position")`` -> ``hand_targets[0].position``."""
    out = ""
    for step in path:
        out += f"[{step}]" if isinstance(step, int) else (f".{step}" if out else step)
    return out


def fingerprint(data) -> str:
    return hashlib.sha256(json.dumps(data, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


# ---------------------------------------------------------------- loader


def load_sweep(path) -> Sweep:
    """Read and validate the sweep file at ``path``; the base task is only located, not loaded."""
    path = Path(path)
    data = read_yaml_mapping(path, SweepError)
    top = Fields(data, path, "", SweepError)
    top.allow_only(TOP_LEVEL)
    if top.has("description"):
        top.string("description")
    task_path = (path.parent / top.string("task")).resolve()
    if not task_path.is_file():
        top.fail("task", "an existing task file (path relative to the sweep file's folder)", str(task_path))
    base = read_yaml_mapping(task_path, SweepError)
    axes = read_axes(top, base)
    try:
        raw = json.loads(json.dumps(data, allow_nan=False))
    except (TypeError, ValueError) as exc:
        raise SweepError(path, "", "only numbers, text, lists and mappings", str(exc)) from None
    return Sweep(
        name=top.string("name", path.stem),
        path=path,
        task_path=task_path,
        objectives=read_objectives(top),
        knots=top.integer("knots", None, lo=2, hi=2000) if top.has("knots") else None,
        time_limit=top.number("time_limit_s", DEFAULT_TIME_LIMIT, lo=0.0, lo_open=True),
        warm_start=top.string("warm_start", "none", choices=WARM_STARTS),
        axes=axes,
        variants=read_variants(top, axes),
        raw=raw,
    )


def read_objectives(top: Fields) -> list:
    items = top.raw("objectives")
    if not isinstance(items, list) or not items:
        top.fail("objectives", "a non-empty list of objectives (" + ", ".join(OBJECTIVES) + ")", items)
    for i, name in enumerate(items):
        if name not in OBJECTIVES:
            top.fail(f"objectives[{i}]", "one of " + ", ".join(OBJECTIVES), name)
    if len(set(items)) != len(items):
        top.fail("objectives", "objectives without repeats", items)
    return list(items)


def read_axes(top: Fields, base: dict) -> list[Axis]:
    axes = top.sub("axes")
    if not axes.data or len(axes.data) > MAX_AXES:
        top.fail("axes", f"a mapping of 1 to {MAX_AXES} named axes", axes.data)
    out = []
    for name in axes.data:
        if not isinstance(name, str) or not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", name):
            axes.fail(str(name), "an axis name of letters, digits and underscores", name)
        spec = axes.sub(name)
        spec.allow_only({"field", "model"})
        if spec.has("field") == spec.has("model"):
            spec.fail("field", "exactly one of 'field' (a task field path) or 'model' ("
                      + ", ".join(MODEL_QUANTITIES) + ")", sorted(spec.data))
        if spec.has("model"):
            out.append(Axis(name, model=spec.string("model", choices=list(MODEL_QUANTITIES))))
        else:
            out.append(Axis(name, field=parse_field(spec, "field", base)))
    return out


def parse_field(spec: Fields, key: str, base: dict) -> tuple:
    """A dotted path with list indices, checked to lead into the base task."""
    text = spec.string(key)
    path: list = []
    for part in text.split("."):
        match = _STEP.match(part)
        if not match:
            spec.fail(key, "a field path like stance.terrain.slope_deg or hand_targets[0].position[2]", text)
        path.append(match.group(1))
        path += [int(i) for i in re.findall(r"\d+", match.group(2))]
    node = base
    for depth, step in enumerate(path):
        if isinstance(step, int):
            ok = isinstance(node, list) and step < len(node)
        else:
            ok = isinstance(node, dict) and step in node
        if not ok:
            spec.fail(key, "a field the base task file gives (write it there first)",
                      f"{text} (no '{field_text(tuple(path[:depth + 1]))}' in the task)")
        node = node[step]
    if isinstance(node, bool) or not isinstance(node, (int, float, list)):
        spec.fail(key, "a field holding a number or a list of numbers in the base task", f"{text}: {node!r}")
    return tuple(path)


# ---------------------------------------------------------------- variants


def read_variants(top: Fields, axes: list[Axis]) -> list[Variant]:
    given = [kind for kind in VARIANT_KINDS if top.has(kind)]
    if len(given) != 1:
        top.fail("grid", "exactly one of " + ", ".join(VARIANT_KINDS), given or "none")
    kind = given[0]
    rows = {"grid": grid_rows, "combinations": listed_rows, "samples": sampled_rows}[kind](top, axes)
    if not rows:
        top.fail(kind, "at least one variant", "none")
    if len(rows) > MAX_VARIANTS:
        top.fail(kind, f"at most {MAX_VARIANTS} variants", len(rows))
    width = max(4, len(str(len(rows))))
    return [Variant(f"v{i + 1:0{width}d}", row) for i, row in enumerate(rows)]


def check_value(fields: Fields, key: str, axis: Axis, value):
    """An axis value: a number (a list of numbers too for field axes), within a model quantity's range."""
    if axis.model:
        _, lo, lo_open = MODEL_QUANTITIES[axis.model]
        return check_number(value, fields, key, lo=lo, lo_open=lo_open)
    if isinstance(value, list):
        return check_vector(value, fields, key, None).tolist()
    return check_number(value, fields, key)


def grid_rows(top: Fields, axes: list[Axis]) -> list[dict]:
    grid = top.sub("grid")
    grid.allow_only({a.name for a in axes})
    columns = []
    for axis in axes:
        values = grid.raw(axis.name)
        if not isinstance(values, list) or not values:
            grid.fail(axis.name, "a non-empty list of values", values)
        columns.append([check_value(grid, f"{axis.name}[{i}]", axis, v) for i, v in enumerate(values)])
    return [dict(zip([a.name for a in axes], combo)) for combo in itertools.product(*columns)]


def listed_rows(top: Fields, axes: list[Axis]) -> list[dict]:
    items = top.raw("combinations")
    if not isinstance(items, list):
        top.fail("combinations", "a list of mappings {axis: value}", items)
    rows = []
    for i, item in enumerate(items):
        row = Fields(item, top.file, top.at(f"combinations[{i}]"), SweepError)
        row.allow_only({a.name for a in axes})
        rows.append({a.name: check_value(row, a.name, a, row.raw(a.name)) for a in axes})
    return rows


def sampled_rows(top: Fields, axes: list[Axis]) -> list[dict]:
    """``count`` uniform samples in ``ranges`` from NumPy's PCG64 generator seeded with ``seed``."""
    samples = top.sub("samples")
    samples.allow_only({"count", "seed", "ranges"})
    count = samples.integer("count", lo=1, hi=MAX_VARIANTS)
    seed = samples.integer("seed", lo=0)
    ranges = samples.sub("ranges")
    ranges.allow_only({a.name for a in axes})
    bounds = []
    for axis in axes:
        low, high = ranges.vector(axis.name, 2)
        if not low < high:
            ranges.fail(axis.name, "[low, high] with low < high", [low, high])
        for value, where in ((low, f"{axis.name}[0]"), (high, f"{axis.name}[1]")):
            check_value(ranges, where, axis, float(value))
        bounds.append((low, high))
    rng = np.random.default_rng(seed)
    draws = rng.uniform(0.0, 1.0, size=(count, len(axes)))
    return [{a.name: float(lo + u * (hi - lo)) for a, (lo, hi), u in zip(axes, bounds, row)} for row in draws]


def nearest(target: Variant, solved: list[Variant], axes: list[Axis], spans: np.ndarray) -> Variant | None:
    """The variant of ``solved`` nearest ``target``, each axis measured in units of its span."""
    if not solved:
        return None
    here = target.numbers(axes) / spans
    distances = [float(np.linalg.norm(v.numbers(axes) / spans - here)) for v in solved]
    return solved[int(np.argmin(distances))]


def axis_spans(sweep: Sweep) -> np.ndarray:
    """Range of each axis over the sweep's variants (1 where an axis takes one value)."""
    table = np.array([v.numbers(sweep.axes) for v in sweep.variants])
    span = table.max(axis=0) - table.min(axis=0)
    return np.where(span > 0, span, 1.0) if table.size else np.ones(len(sweep.axes))


