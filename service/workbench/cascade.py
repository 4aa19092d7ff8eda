"""The oxygen cascade of one gas against the normal cascade for the same age, altitude and FiO2.

Pure: numbers in, an SVG string out. The stages are inspired → alveolar → arterial (→ mixed
venous when it was measured); the normal values come from ``service.physiology.cascade``
(same PB, FiO2 and PH2O, PaCO2 40). The gap between the patient's line and the normal line at
each stage shows where the oxygen is lost; its growth from one stage to the next, at which step.

Drawn by hand, as the deficit waterfall beside it (``waterfall``): a few lines, marks and
labels, so a plotting library would add a large dependency to the service for nothing a
reader sees; hand-written SVG keeps every label as text, is a few kB and reproducible.
Readable without colour: the patient is a solid line with filled circles, the normal a dashed
line with open squares, the gap a hatched band with its signed size written on it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from html import escape

from service.physiology import constants as c
from service.physiology.cascade import NormalCascade, normal_cascade

__all__ = [
    "Cascade",
    "CascadeInput",
    "Stage",
    "build_cascade",
    "cascade_svg",
    "describe",
    "signed",
]

# The sea-level room-air reference is drawn when the inspired PO2 is this far below it.
LOW_INSPIRED_MARGIN_MMHG = 5.0
# Gaps smaller than this are not annotated (the inspired gap is zero by construction).
SMALLEST_GAP_MMHG = 0.5

PATIENT_INK = "#7a2431"  # the patient: solid line, filled circles
NORMAL_INK = "#3d6478"  # the normal cascade: dashed line, open squares
REFERENCE_INK = "#555555"  # the sea-level room-air reference: dotted
GAP_INK, GAP_PAPER = "#8a6a22", "#f3e6c4"  # the hatched band between the lines
INK, MUTED, GRID = "#1f2a33", "#444444", "#e3e6e9"
WIDTH, HEIGHT = 740, 330
LEFT, RIGHT, TOP, BOTTOM = 56, 14, 44, 52
HEADROOM = 1.12
TARGET_TICKS = 5


@dataclass(frozen=True, slots=True)
class CascadeInput:
    """The numbers of one gas (mm[Hg], FiO2 as a fraction, age in years); None when unknown."""

    fio2: float | None
    barometric_mmhg: float | None
    water_vapour_mmhg: float = c.WATER_VAPOUR_TEXTBOOK_MMHG
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT
    age_years: float | None = None
    inspired_po2: float | None = None
    alveolar_po2: float | None = None
    arterial_po2: float | None = None
    arterial_pco2: float | None = None
    mixed_venous_po2: float | None = None
    sea_level_inspired_po2: float | None = None


@dataclass(frozen=True, slots=True)
class Stage:
    """One step of the cascade: the patient's PO2 and the normal PO2, or why either is absent."""

    key: str
    label: str
    symbol: str
    patient: float | None
    normal: float | None
    patient_missing: str | None = None
    normal_missing: str | None = None

    @property
    def difference(self) -> float | None:
        """Patient − normal (negative: oxygen lost against the normal cascade)."""
        if self.patient is None or self.normal is None:
            return None
        return self.patient - self.normal


@dataclass(frozen=True, slots=True)
class Cascade:
    """The stages to draw, the notes of the caption and the conditions of the normal line."""

    stages: tuple[Stage, ...]
    notes: tuple[str, ...]
    conditions: str
    sea_level_inspired_po2: float | None = None

    @property
    def drawable(self) -> bool:
        """Whether any stage has a number to draw."""
        return any(s.patient is not None or s.normal is not None for s in self.stages)


def _patient_missing(inp: CascadeInput) -> dict[str, str]:
    why: dict[str, str] = {}
    if inp.inspired_po2 is None:
        why["inspired"] = "FiO2 not known" if inp.fio2 is None else "not computed"
    if inp.alveolar_po2 is None:
        if inp.fio2 is None:
            why["alveolar"] = "FiO2 not known"
        elif inp.arterial_pco2 is None:
            why["alveolar"] = "no PaCO2, so no alveolar gas equation"
        else:
            why["alveolar"] = "not computed"
    if inp.arterial_po2 is None:
        why["arterial"] = "no arterial PO2 measured"
    return why


