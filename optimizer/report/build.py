"""Write a comparison's files: figures, key frames, animation, table and page.

Input is plans that already exist, with their certification (see
:class:`~optimizer.report.table.Entry`); nothing here solves. One folder per
task (the output folder itself when there is one task), one ``report.html``
at the top.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from ..files import atomic_output
from .figures import FIGURES, write_figures
from .motion import animation, keyframe_strip
from .page import page_html, section_html
from .table import csv_text, row

PAGE = "report.html"
SUMMARY = "summary.csv"
KEYFRAMES = "keyframes.png"
MOVIE = "motion.gif"


def figure_files() -> list[str]:
    """Names of the figure files of one comparison (PNG and SVG of each figure)."""
    return [f"{name}{suffix}" for name in FIGURES for suffix in (".png", ".svg")]


def comparison_files(with_plans: bool = True) -> list[str]:
    """Every file name one comparison writes into its folder (plan files come on top)."""
    return figure_files() + [KEYFRAMES, MOVIE, SUMMARY] if with_plans else [SUMMARY]


@dataclass
class Comparison:
    """The plans of one task.

    Attributes
    ----------
    title : str
        Heading (the task's name).
    meta : dict
        ``meta`` of one of the plans (describes the task).
    entries : list of Entry
    folder : str
        Sub-folder of the output folder for this comparison's files ('' = the folder itself).
    plan_files : list of str
        Names of plan files in that folder (for the page's file list).
    """

    title: str
    meta: dict
    entries: list
    folder: str = ""
    plan_files: tuple = ()


def write_comparison(comparison: Comparison, out_dir, progress=None, frames: int | None = None) -> list[Path]:
    """Write the table, figures, key frames and animation of ``comparison``; returns the paths.

    ``progress(message, done, total)`` is told about each step and each
    animation frame (``done``/``total`` None for plain messages).
    """
    folder = Path(out_dir) / comparison.folder
    tell = progress or (lambda message, done=None, total=None: None)
    written = [_write_text(folder / SUMMARY, csv_text([row(e) for e in comparison.entries]))]
    solved = [e for e in comparison.entries if e.ok]
    if not solved:
        return written
    tell(f"{comparison.title}: figures")
    written += write_figures(solved, folder)
    tell(f"{comparison.title}: key frames")
    written.append(keyframe_strip(solved, folder / KEYFRAMES))
    written.append(animation(solved, folder / MOVIE, frames=frames,
                             progress=lambda done, total: tell(f"{comparison.title}: animation frame", done, total)))
    return written


def write_page(comparisons: list[Comparison], out_dir, subtitle: str) -> Path:
    """Write ``report.html`` for ``comparisons`` (files must exist already); returns its path."""
    sections = []
    for c in comparisons:
        listed = list(c.plan_files) + [f for f in comparison_files(any(e.ok for e in c.entries))]
        sections.append(section_html(c.title, c.meta, c.entries, c.folder, listed))
    return _write_text(Path(out_dir) / PAGE, page_html(sections, subtitle))


def _write_text(path: Path, text: str) -> Path:
    with atomic_output(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return path
