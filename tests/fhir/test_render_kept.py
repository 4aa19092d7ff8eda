"""What the renderer keeps between results and writes out for speed gives what the general
rule gives.

``service.fhir.render`` copies each Quantity from a template per kind of value, keeps the parts
that depend only on a code, a rule id or an offset (a mechanism's code and grade, a rule, a
finding's code and severity, a paired value's ``taken-before-gas``) and shares them between
results. These tests check each written-out step against the general one: the Quantities
against ``presentation`` (the one place where a value is converted and rounded), the offsets
against Python's own ``round`` (the standard library is the reference), and that the kept
tables stay within their budget and change nothing when they start again.
"""

from __future__ import annotations

import math
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import orjson
import pytest
from hypothesis import example, given
from hypothesis import strategies as st

from service.assess.partition import assessment_partitions
from service.assess.presentation import PressureUnit, display_round, quantity, shown_quantity
from service.fhir import render
from service.fhir.extract import read_bundle
from service.runtime import Runtime

Json = dict[str, Any]
ROOT = Path(__file__).resolve().parents[2]
BUNDLES = sorted((ROOT / "fixtures").rglob("*.bundle.json"))
NOW = datetime(2026, 12, 1, 8, 0, tzinfo=UTC)
DECISION = "0b3f1c2e-4d5a-4b6c-8d7e-9f0a1b2c3d4e"
UNITS: tuple[PressureUnit, ...] = ("mm[Hg]", "kPa")
# The partition's names in the ``deficit`` parameter, and the names their Quantities are
# shown under (``presentation``: the display decimals by name).
PARTITION_NAMES = {
    "pao2": "pao2",
    "expected-pao2": "pao2-expected",
    "fall": "pao2-fall",
    **{part: f"deficit-{key}" for key, part in render.DEFICIT_PARTS.items()},
}


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def _parts(parameter: Json) -> dict[str, Json]:
    return {p["name"]: p for p in parameter["part"]}


@pytest.mark.parametrize("unit", UNITS)
def test_every_quantity_shown_is_the_general_rules(runtime: Runtime, unit: PressureUnit) -> None:
    checked = 0
    for path in BUNDLES:
        intake = read_bundle(orjson.loads(path.read_bytes()), concept_map=runtime.concept_map)
        assessment = runtime.assess_intake(intake, now=NOW, decision_id=DECISION)
        result = runtime.render(assessment, pressure_unit=unit, addresses=intake.addresses)
        params = next(e["resource"] for e in result["entry"] if e["resource"]["id"] == "result")
        gases = [p for p in params["parameter"] if p["name"] == "gas"]
        for gas, parameter in zip(assessment.gases, gases, strict=True):
            for name, part in _parts(parameter).items():
                if "valueQuantity" in part:
                    d = gas.facts.derived[name]
                    assert part["valueQuantity"] == shown_quantity(name, d, unit), (path, name)
                    checked += 1
        partitions = assessment_partitions(assessment, runtime.settings)
        shown = [s for g in partitions for s in g.shown]
        deficits = [
            p
            for p in params["parameter"]
            if p["name"] == "deficit" and "not-computed" not in _parts(p)
        ]
        for partition, parameter in zip(shown, deficits, strict=True):
            split = partition.partition
            mmhg = {
                "pao2": split.arterial_po2,
                "expected-pao2": split.expected_pao2,
                "fall": split.fall,
            }
            mmhg |= {render.DEFICIT_PARTS[key]: value for key, value in partition.parts}
            found = {
                name: part["valueQuantity"]
                for name, part in _parts(parameter).items()
                if "valueQuantity" in part
            }
            assert found.keys() == mmhg.keys()
            for name, value in mmhg.items():
                expected = quantity(PARTITION_NAMES[name], value, "mm[Hg]", unit)
                assert found[name] == expected, (path, name)
                assert repr(found[name]["value"]) == repr(expected["value"])  # no -0.0
                checked += 1
    assert checked > 500  # every fixture's values, not a few


def _round_reference(value: float, decimals: int) -> float:
    """The general rule (``presentation.shaped``): Python's own ``round``."""
    rounded = round(value, decimals) + 0.0
    return rounded if decimals else float(int(rounded))


@given(
    st.floats(allow_nan=False, allow_infinity=False)
    | st.floats(min_value=-2e9, max_value=2e9)
    | st.integers(min_value=-(10**7), max_value=10**7).map(lambda n: n / 200),  # midpoints
    st.sampled_from([0, 1, 2, 3]),
)
@example(0.25, 1)  # an exact midpoint: to even, 0.2
@example(0.35, 1)  # not exactly 0.35 in binary: 0.3
@example(2.675, 2)  # 2.67499999…: 2.67
@example(-0.04, 1)  # -0.0 before + 0.0
@example(-0.5, 0)
@example(1.5, 0)
@example(99999999.95, 1)
@example(1e9 / 10 - 0.05, 1)  # at the edge of the written-out range
@example(5e-324, 2)
def test_display_round_is_python_s_round(value: float, decimals: int) -> None:
    found = display_round(value, decimals, 10.0**decimals)
    expected = _round_reference(value, decimals)
    assert repr(found) == repr(expected)  # the same double, the same sign of zero
    assert type(found) is float


@pytest.mark.parametrize("value", [math.nan, math.inf, -math.inf])
@pytest.mark.parametrize("decimals", [0, 1, 2])
def test_display_round_leaves_what_is_no_number_to_round(value: float, decimals: int) -> None:
    try:
        expected: object = _round_reference(value, decimals)
    except (ValueError, OverflowError) as exc:
        with pytest.raises(type(exc)):
            display_round(value, decimals, 10.0**decimals)
    else:
        assert repr(display_round(value, decimals, 10.0**decimals)) == repr(expected)


def test_a_paired_value_s_offset_is_the_general_rounding_kept_or_not() -> None:
    """The ``taken-before-gas`` part kept by offset is the one written afresh: the offset in
    minutes as ``round(seconds / 60, 1)`` gives it, for the usual and the awkward offsets."""
    offsets = [timedelta(minutes=m) for m in range(-30, 90)]
    offsets += [timedelta(seconds=s) for s in (-90, -30, -1, 1, 3, 29, 30, 31, 3599)]
    offsets += [timedelta(days=-1), timedelta(days=3, seconds=59)]
    for offset in offsets:
        for _ in range(2):  # written, then kept
            part = render._taken_before(offset)
            expected = round(offset.total_seconds() / 60.0, 1)
            assert part["name"] == "taken-before-gas"
            assert part["valueQuantity"] == {
                "value": expected,
                "unit": "min",
                "system": "http://unitsofmeasure.org",
                "code": "min",
            }
            assert repr(part["valueQuantity"]["value"]) == repr(expected)


def test_the_kept_parts_are_bounded_and_starting_again_changes_nothing(
    runtime: Runtime,
) -> None:
    tables = (render._TAKEN_BEFORE, render._RULE_PARTS, render._FINDING_CODE_PARTS)
    for n in range(render._KEPT + 10):
        render._taken_before(timedelta(seconds=n))
    assert 0 < len(render._TAKEN_BEFORE) <= render._KEPT
    data = orjson.loads(BUNDLES[0].read_bytes())
    first = orjson.dumps(runtime.assess_bundle(data, now=NOW, decision_id=DECISION))
    for table in tables:
        table.clear()
    again = orjson.dumps(runtime.assess_bundle(data, now=NOW, decision_id=DECISION))
    assert again == first
    assert all(len(table) <= render._KEPT for table in tables)
