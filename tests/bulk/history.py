"""The history at a gas, built literally: what ``oxyrule assess`` is given to check a bulk episode.

``service/bulk/episodes.py`` (its module docstring) promises that the episode of the gas at
``t`` is assessed as ``oxyrule assess`` assesses the patient's whole history with a few things
left out. This module leaves them out of a list of resources, one resource at a time, by the
words of that promise, and knows nothing of how the episode is cut (nearest values, timelines).
Each Observation is classified by reading it with the service's reader (with the Patient and
Specimens, which its specimen may name).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from service.config import Settings
from service.fhir.extract import read_bundle
from service.intake.model import Quantity, Specimen

ARTERIAL_CODED = frozenset(
    {
        Quantity.ARTERIAL_PO2,
        Quantity.ARTERIAL_PCO2,
        Quantity.ARTERIAL_PH,
        Quantity.ARTERIAL_HCO3,
        Quantity.ARTERIAL_BASE_EXCESS,
        Quantity.ARTERIAL_SO2,
        Quantity.ARTERIAL_O2HB,
    }
)
NOT_ARTERIAL_BLOOD = frozenset(
    q
    for q in Quantity
    if q.value.startswith(("venous_", "central_venous_", "capillary_", "mixed_venous_"))
)


@dataclass(frozen=True)
class Observed:
    """One Observation as the promise sees it."""

    resource: dict[str, Any]
    time: datetime | None
    kind: str  # gas | sample | context | unused
    usable: bool  # a gas: its sample is known to be arterial (or unstated)


def classify(resources: list[dict[str, Any]]) -> list[Observed | dict[str, Any]]:
    """Each Observation classified; the Patient, Specimens and Locations as they are; the
    resource types the service does not read (an Encounter) left out."""
    helpers = [r for r in resources if r["resourceType"] in ("Patient", "Specimen")]
    out: list[Observed | dict[str, Any]] = []
    for r in resources:
        if r["resourceType"] in ("Patient", "Specimen", "Location"):
            out.append(r)
            continue
        if r["resourceType"] != "Observation":
            continue
        bundle = {
            "resourceType": "Bundle",
            "type": "collection",
            "entry": [{"resource": x} for x in [*helpers, r]],
        }
        found = read_bundle(bundle).measurements
        quantities = {m.quantity for m in found}
        doubtful = any(
            m.specimen not in (None, Specimen.ARTERIAL)
            for m in found
            if m.quantity in ARTERIAL_CODED
        )
        times = [m.time for m in found if m.time is not None]
        time = times[0] if times else _time(r)
        if not found:
            kind = "unused"
        elif Quantity.ARTERIAL_PO2 in quantities:
            kind = "gas"
        elif quantities & NOT_ARTERIAL_BLOOD or (quantities & ARTERIAL_CODED and doubtful):
            kind = "sample"
        else:
            kind = "context"
        out.append(Observed(r, time, kind, not doubtful))
    return out


def _time(resource: dict[str, Any]) -> datetime | None:
    text = resource.get("effectiveDateTime")
    return datetime.fromisoformat(text) if isinstance(text, str) else None


def gas_times(classified: list[Observed | dict[str, Any]]) -> list[datetime]:
    """Every time an arterial PO2 was sampled, earliest first."""
    return sorted(
        {o.time for o in classified if isinstance(o, Observed) and o.kind == "gas" and o.time}
    )


def history_at(
    classified: list[Observed | dict[str, Any]], t: datetime, settings: Settings
) -> dict[str, Any]:
    """The patient's history at the gas sampled at ``t``, as a collection Bundle."""
    beside = timedelta(minutes=settings.pairing_window_minutes)
    response = timedelta(hours=settings.oxygen_response_window_hours)
    observed = [o for o in classified if isinstance(o, Observed)]
    usable_at_t = any(o.kind == "gas" and o.usable and o.time == t for o in observed)
    if usable_at_t:
        scope = {
            o.time
            for o in observed
            if o.kind == "gas" and o.usable and o.time and t - response <= o.time <= t
        }
        end = None
    else:
        scope, end = {t}, t + beside

    def near(when: datetime | None) -> bool:
        return when is None or any(abs(when - g) <= beside for g in scope)

    def kept(o: Observed) -> bool:
        if o.kind == "gas":
            if o.time is None or o.time > t:
                return False
            if o.usable:
                return usable_at_t and o.time in scope
            return near(o.time)
        if o.kind in ("sample", "unused"):
            return near(o.time)
        return o.time is None or end is None or o.time <= end

    resources = [
        o.resource if isinstance(o, Observed) else o
        for o in classified
        if not isinstance(o, Observed) or kept(o)
    ]
    return {
        "resourceType": "Bundle",
        "type": "collection",
        "entry": [{"resource": r} for r in resources],
    }
