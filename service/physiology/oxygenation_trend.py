"""The course of oxygenation over three or more gases: each measure's series and a plain
direction (improving, worsening, stable), with the threshold that decides it.

The change of a measure is the rise of its least-squares line across the series (last time
minus first), so one odd gas in the middle does not decide the course. A change smaller than
the measure's threshold is "stable". Thresholds, and where they come from:

- P/F and a/A ratio: a 20 % relative change (common practice: the size of change commonly
  taken as a response of P/F to an intervention; from memory, not from one source).
- Venous admixture: 5 percentage points (common practice).
- Fitted shunt: 5 percentage points, and fitted ΔPO2: 3 kPa (22.5 mmHg): about half the 95 %
  limits of agreement between two published ways of fitting the same titration (shunt −6.5 to
  +3.5 %, right shift −2.9 to +3.6 kPa; Rowe L et al., Arch Dis Child Fetal Neonatal Ed
  2010;95:F47) — a smaller change is within what the fitting method itself moves.

P/F and a/A change with FiO2 for an unchanged lung (Karbing DS et al., Crit Care
2007;11:R118), so when FiO2 varied across the gases the trend says so; the fitted shunt and
ΔPO2 do not carry that bias.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from enum import StrEnum

from service.physiology.units import FIO2_LIMITS, comparable, mmhg_from_kpa

MIN_POINTS = 3
FIO2_VARIED = 0.10  # FiO2 range across the gases above which P/F and a/A are confounded
_FIO2_BOUND = frozenset({"pf_ratio", "arterial_alveolar_ratio"})
VQ_DROP_CHANGE_MMHG = mmhg_from_kpa(3.0)  # Rowe 2010 (module docstring)


class Direction(StrEnum):
    """The course of one measure, or of all together."""

    IMPROVING = "improving"
    WORSENING = "worsening"
    STABLE = "stable"
    UNCLEAR = "unclear"  # too few values, or measures that disagree


@dataclass(frozen=True, slots=True)
class GasSummary:
    """What one arterial gas showed; any measure may be missing (None)."""

    time: datetime
    fio2: float
    pf_ratio_mmhg: float | None = None
    arterial_alveolar_ratio: float | None = None
    venous_admixture: float | None = None
    shunt: float | None = None  # fitted, from the titration ending at this gas
    vq_drop_mmhg: float | None = None  # fitted ΔPO2

    def __post_init__(self) -> None:
        if self.time.tzinfo is None:
            raise ValueError("a gas summary's time must be timezone-aware")
        if not FIO2_LIMITS[0] <= self.fio2 <= FIO2_LIMITS[1]:
            raise ValueError(f"fio2 must lie between {FIO2_LIMITS[0]:g} and {FIO2_LIMITS[1]:g}")


@dataclass(frozen=True, slots=True)
class Threshold:
    """The smallest change called a change: ``size`` in the measure's unit, or a fraction of
    its first fitted value when ``relative``; ``source`` says where it comes from."""

    size: float
    relative: bool
    source: str


@dataclass(frozen=True, slots=True)
class MeasureTrend:
    """One measure over time: its series, its fitted change and direction."""

    measure: str
    unit: str
    series: tuple[tuple[datetime, float], ...]
    change: float | None
    direction: Direction
    threshold: Threshold
    higher_is_better: bool


@dataclass(frozen=True, slots=True)
class OxygenationTrend:
    """Every measure's trend, the overall direction and a note on how to read it."""

    measures: tuple[MeasureTrend, ...]
    direction: Direction
    fio2_range: float
    note: str


_COMMON_RELATIVE = Threshold(0.20, True, "common practice (20 % relative change)")
DEFAULT_THRESHOLDS: Mapping[str, Threshold] = {
    "pf_ratio": _COMMON_RELATIVE,
    "arterial_alveolar_ratio": _COMMON_RELATIVE,
    "venous_admixture": Threshold(0.05, False, "common practice (5 percentage points)"),
    "shunt": Threshold(0.05, False, "Rowe et al. 2010, method limits of agreement (±5 points)"),
    "vq_drop": Threshold(
        VQ_DROP_CHANGE_MMHG, False, "Rowe et al. 2010, method limits of agreement (3 kPa)"
    ),
}

# (measure, unit, its value in a summary, whether a rise is an improvement)
_MEASURES: tuple[tuple[str, str, Callable[[GasSummary], float | None], bool], ...] = (
    ("pf_ratio", "mm[Hg]", lambda g: g.pf_ratio_mmhg, True),
    ("arterial_alveolar_ratio", "1", lambda g: g.arterial_alveolar_ratio, True),
    ("venous_admixture", "1", lambda g: g.venous_admixture, False),
    ("shunt", "1", lambda g: g.shunt, False),
    ("vq_drop", "mm[Hg]", lambda g: g.vq_drop_mmhg, False),
)