def _fmt(value: float) -> str:
    return f"{value:.1f}"


def build_cascade(inp: CascadeInput) -> Cascade:
    """The patient's stages beside the normal ones, with the caption notes."""
    normal: NormalCascade = normal_cascade(
        fio2=inp.fio2,
        barometric_mmhg=inp.barometric_mmhg,
        age_years=inp.age_years,
        water_vapour_mmhg=inp.water_vapour_mmhg,
        respiratory_quotient=inp.respiratory_quotient,
    )
    why = _patient_missing(inp)
    stages = [
        Stage(
            "inspired",
            "Inspired",
            "PIO₂",
            inp.inspired_po2,
            normal.inspired_mmhg,
            why.get("inspired"),
            normal.missing.get("inspired"),
        ),
        Stage(
            "alveolar",
            "Alveolar",
            "PAO₂",
            inp.alveolar_po2,
            normal.alveolar_mmhg,
            why.get("alveolar"),
            normal.missing.get("alveolar"),
        ),
        Stage(
            "arterial",
            "Arterial",
            "PaO₂",
            inp.arterial_po2,
            normal.arterial_mmhg,
            why.get("arterial"),
            normal.missing.get("arterial"),
        ),
    ]
    notes: list[str] = []
    if inp.mixed_venous_po2 is not None:
        stages.append(
            Stage(
                "mixed-venous",
                "Mixed venous",
                "PvO₂",
                inp.mixed_venous_po2,
                normal.mixed_venous_mmhg,
            )
        )
        notes.append(
            f"Normal mixed-venous PO2 taken as about {c.NORMAL_MIXED_VENOUS_PO2_MMHG:g} mmHg "
            "(common practice)."
        )
    else:
        notes.append("Mixed-venous PO2 not measured: that stage is not drawn.")
    for stage in stages:
        if stage.patient_missing:
            notes.append(f"{stage.label}: no patient value ({stage.patient_missing}).")
        if stage.normal_missing:
            notes.append(f"{stage.label}: no normal value ({stage.normal_missing}).")
    return Cascade(tuple(stages), tuple(notes), _conditions(inp, normal), _reference(inp))


def _conditions(inp: CascadeInput, normal: NormalCascade) -> str:
    parts = []
    if inp.age_years is not None:
        parts.append(f"age {inp.age_years:g}")
    if inp.barometric_mmhg is not None:
        parts.append(f"PB {inp.barometric_mmhg:.0f} mmHg")
    if inp.fio2 is not None:
        parts.append(f"FiO2 {inp.fio2:.2f}")
    parts.append(f"PaCO2 {c.NORMAL_PACO2_MMHG:g} mmHg")
    parts.append(f"PH2O {_fmt(inp.water_vapour_mmhg)} mmHg")
    parts.append(f"R {inp.respiratory_quotient:g}")
    if normal.aa_limit_mmhg is not None:
        parts.append(f"A-a for age {_fmt(normal.aa_limit_mmhg)} mmHg")
    return ", ".join(parts)


def _reference(inp: CascadeInput) -> float | None:
    ref, pio2 = inp.sea_level_inspired_po2, inp.inspired_po2
    if ref is not None and pio2 is not None and pio2 < ref - LOW_INSPIRED_MARGIN_MMHG:
        return ref
    return None


def describe(cascade: Cascade) -> str:
    """A plain-text description of the chart (its SVG ``<desc>`` and the alt text)."""
    parts = []
    for s in cascade.stages:
        patient = f"{_fmt(s.patient)}" if s.patient is not None else "not available"
        normal = f"{_fmt(s.normal)}" if s.normal is not None else "not available"
        text = f"{s.label} PO2: patient {patient}, normal {normal}"
        if s.difference is not None:
            text += f", difference {signed(s.difference)}"
        parts.append(text + " mmHg")
    return "; ".join(parts) + f". Normal cascade for {cascade.conditions}."


