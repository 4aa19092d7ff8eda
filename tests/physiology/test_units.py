"""Unit conversion against UCUM's definitions."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from service.exceptions import ImpossibleValueError, UnitError
from service.physiology import units as u
from service.physiology.units import Dimension


def test_mmhg_to_kpa_uses_the_ucum_factor() -> None:
    # UCUM essence: m[Hg] = 133.3220 kPa, so 1 mm[Hg] = 0.1333220 kPa.
    assert u.kpa_from_mmhg(1.0) == pytest.approx(0.1333220, abs=1e-12)
    # UCUM: m[Hg] = 133.3220 kPa, so 1 kPa = 7.500638 mm[Hg] [calc].
    assert u.mmhg_from_kpa(1.0) == pytest.approx(7.500638, abs=5e-7)


def test_mmhg_to_kpa_matches_published_worked_values() -> None:
    # [calc] from the UCUM factor: PAO2 101.8 mmHg = 13.57 kPa; 673.0 mmHg = 89.7 kPa.
    assert u.kpa_from_mmhg(101.8) == pytest.approx(13.57, abs=0.005)
    assert u.kpa_from_mmhg(673.0) == pytest.approx(89.7, abs=0.05)
    # Grocott et al., NEJM 2009 abstract: PB 272 mmHg (36.3 kPa), PaO2 24.6 mmHg (3.28 kPa).
    assert u.kpa_from_mmhg(272.0) == pytest.approx(36.3, abs=0.05)
    assert u.kpa_from_mmhg(24.6) == pytest.approx(3.28, abs=0.005)


def test_cmh2o_to_mmhg_uses_the_ucum_factor() -> None:
    # UCUM: m[H2O] = 9.80665 kPa, m[Hg] = 133.3220 kPa: 1 mm[Hg] ≈ 1.3595 cm[H2O] [calc].
    assert u.mmhg_from_cmh2o(1.3595) == pytest.approx(1.0, abs=1e-4)


def test_fahrenheit_to_celsius_fixed_points() -> None:
    # Definition of the Fahrenheit scale: 32 °F freezing, 212 °F boiling, 98.6 °F = 37 °C.
    assert u.celsius_from_fahrenheit(32.0) == 0.0
    assert u.celsius_from_fahrenheit(212.0) == pytest.approx(100.0)
    assert u.celsius_from_fahrenheit(98.6) == pytest.approx(37.0)


def test_haemoglobin_g_per_l_to_g_per_dl() -> None:
    # SI definition: 1 L = 10 dL, so 150 g/L = 15 g/dL.
    assert u.g_dl_from_g_l(150.0) == 15.0
    assert u.g_l_from_g_dl(15.0) == 150.0


@pytest.mark.parametrize(
    ("value", "unit", "fraction", "reinterpreted"),
    [
        (21.0, "%", 0.21, False),
        (0.21, "1", 0.21, False),
        # Common practice: feeds send an FiO2 of 0.3 with UCUM "%"; it is a fraction.
        (0.3, "%", 0.3, True),
        (40.0, "1", 0.40, True),
        (100.0, "%", 1.0, False),
        (1.0, "%", 1.0, True),
    ],
)
def test_normalise_fio2_reads_percent_and_fraction(
    value: float, unit: str, fraction: float, reinterpreted: bool
) -> None:
    result = u.normalise_fio2(value, unit)
    assert result.fraction == pytest.approx(fraction)
    assert result.reinterpreted is reinterpreted


@pytest.mark.parametrize(("value", "unit"), [(140.0, "%"), (5.0, "%"), (0.05, "1"), (0.0, "1")])
def test_normalise_fio2_rejects_values_outside_ten_to_hundred_percent(
    value: float, unit: str
) -> None:
    with pytest.raises(ImpossibleValueError, match=r"between 0\.1 and 1"):
        u.normalise_fio2(value, unit)


def test_normalise_fio2_rejects_a_unit_that_is_not_a_fraction() -> None:
    with pytest.raises(UnitError, match="'L/min'"):  # a code of the service's own table
        u.normalise_fio2(2.0, "L/min")


def test_to_canonical_converts_each_dimension_once() -> None:
    assert u.to_canonical(13.3, "kPa", Dimension.PRESSURE) == pytest.approx(99.76, abs=0.01)
    assert u.to_canonical(97.0, "%", Dimension.FRACTION) == pytest.approx(0.97)
    assert u.to_canonical(101.3, "[degF]", Dimension.TEMPERATURE) == pytest.approx(38.5)
    assert u.to_canonical(2000.0, "mL/min", Dimension.FLOW) == pytest.approx(2.0)


def test_to_canonical_names_the_accepted_units_when_it_refuses() -> None:
    with pytest.raises(UnitError) as caught:
        u.to_canonical(5.0, "psi", Dimension.PRESSURE)
    assert "mm[Hg]" in str(caught.value)
    assert "kPa" in str(caught.value)


@given(st.floats(min_value=0.0, max_value=2000.0, allow_nan=False))
def test_pressure_round_trip_is_exact(mmhg: float) -> None:
    assert u.mmhg_from_kpa(u.kpa_from_mmhg(mmhg)) == pytest.approx(mmhg, rel=1e-12, abs=1e-12)


@given(st.floats(min_value=0.0, max_value=1.0, allow_nan=False))
def test_fraction_round_trip_is_exact(fraction: float) -> None:
    assert u.fraction_from_percent(u.percent_from_fraction(fraction)) == pytest.approx(
        fraction, rel=1e-12, abs=1e-15
    )


@given(st.floats(min_value=-50.0, max_value=120.0, allow_nan=False))
def test_temperature_round_trip_is_exact(celsius: float) -> None:
    assert u.celsius_from_fahrenheit(u.fahrenheit_from_celsius(celsius)) == pytest.approx(
        celsius, abs=1e-9
    )


@given(st.floats(min_value=0.1, max_value=1.0), st.sampled_from(["%", "1"]))
def test_normalise_fio2_is_idempotent_on_its_own_output(fraction: float, unit: str) -> None:
    sent = fraction * 100.0 if unit == "%" else fraction
    first = u.normalise_fio2(sent, unit)
    assert u.normalise_fio2(first.fraction, "1").fraction == pytest.approx(first.fraction)


def test_fio2_just_above_one_is_refused_whichever_way_it_is_read() -> None:
    # A fraction above 1 sent as "1" is read as a percentage (1.05 % = 0.0105) and one just
    # above 1 sent as "%" as a percentage too; both are impossible inspired fractions.
    for value, unit, fraction in ((1.05, "1", 0.0105), (1.05, "%", 0.0105), (105.0, "%", 1.05)):
        with pytest.raises(ImpossibleValueError) as caught:
            u.normalise_fio2(value, unit)
        assert caught.value.value == pytest.approx(fraction)
    assert u.normalise_fio2(1.0, "%") == u.Fio2(fraction=1.0, reinterpreted=True)
    assert u.normalise_fio2(100.0, "%") == u.Fio2(fraction=1.0, reinterpreted=False)
    assert u.FIO2_LIMITS == (0.10, 1.0)  # 10 % (hypoxic test gas) to pure oxygen


def test_the_units_read_as_ucum_are_ucum_and_the_others_are_named() -> None:
    # ucumvert (a UCUM grammar from the registry) parses every code read as UCUM; the
    # spellings read with a warning are not UCUM, but "pH", which UCUM reads as picohenry
    # (p = pico, H = henry; UCUM 1.9 tables), so it is not [pH] either.
    from service.physiology.units import KNOWN_UNITS, NOT_UCUM
    from tests.conformance.validators import is_ucum

    assert [u for u in KNOWN_UNITS - set(NOT_UCUM) if not is_ucum(u)] == []
    assert [u for u in NOT_UCUM if is_ucum(u)] == ["pH"]
    assert all(is_ucum(meant) for meant in NOT_UCUM.values())
