"""Small builders of intake measurements for the assess tests (invented values)."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

from service.intake.model import (
    Fio2Source,
    Intake,
    Measurement,
    Patient,
    Quantity,
    Source,
    Specimen,
)

T0 = datetime(2026, 11, 20, 10, 0, tzinfo=UTC)


def m(
    quantity: Quantity,
    value: float | str,
    minutes: float | None = 0.0,
    *,
    ident: str | None = None,
    specimen: Specimen | None = None,
    fio2_source: Fio2Source | None = None,
) -> Measurement:
    name = ident or f"{quantity.value}-{minutes}"
    return Measurement(
        quantity=quantity,
        value=value,
        time=None if minutes is None else T0 + timedelta(minutes=minutes),
        source=Source(f"Observation/{name}", f"Bundle.entry[0].resource/{name}"),
        specimen=specimen,
        fio2_source=fio2_source,
    )


def intake(*measurements: Measurement, birth: tuple[int, int, int] | None = (1960, 5, 1)) -> Intake:
    from datetime import date

    patient = Patient("Patient/p1", date(*birth) if birth else None, None)
    return Intake(patient=patient, measurements=list(measurements))