def signed(value: float) -> str:
    """``+1.2`` / ``−3.4`` (a true minus sign), ``0.0`` when it rounds to zero."""
    text = f"{value:+.1f}"
    return "0.0" if text in ("+0.0", "-0.0") else text.replace("-", "−")


def _ticks(high: float) -> list[float]:
    """Round tick values (1, 2 or 5 × 10^k apart) from 0 to ``high``."""
    raw = max(high, 1.0) / TARGET_TICKS
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1.0, 2.0, 5.0, 10.0) if m * power >= raw)
    return [i * step for i in range(int(high / step) + 1)]


def _wrap(text: str, width: int = 24) -> list[str]:
    lines: list[str] = []
    for word in text.split():
        if lines and len(lines[-1]) + 1 + len(word) <= width:
            lines[-1] += " " + word
        else:
            lines.append(word)
    return lines


def _text(x: float, y: float, words: str, **attributes: str) -> str:
    extra = "".join(f' {k.replace("_", "-")}="{v}"' for k, v in attributes.items())
    return f'<text x="{x:.1f}" y="{y:.1f}"{extra}>{escape(words)}</text>'


def _steps(values: list[float | None], x: list[float], y: object) -> str:
    """A step line's path: a plateau over each known stage, neighbours joined vertically."""
    assert callable(y)
    path: list[str] = []
    previous: float | None = None
    for i, v in enumerate(values):
        if v is None:
            previous = None
            continue
        start, end = x[i], x[i + 1]
        path.append(f"{'L' if previous is not None else 'M'}{start:.1f},{y(v):.1f}")
        path.append(f"L{end:.1f},{y(v):.1f}")
        previous = v
    return " ".join(path)


def _defs(prefix: str) -> str:
    return (
        "<defs>"
        f'<pattern id="{prefix}-gap" width="6" height="6" patternUnits="userSpaceOnUse" '
        'patternTransform="rotate(45)">'
        f'<rect width="6" height="6" fill="{GAP_PAPER}"/>'
        f'<line x1="0" y1="0" x2="0" y2="6" stroke="{GAP_INK}" stroke-width="1.6"/>'
        "</pattern></defs>"
    )


def _legend(prefix: str, *, reference: bool) -> str:
    y = 16
    items = [
        f'<line x1="{LEFT}" x2="{LEFT + 26}" y1="{y}" y2="{y}" stroke="{PATIENT_INK}" '
        'stroke-width="2.6"/>'
        f'<circle cx="{LEFT + 13}" cy="{y}" r="3.6" fill="{PATIENT_INK}"/>'
        + _text(LEFT + 32, y + 4, "this patient"),
        f'<line x1="{LEFT + 130}" x2="{LEFT + 156}" y1="{y}" y2="{y}" stroke="{NORMAL_INK}" '
        'stroke-width="1.8" stroke-dasharray="5 3"/>'
        f'<rect x="{LEFT + 139.5}" y="{y - 3.5}" width="7" height="7" fill="white" '
        f'stroke="{NORMAL_INK}" stroke-width="1.4"/>'
        + _text(LEFT + 162, y + 4, "normal: same age, PB, FiO₂"),
        f'<rect x="{LEFT + 352}" y="{y - 6}" width="18" height="12" fill="url(#{prefix}-gap)" '
        f'stroke="{GAP_INK}" stroke-width="0.8"/>'
        + _text(LEFT + 376, y + 4, "gap: patient − normal"),
    ]
    if reference:
        items.append(
            f'<line x1="{LEFT + 530}" x2="{LEFT + 556}" y1="{y}" y2="{y}" '
            f'stroke="{REFERENCE_INK}" stroke-width="1.3" stroke-dasharray="1.5 2.5"/>'
            + _text(LEFT + 562, y + 4, "sea-level room air")
        )
    return f'<g class="legend" font-size="11" fill="{INK}">' + "".join(items) + "</g>"


