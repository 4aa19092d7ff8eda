"""The intake records (msgspec Structs since issue 18) behave as the immutable value records
every stage after the adapters relies on: equal by value, hashable, frozen, changed only into a
copy, and kept whole through pickling (the NDJSON workers and the Spark path move them between
processes). The contract checked is Python's own data model: equal objects hash equally."""

from __future__ import annotations

import pickle
from datetime import UTC, date, datetime

import msgspec
import pytest

from service.intake.model import (
    Fio2Source,
    IntakeIssue,
    Measurement,
    Patient,
    Quantity,
    Severity,
    Source,
    Specimen,
)
from service.intake.reading import Reading

WHEN = datetime(2026, 1, 5, 10, 0, tzinfo=UTC)


def _measurement(value: float = 0.4) -> Measurement:
    return Measurement(
        Quantity.FIO2,
        value,
        WHEN,
        Source("Observation/f1", "Bundle.entry[1].resource"),
        None,
        40.0,
        "%",
        Fio2Source.MEASURED,
    )


RECORDS: list[msgspec.Struct] = [
    _measurement(),
    Source("Observation/p1", "Bundle.entry[0].resource"),
    IntakeIssue("unit-converted", Severity.INFORMATION, "converted", "Bundle.entry[0]"),
    Patient("Patient/a", date(1958, 3, 14), "female"),
    Reading(0.4, sent_value=40.0, sent_unit="%"),
]


@pytest.mark.parametrize("record", RECORDS, ids=lambda r: type(r).__name__)
def test_a_record_is_an_immutable_value(record: msgspec.Struct) -> None:
    copy = pickle.loads(pickle.dumps(record))
    assert copy == record and copy is not record
    assert hash(copy) == hash(record)
    assert len({record, copy}) == 1
    first = msgspec.structs.fields(type(record))[0].name
    with pytest.raises(AttributeError):
        setattr(record, first, None)


def test_a_measurement_is_changed_into_a_copy() -> None:
    original = _measurement()
    changed = msgspec.structs.replace(original, value=0.5, sent_value=None, sent_unit=None)
    assert original.value == 0.4 and original.sent_unit == "%"  # untouched
    assert changed.value == 0.5 and changed.sent_value is None and changed.time == WHEN
    assert changed != original


def test_records_differ_by_any_field_and_by_kind() -> None:
    assert _measurement(0.4) != _measurement(0.41)
    m = _measurement()
    assert msgspec.structs.replace(m, specimen=Specimen.ARTERIAL) != m
    # A record never equals one of another kind (as with the dataclasses they were).
    source: object = Source("a", "b")
    assert source != IntakeIssue("a", Severity.ERROR, "b", "c")
    assert m.unit == "1"  # the canonical unit of FiO2, a fraction
