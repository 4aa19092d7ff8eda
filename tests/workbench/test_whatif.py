"""What-if changes the inputs of the index gas only, and keeps the sample consistent."""

from __future__ import annotations

import math
from pathlib import Path

import orjson
import pytest

from service.fhir.extract import read_bundle
from service.intake.model import Quantity
from service.runtime import Runtime
from service.workbench.whatif import WhatIf, WhatIfError, apply_what_if

ROOT = Path(__file__).resolve().parents[2]
# Invented demo case: PaCO2 65 mmHg, pH 7.25, HCO3 27.6 mmol/L at sea level.
CASE = ROOT / "fixtures" / "demo" / "post-operative-drowsiness.bundle.json"
# Invented demo case with two gases on FiO2 0.5 and 1.0.
SERIAL = ROOT / "fixtures" / "demo" / "ventilated-two-fio2.bundle.json"


@pytest.fixture(scope="module")
def runtime() -> Runtime:
    return Runtime.load()


def _values(intake: object, quantity: Quantity) -> list[float]:
    return [m.value for m in intake.measurements if m.quantity is quantity]  # type: ignore[attr-defined]


def test_a_new_paco2_brings_the_ph_of_the_same_bicarbonate(runtime: Runtime) -> None:
    intake = read_bundle(orjson.loads(CASE.read_bytes()))
    gas = runtime.assess_intake(intake).index.gas
    changed = apply_what_if(intake, gas, WhatIf(paco2_mmhg=40.0))
    assert _values(changed, Quantity.ARTERIAL_PCO2) == [40.0]
    # Henderson (Kassirer & Bleich 1965): [H+] = 24 × 40 / 27.6 = 34.8 nmol/L, pH 7.459.
    expected_ph = 9.0 - math.log10(24.0 * 40.0 / 27.6)
    assert _values(changed, Quantity.ARTERIAL_PH) == [pytest.approx(expected_ph, abs=0.001)]
    assert _values(changed, Quantity.ARTERIAL_HCO3) == [27.6]
    assert _values(intake, Quantity.ARTERIAL_PCO2) == [65.0]  # the case itself is untouched


def test_an_fio2_not_sent_is_added_at_the_gas_time_and_only_the_index_gas_changes(
    runtime: Runtime,
) -> None:
    intake = read_bundle(orjson.loads(SERIAL.read_bytes()))
    a = runtime.assess_intake(intake)
    before = sorted(_values(intake, Quantity.FIO2))
    changed = apply_what_if(intake, a.index.gas, WhatIf(fio2=0.7))
    after = sorted(_values(changed, Quantity.FIO2))
    assert len(after) == len(before) and 0.7 in after
    assert len(set(before) - set(after)) == 1  # the earlier gas keeps its FiO2
    again = runtime.assess_intake(changed)
    assert again.index.facts["fio2"] == 0.7


def test_an_altitude_replaces_a_measured_pressure(runtime: Runtime) -> None:
    intake = read_bundle(orjson.loads(CASE.read_bytes()))
    gas = runtime.assess_intake(intake).index.gas
    changed = apply_what_if(intake, gas, WhatIf(altitude_m=2500.0))
    assert _values(changed, Quantity.BAROMETRIC_PRESSURE) == []
    again = runtime.assess_intake(changed)
    # West 1996 model atmosphere at 2,500 m: PB = exp(6.63268 − 0.1112 × 2.5 − 0.00149 × 2.5²)
    west = math.exp(6.63268 - 0.1112 * 2.5 - 0.00149 * 2.5**2)
    assert again.index.facts["barometric_pressure"] == pytest.approx(west, abs=0.5)


def test_an_age_becomes_a_birth_date(runtime: Runtime) -> None:
    intake = read_bundle(orjson.loads(CASE.read_bytes()))
    gas = runtime.assess_intake(intake).index.gas
    again = runtime.assess_intake(apply_what_if(intake, gas, WhatIf(age_years=80.0)))
    assert again.index.facts["age"] == 80.0


@pytest.mark.parametrize(
    ("values", "words"),
    [
        ({"fio2": 1.5}, "fio2: outside"),
        ({"colour": 1}, "not a what-if input"),
        ({"altitude_m": 10, "barometric_pressure_mmhg": 700}, "not both"),
    ],
)
def test_a_what_if_outside_what_the_service_takes_is_refused(
    values: dict[str, float], words: str
) -> None:
    with pytest.raises(WhatIfError, match=words):
        WhatIf.of(values)