def _stage_marks(s: Stage, centre: float, y: object, top_value: float) -> list[str]:
    assert callable(y)
    out: list[str] = []
    if s.normal is not None:
        out.append(
            f'<rect x="{centre - 4.5:.1f}" y="{y(s.normal) - 4.5:.1f}" width="9" height="9" '
            f'fill="white" stroke="{NORMAL_INK}" stroke-width="1.6"/>'
        )
    if s.patient is not None:
        out.append(
            f'<circle cx="{centre:.1f}" cy="{y(s.patient):.1f}" r="4.5" fill="{PATIENT_INK}"/>'
        )
    above = s.normal is None or (s.patient is not None and s.patient >= s.normal)
    if s.patient is not None:
        dy = -7 if above else 15
        out.append(
            _text(
                centre - 8,
                y(s.patient) + dy,
                _fmt(s.patient),
                text_anchor="end",
                font_weight="bold",
                fill=PATIENT_INK,
            )
        )
    if s.normal is not None:
        dy = 15 if above else -7
        out.append(
            _text(centre - 8, y(s.normal) + dy, _fmt(s.normal), text_anchor="end", fill=NORMAL_INK)
        )
    if s.normal is None and s.patient is not None:
        out.append(
            _text(
                centre,
                y(top_value * 0.03),
                "no normal value (see caption)",
                text_anchor="middle",
                font_style="italic",
                fill=MUTED,
            )
        )
    if s.patient is None:
        low = s.normal is not None and s.normal > top_value * 0.5
        base = y(top_value * (0.25 if low else 0.72))
        lines = ["patient value", "not available:", *_wrap(s.patient_missing or "not available")]
        for n, line in enumerate(lines):
            out.append(
                _text(
                    centre,
                    base + (n - len(lines) / 2) * 13 + 10,
                    line,
                    text_anchor="middle",
                    font_style="italic",
                    fill=MUTED,
                )
            )
    return out


def _gap(s: Stage, left: float, right: float, y: object, prefix: str) -> list[str]:
    """The hatched band between the lines over one stage and its signed size, as text."""
    assert callable(y) and s.patient is not None and s.normal is not None
    low, high = sorted((s.patient, s.normal))
    top, bottom = y(high), y(low)
    x = right - 52  # the signed size sits in the band's right part, inside the stage
    out = [
        f'<rect class="gap" x="{left:.1f}" y="{top:.1f}" width="{right - left:.1f}" '
        f'height="{max(bottom - top, 0.8):.1f}" fill="url(#{prefix}-gap)" stroke="none"/>'
    ]
    label_y = (top + bottom) / 2 + 4 if bottom - top > 18 else bottom + 13
    if bottom - top > 18:
        out.append(
            f'<line x1="{x:.1f}" x2="{x:.1f}" y1="{top + 2:.1f}" y2="{bottom - 2:.1f}" '
            f'stroke="{INK}" stroke-width="0.9"/>'
        )
    out.append(
        f'<rect x="{x + 3:.1f}" y="{label_y - 11:.1f}" width="38" height="14" fill="white"/>'
        + _text(x + 5, label_y, signed(s.patient - s.normal), font_weight="bold", fill=INK)
    )
    return out


