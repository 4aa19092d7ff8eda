"""The PaO2 deficit partition of one gas as a waterfall chart (inline SVG).

The bars, left to right: the PaO2 expected for age (sea level, air), one step per part of the
fall — down where the part lowers the PaO2, up where it raises it (an oxygen credit, a PaCO2
below the expected value) — and the measured PaO2 at the end. The steps and their levels come
from ``service.physiology.deficit_steps`` through ``service.assess.partition``: this module
only turns levels into coordinates.

Readable without colour: the two end bars are plain and named; a step that lowers the PaO2 is
hatched and labelled "lowers N", one that raises it is dotted and labelled "raises N"; every
bar has its name under it and its number on it.

Drawn by hand rather than with a plotting library (as the oxygen cascade beside it): the chart
is a few rectangles and labels, so hand-written SVG is a few kB instead of tens, keeps every
label as text, needs no layout engine and costs microseconds; the bytes are reproducible.
"""

from __future__ import annotations

import math
from html import escape

from service.assess.partition import PART_LABELS, ShownPartition
from service.physiology.deficit_steps import RESIDUE_MMHG, Step

WIDTH, HEIGHT = 680, 290
LEFT, RIGHT, TOP, BOTTOM = 52, 12, 30, 58
BAR_FRACTION = 0.62  # of a column
HEADROOM = 1.12  # the top of the axis above the highest level
TARGET_TICKS = 5
END_FILL = "#d8dde2"  # the expected and measured bars: plain, named
LOWER_INK, LOWER_PAPER = "#8a3b12", "#f6e3d3"  # hatched: lowers the PaO2
RAISE_INK, RAISE_PAPER = "#1f5a7a", "#dcebf3"  # dotted: raises it
INK = "#1f2a33"
END_LABELS = {"expected": "Expected for age", "measured": "Measured PaO2"}


def _number(value: float) -> str:
    text = f"{value:.1f}"
    return "0.0" if text == "-0.0" else text.replace("-", "−")


def _ticks(low: float, high: float) -> list[float]:
    """Round tick values (1, 2 or 5 × 10^k apart) covering [low, high]."""
    span = max(high - low, 1.0)
    raw = span / TARGET_TICKS
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1.0, 2.0, 5.0, 10.0) if m * power >= raw)
    first = math.ceil(low / step) * step
    return [first + i * step for i in range(int((high - first) / step) + 1)]


def _name(step: Step, shown: ShownPartition) -> str:
    if step.key == "measured":
        return "PaO2 imputed" if shown.imputed else END_LABELS["measured"]
    if step.key in END_LABELS:
        return END_LABELS[step.key]
    label = PART_LABELS[step.key]
    return label[0].upper() + label[1:]


def _words(step: Step) -> str:
    """The words on a bar: its level for the end bars, what the part does for a step."""
    if step.part_mmhg is None:
        return _number(step.end_mmhg)
    if abs(step.part_mmhg) < RESIDUE_MMHG:
        return "no change"
    verb = "lowers" if step.lowers else "raises"
    return f"{verb} {_number(abs(step.part_mmhg))}"


def describe(shown: ShownPartition) -> str:
    """The chart in words (its ``<desc>``)."""
    d = shown.partition
    parts = "; ".join(
        f"{PART_LABELS[s.key]} {_words(s)} mmHg" for s in shown.steps if s.part_mmhg is not None
    )
    assumed = f" ({shown.assumption})" if shown.assumption else ""
    return (
        f"PaO2 expected for age at sea level on air {_number(d.expected_pao2)} mmHg; {parts}; "
        f"{shown.pao2_label} {_number(d.arterial_po2)} mmHg, a fall of {_number(d.fall)} "
        f"mmHg{assumed}."
    )


def _defs(prefix: str) -> str:
    return (
        "<defs>"
        f'<pattern id="{prefix}-lowers" width="7" height="7" patternUnits="userSpaceOnUse" '
        'patternTransform="rotate(45)">'
        f'<rect width="7" height="7" fill="{LOWER_PAPER}"/>'
        f'<line x1="0" y1="0" x2="0" y2="7" stroke="{LOWER_INK}" stroke-width="2.4"/>'
        "</pattern>"
        f'<pattern id="{prefix}-raises" width="7" height="7" patternUnits="userSpaceOnUse">'
        f'<rect width="7" height="7" fill="{RAISE_PAPER}"/>'
        f'<circle cx="3.5" cy="3.5" r="1.5" fill="{RAISE_INK}"/>'
        "</pattern>"
        "</defs>"
    )


