"""The response to oxygen as two charts (inline SVG): saturation and PaO2 against FiO2.

Each chart draws, from FiO2 0.21 to 1.0:

* the patient's points — SpO2 as open circles, PaO2 (and, on the saturation chart, the
  saturation the model gives for it) as filled squares, readings the fit left out as crosses;
* the fitted curve — a thick solid line inside its 95 % range (a hatched band);
* the healthy curve — a dashed line: the healthy lung of the patient's age (the same model
  fitted to Cerveri 1995 on air and to healthy men on 100 % oxygen, ``physiology.reference``)
  breathing the same gas at PaCO2 40 mmHg;
* iso-shunt references — thin dotted lines for 10, 20, 30 and 40 % shunt without a V/Q term
  at the patient's Hb, PaCO2 and blood curve (Benatar SR, Hewlett AM & Nunn JF, Br J Anaesth
  1973;45:711), each labelled in words at its end.

Readable without colour: every line differs in stroke (solid, dashed, dotted) and is named in
words, points differ in shape, and a key under the chart says which is which. The numbers are
in the report's tables; ``describe`` puts the chart into words for its ``<desc>``.

Hand-written SVG for the reasons of ``waterfall``: a few lines and marks, text kept as text,
reproducible bytes.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from html import escape

from service.assess.titration import Titration
from service.exceptions import PhysiologyError
from service.physiology import constants as c
from service.physiology.oxygen_affinity import OxygenAffinity
from service.physiology.oxygen_exchange import (
    ExchangeConditions,
    exchange_conditions,
    predict_arterial_oxygen,
    shunt_from_odds,
)
from service.physiology.oxygen_prediction import CAUTION
from service.physiology.reference import healthy_lung
from service.physiology.saturation import saturation_from_po2
from service.physiology.titration import MeasuredKind

WIDTH, HEIGHT = 680, 400
LEFT, RIGHT, TOP, BOTTOM = 56, 80, 20, 96
INK = "#1f2a33"
FIT_INK, BAND_INK = "#7a2431", "#e9c9cf"
HEALTHY_INK, ISO_INK = "#3d6478", "#6b6b6b"
ISO_SHUNTS = (0.10, 0.20, 0.30, 0.40)
FIO2_GRID = (*(round(0.21 + 0.01 * i, 2) for i in range(80)), 1.0)
HEALTHY_PACO2_MMHG = c.NORMAL_PACO2_MMHG
UNKNOWN_AGE_YEARS = 50  # the healthy curve drawn when the age is not known (said so)


@dataclass(frozen=True, slots=True)
class Line:
    """A named curve: (FiO2, value) pairs, in the chart's unit."""

    name: str
    points: tuple[tuple[float, float], ...]


@dataclass(frozen=True, slots=True)
class ChartData:
    """Everything one chart draws, in its unit (saturation %, or PaO2 mm[Hg])."""

    quantity: str  # "saturation" or "pao2"
    fitted: Line | None
    band: tuple[tuple[float, float, float], ...]  # (FiO2, low, high) of the fitted curve
    healthy: Line | None
    iso_shunt: tuple[Line, ...]
    used: tuple[tuple[float, float, str], ...]  # (FiO2, value, kind) of points the fit used
    unused: tuple[tuple[float, float, str], ...]
    notes: tuple[str, ...]


def _curve(
    shunt: float,
    drop: float,
    paco2: float,
    conditions: ExchangeConditions,
    value: Callable[[float, float], float],
    affinity: OxygenAffinity | None = None,
) -> tuple[tuple[float, float], ...]:
    """(FiO2, value(PaO2, SaO2)) over the grid, where the model has a steady state."""
    out: list[tuple[float, float]] = []
    for fio2 in FIO2_GRID:
        try:
            found = predict_arterial_oxygen(
                shunt_fraction=shunt,
                vq_drop_mmhg=drop,
                fio2=fio2,
                paco2_mmhg=paco2,
                conditions=conditions,
                affinity=affinity,
            )
        except PhysiologyError:
            continue
        out.append((fio2, value(found.arterial_po2_mmhg, found.arterial_saturation)))
    return tuple(out)


