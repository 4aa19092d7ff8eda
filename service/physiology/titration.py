"""Points of an oxygen titration: saturations and PaO2s, each with the FiO2 it was taken on.

A point is one measured value (SpO2, SaO2 or PaO2) with its FiO2, the FiO2's plausible range
and how it was known, and — when known — the PaCO2, pH and temperature of the blood. Points
come from a titration, a repeat gas after a change of mask, a ventilator's FiO2 steps or a
run of oximetry readings; ``select_titration_points`` takes the ones that belong to one
titration window, in time order, whether a gas or an oximeter reading came first.

Pure data and a pure function: no clock, no I/O. The caller maps its own records onto
``TitrationPoint`` (times must be timezone-aware).
"""

from __future__ import annotations

import statistics
from collections.abc import Sequence
from dataclasses import dataclass, replace
from datetime import datetime, timedelta
from enum import StrEnum

from service.exceptions import ImpossibleValueError
from service.physiology.bounds import (
    BODY_TEMPERATURE_CEL,
    CARBON_DIOXIDE_MMHG,
    FRACTION,
    PARTIAL_PRESSURE_MMHG,
    PH,
    require_possible,
)
from service.physiology.units import FIO2_LIMITS, comparable

# How far back from the latest point (or the given anchor) a titration reaches: long enough
# for a stepped titration or a repeat gas after a change of mask, short enough that the lung
# itself has not changed (our default; a setting of the caller).
DEFAULT_TITRATION_WINDOW_MIN = 120.0
# Oximeter readings whose FiO2 differs by no more than this belong to one step: half a point of
# an FiO2 charted in whole percent.
SAME_STEP_FIO2 = 0.005
# The longest titration window taken (a week): longer is a slip in the caller's setting.
MAX_TITRATION_WINDOW_MIN = 7 * 24 * 60.0


class Fio2Source(StrEnum):
    """How the FiO2 of a point was known (the same codes as the service's intake)."""

    MEASURED = "measured"
    VENTILATOR_SETTING = "ventilator-setting"
    DEVICE_ESTIMATE = "device-estimate"
    SITE_SETTING = "site-setting"


class MeasuredKind(StrEnum):
    """What a point measured."""

    SPO2 = "spo2"  # pulse oximetry, functional saturation (fraction)
    SAO2 = "sao2"  # arterial saturation by co-oximetry (fraction)
    PAO2 = "pao2"  # arterial PO2 (mm[Hg])


@dataclass(frozen=True, slots=True)
class InspiredOxygen:
    """An FiO2 (fraction) with the range it may take: equal to it when measured or set, wider
    for a device estimate (e.g. a nasal cannula's 0.26–0.54 at 1–6 L/min, Wettstein RB,
    Shelledy DC & Peters JI, Respir Care 2005;50:604)."""

    fio2: float
    low: float
    high: float
    source: Fio2Source

    def __post_init__(self) -> None:
        for name in ("fio2", "low", "high"):
            require_possible(name, getattr(self, name), *FIO2_LIMITS, "1")
        if not self.low <= self.fio2 <= self.high:
            raise ImpossibleValueError(
                "fio2", self.fio2, f"must lie within its range {self.low:g}–{self.high:g}"
            )

    @property
    def half_range(self) -> float:
        """Half the width of the range (0 for a measured or set FiO2)."""
        return (self.high - self.low) / 2.0


@dataclass(frozen=True, slots=True)
class TitrationPoint:
    """One measurement on one FiO2. Exactly one of ``spo2``, ``sao2``, ``pao2_mmhg`` is given.

    ``readings`` counts the oximeter readings merged into a step; ``blood_from`` is the time of
    the gas whose PaCO2/pH/temperature a saturation point borrowed (None when its own or
    none); ``reference`` is the caller's handle on the source record.
    """

    time: datetime
    inspired: InspiredOxygen
    spo2: float | None = None
    sao2: float | None = None
    pao2_mmhg: float | None = None
    paco2_mmhg: float | None = None
    ph: float | None = None
    temperature_cel: float | None = None
    readings: int = 1
    blood_from: datetime | None = None
    reference: str = ""

    def __post_init__(self) -> None:
        if self.time.tzinfo is None:
            raise ValueError("a titration point's time must be timezone-aware")
        given = [v for v in (self.spo2, self.sao2, self.pao2_mmhg) if v is not None]
        if len(given) != 1:
            raise ValueError("give exactly one of spo2, sao2 and pao2_mmhg")
        for name in ("spo2", "sao2"):
            value = getattr(self, name)
            if value is not None:
                require_possible(name, value, *FRACTION, "1")
        if self.pao2_mmhg is not None:
            require_possible("pao2_mmhg", self.pao2_mmhg, 1.0, PARTIAL_PRESSURE_MMHG[1], "mm[Hg]")
        if self.paco2_mmhg is not None:
            require_possible("paco2_mmhg", self.paco2_mmhg, 1.0, CARBON_DIOXIDE_MMHG[1], "mm[Hg]")
        if self.ph is not None:
            require_possible("ph", self.ph, *PH, "[pH]")
        if self.temperature_cel is not None:
            require_possible("temperature_cel", self.temperature_cel, *BODY_TEMPERATURE_CEL, "Cel")

    @property
    def kind(self) -> MeasuredKind:
        """Which quantity this point measured."""
        if self.spo2 is not None:
            return MeasuredKind.SPO2
        if self.sao2 is not None:
            return MeasuredKind.SAO2
        return MeasuredKind.PAO2

    @property
    def value(self) -> float:
        """The measured value: a fraction for saturations, mm[Hg] for PaO2 (see ``kind``)."""
        for v in (self.spo2, self.sao2, self.pao2_mmhg):
            if v is not None:
                return v
        raise AssertionError("unreachable: __post_init__ requires one value")

    @property
    def is_gas(self) -> bool:
        """True for an arterial sample (PaO2 or SaO2), False for pulse oximetry."""
        return self.spo2 is None


