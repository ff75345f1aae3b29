"""The shared results table of the benchmarks: ``benchmarks/RESULTS.md``, one ``## Heading`` section per script."""
from __future__ import annotations

import re
from pathlib import Path


def write_section(path: Path, heading: str, text: str) -> None:
    """Replace the section ``## heading`` of ``path`` with ``text`` (which starts with that heading), or append it."""
    path = Path(path)
    old = path.read_text(encoding="utf-8") if path.exists() else "# Benchmark results\n"
    pattern = re.compile(rf"## {re.escape(heading)}\n.*?(?=\n## |\Z)", re.S)
    new = pattern.sub(lambda _: text.rstrip("\n"), old) if pattern.search(old) else old.rstrip("\n") + "\n\n" + text
    path.write_text(new if new.endswith("\n") else new + "\n", encoding="utf-8")


def publish(text: str, path, heading: str) -> None:
    """Print a script's section and, when ``path`` is given, write it into that results file."""
    print(text)
    if path:
        write_section(Path(path), heading, text)


def simulation_run_line(command: str, elapsed: float, load_before: float, load_after: float) -> str:
    """The opening line of a simulation section: command, date, machine, versions, run time [min], load."""
    import datetime
    import os
    import platform

    import mujoco

    cpu = platform.processor() or platform.machine()
    return (f"Script: `{command}` ({datetime.date.today().isoformat()}, {os.cpu_count()} cores, {cpu}, Python "
            f"{platform.python_version()}, MuJoCo {mujoco.__version__}, `OPENBLAS_NUM_THREADS=1`); whole run "
            f"{elapsed / 60:.1f} min, load average (1 min) {load_before:.1f} before and {load_after:.1f} after")