def oxygenation_trend(
    *,
    summaries: Sequence[GasSummary],
    thresholds: Mapping[str, Threshold] = DEFAULT_THRESHOLDS,
) -> OxygenationTrend:
    """The series of every measure over ``summaries`` (any order), each with its direction,
    and an overall direction: worsening or improving when the measures that moved agree,
    stable when none moved, unclear when they disagree or fewer than three values exist.
    When FiO2 varied by more than 0.10 across the gases, P/F and a/A (which FiO2 moves by
    itself) do not take part in the overall direction.
    ``thresholds`` (by measure name, as ``DEFAULT_THRESHOLDS``) lets a rule set set its own.

    Raises:
        KeyError: ``thresholds`` lacks a measure.
    """
    ordered = sorted(summaries, key=lambda g: g.time)
    trends = tuple(
        _measure_trend(name, unit, ordered, get, better, thresholds[name])
        for name, unit, get, better in _MEASURES
    )
    fio2s = [g.fio2 for g in ordered]
    # Rounded so that FiO2 0.30 to 0.40 varied by 0.10, not by 0.10000000000000003.
    fio2_range = comparable(max(fio2s) - min(fio2s)) if fio2s else 0.0
    varied = fio2_range > FIO2_VARIED
    # P/F and a/A move with FiO2 alone: when it varied they are shown but do not decide.
    deciding = [t for t in trends if not (varied and t.measure in _FIO2_BOUND)]
    judged = [t.direction for t in deciding if t.direction is not Direction.UNCLEAR]
    if not judged:
        overall = Direction.UNCLEAR
        note = (
            "no measure that FiO2 does not move has enough values"
            if varied
            else f"fewer than {MIN_POINTS} values of every measure"
        )
    elif Direction.WORSENING in judged and Direction.IMPROVING in judged:
        overall = Direction.UNCLEAR
        note = "the measures disagree"
    elif Direction.WORSENING in judged:
        overall, note = Direction.WORSENING, "the measures that changed all worsened"
    elif Direction.IMPROVING in judged:
        overall, note = Direction.IMPROVING, "the measures that changed all improved"
    else:
        overall, note = Direction.STABLE, "no measure changed beyond its threshold"
    if varied:
        note += (
            f"; FiO2 varied by {fio2_range:.2f}, and P/F and a/A move with FiO2 alone "
            "(Karbing 2007): they are shown but do not decide the course; the fitted shunt "
            "and ΔPO2 and the venous admixture do"
        )
    return OxygenationTrend(trends, overall, fio2_range, note)


def _measure_trend(
    name: str,
    unit: str,
    ordered: list[GasSummary],
    get: Callable[[GasSummary], float | None],
    higher_is_better: bool,
    threshold: Threshold,
) -> MeasureTrend:
    series = tuple((g.time, v) for g in ordered if (v := get(g)) is not None)
    if len(series) < MIN_POINTS:
        return MeasureTrend(
            name, unit, series, None, Direction.UNCLEAR, threshold, higher_is_better
        )
    change, start = _fitted_change(series)
    limit = threshold.size * abs(start) if threshold.relative else threshold.size
    # Rounded so that a change of exactly the threshold counts as one whatever the
    # floating-point rest (0.15 − 0.10 is 0.04999999999999999); no change is never a change.
    if change == 0.0 or comparable(abs(change)) < comparable(limit):
        direction = Direction.STABLE
    elif (change > 0) == higher_is_better:
        direction = Direction.IMPROVING
    else:
        direction = Direction.WORSENING
    return MeasureTrend(name, unit, series, change, direction, threshold, higher_is_better)


def _fitted_change(series: tuple[tuple[datetime, float], ...]) -> tuple[float, float]:
    """(rise of the least-squares line from the first time to the last, its value at the
    first time). With all values at one instant, the last minus the first value."""
    t0 = series[0][0]
    xs = [(t - t0).total_seconds() for t, _ in series]
    ys = [v for _, v in series]
    n = len(xs)
    mean_x = sum(xs) / n
    mean_y = sum(ys) / n
    sxx = sum((x - mean_x) ** 2 for x in xs)
    if sxx == 0.0:
        return ys[-1] - ys[0], ys[0]
    slope = sum((x - mean_x) * (y - mean_y) for x, y in zip(xs, ys, strict=True)) / sxx
    start = mean_y - slope * mean_x
    return slope * (xs[-1] - xs[0]), start
