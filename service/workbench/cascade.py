"""The oxygen cascade of one gas against the normal cascade for the same age, altitude and FiO2.

Pure: numbers in, an SVG string out. The stages are inspired → alveolar → arterial (→ mixed
venous when it was measured). The normal line breathes the same gas (same PB, FiO2 and PH2O):

* inspired: PIO2 = FiO2 × (PB − PH2O);
* alveolar: the alveolar gas equation (full form) with PaCO2 40 mmHg;
* arterial: normal alveolar − the age-expected room-air A-a limit;
* mixed venous: about 40 mmHg (common practice).

The gap between the patient's line and the normal line at each stage shows where the oxygen
is lost; the growth of the gap from one stage to the next shows at which step.
"""

from __future__ import annotations

import html
import io
import math
import re
from contextlib import AbstractContextManager
from dataclasses import dataclass

import matplotlib
from matplotlib.artist import Artist
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from service.exceptions import PhysiologyError
from service.physiology import constants as c
from service.physiology.gas_exchange import (
    aa_gradient_upper_limit_mmhg,
    alveolar_po2_mmhg,
    inspired_po2_mmhg,
)

NORMAL_PACO2_MMHG = c.NORMAL_PACO2_MMHG
NORMAL_MIXED_VENOUS_PO2_MMHG = 40.0  # common practice: resting mixed-venous PO2 ≈ 40 mmHg
ROOM_AIR_LIMIT_MAX_FIO2 = 0.3  # above this the room-air A-a limit understates the normal gap
# The sea-level room-air reference is drawn when the inspired PO2 is this far below it.
LOW_INSPIRED_MARGIN_MMHG = 5.0
# Gaps smaller than this are not annotated (the inspired gap is zero by construction).
SMALLEST_GAP_MMHG = 0.5

HASH_SALT = "oxyrule-cascade"  # a constant salt makes the SVG ids, so the bytes, reproducible
PATIENT_COLOUR = "#7a2431"  # deep wine: the patient, solid line with filled circles
NORMAL_COLOUR = "#3d6478"  # slate: the normal cascade, dashed line with open squares
REFERENCE_COLOUR = "#6b6b6b"  # grey: the sea-level room-air reference, dotted
GAP_COLOUR = "#e7c77f"  # sand: the hatched band between the lines
GAP_EDGE = "#b08a3a"
NORMAL_DASH = (0, (5, 3))
FIGURE_SIZE_IN = (7.4, 3.9)
# Fixed margins (a layout engine would triple the drawing time); room for two-line tick labels.
MARGINS = {"left": 0.085, "right": 0.985, "bottom": 0.15, "top": 0.92}


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
class Normal:
    """The normal cascade for one age, PB and FiO2, with the reasons for any missing value."""

    inspired: float | None
    alveolar: float | None
    arterial: float | None
    mixed_venous: float
    aa_limit: float | None
    missing: dict[str, str]


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


