"""What an episode holds for the response to oxygen: the part of the history the titration of
its gas reads (``service.assess.titration``), found with that module's own selection.

The service fits every SpO2 and arterial PO2 of the record that it does not leave out (no FiO2,
taken within the settling time of an FiO2 change, below the oximeter's range, COHb or MetHb
above the rule set's limit anywhere in the record) within one titration window, which ends at
the latest such point no later than one window after the index gas (its own time when there is
none); and, for the trend over three or more gases, the window ending at each earlier gas. A
point's FiO2 is the setting in force when it was taken, by the rule of pairing. So an episode
must hold, besides what pairing uses:

* every SpO2 of the history in the index gas's titration window, and in the window ending at
  each of its earlier gases when it has three or more (the trend);
* for every SpO2 and gas it holds, the nearest setting of each kind before and after the
  moment it was taken and the moment one settling time earlier — the titration chooses among
  those exactly as among the whole history's (a farther one can never win);
* the highest COHb and the highest MetHb of the history, which decide whether any SpO2 of the
  record is usable;
* the earliest and the latest setting of each kind: the titration is not tried when the record
  holds one moment of settings, and the history may hold more than the ones near the gas.

Finding where the window ends needs to know which points are left out, which depends on the
settings near each one, so the search runs the titration's own selection
(``point_times``, ``window_end``) on small parts of the history: down from one window after the
gas, a window at a time, over the SpO2 of the history and the values the episode holds of other
kinds (its gases and samples, whose settings are the history's too) with the settings nearest
each point. Below the earliest of those values (less the pairing window, within which their
settings may decide), a point's settings are the patient's charted settings alone, so which
points are left out there is read once per patient, when a search first reaches that far.
The search leaves out COHb and MetHb: when they leave every SpO2 out, only the episode's own
gases can be points, and it holds them all.
"""

from __future__ import annotations

from bisect import bisect_left
from collections.abc import Iterable, Iterator
from datetime import datetime

from service.assess.pairing import group_measurements
from service.assess.titration import SETTING_QUANTITIES, point_times, window_end
from service.intake.model import Intake, Quantity
from service.physiology.oxygenation_trend import MIN_POINTS

from .timeline import Entry, EpisodeWindows, Role, Timeline, Timelines, in_order

POINT_KINDS = frozenset({Quantity.SPO2, Quantity.ARTERIAL_PO2})
# What the search reads: points and the settings that give their FiO2 (no COHb, no MetHb).
SEARCHED = POINT_KINDS | SETTING_QUANTITIES


class TitrationReach:
    """One patient's titration inputs for every episode (built once per patient)."""

    def __init__(self, lines: Timelines, windows: EpisodeWindows) -> None:
        self.lines = lines
        self.w = windows
        self.spo2: Timeline | None = lines.kinds.get(Quantity.SPO2)
        self.settings = [lines.kinds[q] for q in sorted(SETTING_QUANTITIES) if q in lines.kinds]
        self._charted_points: list[datetime] | None = None

    def entries(
        self,
        held: Iterable[Entry],
        *,
        index_time: datetime | None,
        end: datetime | None,
        gas_times: list[datetime],
    ) -> list[Entry]:
        """What the episode must add to ``held`` (what it holds for pairing) for the titration
        of its index gas (taken at ``index_time``) and its trend over ``gas_times`` (the
        episode's gases), the history ending at ``end`` when given."""
        held = list(held)
        span = self.w.titration
        added: dict[int, Entry] = {}

        def spo2_between(start: datetime, stop: datetime) -> None:
            if self.spo2 is not None:
                stop = stop if end is None else min(stop, end)
                added.update((id(e), e) for e in self.spo2.between(start, stop))

        last = self.window_end(held, index_time=index_time, end=end)
        if last is not None:
            spo2_between(last - span, last)
        if len(gas_times) >= MIN_POINTS:
            for g in gas_times:
                spo2_between(g - span, g)
        points = [e for e in (*held, *added.values()) if e.quantities & POINT_KINDS]
        for e in points:
            added.update((id(s), s) for s in self._settings_near(e, end))
        for line in self.settings:
            added.update((id(e), e) for e in line.first_and_last(end))
        for peaks in self.lines.peaks:
            highest = peaks.up_to(end)
            if highest is not None:
                added[id(highest)] = highest
        return list(added.values())

    def window_end(
        self, held: list[Entry], *, index_time: datetime | None, end: datetime | None
    ) -> datetime | None:
        """Where the history's titration window ends for the index gas at ``index_time``;
        None when no point of the history is that early or earlier (no window holds one)."""
        if index_time is None:
            return None
        span, near = self.w.titration, self.w.pairing.context
        upper = index_time + span if end is None else min(index_time + span, end)
        other = [e for e in held if e.role is not Role.CONTEXT]
        floor = min([upper - span, *(e.time - near for e in other if e.time is not None)])
        if end is not None:
            floor = min(floor, end - near)
        high = upper
        while True:
            low = max(high - span, floor)
            found = self._points_between(low, high, other, end)
            if found:
                return window_end(found, index_time, span)
            if low <= floor:
                break
            high = low
        charted = self._charted()
        position = bisect_left(charted, floor)
        if not position:
            return None
        return window_end([charted[position - 1]], index_time, span)

    def _settings_near(self, entry: Entry, end: datetime | None) -> Iterator[Entry]:
        """The settings nearest before and after the moment ``entry`` was taken and one
        settling time earlier, no later than ``end``."""
        if entry.time is None:
            return
        for when in (entry.time, entry.time - self.w.settle):
            for line in self.settings:
                yield from line.at_or_before(when)
                yield from line.after(when, end)

    def _points_between(
        self, low: datetime, high: datetime, other: list[Entry], end: datetime | None
    ) -> list[datetime]:
        """The times in [low, high] of the history's points that the titration does not leave
        out, read with the settings nearest each one and every setting ``other`` holds."""
        candidates = [e for e in other if e.time is not None and low <= e.time <= high]
        if self.spo2 is not None:
            candidates += self.spo2.between(low, high if end is None else min(high, end))
        candidates = [e for e in candidates if e.quantities & POINT_KINDS]
        if not candidates:
            return []
        near = [s for e in candidates for s in self._settings_near(e, end)]
        entries = in_order([*candidates, *near, *other, *self.lines.untimed])
        times = self._kept(entries)
        return [t for t in times if low <= t <= high]

    def _charted(self) -> list[datetime]:
        """The times of the points among the patient's charted SpO2, read with the charted
        settings alone (and every value with no time), earliest first: read once."""
        if self._charted_points is None:
            lines = [self.spo2, *self.settings] if self.spo2 is not None else []
            entries = in_order([*(e for line in lines for e in line.entries), *self.lines.untimed])
            self._charted_points = self._kept(entries)
        return self._charted_points

    def _kept(self, entries: list[Entry]) -> list[datetime]:
        measurements = [m for e in entries for m in e.measurements if m.quantity in SEARCHED]
        grouped, _ = group_measurements(Intake(None, measurements))
        return point_times(
            grouped, windows=self.w.pairing, settings=self.w.settings, rules=self.w.rules
        )