def _fitted(
    titration: Titration, value: Callable[[float, float], float], saturation: bool
) -> tuple[Line | None, tuple[tuple[float, float, float], ...]]:
    """The fitted curve and its 95 % band (empty without predictions)."""
    response = titration.response
    fit = response.preferred
    if fit is None:
        return None, ()
    name = "fitted" if fit is response.two_parameter else "fitted (effective shunt)"
    line = Line(
        name,
        _curve(
            fit.shunt.value,
            fit.vq_drop_mmhg.value,
            response.prediction_paco2_mmhg,
            response.conditions,
            value,
            response.prediction_affinity,
        ),
    )
    prediction = titration.prediction
    if prediction is None:
        return line, ()
    band = tuple(
        (p.fio2, 100.0 * p.saturation_low, 100.0 * p.saturation_high)
        if saturation
        else (p.fio2, p.pao2_low_mmhg, p.pao2_high_mmhg)
        for p in prediction.curve
    )
    return line, band


def _healthy(
    conditions: ExchangeConditions, age_years: float, value: Callable[[float, float], float]
) -> Line:
    """A healthy lung of this age on the same gas, Hb 14 g/dL, PaCO2 40 mmHg."""
    lung = healthy_lung(round(max(age_years, 18.0)), False, conditions.respiratory_quotient)
    healthy_conditions = exchange_conditions(
        barometric_mmhg=conditions.barometric_mmhg,
        hufner_ml_per_g=conditions.hufner_ml_per_g,
        respiratory_quotient=conditions.respiratory_quotient,
        water_vapour_mmhg=conditions.water_vapour_mmhg,
    )
    shunt = shunt_from_odds(lung.shunt_odds)
    points = _curve(shunt, lung.vq_drop_mmhg, HEALTHY_PACO2_MMHG, healthy_conditions, value)
    return Line(f"healthy {age_years:.0f}-year-old", points)


Marks = tuple[tuple[float, float, str], ...]


def _marks(titration: Titration, saturation: bool) -> tuple[Marks, Marks]:
    """(points the fit used, points it did not or that were left out) as (FiO2, value, kind);
    a gas on the saturation chart at the saturation of standard blood at its PaO2
    (Severinghaus 1979); an SpO2 has no PaO2 to draw on the PaO2 chart."""
    used: list[tuple[float, float, str]] = []
    unused: list[tuple[float, float, str]] = []
    fit = titration.response.preferred
    for p in fit.points if fit is not None else ():
        point = p.point
        if point.kind is not MeasuredKind.PAO2 and not saturation:
            continue
        if point.kind is MeasuredKind.PAO2:
            shown = 100.0 * saturation_from_po2(po2_mmhg=point.value) if saturation else point.value
        else:
            shown = 100.0 * point.value
        (used if p.used else unused).append((point.inspired.fio2, shown, point.kind.value))
    for d in titration.dropped:
        if d.fio2 is None or (d.kind is MeasuredKind.PAO2) == saturation:
            continue
        shown = d.value if d.kind is MeasuredKind.PAO2 else 100.0 * d.value
        unused.append((d.fio2, shown, d.kind.value))
    return tuple(used), tuple(unused)


def chart_data(titration: Titration, *, age_years: float | None, quantity: str) -> ChartData:
    """The lines and points of one chart ("saturation" or "pao2") for ``titration``."""
    saturation = quantity == "saturation"

    def value(pao2: float, sao2: float) -> float:
        return 100.0 * sao2 if saturation else pao2

    response = titration.response
    notes: list[str] = []
    fitted, band = _fitted(titration, value, saturation)
    if age_years is None:
        notes.append(f"age not known: the healthy curve is a {UNKNOWN_AGE_YEARS}-year-old's")
    healthy = _healthy(
        response.conditions,
        float(UNKNOWN_AGE_YEARS) if age_years is None else age_years,
        value,
    )
    paco2 = response.prediction_paco2_mmhg
    curve = response.prediction_affinity  # the blood of the latest point, as the predictions
    iso = tuple(
        Line(f"{s:.0%} shunt", _curve(s, 0.0, paco2, response.conditions, value, curve))
        for s in ISO_SHUNTS
    )
    used, unused = _marks(titration, saturation)
    if saturation and any(kind == MeasuredKind.PAO2.value for _, _, kind in used + unused):
        notes.append("a gas's PaO2 is drawn at the saturation of standard blood at that PaO2")
    return ChartData(quantity, fitted, band, healthy, iso, used, unused, tuple(notes))