def normal_cascade(
    *,
    fio2: float | None,
    barometric_mmhg: float | None,
    age_years: float | None,
    water_vapour_mmhg: float = c.WATER_VAPOUR_TEXTBOOK_MMHG,
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT,
) -> Normal:
    """The normal PO2 at each stage for the same gas (same FiO2, PB and PH2O), PaCO2 40."""
    missing: dict[str, str] = {}
    inspired = alveolar = arterial = aa_limit = None
    if age_years is not None:
        try:
            aa_limit = aa_gradient_upper_limit_mmhg(age_years=age_years)
        except PhysiologyError as error:
            missing["arterial"] = f"no age-expected A-a limit ({error})"
    else:
        missing["arterial"] = "age not known, so no age-expected A-a limit"
    if fio2 is None or barometric_mmhg is None:
        why = "FiO2 not known" if fio2 is None else "barometric pressure not known"
        missing.update(inspired=why, alveolar=why, arterial=why)
        return Normal(None, None, None, NORMAL_MIXED_VENOUS_PO2_MMHG, aa_limit, missing)
    try:
        inspired = inspired_po2_mmhg(
            fio2=fio2, barometric_mmhg=barometric_mmhg, water_vapour_mmhg=water_vapour_mmhg
        )
        alveolar = alveolar_po2_mmhg(
            fio2=fio2,
            paco2_mmhg=NORMAL_PACO2_MMHG,
            barometric_mmhg=barometric_mmhg,
            water_vapour_mmhg=water_vapour_mmhg,
            respiratory_quotient=respiratory_quotient,
        )
    except PhysiologyError as error:
        missing.update(inspired=str(error), alveolar=str(error), arterial=str(error))
        return Normal(None, None, None, NORMAL_MIXED_VENOUS_PO2_MMHG, aa_limit, missing)
    if alveolar <= 0:
        # Extreme altitude or a hypoxic mixture: with PaCO2 40 no oxygen would be left, so no
        # normal line exists there (people survive it only by hyperventilating).
        why = (
            f"with PaCO2 {NORMAL_PACO2_MMHG:g} mmHg no alveolar oxygen is left at this PB and "
            f"FiO2: the equation gives {signed(alveolar)} mmHg"
        )
        missing.update(alveolar=why, arterial=why)
        return Normal(inspired, None, None, NORMAL_MIXED_VENOUS_PO2_MMHG, aa_limit, missing)
    if aa_limit is not None:
        arterial = alveolar - aa_limit
        if arterial <= 0:
            arterial = None
            missing["arterial"] = "the age-expected A-a limit exceeds the normal alveolar PO2"
    return Normal(inspired, alveolar, arterial, NORMAL_MIXED_VENOUS_PO2_MMHG, aa_limit, missing)


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
    normal = normal_cascade(
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
            normal.inspired,
            why.get("inspired"),
            normal.missing.get("inspired"),
        ),
        Stage(
            "alveolar",
            "Alveolar",
            "PAO₂",
            inp.alveolar_po2,
            normal.alveolar,
            why.get("alveolar"),
            normal.missing.get("alveolar"),
        ),
        Stage(
            "arterial",
            "Arterial",
            "PaO₂",
            inp.arterial_po2,
            normal.arterial,
            why.get("arterial"),
            normal.missing.get("arterial"),
        ),
    ]
    notes: list[str] = []
    if inp.mixed_venous_po2 is not None:
        stages.append(
            Stage("mixed-venous", "Mixed venous", "PvO₂", inp.mixed_venous_po2, normal.mixed_venous)
        )
        notes.append(
            f"Normal mixed-venous PO2 taken as about {NORMAL_MIXED_VENOUS_PO2_MMHG:g} mmHg "
            "(common practice)."
        )
    else:
        notes.append("Mixed-venous PO2 not measured: that stage is not drawn.")
    for stage in stages:
        if stage.patient_missing:
            notes.append(f"{stage.label}: no patient value ({stage.patient_missing}).")
        if stage.normal_missing:
            notes.append(f"{stage.label}: no normal value ({stage.normal_missing}).")
    if inp.fio2 is not None and inp.fio2 > ROOM_AIR_LIMIT_MAX_FIO2 and normal.aa_limit is not None:
        notes.append(
            f"On FiO2 {inp.fio2:.2f} the room-air A-a limit for age ({_fmt(normal.aa_limit)} mmHg) "
            "understates the normal gap, which widens with FiO2: the normal arterial value is "
            "drawn too high, so the arterial gap overstates the loss."
        )
    return Cascade(tuple(stages), tuple(notes), _conditions(inp, normal), _reference(inp))


def _conditions(inp: CascadeInput, normal: Normal) -> str:
    parts = []
    if inp.age_years is not None:
        parts.append(f"age {inp.age_years:g}")
    if inp.barometric_mmhg is not None:
        parts.append(f"PB {inp.barometric_mmhg:.0f} mmHg")
    if inp.fio2 is not None:
        parts.append(f"FiO2 {inp.fio2:.2f}")
    parts.append(f"PaCO2 {NORMAL_PACO2_MMHG:g} mmHg")
    parts.append(f"PH2O {_fmt(inp.water_vapour_mmhg)} mmHg")
    parts.append(f"R {inp.respiratory_quotient:g}")
    if normal.aa_limit is not None:
        parts.append(f"A-a limit {_fmt(normal.aa_limit)} mmHg")
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


def _polyline(values: list[float | None]) -> tuple[list[float], list[float]]:
    """A step line: each known stage a plateau over [i, i+1], neighbours joined vertically."""
    xs: list[float] = []
    ys: list[float] = []
    for i, v in enumerate(values):
        if v is None:
            xs.append(math.nan)
            ys.append(math.nan)
            continue
        xs += [float(i), float(i + 1)]
        ys += [v, v]
    return xs, ys


