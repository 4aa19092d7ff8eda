"""The arterial O2 content fact on each way its saturation is found, and the refusals that
guard each way (the content equation CaO2 = k × Hb × SaO2 + 0.003 × PaO2, common practice;
the pH range is the analysers' measuring range, 6.3-8.0, as the intake reads it).

A measured SaO2 needs no dissociation curve, so the curve is not built for it; the pH sent
with it must still be refused when it is impossible, exactly as on the curve's path."""

from __future__ import annotations

import math

import pytest

from service.assess.derivation import Computed, DerivedFact
from service.assess.derived import DERIVED_FACTS
from service.config import Settings
from service.exceptions import ImpossibleValueError

ENTRIES: dict[str, DerivedFact] = {entry.name: entry for entry in DERIVED_FACTS}
SOLUBILITY_ML_DL_PER_MMHG = 0.003  # dissolved O2 at 37 °C (common practice)
HUFNER_ML_PER_G = 1.34  # the conventional Hüfner factor (common practice)


def _content(**inputs: float | None) -> Computed:
    out = ENTRIES["arterial_o2_content"].compute(
        haemoglobin=15.0, settings=Settings(hufner_ml_per_g=HUFNER_ML_PER_G), **inputs
    )
    assert isinstance(out, Computed)
    return out


@pytest.mark.parametrize("ph", [None, 7.10, 7.40, 7.60])
def test_a_measured_saturation_is_used_as_it_is_whatever_the_ph(ph: float | None) -> None:
    # CaO2 = 1.34 × 15 × 0.95 + 0.003 × 80 = 19.095 + 0.24 = 19.335 mL/dL (by hand): a
    # measured SaO2 does not move with the pH (the curve only stands in for a missing SaO2).
    out = _content(arterial_po2=80.0, arterial_so2_functional=0.95, arterial_ph=ph)
    assert out.value == pytest.approx(19.335, abs=1e-9)
    assert out.method == "CaO2 = 1.34 × Hb × SaO2 + 0.003 × PaO2 (measured saturation)"


def test_dyshaemoglobins_correct_a_measured_saturation() -> None:
    # 1.34 × 15 × 0.95 × (1 − 0.10 − 0.02) + 0.003 × 80 = 16.8036 + 0.24 (by hand)
    out = _content(
        arterial_po2=80.0,
        arterial_so2_functional=0.95,
        carboxyhaemoglobin=0.10,
        methaemoglobin=0.02,
        arterial_ph=7.40,
    )
    assert out.value == pytest.approx(17.0436, abs=1e-9)
    assert out.method.endswith("(measured saturation, times (1 − COHb − MetHb))")


def test_without_a_saturation_the_curve_of_the_ph_is_read() -> None:
    # At pH 7.40 the patient's curve is the standard one, Severinghaus 1979 eq. 1:
    # S = x / (x + 23400), x = PO2³ + 150 PO2 (P50 26.9 mmHg).
    x = 26.86**3 + 150.0 * 26.86
    out = _content(arterial_po2=26.86, arterial_ph=7.40)
    assert out.value == pytest.approx(
        HUFNER_ML_PER_G * 15.0 * x / (x + 23400.0) + SOLUBILITY_ML_DL_PER_MMHG * 26.86, abs=1e-6
    )
    assert "P50 26.9 mmHg for pH 7.40" in out.method
    # An acidaemia moves the curve right (the Bohr effect): less oxygen at the same PaO2.
    assert _content(arterial_po2=26.86, arterial_ph=7.20).value < out.value


@pytest.mark.parametrize("so2", [0.95, None])
@pytest.mark.parametrize("ph", [6.2, 8.1, math.nan, math.inf])
def test_an_impossible_ph_is_refused_on_every_path(so2: float | None, ph: float) -> None:
    # Outside the analysers' range (6.3-8.0) or not a number: refused whether or not a
    # measured SaO2 makes the curve unnecessary, with the same located error.
    with pytest.raises(ImpossibleValueError) as refused:
        _content(arterial_po2=80.0, arterial_so2_functional=so2, arterial_ph=ph)
    assert refused.value.quantity == "ph"


@pytest.mark.parametrize("ph", [6.3, 8.0])
def test_the_ends_of_the_ph_range_are_accepted_with_a_measured_saturation(ph: float) -> None:
    assert _content(arterial_po2=80.0, arterial_so2_functional=0.95, arterial_ph=ph).value == (
        pytest.approx(19.335, abs=1e-9)
    )