def _ticks(low: float, high: float, count: int = 5) -> list[float]:
    span = max(high - low, 1e-9)
    raw = span / count
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1.0, 2.0, 5.0, 10.0) if m * power >= raw)
    first = math.ceil(low / step) * step
    return [first + i * step for i in range(int((high - first) / step + 1e-9) + 1)]


def _range_of(data: ChartData) -> tuple[float, float]:
    if data.quantity == "saturation":
        values = [v for _, v, _ in data.used + data.unused]
        values += [v for line in (data.fitted,) if line for _, v in line.points]
        return max(0.0, min([*values, 100.0]) - 5.0) // 10 * 10, 100.0
    values = [v for _, v, _ in data.used + data.unused]
    if data.fitted is not None:
        values += [v for _, v in data.fitted.points]
    top = max([150.0, *values]) * 1.1
    return 0.0, top


def describe(data: ChartData) -> str:
    """The chart in words."""
    unit = "%" if data.quantity == "saturation" else " mmHg"
    what = "saturation" if data.quantity == "saturation" else "PaO2"
    parts = [f"{what.capitalize()} against FiO2 from 0.21 to 1.0."]
    for kind, points in (("used by the fit", data.used), ("left out", data.unused)):
        if points:
            listed = "; ".join(f"{k} {v:.0f}{unit} on FiO2 {f:.2f}" for f, v, k in points)
            parts.append(f"Points {kind}: {listed}.")
    if data.fitted is not None and data.fitted.points:
        (f0, v0), (f1, v1) = data.fitted.points[0], data.fitted.points[-1]
        parts.append(
            f"The {data.fitted.name} curve runs from {v0:.0f}{unit} on FiO2 {f0:.2f} to "
            f"{v1:.0f}{unit} on {f1:.2f}."
        )
    if data.healthy is not None and data.healthy.points:
        parts.append(
            f"The {data.healthy.name}'s curve reaches {data.healthy.points[0][1]:.0f}{unit} on air."
        )
    parts.append("Dotted iso-shunt lines for " + ", ".join(i.name for i in data.iso_shunt) + ".")
    parts.append(CAUTION)
    return " ".join(parts)


def _path(
    points: Sequence[tuple[float, float]], x: Callable[[float], float], y: Callable[[float], float]
) -> str:
    return " ".join(
        f"{'M' if i == 0 else 'L'}{x(f):.1f},{y(v):.1f}" for i, (f, v) in enumerate(points)
    )


def _marker(kind: str, used: bool, cx: float, cy: float) -> str:
    if not used:
        return (
            f'<path d="M{cx - 5:.1f},{cy - 5:.1f} L{cx + 5:.1f},{cy + 5:.1f} M{cx - 5:.1f},'
            f'{cy + 5:.1f} L{cx + 5:.1f},{cy - 5:.1f}" stroke="{INK}" stroke-width="2"/>'
        )
    if kind == "pao2":
        return (
            f'<rect x="{cx - 4.5:.1f}" y="{cy - 4.5:.1f}" width="9" height="9" fill="{INK}" '
            f'stroke="{INK}"/>'
        )
    return (
        f'<circle cx="{cx:.1f}" cy="{cy:.1f}" r="5" fill="#ffffff" stroke="{INK}" '
        'stroke-width="2"/>'
    )


