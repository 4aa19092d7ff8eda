"""Pair each arterial gas with the values that describe the same moment.

A gas is anchored on its arterial PO2. Each kind of value has its own window (``Windows``),
fitting how fast it changes and how it is usually recorded: values of the same sample (PaCO2,
pH, HCO3, SaO2) within minutes of the anchor; the moment's context (SpO2, ambient pressure,
mixed-venous values) within the pairing window; oxygen and ventilator settings (FiO2, flow,
device, PEEP) as the one in force — the latest charted before the gas within hours, else the
nearest within the pairing window; haemoglobin within
hours, carboxy- and methaemoglobin and body temperature within a few hours; lung function
(DLCO, walk-test oximetry) within months; altitude and residence regardless of time. Among
candidates the nearest in time wins; a value with no time is used only when no timed value
qualifies. Values of a kind that exist but fall outside their window are kept as
``out_of_window`` so the result can say so, and how far from the gas each value was taken is
kept (``offset``) so the result can show it.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import cast

from service.intake.model import Intake, Measurement, Quantity, Specimen

SAME_SAMPLE: frozenset[Quantity] = frozenset(
    {
        Quantity.ARTERIAL_PCO2,
        Quantity.ARTERIAL_PH,
        Quantity.ARTERIAL_HCO3,
        Quantity.ARTERIAL_BASE_EXCESS,
        Quantity.ARTERIAL_SO2,
        Quantity.ARTERIAL_O2HB,
    }
)
SETTINGS: frozenset[Quantity] = frozenset(
    {
        Quantity.FIO2,
        Quantity.OXYGEN_FLOW,
        Quantity.OXYGEN_DEVICE,
        Quantity.PEEP,
        Quantity.MEAN_AIRWAY_PRESSURE,
    }
)
"""Settings stay in force until changed: charted when set, not at each gas."""
CONTEXT: frozenset[Quantity] = SETTINGS | frozenset(
    {
        Quantity.SPO2,
        Quantity.RESPIRATORY_RATE,
        Quantity.BAROMETRIC_PRESSURE,
        Quantity.MIXED_VENOUS_PO2,
        Quantity.MIXED_VENOUS_SO2,
    }
)
HAEMOGLOBIN: frozenset[Quantity] = frozenset({Quantity.HAEMOGLOBIN})
DYSHAEMOGLOBINS: frozenset[Quantity] = frozenset(
    {Quantity.CARBOXYHAEMOGLOBIN, Quantity.METHAEMOGLOBIN}
)
TEMPERATURE: frozenset[Quantity] = frozenset({Quantity.BODY_TEMPERATURE})
LUNG_FUNCTION: frozenset[Quantity] = frozenset(
    {
        Quantity.DLCO,
        Quantity.DLCO_PERCENT_PREDICTED,
        Quantity.DLCO_LOWER_LIMIT,
        Quantity.DLCO_PERCENT_LOWER_LIMIT,
        Quantity.SPO2_EXERTIONAL_NADIR,
        Quantity.SPO2_EXERTIONAL_BASELINE,
    }
)
PATIENT_LEVEL: frozenset[Quantity] = frozenset({Quantity.ALTITUDE, Quantity.ALTITUDE_RESIDENCE})


@dataclass(frozen=True, slots=True)
class Windows:
    """How far from its gas each kind of value may be taken (None: any time)."""

    same_sample: timedelta
    context: timedelta
    setting: timedelta
    """How long an oxygen or ventilator setting charted before a gas is taken to be in force."""
    haemoglobin: timedelta
    dyshaemoglobins: timedelta
    temperature: timedelta
    lung_function: timedelta

    def limit(self, quantity: Quantity) -> timedelta | None:
        """The window of ``quantity``: a time, or None for any time (patient-level values)."""
        name = _WINDOW_OF.get(quantity)
        return None if name is None else cast(timedelta, getattr(self, name))


# The field of ``Windows`` each kind of value is taken within, looked up once: the first group
# a quantity belongs to, in this order, decides (settings are context too).
_WINDOW_OF: dict[Quantity, str] = {}
for _group, _field in (
    (SAME_SAMPLE, "same_sample"),
    (CONTEXT, "context"),
    (HAEMOGLOBIN, "haemoglobin"),
    (DYSHAEMOGLOBINS, "dyshaemoglobins"),
    (TEMPERATURE, "temperature"),
    (LUNG_FUNCTION, "lung_function"),
):
    for _quantity in _group:
        _WINDOW_OF.setdefault(_quantity, _field)


PAIRED: frozenset[Quantity] = (
    SAME_SAMPLE | CONTEXT | HAEMOGLOBIN | DYSHAEMOGLOBINS | TEMPERATURE | LUNG_FUNCTION
) | PATIENT_LEVEL
"""Every quantity a gas takes from around it (venous and capillary values are not)."""
# Arterial quantities that must not be used when the sample is not known to be arterial.
ARTERIAL: frozenset[Quantity] = SAME_SAMPLE | {Quantity.ARTERIAL_PO2}
NOT_ARTERIAL_PO2: frozenset[Quantity] = frozenset(
    {Quantity.VENOUS_PO2, Quantity.CAPILLARY_PO2, Quantity.MIXED_VENOUS_PO2}
)


@dataclass(slots=True)
class PairedGas:
    """One assessable moment: an arterial gas (or, with no gas, the latest SpO2) and the
    values paired with it. ``anchor`` is None only when the input has neither."""

    anchor: Measurement | None
    values: dict[Quantity, Measurement] = field(default_factory=dict)
    out_of_window: dict[Quantity, Measurement] = field(default_factory=dict)
    untimed: list[Quantity] = field(default_factory=list)

    @property
    def time(self) -> datetime | None:
        return self.anchor.time if self.anchor else None

    def get(self, quantity: Quantity) -> Measurement | None:
        return self.values.get(quantity)

    def offset(self, quantity: Quantity) -> timedelta | None:
        """How long before (negative: after) the gas the paired value was taken, if both
        are timed."""
        m = self.values.get(quantity)
        anchor = self.time
        if m is None or m.time is None or anchor is None:
            return None
        return anchor - m.time


@dataclass(slots=True)
class Pairing:
    """All gases of one input, index gas first, and what the specimen checks saw."""

    gases: list[PairedGas]
    excluded_specimens: list[Measurement]  # arterial-coded values whose sample is doubtful
    non_arterial_po2: list[Measurement]  # venous, capillary, mixed-venous PO2 present
    by_quantity: dict[Quantity, list[Measurement]] = field(default_factory=dict)
    """Every usable measurement by quantity (what the gases were paired from)."""

    @property
    def index(self) -> PairedGas:
        return self.gases[0]


def _is_usable_arterial(m: Measurement) -> bool:
    return m.specimen in (None, Specimen.ARTERIAL)


def _sort_key(m: Measurement) -> tuple[int, float]:
    # Timed values sort by instant (intake times are timezone-aware); untimed ones sort first
    # so that "latest" prefers a timed value.
    return (0, 0.0) if m.time is None else (1, m.time.timestamp())


def _in_force(
    candidates: Iterable[Measurement], anchor_time: datetime | None, lookback: timedelta
) -> Measurement | None:
    """The setting in force at ``anchor_time``: the latest charted at or before it, within
    ``lookback``."""
    if anchor_time is None:
        return None
    before = [
        m
        for m in candidates
        if m.time is not None and timedelta(0) <= anchor_time - m.time <= lookback
    ]
    return max(before, key=_sort_key) if before else None


def _nearest(
    candidates: Sequence[Measurement], anchor_time: datetime | None, limit: timedelta | None
) -> tuple[Measurement | None, Measurement | None, bool]:
    """(chosen, nearest rejected as out of window, chosen-is-untimed)."""
    if len(candidates) == 1:
        # The usual case, one value of a kind: what the general search below gives for it,
        # without its lists and sorts.
        (only,) = candidates
        if only.time is None:
            return only, None, True
        if anchor_time is None or limit is None or abs(only.time - anchor_time) <= limit:
            return only, None, False
        return None, only, False
    timed = [m for m in candidates if m.time is not None]
    untimed = [m for m in candidates if m.time is None]
    if anchor_time is None or limit is None:
        pool = sorted(timed, key=_sort_key) or untimed
        return (pool[-1] if pool else None), None, bool(pool) and pool[-1].time is None
    assert all(m.time is not None for m in timed)
    by_distance = sorted(timed, key=lambda m: abs(m.time - anchor_time))  # type: ignore[operator]
    if by_distance and abs(by_distance[0].time - anchor_time) <= limit:  # type: ignore[operator]
        return by_distance[0], None, False
    rejected = by_distance[0] if by_distance else None
    if untimed:
        return untimed[-1], rejected, True
    return None, rejected, False


ByQuantity = dict[Quantity, list[Measurement]]

# The window of every paired quantity for the last ``Windows`` seen (one per site's settings),
# worked out once rather than by attribute name for each value of each gas.
_LAST_LIMITS: list[tuple[Windows, dict[Quantity, timedelta | None]]] = []


def _limits(windows: Windows) -> dict[Quantity, timedelta | None]:
    """``windows.limit`` of every quantity of ``PAIRED``."""
    last = _LAST_LIMITS[0] if _LAST_LIMITS else None
    if last is not None and last[0] is windows:
        return last[1]
    found = {quantity: windows.limit(quantity) for quantity in PAIRED}
    _LAST_LIMITS[:] = [(windows, found)]
    return found


def group_measurements(intake: Intake) -> tuple[ByQuantity, list[Measurement]]:
    """The usable measurements of ``intake`` by quantity, and the arterial-coded ones whose
    sample is doubtful (left out)."""
    by_quantity: ByQuantity = {}
    excluded: list[Measurement] = []
    for m in intake.measurements:
        if m.quantity in ARTERIAL and not _is_usable_arterial(m):
            excluded.append(m)
            continue
        by_quantity.setdefault(m.quantity, []).append(m)
    return by_quantity, excluded


def pair_at(
    anchor: Measurement | None,
    by_quantity: ByQuantity,
    windows: Windows,
    *,
    only: frozenset[Quantity],
    at: datetime | None = None,
) -> PairedGas:
    """The values of the quantities ``only`` that describe the moment of ``anchor`` (or the
    time ``at``), by the same windows as a gas: a titration point's FiO2 and blood."""
    return _pair_one(anchor, by_quantity, windows, only=PAIRED & only, at=at)


