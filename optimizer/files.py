"""Reading user files safely and writing outputs atomically."""
from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path

import yaml

from . import supervisor
from .errors import InputError, OutputError

LARGEST_INPUT = 20_000_000  # bytes; robot, URDF and task files are far smaller


class _UniqueKeyLoader(yaml.SafeLoader):
    """PyYAML's safe loader, refusing a key given twice in one mapping."""


def _mapping_without_repeats(loader, node, deep=False):
    seen = set()
    for key_node, _ in node.value:
        key = loader.construct_object(key_node, deep=deep)
        try:
            repeated = key in seen
        except TypeError:  # unhashable key: the safe constructor reports it
            break
        if repeated:
            raise yaml.constructor.ConstructorError(
                None, None, f"key {key!r} given twice in one mapping", key_node.start_mark)
        seen.add(key)
    return loader.construct_mapping(node, deep=deep)


_UniqueKeyLoader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _mapping_without_repeats)


def read_text(path, error=InputError) -> str:
    """Return the UTF-8 text of ``path`` or raise ``error`` naming the file."""
    path = Path(path)
    if path.is_dir():
        raise error(path, "", "a file", "a directory")
    if not path.is_file():
        raise error(path, "", "an existing readable file", "no such file")
    try:
        if path.stat().st_size > LARGEST_INPUT:
            raise error(path, "", f"a file of at most {LARGEST_INPUT // 1_000_000} MB", f"{path.stat().st_size} bytes")
        return path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise error(path, "", "UTF-8 text", f"undecodable byte at offset {exc.start}") from None
    except OSError as exc:
        raise error(path, "", "a readable file", exc.strerror) from None


def read_yaml_mapping(path, error=InputError) -> dict:
    """Load a YAML file with the safe loader; its top level must be a mapping.

    A key repeated within one mapping is an error (plain PyYAML keeps the last).
    """
    text = read_text(path, error)
    try:
        data = yaml.load(text, Loader=_UniqueKeyLoader)  # a SafeLoader: builds plain data only
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f"line {mark.line + 1}, column {mark.column + 1}" if mark else "unknown place"
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise error(path, "", "valid YAML", f"{problem} at {where}") from None
    except RecursionError:
        raise error(path, "", "valid YAML nested fewer than a few hundred levels deep", "deeper nesting") from None
    if not isinstance(data, dict):
        raise error(path, "", "a YAML mapping at the top level", type(data).__name__)
    return data


@contextlib.contextmanager
def atomic_output(path, suffix: str = ""):
    """Yield a temporary path beside ``path``; move it into place only on success.

    An exception (including KeyboardInterrupt) inside the block removes the
    temporary file, so no half-written output is ever left at ``path``; the
    temporary's name is declared to the supervisor first, which removes it
    if it stops the process (``optimizer.supervisor``).
    """
    path = Path(path)
    if path.is_dir():
        raise OutputError(path, "", "a file path to write", "a directory")
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        prefix = f".{path.name}.{os.getpid()}."
        supervisor.will_create(path.parent, prefix)
        fd, tmp = tempfile.mkstemp(prefix=prefix, suffix=suffix or path.suffix, dir=path.parent)
    except OSError as exc:
        raise OutputError(path, "", "a writable place for the output", exc.strerror or str(exc)) from None
    os.close(fd)
    _permissions_as_open(tmp)
    try:
        yield Path(tmp)
        try:
            os.replace(tmp, path)
        except OSError as exc:
            raise OutputError(path, "", "a writable output path", exc.strerror or str(exc)) from None
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


def _permissions_as_open(path) -> None:
    """Give a temporary file the permissions ``open(path, "w")`` would (mkstemp makes it private)."""
    umask = os.umask(0)
    os.umask(umask)
    with contextlib.suppress(OSError):
        os.chmod(path, 0o666 & ~umask)
