"""Memory sizes as users write them, and how much memory this machine can give.

Sizes are bytes in code and text with a unit for people: ``"8G"``,
``"512M"``, ``"1.5 GB"`` (binary units: 1 K = 1024 bytes). Available memory
is the smaller of the system's available memory (``MemAvailable`` of
``/proc/meminfo``) and the room left under the process's control-group limit
(containers and batch schedulers set one), so a solve that fits the machine
but not the container is refused too.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path

UNITS = {"": None, "K": 1 << 10, "M": 1 << 20, "G": 1 << 30, "T": 1 << 40}
SIZE_TEXT = "a size with a unit, like 8G or 512M"
_SIZE = re.compile(r"^\s*([0-9]*\.?[0-9]+)\s*([KMGT]?)(?:I?B)?\s*$", re.IGNORECASE)


def parse_size(text) -> int | None:
    """Bytes of ``"8G"``, ``"512M"``, ``"1.5 GB"``; None when ``text`` is not such a size (or not positive)."""
    if isinstance(text, bool) or not isinstance(text, str):
        return None
    match = _SIZE.match(text)
    if match is None or UNITS[match.group(2).upper()] is None:
        return None
    value = float(match.group(1)) * UNITS[match.group(2).upper()]
    return int(value) if math.isfinite(value) and value >= 1 else None


def format_size(size: float) -> str:
    """``1.5 GB``, ``820 MB``: bytes in a short human form (binary units)."""
    if size >= 1 << 30:
        return f"{size / (1 << 30):.1f} GB"
    return f"{size / (1 << 20):.0f} MB"


@dataclass(frozen=True)
class Available:
    """Memory this process can still take [bytes] and where the figure comes from."""

    size: int
    source: str


def available_memory() -> Available | None:
    """The memory available to this process now, or None when the system does not say."""
    found = []
    meminfo = _meminfo_available()
    if meminfo is not None:
        found.append(Available(meminfo, "available on this machine"))
    group = _cgroup_room()
    if group is not None:
        found.append(Available(group, "left under this process's memory limit (cgroup)"))
    if not found:
        try:
            import psutil  # optional: other systems than Linux
        except ImportError:
            return None
        return Available(int(psutil.virtual_memory().available), "available on this machine")
    return min(found, key=lambda a: a.size)


def _proc_field(path: str, key: str) -> int | None:
    """The ``key: N kB`` line of a /proc file, in bytes (None when the system does not say)."""
    try:
        for line in Path(path).read_text().splitlines():
            if line.startswith(key + ":"):
                return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    return None


def resident_size() -> int:
    """This process's resident memory now [bytes] (0 when the system does not say)."""
    return _proc_field("/proc/self/status", "VmRSS") or 0


def _meminfo_available() -> int | None:
    return _proc_field("/proc/meminfo", "MemAvailable")


def _cgroup_room() -> int | None:
    """Limit minus usage of this process's control group (v2, else v1), or None without a limit."""
    try:
        relative = ""
        for line in Path("/proc/self/cgroup").read_text().splitlines():
            if line.startswith("0::"):
                relative = line[3:].strip().lstrip("/")
        base = Path("/sys/fs/cgroup") / relative
        pairs = [(base / "memory.max", base / "memory.current"),
                 (Path("/sys/fs/cgroup/memory.max"), Path("/sys/fs/cgroup/memory.current")),
                 (Path("/sys/fs/cgroup/memory/memory.limit_in_bytes"), Path("/sys/fs/cgroup/memory/memory.usage_in_bytes"))]
        for limit_file, usage_file in pairs:
            if limit_file.is_file() and usage_file.is_file():
                limit = limit_file.read_text().strip()
                if limit == "max" or int(limit) >= 1 << 60:
                    return None
                return max(int(limit) - int(usage_file.read_text().strip()), 0)
    except (OSError, ValueError):
        pass
    return None
