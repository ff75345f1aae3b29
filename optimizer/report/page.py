"""``report.html``: one self-contained page per comparison, readable without a server.

The page says what the task is, which plan is more robust and when, what
limits it, shows the table, every figure, the key frames and the animation,
the certification of every plan and the safety cautions. Images are files
beside the page, referenced by relative paths; the style sheet is inline;
no script, no font or anything else is fetched. Printing keeps figures whole.
"""
from __future__ import annotations

import html
import math
from pathlib import PurePosixPath

from .. import __version__
from ..notices import MODEL_ONLY, SAFETY
from . import palette
from .figures import CAPTIONS, FIGURES
from .table import COLUMNS, cell, entry_shortfalls, row, titles

TITLE = "brace comparison"

STYLE = f"""
:root {{ --ink: {palette.INK}; --muted: {palette.MUTED}; --danger: {palette.DANGER}; }}
* {{ box-sizing: border-box; }}
body {{ font-family: "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; color: var(--ink); margin: 0;
       background: #fbfaf7; line-height: 1.45; }}
main {{ max-width: 1180px; margin: 0 auto; padding: 18px 28px 40px; }}
header.page {{ border-bottom: 3px solid var(--ink); padding-bottom: 6px; margin-bottom: 14px; }}
header.page h1 {{ margin: 0; font-size: 1.7em; letter-spacing: 0.02em; }}
header.page p {{ margin: 2px 0 0; color: #555; font-size: 0.9em; }}
section.task {{ margin-top: 26px; }}
h2 {{ font-size: 1.35em; margin: 26px 0 8px; border-left: 6px solid var(--ink); padding-left: 8px; }}
h3 {{ font-size: 1.08em; margin: 20px 0 6px; }}
.reading {{ background: #ffffff; border: 1px solid #d9d5c8; border-radius: 6px; padding: 10px 16px; }}
.reading li {{ margin: 3px 0; }}
.swatch {{ display: inline-block; width: 0.9em; height: 0.9em; border-radius: 2px; vertical-align: -0.1em;
          margin-right: 4px; }}
table.numbers {{ border-collapse: collapse; font-size: 0.84em; background: #fff; width: 100%; }}
table.numbers th, table.numbers td {{ border-bottom: 1px solid #e2ded2; padding: 4px 6px; text-align: right; }}
table.numbers th {{ background: #efece3; font-weight: 600; }}
table.numbers td.text, table.numbers th.text {{ text-align: left; }}
table.numbers tr.failed td {{ color: var(--danger); }}
dl.facts {{ display: grid; grid-template-columns: max-content 1fr; gap: 2px 14px; margin: 6px 0; }}
dl.facts dt {{ font-weight: 600; }}
dl.facts dd {{ margin: 0; }}
figure {{ margin: 16px 0; background: #fff; border: 1px solid #e2ded2; border-radius: 6px; padding: 8px;
          break-inside: avoid; page-break-inside: avoid; }}
figure img {{ display: block; max-width: 100%; height: auto; margin: 0 auto; }}
figcaption {{ font-size: 0.88em; color: #444; margin-top: 6px; }}
figcaption a {{ color: #444; }}
.caution {{ border: 2px solid var(--danger); border-radius: 6px; padding: 8px 16px; background: #fff7f5; }}
.caution h2 {{ border-left-color: var(--danger); margin-top: 6px; }}
.files {{ font-size: 0.88em; }}
.certified {{ color: #2b6a36; font-weight: 600; }}
.not-certified {{ color: var(--danger); font-weight: 600; }}
@media print {{
  body {{ background: #fff; }}
  main {{ max-width: none; padding: 0; }}
  figure, table.numbers, .reading, .caution {{ break-inside: avoid; page-break-inside: avoid; }}
  section.task + section.task {{ break-before: page; page-break-before: always; }}
  a {{ color: var(--ink); text-decoration: none; }}
}}
"""


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _swatch(name: str) -> str:
    return f'<span class="swatch" style="background:{palette.colour(name)}"></span>'


def _path(folder: str, name: str) -> str:
    return str(PurePosixPath(folder) / name) if folder else name