def _draw(fig: Figure, cascade: Cascade) -> None:
    ax = fig.add_subplot()
    stages = cascade.stages
    n = len(stages)
    patient = [s.patient for s in stages]
    normal = [s.normal for s in stages]
    known = [v for v in patient + normal if v is not None]
    if cascade.sea_level_inspired_po2 is not None:
        known.append(cascade.sea_level_inspired_po2)
    top = max(known, default=100.0) * 1.12
    ax.set_xlim(0, n)
    ax.set_ylim(0, top)
    ax.set_xticks([i + 0.5 for i in range(n)])
    ax.set_xticklabels([f"{s.label}\n{s.symbol}" for s in stages])
    ax.tick_params(axis="x", length=0)
    for i in range(1, n):
        ax.axvline(i, color="#eeeeee", linewidth=0.6, zorder=0)
    ax.set_ylabel("PO₂ (mmHg)")

    for i, s in enumerate(stages):
        if s.patient is None or s.normal is None:
            continue
        if abs(s.patient - s.normal) >= SMALLEST_GAP_MMHG:
            _gap(ax, i, s.patient, s.normal, top)

    nx, ny = _polyline(normal)
    ax.plot(nx, ny, color=NORMAL_COLOUR, linewidth=1.6, linestyle=NORMAL_DASH, zorder=3)
    px, py = _polyline(patient)
    ax.plot(px, py, color=PATIENT_COLOUR, linewidth=2.4, zorder=4)
    for i, s in enumerate(stages):
        _stage_marks(ax, i, s, top)
    if cascade.sea_level_inspired_po2 is not None:
        _reference_mark(ax, cascade.sea_level_inspired_po2)
    _legend(ax, reference=cascade.sea_level_inspired_po2 is not None)


def _legend(ax: Axes, *, reference: bool) -> None:
    handles: list[Artist] = [
        Line2D([], [], color=PATIENT_COLOUR, linewidth=2.4, marker="o", label="this patient"),
        Line2D(
            [],
            [],
            color=NORMAL_COLOUR,
            linewidth=1.6,
            linestyle=NORMAL_DASH,
            marker="s",
            markerfacecolor="white",
            label="normal: same age, PB, FiO₂",
        ),
        Patch(
            facecolor=GAP_COLOUR,
            edgecolor=GAP_EDGE,
            hatch="///",
            alpha=0.55,
            label="gap: patient − normal",
        ),
    ]
    if reference:
        handles.append(
            Line2D([], [], color=REFERENCE_COLOUR, linestyle=":", label="sea-level room air")
        )
    ax.legend(
        handles=handles,
        loc="lower left",
        bbox_to_anchor=(0.0, 1.01),
        ncols=len(handles),
        handlelength=2.4,
        columnspacing=1.2,
        borderaxespad=0.0,
    )


def _reference_mark(ax: Axes, ref: float) -> None:
    ax.plot([0.06, 0.94], [ref, ref], color=REFERENCE_COLOUR, linewidth=1.2, linestyle=":")
    ax.annotate(
        f"sea-level room air {_fmt(ref)}",
        (0.5, ref),
        xytext=(0, 3),
        textcoords="offset points",
        ha="center",
        va="bottom",
        fontsize=7.5,
        color="#444444",
    )


def _stage_marks(ax: Axes, i: int, s: Stage, top: float) -> None:
    centre = i + 0.5
    if s.normal is not None:
        ax.plot(
            [centre],
            [s.normal],
            marker="s",
            markersize=7,
            color=NORMAL_COLOUR,
            markerfacecolor="white",
            markeredgewidth=1.4,
            linestyle="none",
            zorder=5,
        )
    if s.patient is not None:
        ax.plot(
            [centre],
            [s.patient],
            marker="o",
            markersize=5.5,
            color=PATIENT_COLOUR,
            linestyle="none",
            zorder=6,
        )
    above = s.normal is None or (s.patient is not None and s.patient >= s.normal)
    if s.patient is not None:
        _value_label(ax, centre, s.patient, above=above, bold=True, colour=PATIENT_COLOUR)
    if s.normal is not None:
        _value_label(ax, centre, s.normal, above=not above, bold=False, colour=NORMAL_COLOUR)
    if s.normal is None and s.patient is not None:
        ax.text(
            centre,
            top * 0.03,
            "no normal value (see caption)",
            ha="center",
            va="bottom",
            fontsize=7.5,
            style="italic",
            color="#333333",
        )
    if s.patient is None:
        # The note goes in the half of the stage away from the normal line.
        y = top * (0.25 if s.normal is not None and s.normal > top * 0.5 else 0.72)
        ax.text(
            centre,
            y,
            "patient value\nnot available:\n" + _wrap(s.patient_missing or "not available"),
            ha="center",
            va="center",
            fontsize=7.5,
            style="italic",
            color="#333333",
            bbox={"boxstyle": "round,pad=0.35", "facecolor": "white", "edgecolor": "#999999"},
            zorder=7,
        )


def _wrap(text: str, width: int = 22) -> str:
    lines: list[str] = []
    for word in text.split():
        if lines and len(lines[-1]) + 1 + len(word) <= width:
            lines[-1] += " " + word
        else:
            lines.append(word)
    return "\n".join(lines)


