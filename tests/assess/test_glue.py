"""The glue's smaller decisions, each pinned (invented values; [calc] from the equations)."""

from __future__ import annotations

import inspect

import pytest
from iapws.iapws97 import _PSat_T

from service.assess.admixture import venous_admixture
from service.assess.assess import assess, windows
from service.assess.catalogue import DEFAULT_CATALOGUE, Measured
from service.assess.derivation import Computed
from service.assess.derived import DERIVED_FACTS
from service.assess.gas_exchange import a_a_ratio, water_vapour_pressure
from service.assess.oximetry import imputed_pao2
from service.assess.pairing import pair_gases
from service.config import Settings
from service.engine import Severity
from service.intake.model import Intake, IntakeIssue
from service.intake.model import Quantity as Q
from service.intake.model import Severity as IntakeSeverity
from service.physiology import constants as c
from service.runtime import Runtime

from .builders import intake, m
from .test_slips import gas, gases

RULESET = Runtime.load().ruleset


def computed(out: object) -> Computed:
    assert isinstance(out, Computed), out
    return out


WINDOWS = windows(Settings())

# Display precision of facts in rationales, by unit (common practice in blood-gas reports:
# pH to 2 decimals, pressures and concentrations to 1, FiO2 to 2 decimals, admixtures and
# shares in whole percent), with the facts that differ named: pressures of the air and
# ratios are whole numbers, dyshaemoglobins one decimal. Rules compare numbers at these
# decimals (rules/README.md), so a change here changes grades.
PRECISION = {
    "mm[Hg]": 1, "[pH]": 2, "mmol/L": 1, "%": 0, "1": 2, "L/min": 1, "g/dL": 1,
    "mL/dL": 1, "Cel": 1, "a": 0, "m": 0, "cm[H2O]": 0, "/min": 0, "mL/min/mm[Hg]": 1,
}  # fmt: skip
# Counts of the oxygen-response fit, and its V/Q term: the fit gives that term to several
# mmHg at best (docs/oxygen-response.md), so whole mmHg.
WHOLE = {
    "barometric_pressure", "pf_ratio", "sf_ratio",
    "titration_points", "titration_fio2_levels", "titration_fio2_known_levels",
    "fitted_vq_drop", "fitted_vq_drop_least", "fitted_vq_drop_most",
    "vq_drop_upper_limit", "fitted_vq_drop_excess_least", "fitted_vq_drop_excess_most",
}  # fmt: skip
# Rule set 2.0 states saturations to 0.1 % as co-oximeters and oximeters report them
# (common practice) instead of 1.x's whole percent: a target band of 94-98 % must not take
# an SpO2 of 93.6 % for 94 %. Changes of admixture and the fitted shunts are read against
# limits of a few points, so to 0.1 point too.
TENTHS = {
    "carboxyhaemoglobin", "methaemoglobin",
    "arterial_so2", "arterial_o2hb", "arterial_so2_functional", "spo2",
    "spo2_exertional_nadir", "spo2_exertional_baseline", "exertional_desaturation",
    "spo2_sao2_difference", "spo2_sao2_gap",
    "admixture_fall_least", "admixture_change_largest",
    "fitted_shunt", "fitted_shunt_least", "fitted_shunt_most",
    "effective_shunt", "effective_shunt_least", "effective_shunt_most",
}  # fmt: skip
# The fit's chi-square probability is read against a limit of 1 % (0.01).
THOUSANDTHS = {"titration_fit_probability"}


def test_facts_are_shown_with_the_precision_of_their_unit() -> None:
    for name, spec in DEFAULT_CATALOGUE.items():
        if spec.unit is None:
            continue
        expected = (
            0
            if name in WHOLE
            else 1
            if name in TENTHS
            else 3
            if name in THOUSANDTHS
            else PRECISION[spec.unit]
        )
        assert spec.decimals == expected, name


def test_a_measured_fact_is_presented_in_its_own_unit_or_a_fraction_in_percent() -> None:
    for quantity, unit in (
        (Q.ARTERIAL_SO2, "mm[Hg]"),
        (Q.ARTERIAL_PO2, "%"),
        (Q.ARTERIAL_PO2, "kPa"),
    ):
        with pytest.raises(ValueError, match="cannot present"):
            Measured(quantity, unit, 1, "x").spec()
    assert Measured(Q.ARTERIAL_SO2, "%", 0, "x").spec().maximum == 100.0


def test_only_named_results_are_filed() -> None:
    found = gas(m(Q.ARTERIAL_PO2, 60.0), m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, 0.3))
    results = {entry.result for entry in DERIVED_FACTS if entry.result}
    assert set(found.derived) <= results | {"barometric-pressure", "fio2"}
    assert "aa_gradient_excess" not in found.derived


