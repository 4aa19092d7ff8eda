"""The facts the default rule set may refer to, with canonical UCUM units and ranges.

The ranges are wide on purpose: they reject impossible numbers (a unit slip, a typing
error) and leave judging what is abnormal to the rules. A leaf compares one fact with one
number, so where a rule needs the size of a signed difference the catalogue carries it as
its own fact (`ph_henderson_gap`, `spo2_sao2_gap`, `fio2_step`).
"""

from service.engine.facts import FactKind, FactOrigin, FactSpec

__all__ = ["DEFAULT_FACT_SPECS", "OXYGEN_DEVICES"]

MMHG = "mm[Hg]"
OXYGEN_DEVICES = frozenset(
    {
        "nasal-cannula",
        "simple-mask",
        "venturi-mask",
        "non-rebreather-mask",
        "high-flow-nasal",
        "ventilator",
        "none-room-air",
    }
)


def _measured(
    name: str, unit: str, low: float, high: float, decimals: int, description: str
) -> FactSpec:
    return FactSpec(name, FactKind.QUANTITY, unit, description, low, high, decimals=decimals)


def _derived(
    name: str,
    unit: str,
    low: float,
    high: float,
    decimals: int,
    description: str,
    inputs: tuple[str, ...] = (),
) -> FactSpec:
    return FactSpec(
        name,
        FactKind.QUANTITY,
        unit,
        description,
        low,
        high,
        decimals=decimals,
        origin=FactOrigin.DERIVED,
        inputs=inputs,
    )


def _serial(
    name: str, unit: str, low: float, high: float, decimals: int, description: str
) -> FactSpec:
    return FactSpec(
        name,
        FactKind.QUANTITY,
        unit,
        description,
        low,
        high,
        decimals=decimals,
        origin=FactOrigin.SERIAL,
    )


def _flag(name: str, description: str, origin: FactOrigin = FactOrigin.PROVENANCE) -> FactSpec:
    return FactSpec(name, FactKind.BOOLEAN, None, description, origin=origin)


_PAO2_INPUTS = ("fio2", "barometric_pressure", "arterial_pco2")
_ACID_BASE = ("arterial_ph", "arterial_pco2", "arterial_hco3")

