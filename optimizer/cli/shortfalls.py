"""Low-margin and unmet-requirement blocks, printed so that nobody misses them.

Every line of a block starts with ``!!``; on a terminal the block is also
coloured (red for an unmet requirement, amber for a low-margin warning),
unless the ``NO_COLOR`` environment variable is set.
"""
from __future__ import annotations

import os

RED, AMBER, RESET = "\033[1;31m", "\033[1;33m", "\033[0m"


def use_colour(stream) -> bool:
    """Colour only for a terminal, and never when ``NO_COLOR`` is set."""
    return hasattr(stream, "isatty") and stream.isatty() and "NO_COLOR" not in os.environ


def shortfall_lines(shortfalls, colour: bool = False) -> list[str]:
    """The ``!!`` block for ``shortfalls`` (:class:`optimizer.analysis.margin_flags.Shortfall`); empty if none."""
    unmet = [s for s in shortfalls if s.required]
    low = [s for s in shortfalls if not s.required]
    lines = []
    if unmet:
        lines += _block(f"REQUIRED MARGIN NOT MET at {len(unmet)} time range(s):", unmet, RED if colour else "")
    if low:
        lines += _block(f"LOW MARGIN at {len(low)} time range(s): the robot rejects little or no push there:",
                        low, AMBER if colour else "")
    return lines


def _block(title: str, items, paint: str) -> list[str]:
    end = RESET if paint else ""
    return [f"{paint}!! {title}{end}"] + [f"{paint}!!   {s.text()}{end}" for s in items]
