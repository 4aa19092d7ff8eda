"""The summary page of a bulk job (``summary/index.html``): offline, charts drawn as inline SVG.

One file with inline CSS and SVG, no script, font, image or link to fetch. The charts are
drawn here (a few rectangles and labels each; a plotting library would add nothing but weight)
and read without colour: patterns are told apart by fill texture and named in a legend in
stack order, every bar carries its number, and a table with the same numbers follows each
chart. Every text is escaped. No patient reference appears: only counts by month and place.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from html import escape

from service.assess.result import CAUTION

from .rows import GRADE_COLUMNS
from .summary import Tally

PATTERNS = ("no-hypoxaemia", "single", "mixed", "indeterminate", "not-classifiable")
MECHANISM_NAMES = {
    "low-inspired-oxygen": "Low inspired O2",
    "hypoventilation": "Hypoventilation",
    "diffusion-limitation": "Diffusion",
    "vq-mismatch": "V/Q mismatch",
    "shunt": "Shunt",
}
# Fill textures, one per pattern, distinguishable in grey: (id, SVG pattern body).
_TEXTURES = (
    ("tx-blank", '<rect width="8" height="8" fill="#ffffff"/>'),
    ("tx-solid", '<rect width="8" height="8" fill="#33414c"/>'),
    (
        "tx-diagonal",
        '<rect width="8" height="8" fill="#ffffff"/>'
        '<path d="M-2,2 l4,-4 M0,8 l8,-8 M6,10 l4,-4" stroke="#33414c" stroke-width="2"/>',
    ),
    (
        "tx-dots",
        '<rect width="8" height="8" fill="#ffffff"/><circle cx="4" cy="4" r="1.6" fill="#33414c"/>',
    ),
    (
        "tx-cross",
        '<rect width="8" height="8" fill="#c9d0d6"/>'
        '<path d="M0,0 l8,8 M8,0 l-8,8" stroke="#33414c" stroke-width="1.2"/>',
    ),
)
CSS = """
:root { --ink: #1f2a33; --muted: #5a6670; --rule: #d5dadf; --paper: #fbfaf7; }
body { margin: 0; background: var(--paper); color: var(--ink);
  font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif; }
header, main { max-width: 1080px; margin: 0 auto; padding: 0 1.2rem; }
h1 { font-size: 1.5rem; margin: 1.2rem 0 .4rem; }
h2 { font-size: 1.2rem; margin: 1.6rem 0 .4rem; }
.caution { border: 2px solid var(--ink); background: #fff; padding: .55rem .8rem; }
dl { display: grid; grid-template-columns: max-content 1fr; gap: .15rem 1rem; }
dt { color: var(--muted); } dd { margin: 0; }
table { border-collapse: collapse; margin: .4rem 0 1rem; background: #fff; }
th, td { border: 1px solid var(--rule); padding: .25rem .5rem; text-align: left; }
th { background: #eef1f3; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
figure { margin: .4rem 0; } figure svg { display: block; width: 100%; max-width: 860px;
  height: auto; } figcaption { color: var(--muted); font-size: .9rem; }
code { font-family: ui-monospace, "DejaVu Sans Mono", monospace; font-size: .88em; }
"""
_W = 860


def summary_page(tally: Tally, names: Mapping[str, str], run: Mapping[str, object]) -> str:
    """The whole page."""
    errors = run.get("errors") or {}
    assert isinstance(errors, Mapping)
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        "<title>oxyrule bulk summary</title>",
        f"<style>{CSS}</style></head><body>",
        "<header><h1>Bulk assessment summary</h1>",
        f'<p class="caution"><strong>Caution.</strong> {escape(CAUTION)}</p>',
        _facts(run, tally),
        "</header><main>",
        _months_section(tally),
        _locations_section(tally, names),
        _findings_section(tally),
        _errors_section(errors),
        "</main></body></html>",
    ]
    return "\n".join(parts) + "\n"


def _facts(run: Mapping[str, object], tally: Tally) -> str:
    items = [
        ("gases assessed", f"{tally.gases:,}"),
        ("patients", f"{tally.patients:,}"),
        ("engine", f"{run.get('engine')} ({run.get('workers')} workers)"),
        ("time", f"{run.get('seconds')} s, started {run.get('started')}"),
        ("rule set", f"{run.get('ruleset')}"),
        ("rule-set hash", f"{run.get('ruleset_hash')}"),
        ("settings hash", f"{run.get('settings_hash')}"),
        ("pseudonymised", "yes" if run.get("pseudonymised") else "no"),
        ("oxyrule", f"{run.get('oxyrule')}"),
    ]
    rows = "".join(f"<dt>{escape(k)}</dt><dd>{escape(v)}</dd>" for k, v in items)
    return f"<dl>{rows}</dl>"


def _counts(tally: Tally, table: str) -> dict[tuple[str, str, str, str], int]:
    out: dict[tuple[str, str, str, str], int] = {}
    for (name, month, location, key, value), n in tally.counts.items():
        if name == table:
            k = (month, location, key, value)
            out[k] = out.get(k, 0) + n
    return out


def _defs() -> str:
    bodies = "".join(
        f'<pattern id="{tid}" width="8" height="8" patternUnits="userSpaceOnUse">{body}</pattern>'
        for tid, body in _TEXTURES
    )
    return f"<defs>{bodies}</defs>"


def _months_section(tally: Tally) -> str:
    by_month: dict[str, dict[str, int]] = {}
    for (month, _, _, pattern), n in _counts(tally, "patterns").items():
        cell = by_month.setdefault(month, {})
        cell[pattern] = cell.get(pattern, 0) + n
    months = sorted(by_month)
    title = "<h2>Gases by month and pattern</h2>"
    if not months:
        return title + "<p>No gas was assessed.</p>"
    svg = _stacked_months(months, by_month)
    head = "".join(f"<th>{escape(p)}</th>" for p in PATTERNS)
    body = "".join(
        f"<tr><td>{escape(m)}</td>"
        + "".join(f'<td class="num">{by_month[m].get(p, 0):,}</td>' for p in PATTERNS)
        + f'<td class="num">{sum(by_month[m].values()):,}</td></tr>'
        for m in months
    )
    caption = (
        "Each bar is one calendar month (UTC) of gas sampling times; its segments are the "
        "patterns, stacked in the legend's order from the bottom, each with its count."
    )
    return (
        f"{title}<figure>{svg}<figcaption>{caption}</figcaption></figure>"
        f"<table><tr><th>month</th>{head}<th>all</th></tr>{body}</table>"
    )


def _stacked_months(months: Sequence[str], by_month: Mapping[str, Mapping[str, int]]) -> str:
    left, top, plot_h, legend_h = 48, 12, 240, 34
    n = len(months)
    slot = (_W - left - 10) / n
    bar = max(4.0, min(44.0, slot * 0.7))
    peak = max(sum(c.values()) for c in by_month.values()) or 1
    height = top + plot_h + 60 + legend_h
    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {_W} {height}" role="img" '
        'aria-label="gases by month, stacked by pattern">',
        _defs(),
        f'<line x1="{left}" y1="{top + plot_h}" x2="{_W - 10}" y2="{top + plot_h}" '
        'stroke="#1f2a33"/>',
    ]
    for tick in (0, peak // 2, peak):
        y = top + plot_h - plot_h * tick / peak
        out.append(
            f'<text x="{left - 6}" y="{y + 4:.1f}" font-size="11" text-anchor="end">{tick:,}</text>'
            f'<line x1="{left - 3}" y1="{y:.1f}" x2="{left}" y2="{y:.1f}" stroke="#1f2a33"/>'
        )
    label_every = max(1, math.ceil(n / 24))
    for i, month in enumerate(months):
        x = left + slot * i + (slot - bar) / 2
        y = top + plot_h
        for (tid, _), pattern in zip(_TEXTURES, PATTERNS, strict=True):
            count = by_month[month].get(pattern, 0)
            if not count:
                continue
            h = plot_h * count / peak
            y -= h
            out.append(
                f'<rect x="{x:.1f}" y="{y:.1f}" width="{bar:.1f}" height="{h:.1f}" '
                f'fill="url(#{tid})" stroke="#1f2a33" stroke-width="0.8">'
                f"<title>{escape(month)} {escape(pattern)}: {count:,}</title></rect>"
            )
            if h >= 13 and bar >= 22:
                out.append(_label(x + bar / 2, y + h / 2 + 4, f"{count:,}", tid))
        total = sum(by_month[month].values())
        out.append(
            f'<text x="{x + bar / 2:.1f}" y="{y - 3:.1f}" font-size="10" '
            f'text-anchor="middle">{total:,}</text>'
        )
        if i % label_every == 0:
            ly = top + plot_h + 14
            out.append(
                f'<text x="{x + bar / 2:.1f}" y="{ly}" font-size="10" text-anchor="end" '
                f'transform="rotate(-40 {x + bar / 2:.1f} {ly})">{escape(month)}</text>'
            )
    lx, ly = left, top + plot_h + 60
    for (tid, _), pattern in zip(_TEXTURES, PATTERNS, strict=True):
        out.append(
            f'<rect x="{lx}" y="{ly}" width="16" height="14" fill="url(#{tid})" '
            'stroke="#1f2a33" stroke-width="0.8"/>'
            f'<text x="{lx + 21}" y="{ly + 11}" font-size="12">{escape(pattern)}</text>'
        )
        lx += 40 + 7 * len(pattern)
    out.append("</svg>")
    return "".join(out)


def _label(x: float, y: float, text: str, texture: str) -> str:
    """A number on a bar segment, with a white halo so it reads on any texture."""
    return (
        f'<text x="{x:.1f}" y="{y:.1f}" font-size="10" text-anchor="middle" '
        f'stroke="#ffffff" stroke-width="3" paint-order="stroke" data-on="{texture}">'
        f"{escape(text)}</text>"
    )


def _location_label(location: str, names: Mapping[str, str]) -> str:
    if not location:
        return "(no location)"
    name = names.get(location)
    return f"{name} ({location})" if name else location


def _locations_section(tally: Tally, names: Mapping[str, str]) -> str:
    gases: dict[str, int] = {}
    for (_, location, _, _), n in _counts(tally, "gases").items():
        gases[location] = gases.get(location, 0) + n
    likely: dict[tuple[str, str], int] = {}
    for (_, location, mechanism, grade), n in _counts(tally, "grades").items():
        if grade == "likely":
            likely[location, mechanism] = likely.get((location, mechanism), 0) + n
    title = "<h2>Mechanisms graded likely, by location</h2>"
    if not gases:
        return title + "<p>No gas was assessed.</p>"
    places = sorted(gases, key=lambda loc: (-gases[loc], loc))
    mechanisms = list(GRADE_COLUMNS)
    svg = _likely_matrix(places, mechanisms, gases, likely, names)
    head = "".join(f"<th>{escape(MECHANISM_NAMES[m])}</th>" for m in mechanisms)
    body = "".join(
        f"<tr><td>{escape(_location_label(p, names))}</td><td class='num'>{gases[p]:,}</td>"
        + "".join(
            f'<td class="num">{likely.get((p, m), 0):,} '
            f"({_share(likely.get((p, m), 0), gases[p])})</td>"
            for m in mechanisms
        )
        + "</tr>"
        for p in places
    )
    caption = (
        "For each location (rows) and mechanism (columns): the share of its gases where the "
        "mechanism was graded likely, as the bar's length and the number beside it; the table "
        "below gives the counts."
    )
    return (
        f"{title}<figure>{svg}<figcaption>{caption}</figcaption></figure>"
        f"<table><tr><th>location</th><th>gases</th>{head}</tr>{body}</table>"
    )


def _share(part: int, whole: int) -> str:
    return f"{100 * part / whole:.0f} %" if whole else "–"


def _likely_matrix(
    places: Sequence[str],
    mechanisms: Sequence[str],
    gases: Mapping[str, int],
    likely: Mapping[tuple[str, str], int],
    names: Mapping[str, str],
) -> str:
    label_w, row_h, top = 230, 26, 26
    cell_w = (_W - label_w - 10) / len(mechanisms)
    height = top + row_h * len(places) + 6
    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {_W} {height}" role="img" '
        'aria-label="share of gases graded likely, by location and mechanism">',
        _defs(),
    ]
    for j, mechanism in enumerate(mechanisms):
        x = label_w + cell_w * j
        out.append(
            f'<text x="{x + 4:.1f}" y="16" font-size="12" font-weight="600">'
            f"{escape(MECHANISM_NAMES[mechanism])}</text>"
        )
    for i, place in enumerate(places):
        y = top + row_h * i
        text = _location_label(place, names)
        shown = names.get(place) or text
        short = shown if len(shown) <= 34 else shown[:33] + "…"
        out.append(
            f'<text x="4" y="{y + 17}" font-size="12"><title>{escape(text)}</title>'
            f"{escape(short)}</text>"
        )
        for j, mechanism in enumerate(mechanisms):
            x = label_w + cell_w * j
            count = likely.get((place, mechanism), 0)
            share = count / gases[place] if gases[place] else 0.0
            width = (cell_w - 58) * share
            out.append(
                f'<rect x="{x + 2:.1f}" y="{y + 5}" width="{cell_w - 58:.1f}" height="15" '
                'fill="#ffffff" stroke="#8a959e" stroke-width="0.6"/>'
                f'<rect x="{x + 2:.1f}" y="{y + 5}" width="{width:.1f}" height="15" '
                'fill="url(#tx-diagonal)" stroke="#1f2a33" stroke-width="0.8"/>'
                f'<text x="{x + cell_w - 52:.1f}" y="{y + 17}" font-size="11">'
                f"{escape(_share(count, gases[place]))}</text>"
            )
    out.append("</svg>")
    return "".join(out)


def _findings_section(tally: Tally) -> str:
    totals: dict[str, int] = {}
    for (_, _, _, finding), n in _counts(tally, "findings").items():
        totals[finding] = totals.get(finding, 0) + n
    title = "<h2>Findings</h2>"
    if not totals:
        return title + "<p>No finding was raised.</p>"
    ranked = sorted(totals.items(), key=lambda kv: (-kv[1], kv[0]))
    shown = ranked[:15]
    label_w, row_h = 280, 22
    peak = shown[0][1]
    height = row_h * len(shown) + 8
    bars = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {_W} {height}" role="img" '
        'aria-label="gases with each finding">',
        _defs(),
    ]
    for i, (finding, n) in enumerate(shown):
        y = 4 + row_h * i
        width = (_W - label_w - 80) * n / peak
        bars.append(
            f'<text x="{label_w - 6}" y="{y + 14}" font-size="12" text-anchor="end">'
            f"{escape(finding)}</text>"
            f'<rect x="{label_w}" y="{y + 3}" width="{width:.1f}" height="14" '
            'fill="url(#tx-solid)" stroke="#1f2a33" stroke-width="0.6"/>'
            f'<text x="{label_w + width + 5:.1f}" y="{y + 14}" font-size="11">{n:,}</text>'
        )
    bars.append("</svg>")
    rows = "".join(
        f'<tr><td><code>{escape(f)}</code></td><td class="num">{n:,}</td></tr>' for f, n in ranked
    )
    caption = "Gases whose assessment raised each finding (the 15 most frequent drawn)."
    return (
        f"{title}<figure>{''.join(bars)}<figcaption>{caption}</figcaption></figure>"
        f"<table><tr><th>finding</th><th>gases</th></tr>{rows}</table>"
    )


def _errors_section(errors: Mapping[object, object]) -> str:
    title = "<h2>Data the job could not use</h2>"
    if not errors:
        return title + "<p>None: every line was read.</p>"
    rows = "".join(
        f'<tr><td><code>{escape(str(code))}</code></td><td class="num">{n:,}</td></tr>'
        for code, n in sorted(errors.items(), key=lambda kv: str(kv[0]))
    )
    note = "<p>Each is a row of <code>errors/</code> with its file, line and the problem.</p>"
    return f"{title}{note}<table><tr><th>code</th><th>rows</th></tr>{rows}</table>"
