"""A patient's Observations on a timeline, by the part each takes in episodes, and the windows
that cut them (``episodes`` cuts; ``titration`` adds what the response to oxygen reads).
"""

from __future__ import annotations

from bisect import bisect_left, bisect_right
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import datetime, timedelta
from enum import Enum

from service.assess.assess import titration_rules
from service.assess.assess import windows as pairing_windows
from service.assess.pairing import DYSHAEMOGLOBINS, PAIRED, Windows
from service.assess.titration import TitrationRules
from service.config import Settings
from service.engine.ruleset import RuleSet
from service.intake.model import Measurement, Quantity

# Values of blood that is not arterial: in an episode only when taken beside one of its gases.
NOT_ARTERIAL_BLOOD: frozenset[Quantity] = frozenset(
    {
        Quantity.VENOUS_PO2,
        Quantity.VENOUS_PCO2,
        Quantity.VENOUS_PH,
        Quantity.VENOUS_SO2,
        Quantity.CENTRAL_VENOUS_SO2,
        Quantity.CAPILLARY_PO2,
        Quantity.CAPILLARY_PCO2,
        Quantity.CAPILLARY_PH,
        Quantity.MIXED_VENOUS_PO2,
        Quantity.MIXED_VENOUS_SO2,
    }
)
# The kinds of value chosen per gas by time: every kind the service pairs, but the blood samples.
TIMED_KINDS: tuple[Quantity, ...] = tuple(sorted(PAIRED - NOT_ARTERIAL_BLOOD))


class Role(Enum):
    """How an Observation takes part in episodes."""

    GAS = "gas"  # carries an arterial(-coded) PO2: anchors an episode
    SAMPLE = "sample"  # not-arterial blood, or arterial-coded of doubtful specimen
    CONTEXT = "context"  # values paired by time (settings, SpO2, Hb, DLCO, PaCO2, altitude...)
    UNUSED = "unused"  # the reader took no value from it (its findings remain)


@dataclass(slots=True)
class Entry:
    """One resource of the patient with what episode cutting needs."""

    kind: str
    resource: dict[str, object]
    file: str
    line: int
    ref: str | None  # Type/id
    time: datetime | None = None
    role: Role = Role.UNUSED
    quantities: frozenset[Quantity] = frozenset()
    usable: bool = True  # every arterial value's sample is known to be arterial (or unstated)
    specimen: str | None = None  # a gas's: the specimen of its PO2, where known
    measurements: tuple[Measurement, ...] = ()  # as the patient's first read gave them


def in_order(entries: Iterable[Entry]) -> list[Entry]:
    """``entries`` once each, in the export's order (file, line): the order of the history."""
    unique = {id(e): e for e in entries}
    return sorted(unique.values(), key=lambda e: (e.file, e.line))


@dataclass(frozen=True, slots=True)
class EpisodeWindows:
    """What cuts episodes: the service's pairing windows, its oxygen-response window, and
    the titration's window, settling time and rule-set thresholds (with the settings they
    come from, which the titration's own selection is run with)."""

    pairing: Windows
    response: timedelta
    titration: timedelta
    settle: timedelta
    settings: Settings
    rules: TitrationRules

    @classmethod
    def of(cls, settings: Settings, ruleset: RuleSet) -> EpisodeWindows:
        """The windows of the service's settings and rule set (the ones ``oxyrule assess``
        uses)."""
        return cls(
            pairing_windows(settings),
            timedelta(hours=settings.oxygen_response_window_hours),
            timedelta(minutes=settings.titration_window_minutes),
            timedelta(minutes=settings.titration_settle_minutes),
            settings,
            titration_rules(ruleset),
        )

    @property
    def beside(self) -> timedelta:
        """How far from a gas a sample is beside it: the pairing window of the moment."""
        return self.pairing.context


class Timeline:
    """Timed entries sorted by time (file and line within a time), for range queries."""

    def __init__(self, entries: Iterable[Entry]) -> None:
        timed = sorted(
            ((e.time, e.file, e.line, e) for e in entries if e.time is not None),
            key=lambda p: p[:3],
        )
        self.times: list[datetime] = [p[0] for p in timed]
        self.entries: list[Entry] = [p[3] for p in timed]

    def __bool__(self) -> bool:
        return bool(self.times)

    def between(self, start: datetime, end: datetime) -> list[Entry]:
        """Entries with start ≤ time ≤ end."""
        return self.entries[bisect_left(self.times, start) : bisect_right(self.times, end)]

    def at_or_before(self, when: datetime) -> list[Entry]:
        """Every entry at the latest time ≤ ``when`` (none if there is none)."""
        high = bisect_right(self.times, when)
        if not high:
            return []
        return self.between(self.times[high - 1], self.times[high - 1])

    def after(self, when: datetime, end: datetime | None) -> list[Entry]:
        """Every entry at the earliest time > ``when`` (and ≤ ``end``, when given)."""
        low = bisect_right(self.times, when)
        if low == len(self.times) or (end is not None and self.times[low] > end):
            return []
        return self.between(self.times[low], self.times[low])

    def first_and_last(self, end: datetime | None) -> list[Entry]:
        """The earliest entry and the latest one no later than ``end`` (when given)."""
        high = len(self.times) if end is None else bisect_right(self.times, end)
        return [self.entries[0], self.entries[high - 1]] if high else []


class Peaks:
    """For one kind of value on a timeline: the entry holding the highest value so far, at each
    position (the first of equal highs), so the highest up to any time is one look-up."""

    def __init__(self, line: Timeline, quantity: Quantity) -> None:
        self.line = line
        self.highest: list[Entry] = []
        best: tuple[float, Entry] | None = None
        for entry in line.entries:
            values = [
                m.value
                for m in entry.measurements
                if m.quantity is quantity and isinstance(m.value, float)
            ]
            if values and (best is None or max(values) > best[0]):
                best = (max(values), entry)
            self.highest.append(best[1] if best is not None else entry)

    def up_to(self, end: datetime | None) -> Entry | None:
        """The entry with the highest value no later than ``end`` (any time when None)."""
        high = len(self.line.times) if end is None else bisect_right(self.line.times, end)
        return self.highest[high - 1] if high else None


@dataclass(frozen=True, slots=True)
class Timelines:
    """A patient's Observations by role, for cutting episodes."""

    gases: Timeline  # arterial PO2s with a time
    beside: Timeline  # samples and doubtful gases: in an episode beside one of its gases
    unused: Timeline
    kinds: dict[Quantity, Timeline]  # context values carrying each kind the service pairs
    untimed: tuple[Entry, ...]  # every Observation but gases with no time
    peaks: tuple[Peaks, ...]  # COHb and MetHb: the highest value up to a time


def timelines(entries: list[Entry]) -> Timelines:
    """The patient's Observations sorted for cutting."""
    context = [e for e in entries if e.role is Role.CONTEXT]
    kinds = {q: Timeline(e for e in context if q in e.quantities) for q in TIMED_KINDS}
    kinds = {q: line for q, line in kinds.items() if line}
    return Timelines(
        gases=Timeline(e for e in entries if e.role is Role.GAS),
        beside=Timeline(
            e for e in entries if e.role is Role.SAMPLE or (e.role is Role.GAS and not e.usable)
        ),
        unused=Timeline(e for e in entries if e.role is Role.UNUSED),
        kinds=kinds,
        untimed=tuple(e for e in entries if e.time is None and e.role is not Role.GAS),
        peaks=tuple(Peaks(kinds[q], q) for q in sorted(DYSHAEMOGLOBINS) if q in kinds),
    )