def task_facts(meta: dict, entries) -> list[tuple[str, str]]:
    """(label, text) pairs describing the task in words."""
    task = meta.get("task") or {}
    horizon = task.get("horizon") or {}
    stance = task.get("stance") or {}
    facts = []
    if task.get("description"):
        facts.append(("what", " ".join(str(task["description"]).split())))
    knots = len(entries[0].plan.t) if entries and entries[0].plan is not None else horizon.get("knots")
    facts.append(("horizon", f"{horizon.get('duration', '?')} s, {knots} knots"))
    terrain = stance.get("terrain")
    feet = stance.get("feet") or {}
    if isinstance(terrain, dict):
        details = "; ".join(f"{k.replace('_', ' ')} {_plain(v)}" for k, v in terrain.items() if k != "kind")
        facts.append(("terrain", f"{terrain.get('kind')} ({details})"))
    placed = []
    for name, spec in feet.items():
        surface = spec.get("surface") if isinstance(spec, dict) else None
        placed.append(f"{name}" + (f" on {surface}" if surface else ""))
    if placed:
        facts.append(("feet", ", ".join(placed) + "; every foot stays in stance for the whole motion"))
    targets = []
    for t in task.get("hand_targets") or []:
        when = f"{t['window'][0]}-{t['window'][1]} s" if "window" in t else f"at {t.get('time')} s"
        targets.append(f"{t.get('label') or 'target'} at ({', '.join(f'{x:.2f}' for x in t['position'])}) m, {when}")
    if targets:
        facts.append(("hand targets", "; ".join(targets)))
    points = meta["disturbances"]
    d = points[0]
    facts.append(("disturbance", f"a {d['kind']} of unknown direction at {d['frame']}; the margin is the smallest "
                                 "such push the robot could not reject within its torque limits and friction"))
    if len(points) > 1:
        others = ", ".join(f"point {i}: a {p['kind']} at {p['frame']}" for i, p in enumerate(points) if i)
        facts.append(("more points", f"{others}; each has its own margin (robust objectives combine them: "
                                     f"{meta.get('combine_points', 'smallest')}). Figures, key frames and the margin "
                                     f"columns show point 0 ({d['frame']}); 'exact min per point' and the "
                                     "certification below cover every point"))
    facts.append(("compared", ", ".join(e.name for e in entries)))
    return facts


def _plain(value) -> str:
    """A task-file value in words: mappings as 'key value, ...', lists in brackets."""
    if isinstance(value, dict):
        return ", ".join(f"{k} {_plain(v)}" for k, v in value.items())
    if isinstance(value, list):
        return "[" + ", ".join(_plain(v) for v in value) + "]"
    return str(value)


def _newtons(x: float) -> str:
    return f"{x:.3f} N" if abs(x) < 1.0 else f"{x:.1f} N"


def reading(entries) -> list[str]:
    """Plain-language findings (HTML fragments): who is more robust, when, and what limits it."""
    solved = [e for e in entries if e.ok]
    out = []
    if not solved:
        return ["No plan could be made; the table gives each objective's reason."]
    ranked = sorted(solved, key=lambda e: e.smallest.rho, reverse=True)
    best = ranked[0]
    low = best.smallest
    out.append(f"{_swatch(best.name)}<b>{_e(best.name)}</b> is the most robust over the whole motion: its smallest "
               f"{best.figure} margin is <b>{_newtons(low.rho)}</b>, at t = {low.time:.2f} s.")
    for other in ranked[1:]:
        o = other.smallest
        if o.rho < 0.01 * low.rho:
            ratio = " (practically no margin: the smallest push can break a limit)"
        elif o.rho > 0 and low.rho > o.rho:
            ratio = f" ({low.rho / o.rho:.1f} times smaller)"
        else:
            ratio = ""
        out.append(f"{_swatch(other.name)}<b>{_e(other.name)}</b>: smallest {_newtons(o.rho)} at "
                   f"t = {o.time:.2f} s{ratio}.")
    by_mean = max(solved, key=lambda e: float(e.exact.mean()))
    out.append(f"On average over the knots, {_swatch(by_mean.name)}<b>{_e(by_mean.name)}</b> keeps the most margin "
               f"({_newtons(float(by_mean.exact.mean()))} mean {by_mean.figure}).")
    for e in ranked:
        s = e.smallest
        names = ", ".join(s.bottleneck[:3]) + (f" and {len(s.bottleneck) - 3} more" if len(s.bottleneck) > 3 else "")
        direction = ", ".join(f"{0.0 if abs(x) < 5e-3 else x:+.2f}" for x in s.direction[:3])
        out.append(f"What limits {_e(e.name)} at its weakest moment: a push along ({direction}) is stopped by "
                   f"<i>{_e(names or 'no named limit')}</i>.")
    for e in ranked:
        for s in entry_shortfalls(e):
            what = "required margin not met" if s.required else "low margin"
            out.append(f'<span class="not-certified">{what}</span> for {_e(e.name)}: {_e(s.text())}.')
    failed = [e for e in entries if not e.ok]
    for e in failed:
        out.append(f"{_e(e.name)} has no plan: {_e(e.failure)}.")
    return out


def table_html(entries) -> str:
    """The comparison table as an HTML table (same numbers as ``summary.csv``)."""
    rows = [row(e) for e in entries]
    head = "".join(f'<th class="{"text" if not spec else "num"}">{_e(title)}</th>'
                   for (_, _, spec), title in zip(COLUMNS, titles(rows)))
    body = []
    for e, r in zip(entries, rows):
        cells = []
        for key, _, spec in COLUMNS:
            text = _e(cell(r[key], spec))
            if key == "objective":
                text = _swatch(e.name) + text
            cells.append(f'<td class="{"text" if not spec else "num"}" data-key="{key}">{text}</td>')
        body.append(f'<tr class="{"ok" if e.ok else "failed"}">{"".join(cells)}</tr>')
    return f'<table class="numbers"><thead><tr>{head}</tr></thead><tbody>{"".join(body)}</tbody></table>'


