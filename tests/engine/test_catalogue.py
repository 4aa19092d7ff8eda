"""The fact catalogue: required facts, spec validation, fact checking, documentation."""

import math

import pytest

from service.assess.catalogue import DEFAULT_CATALOGUE
from service.engine.catalogue import (
    FactCatalogue,
    FactKind,
    FactOrigin,
    FactSpec,
    catalogue_markdown,
)
from service.engine.errors import FactError

MMHG = "mm[Hg]"
REQUIRED_QUANTITIES = {
    "arterial_po2": MMHG, "arterial_pco2": MMHG, "arterial_ph": "[pH]",
    "arterial_hco3": "mmol/L", "arterial_so2": "%", "spo2": "%", "fio2": "1",
    "oxygen_flow": "L/min", "haemoglobin": "g/dL", "carboxyhaemoglobin": "%",
    "methaemoglobin": "%", "body_temperature": "Cel", "age": "a",
    "barometric_pressure": MMHG, "altitude": "m", "mixed_venous_po2": MMHG,
    "mixed_venous_so2": "%", "dlco_percent_predicted": "%", "spo2_exertional_nadir": "%",
    "spo2_exertional_baseline": "%", "peep": "cm[H2O]", "respiratory_rate": "/min",
    "inspired_po2": MMHG, "sea_level_inspired_po2": MMHG, "alveolar_po2": MMHG,
    "aa_gradient": MMHG, "aa_gradient_expected": MMHG, "aa_gradient_upper_limit": MMHG,
    "aa_gradient_excess": MMHG, "arterial_alveolar_excess": MMHG, "a_a_ratio": "1",
    "pf_ratio": MMHG, "sf_ratio": "1", "arterial_o2_content": "mL/dL", "shunt_fraction": "%",
    "imputed_pao2": MMHG, "expected_hco3_acute": "mmol/L", "expected_hco3_chronic": "mmol/L",
    "hco3_henderson_difference": "mmol/L", "ph_henderson_difference": "[pH]",
    "spo2_sao2_difference": "%", "spo2_sao2_gap": "%", "ph_henderson_gap": "[pH]",
    "hco3_above_expected_acute": "mmol/L", "hco3_above_expected_chronic": "mmol/L",
    "exertional_desaturation": "%",
    "fio2_step": "1", "pao2_change": MMHG, "admixture_at_lower_fio2": "%",
    "admixture_at_higher_fio2": "%", "admixture_fall_least": "%", "admixture_change_largest": "%",
    "admixture_at_higher_fio2_least": "%", "admixture_at_higher_fio2_most": "%",
    "venous_admixture": "%", "venous_admixture_least": "%", "venous_admixture_most": "%",
    "shunt_dissolved_bound_least": "%", "pao2_expected": MMHG, "paco2_expected": MMHG,
}  # fmt: skip
REQUIRED_BOOLEANS = [
    "fio2_estimated_from_flow", "fio2_time_mismatch", "barometric_pressure_estimated",
    "barometric_pressure_assumed", "arterial_gas_present", "specimen_unknown",
    "specimen_not_arterial", "on_supplemental_oxygen", "sao2_by_cooximetry",
]  # fmt: skip
DEVICES = {
    "nasal-cannula", "simple-mask", "venturi-mask", "non-rebreather-mask",
    "high-flow-nasal", "ventilator", "none-room-air",
}  # fmt: skip


@pytest.mark.parametrize(("name", "unit"), sorted(REQUIRED_QUANTITIES.items()))
def test_default_catalogue_has_each_required_quantity_in_its_ucum_unit(
    name: str, unit: str
) -> None:
    spec = DEFAULT_CATALOGUE[name]
    assert spec.kind is FactKind.QUANTITY
    assert spec.unit == unit


@pytest.mark.parametrize("name", REQUIRED_BOOLEANS)
def test_default_catalogue_has_each_required_boolean(name: str) -> None:
    assert DEFAULT_CATALOGUE[name].kind is FactKind.BOOLEAN


def test_default_catalogue_oxygen_device_is_a_code_with_the_agreed_devices() -> None:
    spec = DEFAULT_CATALOGUE["oxygen_device"]
    assert spec.kind is FactKind.CODE
    assert spec.allowed == DEVICES


def test_default_catalogue_serial_facts_are_marked_serial() -> None:
    serial = {name for name, spec in DEFAULT_CATALOGUE.items() if spec.origin is FactOrigin.SERIAL}
    assert serial == {
        "fio2_step",
        "pao2_change",
        "admixture_at_lower_fio2",
        "admixture_at_higher_fio2",
        "admixture_fall_least",
        "admixture_change_largest",
        "admixture_at_higher_fio2_least",
        "admixture_at_higher_fio2_most",
    }


