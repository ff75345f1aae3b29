"""brace's per-user cache folder: built solver parts kept on disk between processes.

Location: ``$BRACE_CACHE_DIR`` when set (the ``--cache-dir`` flag of
``brace solve`` and ``brace sweep`` sets it), else ``$XDG_CACHE_HOME/brace``,
else ``~/.cache/brace``. ``brace cache clear`` empties it; ``brace cache
show`` lists it.

Every entry is one file named by a digest of everything it depends on, with
a sidecar ``<name>.sha256`` holding the SHA-256 of the file's bytes. Writers
build into a temporary file in the same folder and rename it into place
(atomic on one file system), sidecar last; readers trust an entry only when
its bytes hash to its sidecar, so a truncated or half-replaced entry is
rebuilt, never used. A lock file per entry (``fcntl.flock``) makes a second
process that wants the same entry wait for the first instead of building it
twice; without the lock the result would still be correct, only slower.
"""
from __future__ import annotations

import contextlib
import fcntl
import hashlib
import os
import shutil
from pathlib import Path

from .files import atomic_output

ENVIRONMENT = "BRACE_CACHE_DIR"
SIDECAR = ".sha256"


def cache_dir() -> Path:
    """The cache folder (not created here)."""
    explicit = os.environ.get(ENVIRONMENT)
    if explicit:
        return Path(explicit).expanduser()
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base).expanduser() / "brace"


def set_cache_dir(folder) -> None:
    """Use ``folder`` from now on, in this process and the processes it starts."""
    os.environ[ENVIRONMENT] = str(Path(folder).expanduser().resolve())


def file_digest(path: Path) -> str:
    """SHA-256 of a file's bytes, hex."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def entry_path(section: str, name: str) -> Path:
    """Where the entry ``name`` of ``section`` (a subfolder, e.g. ``compiled``) lives."""
    return cache_dir() / section / name


def valid_entry(path: Path) -> bool:
    """True when ``path`` exists and its bytes hash to its sidecar."""
    sidecar = path.with_name(path.name + SIDECAR)
    try:
        return sidecar.read_text().strip() == file_digest(path)
    except OSError:
        return False


@contextlib.contextmanager
def entry_lock(path: Path):
    """Hold the exclusive lock of entry ``path`` (other processes wanting it wait)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    with open(path.with_name(path.name + ".lock"), "a") as handle:
        fcntl.flock(handle, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(handle, fcntl.LOCK_UN)


@contextlib.contextmanager
def new_entry(path: Path):
    """Yield a temporary file path beside ``path``; on success move it into place, then write its sidecar.

    An exception removes the temporary file and leaves any previous entry as
    it was (a stale entry still fails :func:`valid_entry` and is rebuilt).
    """
    with atomic_output(path) as tmp:
        yield tmp
        digest = file_digest(tmp)
    with atomic_output(path.with_name(path.name + SIDECAR)) as sidecar:
        sidecar.write_text(digest + "\n")


def cache_contents() -> list[tuple[str, int]]:
    """Every file in the cache folder: (path relative to it, size in bytes), sorted."""
    root = cache_dir()
    if not root.is_dir():
        return []
    return sorted((str(p.relative_to(root)), p.stat().st_size) for p in root.rglob("*") if p.is_file())


def clear_cache() -> int:
    """Remove everything in the cache folder; the number of bytes freed."""
    root = cache_dir()
    freed = sum(size for _, size in cache_contents())
    if root.is_dir():
        for child in root.iterdir():
            if child.is_dir() and not child.is_symlink():
                shutil.rmtree(child, ignore_errors=True)
            else:
                with contextlib.suppress(OSError):
                    child.unlink()
    return freed