def _axes(
    data: ChartData,
    low: float,
    high: float,
    x: Callable[[float], float],
    y: Callable[[float], float],
) -> list[str]:
    plot_w, plot_h = WIDTH - LEFT - RIGHT, HEIGHT - TOP - BOTTOM
    label = "Saturation (%)" if data.quantity == "saturation" else "PaO₂ (mmHg)"
    out = []
    for tick in _ticks(low, high):
        ty = y(tick)
        out.append(
            f'<line x1="{LEFT}" x2="{LEFT + plot_w}" y1="{ty:.1f}" y2="{ty:.1f}" '
            'stroke="#e3e6e9"/>'
            f'<text x="{LEFT - 6}" y="{ty + 4:.1f}" text-anchor="end">{tick:.0f}</text>'
        )
    for tick in (0.21, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0):
        tx = x(tick)
        out.append(
            f'<line x1="{tx:.1f}" x2="{tx:.1f}" y1="{TOP + plot_h}" y2="{TOP + plot_h + 4}" '
            f'stroke="{INK}"/>'
            f'<text x="{tx:.1f}" y="{TOP + plot_h + 17}" text-anchor="middle">{tick:g}</text>'
        )
    out.append(
        f'<text x="{LEFT + plot_w / 2:.1f}" y="{TOP + plot_h + 33}" text-anchor="middle">'
        "FiO₂ (fraction of inspired oxygen)</text>"
        f'<text x="14" y="{TOP + plot_h / 2:.1f}" text-anchor="middle" '
        f'transform="rotate(-90 14 {TOP + plot_h / 2:.1f})">{label}</text>'
        f'<rect x="{LEFT}" y="{TOP}" width="{plot_w}" height="{plot_h}" fill="none" '
        f'stroke="{INK}"/>'
    )
    return out


def _lines(
    data: ChartData, chart_id: str, x: Callable[[float], float], y: Callable[[float], float]
) -> list[str]:
    out = [f'<g clip-path="url(#{chart_id}-plot)">']
    if data.band:
        upper = [(f, h) for f, _, h in data.band]
        lower = [(f, lo) for f, lo, _ in reversed(data.band)]
        out.append(
            f'<path class="fit-range" d="{_path(upper + lower, x, y)} Z" '
            f'fill="url(#{chart_id}-band)" stroke="none"/>'
        )
    for line in data.iso_shunt:
        out.append(
            f'<path class="iso-shunt" d="{_path(line.points, x, y)}" fill="none" '
            f'stroke="{ISO_INK}" stroke-width="1.2" stroke-dasharray="1.5 3.5"/>'
        )
    if data.healthy is not None:
        out.append(
            f'<path class="healthy" d="{_path(data.healthy.points, x, y)}" fill="none" '
            f'stroke="{HEALTHY_INK}" stroke-width="2" stroke-dasharray="8 4"/>'
        )
    if data.fitted is not None:
        out.append(
            f'<path class="fitted" d="{_path(data.fitted.points, x, y)}" fill="none" '
            f'stroke="{FIT_INK}" stroke-width="3"/>'
        )
    out.append("</g>")
    return out


def _labels(
    data: ChartData,
    low: float,
    high: float,
    x: Callable[[float], float],
    y: Callable[[float], float],
) -> list[str]:
    """Each iso-shunt line's name in words at its end (at the right edge, or where it leaves
    the plot), moved down so that names do not overlap; the fitted and healthy lines are
    named in the key, where their strokes differ."""
    lines = list(data.iso_shunt)
    out: list[str] = []
    placed: list[float] = []
    for line in lines:
        inside = [(f, v) for f, v in line.points if low <= v <= high]
        if not inside:
            continue
        f_end, v_end = inside[-1]
        at_edge = f_end >= 0.99
        ly = y(v_end) + 4 if at_edge else y(v_end) + 14
        while any(abs(ly - other) < 12 for other in placed):
            ly += 12
        placed.append(ly)
        lx = x(f_end) + 4
        anchor = "start"
        out.append(
            f'<text x="{lx:.1f}" y="{ly:.1f}" text-anchor="{anchor}" fill="{INK}">'
            f"{escape(line.name)}</text>"
        )
    return out


