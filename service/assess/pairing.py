"""Pair each arterial gas with the values that describe the same moment.

A gas is anchored on its arterial PO2. Values of the same sample (PaCO2, pH, HCO3, SaO2,
dyshaemoglobins) are taken within ``same_sample`` of the anchor; context (FiO2, flow, device,
SpO2, temperature, Hb, PEEP, ambient pressure, mixed-venous values) within the pairing window;
patient-level values (altitude, DLCO, walk-test oximetry) regardless of time. Among candidates
the nearest in time wins; a value with no time is used only when no timed value qualifies.
Values of a kind that exist but fall outside the window are kept as ``out_of_window`` so the
result can say so.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import datetime, timedelta

from service.intake.model import Intake, Measurement, Quantity, Specimen

SAME_SAMPLE: frozenset[Quantity] = frozenset(
    {
        Quantity.ARTERIAL_PCO2,
        Quantity.ARTERIAL_PH,
        Quantity.ARTERIAL_HCO3,
        Quantity.ARTERIAL_BASE_EXCESS,
        Quantity.ARTERIAL_SO2,
        Quantity.CARBOXYHAEMOGLOBIN,
        Quantity.METHAEMOGLOBIN,
    }
)
CONTEXT: frozenset[Quantity] = frozenset(
    {
        Quantity.FIO2,
        Quantity.OXYGEN_FLOW,
        Quantity.OXYGEN_DEVICE,
        Quantity.SPO2,
        Quantity.BODY_TEMPERATURE,
        Quantity.HAEMOGLOBIN,
        Quantity.PEEP,
        Quantity.MEAN_AIRWAY_PRESSURE,
        Quantity.RESPIRATORY_RATE,
        Quantity.BAROMETRIC_PRESSURE,
        Quantity.MIXED_VENOUS_PO2,
        Quantity.MIXED_VENOUS_SO2,
    }
)
PATIENT_LEVEL: frozenset[Quantity] = frozenset(
    {
        Quantity.ALTITUDE,
        Quantity.DLCO,
        Quantity.DLCO_PERCENT_PREDICTED,
        Quantity.SPO2_EXERTIONAL_NADIR,
        Quantity.SPO2_EXERTIONAL_BASELINE,
    }
)
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


@dataclass(slots=True)
class Pairing:
    """All gases of one input, index gas first, and what the specimen checks saw."""

    gases: list[PairedGas]
    excluded_specimens: list[Measurement]  # arterial-coded values whose sample is doubtful
    non_arterial_po2: list[Measurement]  # venous, capillary, mixed-venous PO2 present

    @property
    def index(self) -> PairedGas:
        return self.gases[0]


def _is_usable_arterial(m: Measurement) -> bool:
    return m.specimen in (None, Specimen.ARTERIAL)


def _sort_key(m: Measurement) -> tuple[bool, float]:
    # Timed values sort by instant (intake times are timezone-aware); untimed ones sort first
    # so that "latest" prefers a timed value.
    return (m.time is not None, m.time.timestamp() if m.time is not None else 0.0)


def _nearest(
    candidates: Iterable[Measurement], anchor_time: datetime | None, limit: timedelta | None
) -> tuple[Measurement | None, Measurement | None]:
    """(chosen, nearest rejected as out of window); a value with no time is chosen only when
    no timed value qualifies."""
    timed = [m for m in candidates if m.time is not None]
    untimed = [m for m in candidates if m.time is None]
    if anchor_time is None or limit is None:
        pool = sorted(timed, key=_sort_key) or untimed
        return (pool[-1] if pool else None), None
    assert all(m.time is not None for m in timed)
    by_distance = sorted(timed, key=lambda m: abs(m.time - anchor_time))  # type: ignore[operator]
    if by_distance and abs(by_distance[0].time - anchor_time) <= limit:  # type: ignore[operator]
        return by_distance[0], None
    rejected = by_distance[0] if by_distance else None
    return (untimed[-1] if untimed else None), rejected


def pair_gases(intake: Intake, *, window: timedelta, same_sample: timedelta) -> Pairing:
    """Build the gases of ``intake``: every usable arterial PO2 anchors one, latest first."""
    by_quantity: dict[Quantity, list[Measurement]] = {}
    excluded: list[Measurement] = []
    for m in intake.measurements:
        if m.quantity in ARTERIAL and not _is_usable_arterial(m):
            excluded.append(m)
            continue
        by_quantity.setdefault(m.quantity, []).append(m)
    anchors = sorted(by_quantity.get(Quantity.ARTERIAL_PO2, []), key=_sort_key, reverse=True)
    if not anchors:
        spo2 = sorted(by_quantity.get(Quantity.SPO2, []), key=_sort_key, reverse=True)
        anchors = spo2[:1]
    gases = [_pair_one(a, by_quantity, window, same_sample) for a in anchors]
    if not gases:
        gases = [_pair_one(None, by_quantity, window, same_sample)]
    non_arterial = [m for q in NOT_ARTERIAL_PO2 for m in by_quantity.get(q, [])]
    return Pairing(gases=gases, excluded_specimens=excluded, non_arterial_po2=non_arterial)


def _pair_one(
    anchor: Measurement | None,
    by_quantity: dict[Quantity, list[Measurement]],
    window: timedelta,
    same_sample: timedelta,
) -> PairedGas:
    gas = PairedGas(anchor=anchor)
    anchor_time = anchor.time if anchor else None
    if anchor is not None:
        gas.values[anchor.quantity] = anchor
    for quantity, candidates in by_quantity.items():
        if quantity in gas.values:  # the anchor; other PaO2s anchor gases of their own
            continue
        if quantity in PATIENT_LEVEL:
            limit: timedelta | None = None
        elif quantity in SAME_SAMPLE:
            limit = same_sample
        elif quantity in CONTEXT:
            limit = window
        else:
            continue
        chosen, rejected = _nearest(candidates, anchor_time, limit)
        if chosen is not None:
            gas.values[quantity] = chosen
            if chosen.time is None and anchor_time is not None:
                gas.untimed.append(quantity)
        elif rejected is not None:
            gas.out_of_window[quantity] = rejected
    return gas