def test_the_content_method_says_where_the_saturation_came_from() -> None:
    measured = gas(m(Q.ARTERIAL_PO2, 95.0), m(Q.ARTERIAL_SO2, 0.97), m(Q.HAEMOGLOBIN, 14.0))
    curve = gas(m(Q.ARTERIAL_PO2, 95.0), m(Q.HAEMOGLOBIN, 14.0))
    shifted = gas(m(Q.ARTERIAL_PO2, 95.0), m(Q.HAEMOGLOBIN, 14.0), m(Q.ARTERIAL_PH, 7.2))
    assert "(measured saturation)" in measured.derived["arterial-o2-content"].method
    # 2.0 (rules/CHANGELOG.md, "Oxygen content"): without a measured saturation the PaO2 is
    # read on the patient's curve when the pH is known (Severinghaus 1979 eq. 4), else on the
    # standard curve, and the method says which.
    assert (
        "on the standard curve (Severinghaus; no pH)" in curve.derived["arterial-o2-content"].method
    )
    assert "on the patient's curve" in shifted.derived["arterial-o2-content"].method
    assert "0.003 × PaO2" in curve.derived["arterial-o2-content"].method


def test_no_admixture_is_apportioned_without_an_alveolar_to_arterial_gap() -> None:
    # 2.0: the shunt equation lives in the venous admixture (the shunt fraction is that
    # admixture on near-pure oxygen). No end-capillary to arterial gap, nothing to apportion.
    kwargs = {"haemoglobin": 14.0, "arterial_o2_content": 19.0, "fio2": 0.21}
    assert (
        venous_admixture.compute(
            arterial_po2=100.0, alveolar_po2=100.0, settings=Settings(), **kwargs
        )
        is None
    )
    assert (
        venous_admixture.compute(
            arterial_po2=100.0, alveolar_po2=101.0, settings=Settings(), **kwargs
        )
        is not None
    )


def test_water_vapour_is_taken_at_37_cel_whatever_the_body_temperature() -> None:
    # 2.0 (docs/clinical-logic.md: "All gas values are used at 37 °C, as the analyser reports
    # them"): the water vapour pressure no longer follows a body temperature that was sent;
    # it is IAPWS-IF97's at 37 Cel, 47.1 mmHg (the iapws package's _PSat_T, in MPa, at
    # 310.15 K; 1 mmHg = 133.322387415 Pa, ISO 80000-4).
    assert list(inspect.signature(water_vapour_pressure.compute).parameters) == []
    found = computed(water_vapour_pressure.compute())
    assert found.value == pytest.approx(_PSat_T(310.15) * 1e6 / 133.322387415, abs=1e-3)
    assert found.method.startswith("IAPWS-IF97 saturation pressure at 37 Cel")
    warm = gas(m(Q.ARTERIAL_PO2, 80.0), m(Q.ARTERIAL_PCO2, 40.0), m(Q.FIO2, 0.21))
    febrile = gas(
        m(Q.ARTERIAL_PO2, 80.0),
        m(Q.ARTERIAL_PCO2, 40.0),
        m(Q.FIO2, 0.21),
        m(Q.BODY_TEMPERATURE, 39.5),
    )
    assert febrile.facts["alveolar_po2"] == warm.facts["alveolar_po2"]


def test_no_ratio_to_an_alveolar_po2_of_zero() -> None:
    assert a_a_ratio.compute(arterial_po2=40.0, alveolar_po2=0.0) is None
    assert computed(a_a_ratio.compute(arterial_po2=40.0, alveolar_po2=80.0)).value == 0.5


def test_pao2_is_imputed_up_to_and_including_96_percent() -> None:
    # Brown 2016: the imputation holds for SpO2 <= 96 %. [calc] Severinghaus 1979 eq. 1 at
    # 81.9 mmHg: 1 / (23400 / (81.9^3 + 150 x 81.9) + 1) = 0.960.
    at_limit = computed(imputed_pao2.compute(spo2=c.IMPUTATION_MAX_SPO2))
    assert at_limit.value == pytest.approx(81.9, abs=0.05)
    assert at_limit.method.endswith("SpO2 ≤ 96 %")
    assert imputed_pao2.compute(spo2=0.0) is None
    assert imputed_pao2.compute(spo2=0.961) is None


def test_flags_of_the_gas_and_an_age_only_from_a_birth_date() -> None:
    with_sao2 = gas(m(Q.ARTERIAL_PO2, 60.0), m(Q.ARTERIAL_SO2, 0.9))
    assert with_sao2.facts["sao2_by_cooximetry"] is True
    assert with_sao2.facts["arterial_gas_present"] is True
    spo2 = gas(m(Q.SPO2, 0.9))
    assert spo2.facts["sao2_by_cooximetry"] is False
    assert spo2.facts["arterial_gas_present"] is False
    assert "age" in with_sao2.facts
    (no_birth,) = gases(intake(m(Q.ARTERIAL_PO2, 60.0), birth=None))
    assert "age" not in no_birth.facts
    (no_patient,) = gases(Intake(patient=None, measurements=[m(Q.ARTERIAL_PO2, 60.0)]))
    assert "age" not in no_patient.facts


def test_exactly_half_a_point_above_air_is_still_air() -> None:
    threshold = c.ROOM_AIR_FIO2 + c.ROOM_AIR_FIO2_TOLERANCE
    assert (
        gas(m(Q.ARTERIAL_PO2, 60.0), m(Q.FIO2, threshold)).facts["on_supplemental_oxygen"] is False
    )


