"""``report.html`` of a sweep results folder: the sweep in words, its figures and every result.

Built from the results folder alone (the manifest and the stored records), in
the comparison page's style and with its safety cautions; images are the
figures beside it, referenced by relative paths; nothing is fetched.
"""
from __future__ import annotations

import html
from pathlib import Path

from ..files import atomic_output
from ..report import palette
from ..report.page import page_html
from .figures import MARGIN, MEAN_MARGIN, figure_word

PAGE = "report.html"
TITLE = "brace sweep"
NOTE = ("A sweep maps how the model's margins change with the task; a variant that solved is no more "
        "safe to run than any other plan.")
FIGURE_CAPTIONS = {
    "margin_": "Smallest (left) and mean (right) certified margin over the knots against this parameter, "
               "one line per objective: the median over the other parameters, the band their range.",
    "margin_map": "Smallest certified margin over the first two parameters, per objective; crossed cells did not solve.",
    "solved_share": "Share of the variants each objective solved.",
}


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _newtons(value) -> str:
    try:
        return f"{float(value):.1f}"
    except (TypeError, ValueError):
        return "-"


def _yes_no(value) -> str:
    text = str(value).lower()
    return "yes" if text in ("true", "1") else "no" if text in ("false", "0") else "-"


def _caption(name: str) -> str:
    if name in FIGURE_CAPTIONS:
        return FIGURE_CAPTIONS[name]
    return FIGURE_CAPTIONS["margin_"]


def facts(manifest: dict, rows: list[dict]) -> list[tuple[str, str]]:
    """(label, text) pairs describing the sweep."""
    sweep = manifest.get("sweep", {})
    axes = ", ".join(a.get("label", a["name"]) for a in manifest["axes"])
    variants = sorted({r["variant"] for r in rows})
    return [("sweep", manifest["name"]), ("description", sweep.get("description", "-")),
            ("base task", sweep.get("task", "-")), ("parameters", axes),
            ("objectives", ", ".join(manifest["objectives"])), ("knots", str(sweep.get("knots", "the task's"))),
            ("variants with results", str(len(variants)))]


def findings(manifest: dict, rows: list[dict]) -> list[str]:
    """One line per objective: how many solved, the margins reached, low or unmet margins."""
    lines = []
    for objective in manifest["objectives"]:
        mine = [r for r in rows if r["objective"] == objective]
        if not mine:
            continue
        solved = [r for r in mine if r.get("status") == "solved"]
        swatch = f'<span class="swatch" style="background:{palette.colour(objective)}"></span>'
        text = f"{swatch}<b>{_e(objective)}</b>: solved {len(solved)} of {len(mine)} variants"
        if solved:
            smallest = min(float(r[MARGIN]) for r in solved)
            best = max(float(r[MARGIN]) for r in solved)
            text += f"; smallest {figure_word(solved)} margin from {smallest:.1f} N to {best:.1f} N across them"
            low = [r["variant"] for r in solved if int(r.get("low_margin_knots") or 0) > 0]
            unmet = [r["variant"] for r in solved if str(r.get("requirement_met")).lower() == "false"]
            if low:
                text += f"; <b>low margin</b> (under 5 % of body weight) somewhere in {len(low)} of them"
            if unmet:
                text += f"; <b>required margin not met</b> in {', '.join(map(_e, unmet))}"
        lines.append(text)
    return lines


def results_table(manifest: dict, rows: list[dict]) -> str:
    """Every stored result, one row each, with links to its plan file."""
    axes = [a["name"] for a in manifest["axes"]]
    head = ["variant", *[a.get("label", a["name"]) for a in manifest["axes"]], "objective", "status",
            f"smallest {figure_word(rows)} [N]", f"mean {figure_word(rows)} [N]", "low-margin knots", "requirement met", "plan or reason"]
    out = ['<table class="numbers"><tr>' + "".join(f'<th class="text">{_e(h)}</th>' for h in head) + "</tr>"]
    for r in sorted(rows, key=lambda r: (r["variant"], r["objective"])):
        ok = r.get("status") == "solved"
        last = (f'<a href="{_e(r["plan"])}">{_e(Path(r["plan"]).name)}</a>' if ok and r.get("plan")
                else _e(r.get("reason", "")))
        cells = [_e(r["variant"]), *[_e(r.get(a, "")) for a in axes], _e(r["objective"]), _e(r.get("status", "")),
                 _newtons(r.get(MARGIN)) if ok else "-", _newtons(r.get(MEAN_MARGIN)) if ok else "-",
                 _e(r.get("low_margin_knots", "-")) if ok else "-", _yes_no(r.get("requirement_met")) if ok else "-",
                 last]
        out.append(f'<tr class="{"" if ok else "failed"}">' + "".join(f'<td class="text">{c}</td>' for c in cells)
                   + "</tr>")
    return "".join(out) + "</table>"


def sweep_html(manifest: dict, rows: list[dict], figures: list[Path], out: Path) -> str:
    """The whole page (figures given as paths inside ``out``)."""
    parts = ['<section class="task"><h2>' + _e(manifest["name"]) + '</h2><dl class="facts">']
    parts += [f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in facts(manifest, rows)]
    parts.append("</dl><h3>At a glance</h3><div class=\"reading\"><ul>"
                 + "".join(f"<li>{line}</li>" for line in findings(manifest, rows)) + "</ul></div>")
    if figures:
        parts.append("<h3>Figures</h3>")
        for path in figures:
            src = path.relative_to(out).as_posix()
            parts.append(f'<figure><img src="{_e(src)}" alt="{_e(path.stem)}">'
                         f"<figcaption>{_e(_caption(path.stem))}</figcaption></figure>")
    parts.append("<h3>Every result</h3>" + results_table(manifest, rows) + "</section>")
    return page_html(["".join(parts)], f"sweep '{manifest['name']}', {len(rows)} result(s)", TITLE, NOTE)


def write_sweep_page(out, manifest: dict, rows: list[dict], figures: list[Path]) -> Path:
    """Write ``out/report.html`` atomically; returns its path."""
    out = Path(out)
    path = out / PAGE
    with atomic_output(path, suffix=".html") as tmp:
        Path(tmp).write_text(sweep_html(manifest, rows, [Path(f) for f in figures], out), encoding="utf-8")
    return path
