"""Reading user files safely and writing outputs atomically."""
from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path

import yaml

from .errors import InputError


def read_text(path, error=InputError) -> str:
    """Return the UTF-8 text of ``path`` or raise ``error`` naming the file."""
    path = Path(path)
    if not path.is_file():
        raise error(path, "", "an existing readable file", "no such file")
    try:
        return path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise error(path, "", "UTF-8 text", f"undecodable byte at offset {exc.start}") from None
    except OSError as exc:
        raise error(path, "", "a readable file", exc.strerror) from None


def read_yaml_mapping(path, error=InputError) -> dict:
    """Load a YAML file with the safe loader; its top level must be a mapping."""
    text = read_text(path, error)
    try:
        data = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f"line {mark.line + 1}, column {mark.column + 1}" if mark else "unknown place"
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise error(path, "", "valid YAML", f"{problem} at {where}") from None
    if not isinstance(data, dict):
        raise error(path, "", "a YAML mapping at the top level", type(data).__name__)
    return data


@contextlib.contextmanager
def atomic_output(path, suffix: str = ""):
    """Yield a temporary path beside ``path``; move it into place only on success.

    An exception (including KeyboardInterrupt) inside the block removes the
    temporary file, so no half-written output is ever left at ``path``.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=suffix or path.suffix, dir=path.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