def waterfall_svg(shown: ShownPartition, *, title: str, chart_id: str) -> str:
    """The chart as an inline ``<svg>`` element with ``<title>`` and ``<desc>``; ``chart_id``
    prefixes its ids so several charts can share a page."""
    steps = shown.steps
    levels = [v for s in steps for v in (s.start_mmhg, s.end_mmhg)]
    low, high = min(0.0, *levels), max(levels) * HEADROOM
    plot_h, plot_w = HEIGHT - TOP - BOTTOM, WIDTH - LEFT - RIGHT

    def y(value: float) -> float:
        return TOP + (high - value) / (high - low) * plot_h

    column = plot_w / len(steps)
    bar = column * BAR_FRACTION
    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {WIDTH} {HEIGHT}" role="img" '
        f'aria-labelledby="{chart_id}-title {chart_id}-desc" class="deficit-chart" '
        'font-family="DejaVu Sans, Liberation Sans, Arial, sans-serif" font-size="12">',
        f'<title id="{chart_id}-title">{escape(title)}</title>',
        f'<desc id="{chart_id}-desc">{escape(describe(shown))}</desc>',
        _defs(chart_id),
    ]
    for tick in _ticks(low, high / HEADROOM):
        ty = y(tick)
        out.append(
            f'<line x1="{LEFT}" x2="{WIDTH - RIGHT}" y1="{ty:.1f}" y2="{ty:.1f}" '
            'stroke="#e3e6e9" stroke-width="1"/>'
            f'<text x="{LEFT - 6}" y="{ty + 4:.1f}" text-anchor="end" fill="#4a4a4a">'
            f"{_number(tick).removesuffix('.0')}</text>"
        )
    out.append(
        f'<text x="14" y="{TOP + plot_h / 2:.1f}" text-anchor="middle" fill="#4a4a4a" '
        f'transform="rotate(-90 14 {TOP + plot_h / 2:.1f})">PO₂ (mmHg)</text>'
    )
    for i, step in enumerate(steps):
        x = LEFT + i * column + (column - bar) / 2
        top, bottom = max(step.start_mmhg, step.end_mmhg), min(step.start_mmhg, step.end_mmhg)
        height = max(y(bottom) - y(top), 1.0)  # a part of no size still shows as a line
        if step.part_mmhg is None:
            fill = END_FILL
        else:
            fill = f"url(#{chart_id}-{'lowers' if step.lowers else 'raises'})"
        out.append(
            f'<g class="bar bar-{step.key}" data-start="{step.start_mmhg:.3f}" '
            f'data-end="{step.end_mmhg:.3f}">'
            f'<rect x="{x:.1f}" y="{y(top):.1f}" width="{bar:.1f}" height="{height:.1f}" '
            f'fill="{fill}" stroke="{INK}" stroke-width="1"/>'
            f'<text x="{x + bar / 2:.1f}" y="{y(top) - 5:.1f}" text-anchor="middle" '
            f'font-weight="bold" fill="{INK}">{escape(_words(step))}</text>'
            f'<text x="{x + bar / 2:.1f}" y="{HEIGHT - BOTTOM + 18}" text-anchor="middle" '
            f'fill="{INK}">{escape(_name(step, shown))}</text>'
            "</g>"
        )
        if i + 1 < len(steps) and steps[i + 1].part_mmhg is not None:
            level = y(step.end_mmhg)
            out.append(
                f'<line x1="{x + bar:.1f}" x2="{x + column:.1f}" y1="{level:.1f}" '
                f'y2="{level:.1f}" stroke="{INK}" stroke-width="1" stroke-dasharray="3 2"/>'
            )
    baseline = y(0.0)
    out.append(
        f'<line x1="{LEFT}" x2="{WIDTH - RIGHT}" y1="{baseline:.1f}" y2="{baseline:.1f}" '
        f'stroke="{INK}" stroke-width="1"/>'
    )
    key_y = HEIGHT - 12
    out.append(
        f'<rect x="{LEFT}" y="{key_y - 10}" width="14" height="12" '
        f'fill="url(#{chart_id}-lowers)" stroke="{INK}"/>'
        f'<text x="{LEFT + 20}" y="{key_y}">hatched: lowers the PaO2</text>'
        f'<rect x="{LEFT + 210}" y="{key_y - 10}" width="14" height="12" '
        f'fill="url(#{chart_id}-raises)" stroke="{INK}"/>'
        f'<text x="{LEFT + 230}" y="{key_y}">dotted: raises it (oxygen credit, low PaCO2)</text>'
    )
    out.append("</svg>")
    return "".join(out) + "\n"