def _key(data: ChartData) -> str:
    key_y = HEIGHT - 14
    fitted = data.fitted.name if data.fitted is not None else "fitted"
    healthy = data.healthy.name if data.healthy is not None else "healthy"
    return (
        f'<line x1="{LEFT}" x2="{LEFT + 22}" y1="{key_y - 4}" y2="{key_y - 4}" '
        f'stroke="{FIT_INK}" stroke-width="3"/>'
        f'<text x="{LEFT + 26}" y="{key_y}">{escape(fitted)} (hatched: 95 % range)</text>'
        f'<line x1="{LEFT + 330}" x2="{LEFT + 352}" y1="{key_y - 4}" y2="{key_y - 4}" '
        f'stroke="{HEALTHY_INK}" stroke-width="2" stroke-dasharray="8 4"/>'
        f'<text x="{LEFT + 356}" y="{key_y}">{escape(healthy)}</text>'
        f'<line x1="{LEFT}" x2="{LEFT + 22}" y1="{key_y - 22}" y2="{key_y - 22}" '
        f'stroke="{ISO_INK}" stroke-width="1.2" stroke-dasharray="1.5 3.5"/>'
        f'<text x="{LEFT + 26}" y="{key_y - 18}">iso-shunt, no V/Q term (named)</text>'
        f"{_marker('spo2', True, LEFT + 262, key_y - 22)}"
        f'<text x="{LEFT + 271}" y="{key_y - 18}">SpO₂</text>'
        f"{_marker('pao2', True, LEFT + 330, key_y - 22)}"
        f'<text x="{LEFT + 339}" y="{key_y - 18}">gas</text>'
        f"{_marker('spo2', False, LEFT + 390, key_y - 22)}"
        f'<text x="{LEFT + 399}" y="{key_y - 18}">left out of the fit</text>'
    )


def response_svg(data: ChartData, *, title: str, chart_id: str) -> str:
    """One chart as an inline ``<svg>`` with ``<title>`` and ``<desc>``; ``chart_id``
    prefixes its ids."""
    low, high = _range_of(data)
    plot_w, plot_h = WIDTH - LEFT - RIGHT, HEIGHT - TOP - BOTTOM

    def x(fio2: float) -> float:
        return LEFT + (fio2 - 0.21) / (1.0 - 0.21) * plot_w

    def y(value: float) -> float:  # beyond the axis: cut off by the plot's clip path
        return TOP + (high - value) / (high - low) * plot_h

    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {WIDTH} {HEIGHT}" role="img" '
        f'aria-labelledby="{chart_id}-title {chart_id}-desc" class="response-chart" '
        'font-family="DejaVu Sans, Liberation Sans, Arial, sans-serif" font-size="12">',
        f'<title id="{chart_id}-title">{escape(title)}</title>',
        f'<desc id="{chart_id}-desc">{escape(describe(data))}</desc>',
        "<defs>"
        f'<pattern id="{chart_id}-band" width="6" height="6" patternUnits="userSpaceOnUse" '
        'patternTransform="rotate(45)">'
        '<rect width="6" height="6" fill="#ffffff"/>'
        f'<line x1="0" y1="0" x2="0" y2="6" stroke="{BAND_INK}" stroke-width="2"/>'
        "</pattern>"
        f'<clipPath id="{chart_id}-plot"><rect x="{LEFT}" y="{TOP}" width="{plot_w}" '
        f'height="{plot_h}"/></clipPath>'
        "</defs>",
        *_axes(data, low, high, x, y),
        *_lines(data, chart_id, x, y),
        *_labels(data, low, high, x, y),
    ]
    for marks, used in ((data.used, True), (data.unused, False)):
        for fio2, value, kind in marks:
            out.append(_marker(kind, used, x(fio2), y(value)))
    out.append(_key(data))
    out.append("</svg>")
    return "".join(out) + "\n"