def certification_html(entries) -> str:
    """Per plan: certified or not, smallest certified margin, planned/figure range, usual bottleneck."""
    items = []
    for e in entries:
        if not e.ok:
            continue
        s = e.certificate.summary()
        verdict = ('<span class="certified">certified</span>' if s["certified"]
                   else '<span class="not-certified">NOT certified</span>')
        ratio = ("" if s["planned_over_exact_min"] is None else
                 f"; planned / {s['figure']} {s['planned_over_exact_min']:.3f} to {s['planned_over_exact_max']:.3f} "
                 "(1 = the plan's own margin is tight)")
        usual = ("" if not s["most_frequent_bottleneck"] else
                 f"; most frequent bottleneck {_e(s['most_frequent_bottleneck'])} "
                 f"({s['bottleneck_knots']} of {s['knots']} knots)")
        if e.others:
            verdict = ('<span class="certified">certified</span>' if not e.problems()
                       else '<span class="not-certified">NOT certified</span>')
        problems = "".join(f"<li>{_e(p)}</li>" for p in e.problems())
        where = f" at point 0 ({_e(e.certificate.disturbance['frame'])})" if e.others else ""
        more = "".join(f"; point {c.disturbance['index']} ({_e(c.disturbance['frame'])}): smallest "
                       f"{c.summary()['figure']} {_number(c.summary()['smallest_rho_N'])} N at t = "
                       f"{_number(c.summary()['smallest_at_time_s'])} s" for c in e.others)
        items.append(f"<li>{_swatch(e.name)}<b>{_e(e.name)}</b>: {verdict}, {s['knots']} knots checked "
                     f"({s['exact_knots']} exact); smallest {s['figure']} {_number(s['smallest_rho_N'])} N{where} at t = "
                     f"{_number(s['smallest_at_time_s'])} s"
                     f"{more}{ratio}{usual}.{'<ul>' + problems + '</ul>' if problems else ''}</li>")
    return f"<ul>{''.join(items)}</ul>" if items else "<p>No plan to certify.</p>"


def _number(x) -> str:
    return "-" if x is None or (isinstance(x, float) and not math.isfinite(x)) else f"{x:.2f}"


def _figure(src: str, alt: str, caption: str, extra: str = "") -> str:
    return (f'<figure><img src="{_e(src)}" alt="{_e(alt)}">'
            f"<figcaption>{_e(caption)}{extra}</figcaption></figure>")


def section_html(title: str, meta: dict, entries, folder: str, files: list[str]) -> str:
    """One comparison: task, findings, table, figures, motion, certification, files."""
    solved = [e for e in entries if e.ok]
    parts = [f'<section class="task"><h2>{_e(title)}</h2>', '<dl class="facts">']
    parts += [f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in task_facts(meta, entries)]
    parts.append("</dl>")
    parts.append('<h3>At a glance</h3><div class="reading"><ul>'
                 + "".join(f"<li>{line}</li>" for line in reading(entries)) + "</ul></div>")
    parts.append("<h3>Comparison table</h3>" + table_html(entries))
    if solved:
        parts.append("<h3>Figures</h3>")
        for name in FIGURES:
            svg = _path(folder, f"{name}.svg")
            parts.append(_figure(_path(folder, f"{name}.png"), name.replace("_", " "), CAPTIONS[name],
                                 f' <a href="{_e(svg)}">SVG</a>'))
        parts.append("<h3>Motion</h3>")
        parts.append(_figure(_path(folder, "keyframes.png"), "key frames",
                             "Key frames, one row per plan: start, each hand target, the end, and last the plan's "
                             "weakest moment. Links in the plan's colour; friction pyramids at the feet shaded "
                             "by friction use (light: little, dark: near slipping); magenta crosses: hand "
                             "targets; red arrow: weakest direction, length proportional to the certified margin."))
        parts.append(_figure(_path(folder, "motion.gif"), "animation",
                             "The plans side by side in real time (the printed page shows the first frame)."))
    parts.append("<h3>Certification</h3>" + certification_html(entries))
    links = ", ".join(f'<a href="{_e(_path(folder, f))}">{_e(f)}</a>' for f in files)
    parts.append(f'<p class="files">Files: {links}</p></section>')
    return "".join(parts)


COMPARISON_NOTE = "A comparison ranks plans on the model; it does not say that any of them is safe to run."


def page_html(sections: list[str], subtitle: str, title: str = TITLE, note: str = COMPARISON_NOTE) -> str:
    """The whole page around its sections: header, sections, and the safety cautions with ``note``."""
    safety = SAFETY.removeprefix("Safety: ")
    caution = (f'<div class="caution"><h2>Safety</h2><p>{_e(safety[:1].upper() + safety[1:])}</p>'
               f"<p>{_e(MODEL_ONLY)}</p><p>{_e(note)}</p></div>")
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        '<link rel="icon" href="data:,">'
        f"<title>{_e(title)}</title><style>{STYLE}</style></head><body><main>"
        f'<header class="page"><h1>{_e(title)}</h1><p>{_e(subtitle)} &middot; brace {_e(__version__)}</p></header>'
        + "".join(sections) + caution + "</main></body></html>\n"
    )