def pair_gases(intake: Intake, *, windows: Windows) -> Pairing:
    """Build the gases of ``intake``: every usable arterial PO2 anchors one, latest first."""
    by_quantity, excluded = group_measurements(intake)
    anchors = sorted(by_quantity.get(Quantity.ARTERIAL_PO2, []), key=_sort_key, reverse=True)
    if not anchors:
        spo2 = sorted(by_quantity.get(Quantity.SPO2, []), key=_sort_key, reverse=True)
        anchors = spo2[:1]
    gases = [_pair_one(a, by_quantity, windows) for a in anchors]
    if not gases:
        gases = [_pair_one(None, by_quantity, windows)]
    non_arterial = [m for q in NOT_ARTERIAL_PO2 for m in by_quantity.get(q, [])]
    return Pairing(
        gases=gases,
        excluded_specimens=excluded,
        non_arterial_po2=non_arterial,
        by_quantity=by_quantity,
    )


def _pair_one(
    anchor: Measurement | None,
    by_quantity: ByQuantity,
    windows: Windows,
    *,
    only: frozenset[Quantity] = PAIRED,
    at: datetime | None = None,
) -> PairedGas:
    """The gas of ``anchor``: the values of the quantities ``only`` (of ``PAIRED``)."""
    gas = PairedGas(anchor=anchor)
    anchor_time = at if at is not None else anchor.time if anchor else None
    if anchor is not None:
        gas.values[anchor.quantity] = anchor
    limits = _limits(windows)
    for quantity, candidates in by_quantity.items():
        if quantity in gas.values or quantity is Quantity.ARTERIAL_PO2:
            continue
        if quantity not in only:
            continue
        limit = limits[quantity]
        chosen, rejected, untimed = _nearest(candidates, anchor_time, limit)
        if quantity in SETTINGS:
            # The setting in force (charted before the gas) wins over one charted just after.
            in_force = _in_force(candidates, anchor_time, windows.setting)
            if in_force is not None:
                chosen, rejected, untimed = in_force, None, False
        if chosen is not None:
            gas.values[quantity] = chosen
            if untimed and anchor_time is not None:
                gas.untimed.append(quantity)
        elif rejected is not None:
            gas.out_of_window[quantity] = rejected
    return gas