def cascade_svg(cascade: Cascade, *, title: str, chart_id: str) -> str:
    """The chart as an inline ``<svg>`` element (no XML prolog) with ``<title>`` and ``<desc>``.

    ``chart_id`` prefixes every id in the SVG so several charts can share one HTML page.
    """
    stages = cascade.stages
    n = max(len(stages), 1)
    known = [v for s in stages for v in (s.patient, s.normal) if v is not None]
    if cascade.sea_level_inspired_po2 is not None:
        known.append(cascade.sea_level_inspired_po2)
    top_value = max(known, default=100.0) * HEADROOM
    plot_w, plot_h = WIDTH - LEFT - RIGHT, HEIGHT - TOP - BOTTOM

    def y(value: float) -> float:
        return TOP + (top_value - value) / top_value * plot_h

    x = [LEFT + i * plot_w / n for i in range(n + 1)]
    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {WIDTH} {HEIGHT}" role="img" '
        f'aria-labelledby="{chart_id}-title {chart_id}-desc" class="cascade-chart" '
        'font-family="DejaVu Sans, Liberation Sans, Arial, sans-serif" font-size="12">',
        f'<title id="{chart_id}-title">{escape(title)}</title>',
        f'<desc id="{chart_id}-desc">{escape(describe(cascade))}</desc>',
        _defs(chart_id),
        _legend(chart_id, reference=cascade.sea_level_inspired_po2 is not None),
    ]
    for tick in _ticks(top_value / HEADROOM * 1.05):
        out.append(
            f'<line x1="{LEFT}" x2="{WIDTH - RIGHT}" y1="{y(tick):.1f}" y2="{y(tick):.1f}" '
            f'stroke="{GRID}"/>'
            + _text(LEFT - 6, y(tick) + 4, f"{tick:g}", text_anchor="end", fill=MUTED)
        )
    middle = TOP + plot_h / 2
    out.append(
        _text(
            14,
            middle,
            "PO₂ (mmHg)",
            text_anchor="middle",
            fill=MUTED,
            transform=f"rotate(-90 14 {middle:.1f})",
        )
    )
    for i, s in enumerate(stages):
        centre = (x[i] + x[i + 1]) / 2
        if i:
            out.append(
                f'<line x1="{x[i]:.1f}" x2="{x[i]:.1f}" y1="{TOP}" y2="{TOP + plot_h}" '
                f'stroke="{GRID}"/>'
            )
        out.append(_text(centre, HEIGHT - BOTTOM + 18, s.label, text_anchor="middle", fill=INK))
        out.append(_text(centre, HEIGHT - BOTTOM + 33, s.symbol, text_anchor="middle", fill=MUTED))
        gap = s.difference
        if gap is not None and abs(gap) >= SMALLEST_GAP_MMHG:
            out += _gap(s, x[i], x[i + 1], y, chart_id)
    out.append(
        f'<path class="normal-line" d="{_steps([s.normal for s in stages], x, y)}" fill="none" '
        f'stroke="{NORMAL_INK}" stroke-width="1.8" stroke-dasharray="5 3"/>'
    )
    out.append(
        f'<path class="patient-line" d="{_steps([s.patient for s in stages], x, y)}" '
        f'fill="none" stroke="{PATIENT_INK}" stroke-width="2.6"/>'
    )
    for i, s in enumerate(stages):
        out += _stage_marks(s, (x[i] + x[i + 1]) / 2, y, top_value)
    ref = cascade.sea_level_inspired_po2
    if ref is not None and stages:
        out.append(
            f'<line x1="{x[0] + 6:.1f}" x2="{x[1] - 6:.1f}" y1="{y(ref):.1f}" y2="{y(ref):.1f}" '
            f'stroke="{REFERENCE_INK}" stroke-width="1.3" stroke-dasharray="1.5 2.5"/>'
            + _text(
                (x[0] + x[1]) / 2,
                y(ref) - 4,
                f"sea-level room air {_fmt(ref)}",
                text_anchor="middle",
                font_size="10.5",
                fill=MUTED,
            )
        )
    out.append(
        f'<line x1="{LEFT}" x2="{WIDTH - RIGHT}" y1="{y(0):.1f}" y2="{y(0):.1f}" stroke="{INK}"/>'
        f'<line x1="{LEFT}" x2="{LEFT}" y1="{TOP}" y2="{y(0):.1f}" stroke="{INK}"/>'
    )
    out.append("</svg>")
    return "".join(out) + "\n"