def test_default_catalogue_derived_facts_name_only_known_inputs() -> None:
    for spec in DEFAULT_CATALOGUE.values():
        assert set(spec.inputs) <= set(DEFAULT_CATALOGUE), spec.name
    assert set(DEFAULT_CATALOGUE["alveolar_po2"].inputs) == {
        "fio2",
        "barometric_pressure",
        "arterial_pco2",
        "water_vapour_pressure",
    }


def test_catalogue_rejects_a_fact_defined_twice() -> None:
    spec = FactSpec("x", FactKind.BOOLEAN, None, "x")
    with pytest.raises(ValueError, match="defined twice"):
        FactCatalogue([spec, spec])


def test_catalogue_rejects_inputs_that_are_not_facts() -> None:
    spec = FactSpec("x", FactKind.QUANTITY, "1", "x", 0, 1, inputs=("nowhere",))
    with pytest.raises(ValueError, match="unknown inputs: nowhere"):
        FactCatalogue([spec])


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"kind": FactKind.QUANTITY, "unit": None, "minimum": 0, "maximum": 1}, "needs a unit"),
        ({"kind": FactKind.QUANTITY, "unit": "1", "minimum": 2, "maximum": 1}, "below maximum"),
        ({"kind": FactKind.BOOLEAN, "unit": "1"}, "takes no unit"),
        ({"kind": FactKind.CODE, "unit": None}, "only code facts"),
        ({"kind": FactKind.BOOLEAN, "unit": None, "allowed": frozenset({"a"})}, "only code"),
    ],
)
def test_fact_spec_rejects_an_inconsistent_definition(
    kwargs: dict[str, object], message: str
) -> None:
    with pytest.raises(ValueError, match=message):
        FactSpec(name="x", description="x", **kwargs)  # type: ignore[arg-type]


def test_check_accepts_facts_of_the_right_kind_in_range() -> None:
    DEFAULT_CATALOGUE.check(
        {"arterial_po2": 61.5, "age": 40, "specimen_unknown": False, "oxygen_device": "ventilator"}
    )


@pytest.mark.parametrize(
    ("name", "value", "message"),
    [
        ("not_a_fact", 1.0, "not in the fact catalogue"),
        ("arterial_po2", True, "expected a number"),
        ("arterial_po2", "61", "expected a number"),
        ("arterial_po2", math.nan, "finite"),
        ("arterial_po2", math.inf, "finite"),
        ("arterial_po2", -1.0, "outside the accepted range 0 to 1200 mm[Hg]"),
        ("fio2", 21.0, "outside the accepted range"),
        ("specimen_unknown", 1, "expected true or false"),
        ("oxygen_device", "tent", "expected one of"),
        ("oxygen_device", 3, "expected one of"),
        ("arterial_po2", None, "leave a missing fact out"),
    ],
)
def test_check_rejects_a_fact_that_breaks_its_spec(name: str, value: object, message: str) -> None:
    with pytest.raises(FactError) as caught:
        DEFAULT_CATALOGUE.check({name: value})
    [problem] = caught.value.problems
    assert problem.fact == name
    assert message in problem.message


def test_check_reports_every_bad_fact_at_once() -> None:
    with pytest.raises(FactError) as caught:
        DEFAULT_CATALOGUE.check({"arterial_po2": -5.0, "spo2": "high", "mystery": 1.0})
    assert [problem.fact for problem in caught.value.problems] == [
        "arterial_po2",
        "spo2",
        "mystery",
    ]


def test_check_messages_never_repeat_the_rejected_value() -> None:
    # Values are patient data and exception text ends up in logs.
    with pytest.raises(FactError) as caught:
        DEFAULT_CATALOGUE.check({"arterial_po2": 987.654, "oxygen_device": "ward-7-bed-3"})
    text = str(caught.value)
    assert "987.654" not in text
    assert "ward-7-bed-3" not in text


def test_catalogue_markdown_has_one_row_per_fact_in_catalogue_order() -> None:
    text = catalogue_markdown(DEFAULT_CATALOGUE)
    rows = [line for line in text.splitlines() if line.startswith("| `")]
    assert [row.split("`")[1] for row in rows] == list(DEFAULT_CATALOGUE)
    assert "| `fio2` | quantity | `1` | 0.1 to 1 | measured |" in text
    assert "`venturi-mask`" in text
    assert "(needs `alveolar_po2`, `arterial_po2`)" in text


def test_catalogue_markdown_escapes_pipes_in_descriptions() -> None:
    catalogue = FactCatalogue([FactSpec("x", FactKind.BOOLEAN, None, "a | b")])
    assert "a \\| b" in catalogue_markdown(catalogue)
