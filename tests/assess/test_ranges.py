"""One range table: every value the intake accepts, the rule catalogue accepts.

The intake's table of possible values (``service.intake.plausibility``) is the only one; the
catalogue's measured facts take their ranges from it. These tests would fail if the
catalogue (or a derived fact computed from accepted values) kept a range of its own.
"""

from __future__ import annotations

from datetime import date

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.assess.assess import assess
from service.assess.catalogue import DEFAULT_CATALOGUE, MEASURED_FACTS
from service.config import Settings
from service.engine import FindingCode
from service.engine.facts import FactKind
from service.intake.model import CODED, QUANTITY_UNITS, Intake, Patient, Quantity
from service.intake.plausibility import POSSIBLE_RANGE, out_of_range
from service.physiology.units import to_fact_unit
from service.runtime import Runtime
from service.terminology.codes import CODE_SYSTEM_OF, coded_value

from .builders import intake, m

RUNTIME = Runtime.load()
RULESET = RUNTIME.ruleset
# Coded facts (the oxygen device; since 2.0 also the residence at altitude, resident or
# visitor) have allowed codes, not a range: they are checked against the intake's codes below.
NUMERIC = [measured for measured in MEASURED_FACTS if measured.quantity not in CODED]
CODED_FACTS = [measured for measured in MEASURED_FACTS if measured.quantity in CODED]


@pytest.mark.parametrize("measured", NUMERIC, ids=lambda measured: measured.name)
def test_the_catalogue_range_of_a_measured_fact_is_the_intake_range(measured: object) -> None:
    from service.assess.catalogue import Measured

    assert isinstance(measured, Measured)
    low, high = POSSIBLE_RANGE[measured.quantity]
    spec = DEFAULT_CATALOGUE[measured.name]
    assert (spec.minimum, spec.maximum) == (
        to_fact_unit(low, measured.unit),
        to_fact_unit(high, measured.unit),
    )
    for value in (low, (low + high) / 2, high):
        assert out_of_range(measured.quantity, value) is None
        assert spec.problem(to_fact_unit(value, measured.unit)) is None


def test_every_intake_quantity_a_rule_reads_has_a_possible_range() -> None:
    for measured in NUMERIC:
        assert measured.quantity in POSSIBLE_RANGE
        assert QUANTITY_UNITS[measured.quantity] in ("1", measured.unit)


def test_every_coded_fact_accepts_exactly_the_codes_the_intake_accepts() -> None:
    assert {measured.quantity for measured in CODED_FACTS} == set(CODED)
    for measured in CODED_FACTS:
        spec = DEFAULT_CATALOGUE[measured.name]
        assert spec.kind is FactKind.CODE and spec.unit is None
        assert (spec.minimum, spec.maximum) == (None, None)
        system = CODE_SYSTEM_OF[measured.quantity]
        for code in spec.allowed:
            assert coded_value(measured.quantity, system, code) == code, code
            assert spec.problem(code) is None
        assert coded_value(measured.quantity, system, "no-such-code") is None
        assert spec.problem("no-such-code") is not None
    residence = DEFAULT_CATALOGUE[Quantity.ALTITUDE_RESIDENCE.value]
    assert residence.allowed == {"resident", "visitor"}


def test_barometric_pressure_of_180_is_refused_at_intake_not_after_it() -> None:
    # The case: 180 mmHg was accepted at intake and refused by the catalogue.
    assert out_of_range(Quantity.BAROMETRIC_PRESSURE, 180.0) is not None
    assert out_of_range(Quantity.BAROMETRIC_PRESSURE, 253.0) is None  # Everest summit
    assert DEFAULT_CATALOGUE["barometric_pressure"].problem(253.0) is None


def test_ph_69_is_accepted_at_intake_and_by_the_catalogue() -> None:
    # A pH of 6.9 is a severe, survivable acidaemia; 6.2 is below the analysers' range.
    assert out_of_range(Quantity.ARTERIAL_PH, 6.9) is None
    assert DEFAULT_CATALOGUE["arterial_ph"].problem(6.9) is None
    assert out_of_range(Quantity.ARTERIAL_PH, 6.2) is not None
    assert out_of_range(Quantity.ARTERIAL_PH, 7.9) is None
    assert out_of_range(Quantity.ARTERIAL_PH, 8.1) is not None


def test_a_low_pressure_alveolar_value_that_cannot_be_is_not_used_for_a_data_error() -> None:
    # PB 200 mmHg with PaCO2 50 on air: the alveolar gas equation gives a negative PAO2. It is
    # reported and not used, so "PaO2 exceeds the alveolar PO2" cannot fire on a missing value.
    data = intake(
        m(Quantity.ARTERIAL_PO2, 30.0),
        m(Quantity.ARTERIAL_PCO2, 50.0),
        m(Quantity.FIO2, 0.21),
        m(Quantity.BAROMETRIC_PRESSURE, 200.0),
    )
    result = assess(data, ruleset=RULESET, settings=Settings())
    assert "alveolar_po2" not in result.index.facts
    assert "arterial_alveolar_excess" not in result.index.facts
    codes = {f.code for f in result.findings}
    assert FindingCode.PAO2_EXCEEDS_ALVEOLAR.value not in codes
    assert any(f.message.startswith("alveolar_po2: outside") for f in result.findings)


def _values(quantity: Quantity) -> st.SearchStrategy[float]:
    low, high = POSSIBLE_RANGE[quantity]
    return st.floats(min_value=low, max_value=high, allow_nan=False)


@st.composite
def _intakes(draw: st.DrawFn) -> Intake:
    chosen = draw(st.lists(st.sampled_from(NUMERIC), unique=True, max_size=len(NUMERIC)))
    measurements = [m(measured.quantity, draw(_values(measured.quantity))) for measured in chosen]
    for measured in CODED_FACTS:  # a code, when drawn, from the codes the intake accepts
        codes = sorted(DEFAULT_CATALOGUE[measured.name].allowed)
        if draw(st.booleans()):
            measurements.append(m(measured.quantity, draw(st.sampled_from(codes))))
    if draw(st.booleans()):
        measurements.append(m(Quantity.ARTERIAL_PO2, draw(_values(Quantity.ARTERIAL_PO2))))
    born = draw(st.dates(min_value=date(1900, 1, 1), max_value=date(2026, 1, 1)))
    return Intake(patient=Patient("Patient/p", born, None), measurements=measurements)


@settings(max_examples=150, deadline=None)
@given(_intakes())
def test_any_accepted_input_gives_facts_the_catalogue_accepts(data: Intake) -> None:
    # Every fact handed to the engine passes the catalogue: evaluate() would raise otherwise,
    # and no value is silently dropped between the intake and the rules.
    result = assess(data, ruleset=RULESET, settings=Settings())
    DEFAULT_CATALOGUE.check(result.index.facts)
