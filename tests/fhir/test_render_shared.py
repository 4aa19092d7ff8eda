"""What the renderer shares between results and writes once stays right.

The fixed parts of a result (codings, code texts, components, the caution) are built once and
held by every result, a value's Quantity is shared wherever it appears, and a few steps are
written out for speed (``service.fhir.render``). These tests check that no result changes
another, and that each written-out step gives what the general one gives: Python's own
``round`` and ``uuid`` (the standard library is the reference).
"""

from __future__ import annotations

import copy
import math
import uuid
from datetime import UTC, datetime, timedelta
from pathlib import Path

import orjson
import pytest
from hypothesis import given
from hypothesis import strategies as st

from service.fhir.render import _Links, minutes_before
from service.runtime import Runtime

ROOT = Path(__file__).resolve().parents[2]
BUNDLES = sorted((ROOT / "fixtures").rglob("*.bundle.json"))
NOW = datetime(2026, 12, 1, 8, 0, tzinfo=UTC)
DECISION = "0b3f1c2e-4d5a-4b6c-8d7e-9f0a1b2c3d4e"


def test_no_result_changes_an_earlier_one() -> None:
    runtime = Runtime.load()
    first = runtime.assess_bundle(orjson.loads(BUNDLES[0].read_bytes()), now=NOW)
    kept = copy.deepcopy(first)
    for path in BUNDLES:
        for unit in ("mm[Hg]", "kPa"):
            runtime.assess_bundle(orjson.loads(path.read_bytes()), now=NOW, pressure_unit=unit)
    assert first == kept
    assert orjson.dumps(first) == orjson.dumps(kept)


@given(
    st.timedeltas(min_value=timedelta(days=-400), max_value=timedelta(days=400))
    | st.integers(min_value=-400 * 1440, max_value=400 * 1440).map(lambda m: timedelta(minutes=m))
)
def test_minutes_before_is_the_offset_rounded_to_a_tenth(offset: timedelta) -> None:
    expected = round(offset.total_seconds() / 60.0, 1)  # the general rule (standard library)
    found = minutes_before(offset)
    assert found == expected
    assert math.copysign(1.0, found) == math.copysign(1.0, expected)  # no sign of zero lost
    assert type(found) is float


@pytest.mark.parametrize(
    "offset",
    [
        timedelta(0),
        timedelta(minutes=-5),
        timedelta(seconds=-1),  # rounds to -0.0 as round() does
        timedelta(seconds=3),
        timedelta(minutes=-1, microseconds=1),
        timedelta(minutes=2, microseconds=999_999),
        timedelta(seconds=30),
        timedelta(seconds=-30),
        timedelta(seconds=-90, microseconds=1),
        timedelta(days=-1),
        timedelta(days=3, seconds=59),
    ],
)
def test_minutes_before_at_the_edges(offset: timedelta) -> None:
    expected = round(offset.total_seconds() / 60.0, 1)
    assert repr(minutes_before(offset)) == repr(expected)


@given(st.uuids())
def test_entry_urls_take_the_decision_id_as_uuid_spells_it(decision: uuid.UUID) -> None:
    prefix = f"urn:uuid:{str(decision)[:24]}"
    for spelling in (str(decision), str(decision).upper(), decision.hex, f"{{{decision}}}"):
        links = _Links(spelling, {})
        assert links.entry("first") == f"{prefix}000000000001"
        assert links.entry("second") == f"{prefix}000000000002"
        assert links.entry("first") == f"{prefix}000000000001"


def test_entry_urls_past_the_numbers_written_once() -> None:
    links = _Links(DECISION, {})
    urls = [links.entry(f"e{n}") for n in range(1, 300)]
    assert urls == [f"urn:uuid:{DECISION[:24]}{n:012x}" for n in range(1, 300)]


@pytest.mark.parametrize("decision", ["d-1", "", "0b3f1c2e-4d5a-4b6c-8d7e-9f0a1b2c3d4", "x" * 36])
def test_a_decision_id_that_is_no_uuid_is_refused_as_uuid_refuses_it(decision: str) -> None:
    with pytest.raises(ValueError) as expected:
        uuid.UUID(decision)
    with pytest.raises(ValueError) as found:
        _Links(decision, {})
    assert found.value.args == expected.value.args