# One line per fact keeps the table reviewable; the formatter would spread it over 200 lines.
# fmt: off
DEFAULT_FACT_SPECS: tuple[FactSpec, ...] = (
    # Measured values and recorded settings.
    _measured("arterial_po2", MMHG, 0, 800, 1, "Partial pressure of oxygen, arterial blood"),
    _measured("arterial_pco2", MMHG, 0, 250, 1, "Partial pressure of carbon dioxide, arterial"),
    _measured("arterial_ph", "[pH]", 6.0, 8.0, 2, "pH of arterial blood"),
    _measured("arterial_hco3", "mmol/L", 0, 80, 1, "Bicarbonate, arterial blood"),
    _measured("arterial_so2", "%", 0, 100, 0, "Oxygen saturation of arterial haemoglobin"),
    _measured("spo2", "%", 0, 100, 0, "Oxygen saturation by pulse oximetry"),
    _measured("fio2", "1", 0.1, 1.0, 2, "Fraction of inspired oxygen"),
    _measured("oxygen_flow", "L/min", 0, 80, 1, "Supplemental oxygen flow rate"),
    _measured("haemoglobin", "g/dL", 0, 30, 1, "Haemoglobin concentration, blood"),
    _measured("carboxyhaemoglobin", "%", 0, 100, 1, "Carboxyhaemoglobin fraction"),
    _measured("methaemoglobin", "%", 0, 100, 1, "Methaemoglobin fraction"),
    _measured("body_temperature", "Cel", 20, 45, 1, "Body temperature"),
    _measured("age", "a", 0, 130, 0, "Age in years"),
    _measured("barometric_pressure", MMHG, 200, 850, 0, "Ambient barometric pressure"),
    _measured("altitude", "m", -500, 9000, 0, "Altitude above sea level where the gas was drawn"),
    _measured("mixed_venous_po2", MMHG, 0, 200, 1, "Partial pressure of oxygen, mixed venous"),
    _measured("mixed_venous_so2", "%", 0, 100, 0, "Oxygen saturation, mixed venous blood"),
    _measured("dlco_percent_predicted", "%", 0, 250, 0, "Diffusing capacity for CO, % predicted"),
    _measured("spo2_exertional_nadir", "%", 0, 100, 0, "Lowest SpO2 during an exercise test"),
    _measured("spo2_exertional_baseline", "%", 0, 100, 0, "SpO2 at rest before the exercise test"),
    _measured("peep", "cm[H2O]", 0, 40, 0, "Positive end-expiratory pressure"),
    _measured("respiratory_rate", "/min", 0, 100, 0, "Respiratory rate"),
    FactSpec("oxygen_device", FactKind.CODE, None, "Oxygen delivery device in use",
             allowed=OXYGEN_DEVICES),
    # Derived from the same gas by the physiology layer.
    _derived("inspired_po2", MMHG, 0, 800, 1, "Inspired PO2", ("fio2", "barometric_pressure")),
    _derived("sea_level_inspired_po2", MMHG, 0, 800, 1, "Inspired PO2 of room air at sea level"),
    _derived("alveolar_po2", MMHG, 0, 800, 1, "Alveolar PO2 (alveolar gas equation)", _PAO2_INPUTS),
    _derived("aa_gradient", MMHG, -800, 800, 1, "Alveolar-arterial PO2 difference",
             ("alveolar_po2", "arterial_po2")),
    _derived("aa_gradient_mean_for_age", MMHG, 0, 100, 1, "Expected A-a gradient for age",
             ("age",)),
    _derived("aa_gradient_upper_limit", MMHG, 0, 100, 1, "Upper limit of A-a gradient for age",
             ("age",)),
    _derived("aa_gradient_excess", MMHG, -900, 800, 1, "A-a gradient minus its upper limit",
             ("aa_gradient", "aa_gradient_upper_limit")),
    _derived("arterial_alveolar_excess", MMHG, -800, 800, 1, "Arterial minus alveolar PO2",
             ("arterial_po2", "alveolar_po2")),
    _derived("a_a_ratio", "1", 0, 5, 2, "Arterial to alveolar PO2 ratio",
             ("arterial_po2", "alveolar_po2")),
    _derived("pf_ratio", MMHG, 0, 2000, 0, "PaO2 / FiO2", ("arterial_po2", "fio2")),
    _derived("sf_ratio", "1", 0, 1000, 0, "SpO2 (%) / FiO2", ("spo2", "fio2")),
    _derived("arterial_o2_content", "mL/dL", 0, 40, 1, "Oxygen content of arterial blood",
             ("haemoglobin", "arterial_po2")),
    _derived("shunt_fraction", "%", -100, 100, 0, "Estimated right-to-left shunt fraction",
             ("arterial_po2", "alveolar_po2")),
    _derived("imputed_pao2", MMHG, 0, 800, 1, "PaO2 imputed from SpO2", ("spo2",)),
    _derived("expected_hco3_acute", "mmol/L", 0, 80, 1, "Expected HCO3 for an acute CO2 change",
             ("arterial_pco2",)),
    _derived("expected_hco3_chronic", "mmol/L", 0, 80, 1, "Expected HCO3, chronic CO2 change",
             ("arterial_pco2",)),
    _derived("hco3_above_expected_acute", "mmol/L", -80, 80, 1,
             "Reported HCO3 minus the expected HCO3 for an acute CO2 change",
             ("arterial_hco3", "arterial_pco2")),
    _derived("hco3_above_expected_chronic", "mmol/L", -80, 80, 1,
             "Reported HCO3 minus the expected HCO3 for a chronic CO2 change",
             ("arterial_hco3", "arterial_pco2")),
    _derived("hco3_henderson_difference", "mmol/L", -80, 80, 1,
             "Reported HCO3 minus HCO3 computed from pH and PaCO2", _ACID_BASE),
    _derived("ph_henderson_difference", "[pH]", -2, 2, 2,
             "Measured pH minus pH computed from PaCO2 and HCO3", _ACID_BASE),
    _derived("ph_henderson_gap", "[pH]", 0, 2, 2,
             "Size of ph_henderson_difference, whatever its sign", _ACID_BASE),
    _derived("spo2_sao2_difference", "%", -100, 100, 0, "SpO2 minus SaO2",
             ("spo2", "arterial_so2")),
    _derived("spo2_sao2_gap", "%", 0, 100, 0, "Size of spo2_sao2_difference, whatever its sign",
             ("spo2", "arterial_so2")),
    _derived("exertional_desaturation", "%", -100, 100, 0, "Resting SpO2 minus exertional nadir",
             ("spo2_exertional_baseline", "spo2_exertional_nadir")),
    _derived("paco2_upper_limit", MMHG, 0, 100, 1, "Upper limit of normal PaCO2"),
    # Serial: this gas against an earlier one on a different FiO2.
    _serial("fio2_change", "1", -1, 1, 2, "FiO2 now minus FiO2 of the earlier gas"),
    _serial("fio2_step", "1", 0, 1, 2, "Higher minus lower FiO2 of the two gases"),
    _serial("pao2_change", MMHG, -800, 800, 1, "PaO2 now minus PaO2 of the earlier gas"),
    _serial("shunt_fraction_at_lower_fio2", "%", -100, 100, 0, "Shunt fraction, lower-FiO2 gas"),
    _serial("shunt_fraction_at_higher_fio2", "%", -100, 100, 0, "Shunt fraction, higher-FiO2 gas"),
    _serial("shunt_fraction_change", "%", -200, 200, 0, "Shunt fraction, higher minus lower FiO2"),
    # Provenance flags set by the intake.
    _flag("fio2_estimated_from_flow", "FiO2 was estimated from device and flow"),
    _flag("fio2_time_mismatch", "FiO2 was recorded too far from the sample time"),
    _flag("barometric_pressure_estimated", "Barometric pressure was estimated from altitude"),
    _flag("barometric_pressure_assumed", "Barometric pressure was assumed to be sea level"),
    _flag("arterial_gas_present", "An arterial blood gas was supplied"),
    _flag("specimen_unknown", "The specimen type of the gas was not stated"),
    _flag("specimen_not_arterial", "The specimen was stated to be other than arterial"),
    _flag("on_supplemental_oxygen", "Breathing supplemental oxygen", FactOrigin.DERIVED),
    _flag("sao2_by_cooximetry", "SaO2 was measured by co-oximetry, not calculated"),
)
# fmt: on
