"""``FactCatalogue.stated``: ``check`` and ``as_stated`` in one pass, as ``evaluate`` uses them.
It must accept and refuse what ``check`` does (the same problems) and return what
``as_stated`` returns, value for value and type for type."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine.catalogue import FactCatalogue, FactKind, FactSpec
from service.engine.errors import FactError

MMHG_PER_KPA = 1000 / 133.322  # 1 mm[Hg] = 133.322 Pa (UCUM, the unit's definition)


def _same(facts: dict[str, object], catalogue: FactCatalogue = DEFAULT_CATALOGUE) -> None:
    catalogue.check(facts)
    stated = catalogue.stated(facts)
    expected = catalogue.as_stated(facts)
    assert stated == expected
    assert [type(v) for v in stated.values()] == [type(v) for v in expected.values()]
    assert list(stated) == list(facts)


def test_a_converted_pressure_is_compared_as_stated() -> None:
    # 6.0 kPa is 45.004 mm[Hg] after conversion (UCUM); stated to PaCO2's one decimal it is 45.0
    stated = DEFAULT_CATALOGUE.stated({"arterial_pco2": 6.0 * MMHG_PER_KPA})
    assert stated == {"arterial_pco2": 45.0}


def test_every_kind_at_its_bounds_is_stated_as_as_stated_has_it() -> None:
    _same(
        {
            "arterial_po2": 0.0,
            "arterial_pco2": 250.0,
            "fio2": 0.215,
            "spo2": 93.25,
            "age": 130,
            "aa_gradient": -1200.0,
            "specimen_unknown": False,
            "oxygen_device": "ventilator",
        }
    )


def test_the_result_is_a_copy() -> None:
    facts: dict[str, object] = {"specimen_unknown": True, "age": 40}
    stated = DEFAULT_CATALOGUE.stated(facts)
    facts["age"] = 41
    assert stated == {"specimen_unknown": True, "age": 40}


@pytest.mark.parametrize(
    "facts",
    [
        {"not_a_fact": 1.0},
        {"arterial_po2": True},
        {"arterial_po2": "61"},
        {"arterial_po2": math.nan},
        {"arterial_po2": -0.1},
        {"arterial_po2": 1200.1},
        {"age": -1},
        {"age": 131},
        {"fio2": 21.0},
        {"specimen_unknown": 1},
        {"specimen_unknown": "yes"},
        {"oxygen_device": "tent"},
        {"oxygen_device": 3},
        {"arterial_po2": None},
        {"spo2": 90.0, "arterial_po2": -5.0, "mystery": 1.0, "oxygen_device": "tent"},
    ],
)
def test_what_check_refuses_stated_refuses_with_the_same_problems(
    facts: dict[str, object],
) -> None:
    with pytest.raises(FactError) as checked:
        DEFAULT_CATALOGUE.check(facts)
    with pytest.raises(FactError) as stated:
        DEFAULT_CATALOGUE.stated(facts)
    assert stated.value.problems == checked.value.problems


def test_a_quantity_with_an_open_bound_is_checked_in_full_and_still_rounded() -> None:
    catalogue = FactCatalogue(
        [
            FactSpec("open", FactKind.QUANTITY, "1", "x", 0.0, math.inf, decimals=1),
            FactSpec("flag", FactKind.BOOLEAN, None, "x"),
        ]
    )
    assert catalogue.stated({"open": 1.26, "flag": True}) == {"open": 1.3, "flag": True}
    assert type(catalogue.stated({"open": 7})["open"]) is int
    _same({"open": 1e9, "flag": False}, catalogue)
    with pytest.raises(FactError):
        catalogue.stated({"open": -1.0})


def _quantity(spec: FactSpec) -> st.SearchStrategy[object]:
    low, high = float(spec.minimum or 0.0), float(spec.maximum or 0.0)
    return st.one_of(
        st.floats(min_value=low, max_value=high),
        st.sampled_from([low, high]),
        st.integers(min_value=math.ceil(low), max_value=math.floor(high)),
    )


def _value(spec: FactSpec) -> st.SearchStrategy[object]:
    if spec.kind is FactKind.QUANTITY:
        return _quantity(spec)
    if spec.kind is FactKind.BOOLEAN:
        return st.booleans()
    return st.sampled_from(sorted(spec.allowed))


@settings(max_examples=200, deadline=None)
@given(
    st.fixed_dictionaries(
        {}, optional={spec.name: _value(spec) for spec in DEFAULT_CATALOGUE.values()}
    )
)
def test_any_accepted_facts_are_stated_as_as_stated_has_them(facts: dict[str, object]) -> None:
    _same(facts)


def test_a_number_on_a_bound_is_stated_like_any_other() -> None:
    # A bound written with more decimals than the fact is stated at: on it, the value is still
    # rounded only when compared, as anywhere inside the range.
    catalogue = FactCatalogue(
        [FactSpec("x", FactKind.QUANTITY, "1", "x", 0.125, 2.375, decimals=1)]
    )
    for value in (0.125, 2.375):
        assert catalogue.stated({"x": value}, frozenset()) == {"x": value}
        assert catalogue.stated({"x": value}, frozenset({"x"})) == {"x": round(value, 1)}