def test_a_rule_finding_takes_the_location_of_the_intake_issue_it_restates() -> None:
    data = intake(m(Q.SPO2, 0.93), m(Q.FIO2, 0.21))
    data.issues.append(
        IntakeIssue("no-arterial-gas", IntakeSeverity.WARNING, "no gas", "Bundle.entry[7]")
    )
    result = assess(data, ruleset=RULESET, settings=Settings())
    (found,) = [f for f in result.findings if f.code == "no-arterial-gas"]
    assert found.rule is not None and found.expression == "Bundle.entry[7]"
    assert [f.severity for f in result.findings] == sorted(
        (f.severity for f in result.findings), key=list(Severity).index
    )


def test_only_arterial_gases_are_listed_and_the_latest_is_the_index() -> None:
    data = intake(m(Q.ARTERIAL_PO2, 60.0, -60), m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.FIO2, 0.3, 0))
    result = assess(data, ruleset=RULESET, settings=Settings())
    assert [(g.index, g.facts.facts["arterial_po2"]) for g in result.gases] == [
        (True, 70.0),
        (False, 60.0),
    ]
    oximetry = assess(intake(m(Q.SPO2, 0.9)), ruleset=RULESET, settings=Settings())
    assert oximetry.gases == []


def test_context_with_a_time_is_never_reported_as_untimed() -> None:
    pairing = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.FIO2, 0.3, -5), m(Q.ALTITUDE, 1500.0, None)),
        windows=WINDOWS,
    )
    assert pairing.index.untimed == [Q.ALTITUDE]
    timed = pair_gases(
        intake(m(Q.ARTERIAL_PO2, 70.0, 0), m(Q.ALTITUDE, 1500.0, -600)),
        windows=WINDOWS,
    )
    assert timed.index.untimed == []
    latest = pair_gases(intake(m(Q.SPO2, 0.9, None), m(Q.SPO2, 0.93, -5)), windows=WINDOWS)
    assert latest.index.anchor is not None and latest.index.anchor.value == 0.93


def test_acid_base_ranges_are_the_images_of_the_input_ranges() -> None:
    # [calc] Narins & Emmett 1980 / Berend 2014 slopes over PaCO2 0-250 mmHg (bounds.py):
    # acute 24 - 0.2 x 40 = 16 to 24 + 0.1 x 210 = 45; chronic 24 - 0.45 x 40 = 6 to
    # 24 + 0.35 x 210 = 97.5. Henderson: pH = 9 - log10[H+] over [H+] 1-1000 nmol/L is 6-9;
    # HCO3 implied = 24 x PaCO2 / [H+] is at most 24 x 250 / 10 (pH 8.0) = 600 mmol/L.
    ranges = {
        name: (DEFAULT_CATALOGUE[name].minimum, DEFAULT_CATALOGUE[name].maximum)
        for name in (
            "expected_hco3_acute",
            "expected_hco3_chronic",
            "hco3_above_expected_acute",
            "hco3_above_expected_chronic",
            "ph_henderson_difference",
            "ph_henderson_gap",
            "hco3_henderson_difference",
        )
    }
    expected = {
        "expected_hco3_acute": (16.0, 45.0),
        "expected_hco3_chronic": (6.0, 97.5),
        "hco3_above_expected_acute": (1.0 - 45.0, 80.0 - 16.0),
        "hco3_above_expected_chronic": (1.0 - 97.5, 80.0 - 6.0),
        "ph_henderson_difference": (6.3 - 9.0, 8.0 - 6.0),
        "ph_henderson_gap": (0.0, 2.7),
        "hco3_henderson_difference": (1.0 - 600.0, 80.0),
    }
    for name, limits in expected.items():
        assert ranges[name] == pytest.approx(limits), name


def test_an_admixture_cannot_exceed_the_whole_cardiac_output() -> None:
    spec = DEFAULT_CATALOGUE["shunt_fraction"]
    assert spec.problem(95.0) is None and spec.problem(-95.0) is None
    assert spec.problem(105.0) is not None and spec.problem(-105.0) is not None


def test_a_mixed_venous_saturation_without_its_po2_is_taken_at_40_mmhg() -> None:
    # The dissolved part of the venous content needs a PO2; the normal resting mixed-venous
    # PO2 is 40 mmHg (common practice). Sent or assumed, the admixture is the same.
    base = (
        m(Q.ARTERIAL_PO2, 70.0),
        m(Q.ARTERIAL_PCO2, 40.0),
        m(Q.FIO2, 0.5),
        m(Q.HAEMOGLOBIN, 13.0),
        m(Q.MIXED_VENOUS_SO2, 0.65),
    )
    assumed = gas(*base).facts["venous_admixture"]
    sent = gas(*base, m(Q.MIXED_VENOUS_PO2, 40.0)).facts["venous_admixture"]
    assert assumed == sent
    assert gas(*base, m(Q.MIXED_VENOUS_PO2, 44.0)).facts["venous_admixture"] != assumed