@dataclass(frozen=True, slots=True)
class DroppedPoint:
    """A point left out of the titration, and why."""

    point: TitrationPoint
    reason: str


@dataclass(frozen=True, slots=True)
class TitrationSeries:
    """The points of one titration window, oldest first, and those left out."""

    points: tuple[TitrationPoint, ...]
    dropped: tuple[DroppedPoint, ...]
    window_start: datetime | None
    window_end: datetime | None

    @property
    def fio2_span(self) -> float:
        """Highest minus lowest FiO2 among the points (0 with fewer than two)."""
        if len(self.points) < 2:
            return 0.0
        fio2s = [p.inspired.fio2 for p in self.points]
        return max(fio2s) - min(fio2s)


def select_titration_points(
    *,
    points: Sequence[TitrationPoint],
    window_min: float = DEFAULT_TITRATION_WINDOW_MIN,
    anchor: datetime | None = None,
) -> TitrationSeries:
    """The points of the titration that ends at ``anchor`` (default: the latest point).

    1. Points later than the anchor or earlier than ``window_min`` before it are dropped, with
       the reason.
    2. Consecutive oximeter readings on the same FiO2 (within 0.005, same source) are one step
       of the titration: they become one point with their median SpO2, at the time of the
       step's last reading (a long run of readings at one FiO2 must not outweigh the other
       steps; the median resists a motion artefact).
    3. A saturation point without a PaCO2 borrows PaCO2, pH and temperature from the gas
       nearest in time within the window (``blood_from`` says which); without any gas it
       keeps none, and the fit uses its assumed PaCO2.

    Every other point is kept, gases and oximetry alike, so that more than two points are used.

    Raises:
        ImpossibleValueError: ``window_min`` not positive, or longer than a week.
        ValueError: ``anchor`` not timezone-aware.
    """
    if not 0.0 < window_min <= MAX_TITRATION_WINDOW_MIN:
        raise ImpossibleValueError(
            "window_min",
            window_min,
            f"must be positive and at most {MAX_TITRATION_WINDOW_MIN:g} min",
        )
    if anchor is not None and anchor.tzinfo is None:
        raise ValueError("anchor must be timezone-aware")
    ordered = sorted(points, key=lambda p: p.time)
    if not ordered:
        return TitrationSeries((), (), None, None)
    end = anchor if anchor is not None else ordered[-1].time
    start = end - timedelta(minutes=window_min)
    dropped: list[DroppedPoint] = []
    inside: list[TitrationPoint] = []
    for point in ordered:
        if point.time > end:
            dropped.append(DroppedPoint(point, "after the end of the titration window"))
        elif point.time < start:
            dropped.append(
                DroppedPoint(point, f"more than {window_min:g} min before the window's end")
            )
        else:
            inside.append(point)
    merged = _merge_oximetry_steps(inside)
    gases = [p for p in merged if p.paco2_mmhg is not None and p.is_gas]
    kept = tuple(_borrow_blood(p, gases) for p in merged)
    return TitrationSeries(kept, tuple(dropped), start, end)


def _merge_oximetry_steps(points: list[TitrationPoint]) -> list[TitrationPoint]:
    """Collapse runs of SpO2 readings on one FiO2 into one point each (see step 2)."""
    out: list[TitrationPoint] = []
    run: list[TitrationPoint] = []

    def flush() -> None:
        if run:
            out.append(_step_point(run))
            run.clear()

    for point in points:
        if point.spo2 is None:
            out.append(point)  # a gas does not break a run of oximetry at one FiO2
            continue
        if run and not _same_step(run[-1], point):
            flush()
        run.append(point)
    flush()
    return sorted(out, key=lambda p: p.time)


def same_fio2_step(a: float, b: float) -> bool:
    """Whether two FiO2s are one step: no more than ``SAME_STEP_FIO2`` apart, compared after
    rounding (0.405 - 0.40 is 0.0050000000000000044 in binary floating point)."""
    return comparable(abs(a - b)) <= SAME_STEP_FIO2


def _same_step(a: TitrationPoint, b: TitrationPoint) -> bool:
    return (
        same_fio2_step(a.inspired.fio2, b.inspired.fio2) and a.inspired.source == b.inspired.source
    )


def _step_point(run: list[TitrationPoint]) -> TitrationPoint:
    if len(run) == 1:
        return run[0]
    last = run[-1]
    values = [p.spo2 for p in run if p.spo2 is not None]
    count = sum(p.readings for p in run)
    return replace(last, spo2=statistics.median(values), readings=count)


def _borrow_blood(point: TitrationPoint, gases: list[TitrationPoint]) -> TitrationPoint:
    if point.paco2_mmhg is not None or not gases:
        return point
    nearest = min(gases, key=lambda g: abs(g.time - point.time))
    return replace(
        point,
        paco2_mmhg=nearest.paco2_mmhg,
        ph=point.ph if point.ph is not None else nearest.ph,
        temperature_cel=(
            point.temperature_cel if point.temperature_cel is not None else nearest.temperature_cel
        ),
        blood_from=nearest.time,
    )
