"""Small validators for user mappings (robot YAML, task files).

Each returns a clean Python/NumPy value or raises the given ``InputError``
subclass naming the file, the dotted field path and what was expected.
"""
from __future__ import annotations

import difflib
import math
from collections.abc import Mapping

import numpy as np

from .errors import InputError

LARGEST_MAGNITUDE = 1e9  # larger numbers in a robot or task file are mistakes (and overflow downstream)


class Fields:
    """A mapping being validated, with its file and its field path.

    ``Fields(data, file, "contacts.lf_foot", TaskError)`` reads keys of
    ``data`` and raises ``TaskError`` with the full path on every mistake.
    """

    def __init__(self, data, file, path: str = "", error=InputError):
        if not isinstance(data, Mapping):
            raise error(file, path, "a mapping of named fields", data)
        self.data, self.file, self.path, self.error = data, file, path, error

    def at(self, key: str) -> str:
        return f"{self.path}.{key}" if self.path else str(key)

    def fail(self, key: str, expected: str, got=None, hint=None):
        raise self.error(self.file, self.at(key), expected, got, hint)

    def allow_only(self, allowed) -> None:
        """Reject keys not in ``allowed``, suggesting the closest allowed one."""
        for key in self.data:
            if key not in allowed:
                close = difflib.get_close_matches(str(key), list(allowed), n=1)
                hint = f"did you mean '{close[0]}'?" if close else None
                self.fail(str(key), "one of the known fields " + ", ".join(sorted(allowed)), "unknown field", hint)

    def has(self, key: str) -> bool:
        return key in self.data and self.data[key] is not None

    def raw(self, key: str, default=...):
        if key not in self.data or self.data[key] is None:
            if default is ...:
                self.fail(key, "this required field", "nothing")
            return default
        return self.data[key]

    def sub(self, key: str, default=...) -> "Fields":
        return Fields(self.raw(key, default), self.file, self.at(key), self.error)

    def number(self, key: str, default=..., *, lo=None, hi=None, lo_open=False) -> float:
        value = self.raw(key, default)
        return check_number(value, self, key, lo=lo, hi=hi, lo_open=lo_open)

    def integer(self, key: str, default=..., *, lo=None, hi=None) -> int:
        value = self.raw(key, default)
        if isinstance(value, bool) or not isinstance(value, int):
            self.fail(key, "a whole number", value)
        if lo is not None and value < lo:
            self.fail(key, f"a whole number >= {lo}", value)
        if hi is not None and value > hi:
            self.fail(key, f"a whole number <= {hi}", value)
        return int(value)

    def string(self, key: str, default=..., choices=None) -> str:
        value = self.raw(key, default)
        if not isinstance(value, str) or not value:
            self.fail(key, "a non-empty text", value)
        if choices is not None and value not in choices:
            close = difflib.get_close_matches(value, list(choices), n=1)
            self.fail(key, "one of " + ", ".join(choices), value,
                      f"did you mean '{close[0]}'?" if close else None)
        return value

    def boolean(self, key: str, default=...) -> bool:
        value = self.raw(key, default)
        if not isinstance(value, bool):
            self.fail(key, "true or false", value)
        return value

    def vector(self, key: str, size: int | None = None, default=...) -> np.ndarray:
        return check_vector(self.raw(key, default), self, key, size)

    def matrix(self, key: str, shape: tuple[int, int], default=...) -> np.ndarray:
        value = self.raw(key, default)
        rows = value if isinstance(value, list) else None
        if rows is None or len(rows) != shape[0]:
            self.fail(key, f"a {shape[0]}x{shape[1]} matrix (list of {shape[0]} rows)", value)
        return np.array([check_vector(r, self, f"{key}[{i}]", shape[1]) for i, r in enumerate(rows)])


def check_number(value, fields: Fields, key: str, *, lo=None, hi=None, lo_open=False) -> float:
    """A finite real number within optional bounds."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        fields.fail(key, "a number", value)
    value = _as_float(value)
    if not math.isfinite(value):
        fields.fail(key, "a finite number", value)
    if abs(value) > LARGEST_MAGNITUDE:
        fields.fail(key, f"a number of sensible size (|x| <= {LARGEST_MAGNITUDE:g})", value)
    if lo is not None and (value <= lo if lo_open else value < lo):
        fields.fail(key, f"a number {'>' if lo_open else '>='} {lo:g}", value)
    if hi is not None and value > hi:
        fields.fail(key, f"a number <= {hi:g}", value)
    return value


def check_vector(value, fields: Fields, key: str, size: int | None) -> np.ndarray:
    """A list of finite numbers, of length ``size`` when given."""
    what = f"a list of {size} numbers" if size else "a list of numbers"
    if not isinstance(value, (list, tuple)) or (size is not None and len(value) != size):
        fields.fail(key, what, value)
    out = []
    for item in value:
        if isinstance(item, bool) or not isinstance(item, (int, float)) or not math.isfinite(_as_float(item)):
            fields.fail(key, what + " (all finite)", value)
        if abs(item) > LARGEST_MAGNITUDE:
            fields.fail(key, what + f" (all of sensible size, |x| <= {LARGEST_MAGNITUDE:g})", value)
        out.append(float(item))
    return np.array(out)


def _as_float(value) -> float:
    """``float(value)``; a whole number too large for a float becomes inf (rejected as not finite)."""
    try:
        return float(value)
    except OverflowError:
        return math.inf