def _value_label(ax: Axes, x: float, y: float, *, above: bool, bold: bool, colour: str) -> None:
    ax.annotate(
        _fmt(y),
        (x, y),
        xytext=(-8, 4 if above else -4),
        textcoords="offset points",
        ha="right",
        va="bottom" if above else "top",
        fontsize=8,
        fontweight="bold" if bold else "normal",
        color=colour,
        zorder=8,
    )


def _gap(ax: Axes, i: int, patient: float, normal: float, top: float) -> None:
    """The hatched band between the lines over one stage, its arrow and its signed size."""
    low, high = sorted((patient, normal))
    ax.fill_between(
        [i, i + 1],
        low,
        high,
        facecolor=GAP_COLOUR,
        edgecolor=GAP_EDGE,
        hatch="///",
        linewidth=0.0,
        alpha=0.55,
        zorder=1,
    )
    x = i + 0.8
    small = high - low < top * 0.07  # too thin for an arrow: the label sits under the band
    if not small:
        ax.annotate(
            "",
            xy=(x, patient),
            xytext=(x, normal),
            arrowprops={
                "arrowstyle": "<->",
                "color": "#333333",
                "linewidth": 0.9,
                "shrinkA": 0,
                "shrinkB": 0,
            },
            zorder=7,
        )
    ax.annotate(
        signed(patient - normal),
        (x, low if small else (low + high) / 2),
        xytext=(-6 if small else 3, -4 if small else 0),
        textcoords="offset points",
        ha="left",
        va="top" if small else "center",
        fontsize=8,
        fontweight="bold",
        color="#222222",
        bbox={"boxstyle": "square,pad=0.15", "facecolor": "white", "edgecolor": "none"},
        zorder=8,
    )


def signed(value: float) -> str:
    """``+1.2`` / ``−3.4`` (a true minus sign), ``0.0`` when it rounds to zero."""
    text = f"{value:+.1f}"
    return "0.0" if text in ("+0.0", "-0.0") else text.replace("-", "−")


_ID = re.compile(r'\bid="([^"]+)"')
_REF = re.compile(r'(href="#|url\(#)([^")]+)')
_SIZE = re.compile(r'\s(?:width|height)="[\d.]+pt"')


def _style() -> AbstractContextManager[None]:
    """The one style of every chart (a literal, so each key is checked against matplotlib's)."""
    return matplotlib.rc_context(
        {
            "svg.fonttype": "none",  # text stays text: searchable, and no glyph paths
            "svg.hashsalt": HASH_SALT,
            "font.family": "sans-serif",
            "font.sans-serif": ["DejaVu Sans", "Liberation Sans", "Arial"],
            "font.size": 9.0,
            "axes.edgecolor": "#4a4a4a",
            "axes.linewidth": 0.8,
            "axes.spines.top": False,
            "axes.spines.right": False,
            "axes.grid": True,
            "axes.grid.axis": "y",
            "grid.color": "#dddddd",
            "grid.linewidth": 0.6,
            "xtick.color": "#333333",
            "ytick.color": "#333333",
            "legend.frameon": False,
            "legend.fontsize": 8.0,
            "hatch.linewidth": 0.6,
        }
    )


def cascade_svg(cascade: Cascade, *, title: str, chart_id: str) -> str:
    """The chart as an inline ``<svg>`` element (no XML prolog) with ``<title>`` and ``<desc>``.

    ``chart_id`` prefixes every id in the SVG so several charts can share one HTML page.
    """
    with _style():
        fig = Figure(figsize=FIGURE_SIZE_IN)
        fig.subplots_adjust(**MARGINS)
        FigureCanvasAgg(fig)
        try:
            _draw(fig, cascade)
            buffer = io.StringIO()
            fig.savefig(
                buffer,
                format="svg",
                metadata={"Date": None, "Creator": None, "Format": None, "Type": None},
            )
        finally:
            fig.clear()
    return _inline(buffer.getvalue(), title=title, desc=describe(cascade), prefix=chart_id)


def _inline(svg: str, *, title: str, desc: str, prefix: str) -> str:
    svg = svg[svg.index("<svg") :]
    svg = _ID.sub(lambda m: f'id="{prefix}-{m.group(1)}"', svg)
    svg = _REF.sub(lambda m: f"{m.group(1)}{prefix}-{m.group(2)}", svg)
    head_end = svg.index(">") + 1
    head = _SIZE.sub("", svg[:head_end])
    head = head[:-1] + (
        f' role="img" aria-labelledby="{prefix}-title {prefix}-desc" class="cascade-chart">'
    )
    labels = (
        f'<title id="{prefix}-title">{html.escape(title)}</title>'
        f'<desc id="{prefix}-desc">{html.escape(desc)}</desc>'
    )
    return head + labels + svg[head_end:].rstrip() + "\n"
