"""Turn one paired gas into the facts the rules read and the derived values the result files.

Every number here is computed by ``service.physiology``; this module only decides which inputs
to use, in which precedence (contract §2: barometric pressure measured > altitude model > site
setting > sea level; FiO2 measured or set > device estimate > site setting > none), and records
the sources of each derived value so the result can point ``derivedFrom`` at them.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import date

from service.config import Settings
from service.exceptions import PhysiologyError
from service.intake.model import Fio2Source, Measurement, Patient, Quantity, Source
from service.physiology import acid_base, gas_exchange, oxygen_content, saturation
from service.physiology import constants as c
from service.physiology.atmosphere import barometric_pressure_mmhg
from service.physiology.oxygen_delivery import OxygenDevice, estimate_fio2
from service.physiology.units import percent_from_fraction
from service.physiology.water_vapour import water_vapour_pressure_mmhg

from .pairing import PairedGas

FactValue = float | bool | str

# Measured quantity -> fact name, and whether the fact is presented in percent.
MEASURED_FACTS: dict[Quantity, tuple[str, bool]] = {
    Quantity.ARTERIAL_PO2: ("arterial_po2", False),
    Quantity.ARTERIAL_PCO2: ("arterial_pco2", False),
    Quantity.ARTERIAL_PH: ("arterial_ph", False),
    Quantity.ARTERIAL_HCO3: ("arterial_hco3", False),
    Quantity.ARTERIAL_SO2: ("arterial_so2", True),
    Quantity.SPO2: ("spo2", True),
    Quantity.OXYGEN_FLOW: ("oxygen_flow", False),
    Quantity.OXYGEN_DEVICE: ("oxygen_device", False),
    Quantity.HAEMOGLOBIN: ("haemoglobin", False),
    Quantity.CARBOXYHAEMOGLOBIN: ("carboxyhaemoglobin", True),
    Quantity.METHAEMOGLOBIN: ("methaemoglobin", True),
    Quantity.BODY_TEMPERATURE: ("body_temperature", False),
    Quantity.MIXED_VENOUS_PO2: ("mixed_venous_po2", False),
    Quantity.MIXED_VENOUS_SO2: ("mixed_venous_so2", True),
    Quantity.DLCO_PERCENT_PREDICTED: ("dlco_percent_predicted", True),
    Quantity.SPO2_EXERTIONAL_NADIR: ("spo2_exertional_nadir", True),
    Quantity.SPO2_EXERTIONAL_BASELINE: ("spo2_exertional_baseline", True),
    Quantity.PEEP: ("peep", False),
    Quantity.RESPIRATORY_RATE: ("respiratory_rate", False),
}


@dataclass(frozen=True, slots=True)
class Derived:
    """A derived value for the result: canonical value and unit, the method, its inputs."""

    value: float
    unit: str
    method: str
    inputs: tuple[Source, ...]


@dataclass(slots=True)
class GasFacts:
    """What one gas contributes: rule facts, derived values, and where PB and FiO2 came from."""

    gas: PairedGas
    facts: dict[str, FactValue] = field(default_factory=dict)
    derived: dict[str, Derived] = field(default_factory=dict)
    barometric_source: str | None = None
    fio2_source: str | None = None
    fio2_range: tuple[float, float] | None = None
    problems: list[str] = field(default_factory=list)

    def number(self, name: str) -> float | None:
        value = self.facts.get(name)
        return value if isinstance(value, float) else None


def age_years(birth: date, at: date) -> float:
    """Age in whole years at ``at`` (the way ages are stated clinically)."""
    years = at.year - birth.year - ((at.month, at.day) < (birth.month, birth.day))
    return float(years)


def _value(m: Measurement | None) -> float | None:
    return m.value if m is not None and isinstance(m.value, float) else None


class _Builder:
    """Computes the facts of one gas; each step reads earlier results from ``out``."""

    def __init__(
        self, gas: PairedGas, patient: Patient | None, settings: Settings, today: date
    ) -> None:
        self.gas = gas
        self.patient = patient
        self.settings = settings
        self.today = today
        self.out = GasFacts(gas=gas)

    def source(self, quantity: Quantity) -> tuple[Source, ...]:
        m = self.gas.get(quantity)
        return (m.source,) if m is not None else ()

    def derive(
        self,
        name: str,
        fact: str | None,
        unit: str,
        method: str,
        inputs: tuple[Source, ...],
        compute: Callable[[], float],
        *,
        fact_scale: float = 1.0,
    ) -> float | None:
        try:
            value = compute()
        except PhysiologyError as error:
            self.out.problems.append(f"{name}: {error}")
            return None
        if name:
            self.out.derived[name] = Derived(value, unit, method, inputs)
        if fact:
            self.out.facts[fact] = value * fact_scale
        return value

    def build(self) -> GasFacts:
        self.measured()
        pb = self.barometric()
        ph2o = self.water_vapour()
        fio2 = self.fio2()
        self.gas_exchange(pb, ph2o, fio2)
        self.content_and_shunt(fio2)
        self.acid_base()
        self.oximetry(fio2)
        return self.out

    def measured(self) -> None:
        facts = self.out.facts
        for quantity, (name, as_percent) in MEASURED_FACTS.items():
            m = self.gas.get(quantity)
            if m is None:
                continue
            if isinstance(m.value, str):
                facts[name] = m.value
            else:
                facts[name] = percent_from_fraction(m.value) if as_percent else m.value
        facts["arterial_gas_present"] = Quantity.ARTERIAL_PO2 in self.gas.values
        facts["sao2_by_cooximetry"] = Quantity.ARTERIAL_SO2 in self.gas.values
        if self.patient is not None and self.patient.birth_date is not None:
            at = self.gas.time.date() if self.gas.time else self.today
            facts["age"] = age_years(self.patient.birth_date, at)

    def barometric(self) -> float:
        s = self.settings
        measured = _value(self.gas.get(Quantity.BAROMETRIC_PRESSURE))
        altitude = _value(self.gas.get(Quantity.ALTITUDE))
        if altitude is not None:
            self.out.facts["altitude"] = altitude
        pb: float | None = None
        if measured is not None:
            pb, source, method = measured, "measured", "measured ambient pressure"
        for alt, where in ((altitude, "altitude-model"), (s.site_altitude_m, "site-setting")):
            if pb is None and alt is not None:
                try:
                    pb = barometric_pressure_mmhg(altitude_m=alt, model=s.altitude_model)
                except PhysiologyError as error:
                    self.out.problems.append(f"barometric-pressure: {error}")
                    continue
                source, method = where, f"{s.altitude_model.value} model atmosphere at {alt:g} m"
        if pb is None:
            pb, source, method = c.SEA_LEVEL_PRESSURE_MMHG, "sea-level-assumed", "assumed sea level"
        self.out.barometric_source = source
        self.out.facts["barometric_pressure"] = pb
        self.out.facts["barometric_pressure_estimated"] = source in (
            "altitude-model",
            "site-setting",
        )
        self.out.facts["barometric_pressure_assumed"] = source == "sea-level-assumed"
        inputs = self.source(Quantity.BAROMETRIC_PRESSURE) or self.source(Quantity.ALTITUDE)
        self.out.derived["barometric-pressure"] = Derived(pb, "mm[Hg]", method, inputs)
        return pb

    def water_vapour(self) -> float:
        temperature = _value(self.gas.get(Quantity.BODY_TEMPERATURE))
        at = temperature if temperature is not None else c.NORMAL_BODY_TEMPERATURE_CEL
        value = self.derive(
            "water-vapour-pressure",
            None,
            "mm[Hg]",
            f"IAPWS-IF97 saturation pressure at {at:g} Cel"
            + ("" if temperature is not None else " (temperature not sent: 37 Cel assumed)"),
            self.source(Quantity.BODY_TEMPERATURE),
            lambda: water_vapour_pressure_mmhg(temperature_cel=at),
        )
        return value if value is not None else c.WATER_VAPOUR_TEXTBOOK_MMHG

    def fio2(self) -> float | None:
        facts, s = self.out.facts, self.settings
        m = self.gas.get(Quantity.FIO2)
        device = self.gas.get(Quantity.OXYGEN_DEVICE)
        flow = _value(self.gas.get(Quantity.OXYGEN_FLOW))
        fio2: float | None = None
        estimated = False
        inputs: tuple[Source, ...] = ()
        method = ""
        if m is not None and isinstance(m.value, float):
            fio2 = m.value
            self.out.fio2_source = (m.fio2_source or Fio2Source.MEASURED).value
            inputs, method = (m.source,), "as sent"
        elif device is not None and isinstance(device.value, str):
            try:
                estimate = estimate_fio2(device=OxygenDevice(device.value), flow_l_min=flow)
            except (PhysiologyError, ValueError) as error:
                self.out.problems.append(f"fio2: {error}")
            else:
                fio2, self.out.fio2_range = estimate.fio2, (estimate.low, estimate.high)
                self.out.fio2_source = Fio2Source.DEVICE_ESTIMATE.value
                estimated = device.value != OxygenDevice.NONE_ROOM_AIR
                inputs = self.source(Quantity.OXYGEN_DEVICE) + self.source(Quantity.OXYGEN_FLOW)
                method = (
                    f"estimated from {estimate.basis}"
                    f" (range {estimate.low:.2f}–{estimate.high:.2f})"
                )
        if fio2 is None and s.assume_room_air:
            fio2, inputs, method = c.ROOM_AIR_FIO2, (), "room air assumed by site setting"
            self.out.fio2_source = Fio2Source.SITE_SETTING.value
        facts["fio2_estimated_from_flow"] = estimated
        facts["fio2_time_mismatch"] = m is None and Quantity.FIO2 in self.gas.out_of_window
        if fio2 is None:
            return None
        facts["fio2"] = fio2
        facts["on_supplemental_oxygen"] = fio2 > c.ROOM_AIR_FIO2 + 0.005
        self.out.derived["fio2"] = Derived(fio2, "1", method, inputs)
        return fio2

    def gas_exchange(self, pb: float, ph2o: float, fio2: float | None) -> None:
        f, s = self.out.facts, self.settings
        pao2 = self.out.number("arterial_po2")
        paco2 = self.out.number("arterial_pco2")
        age = self.out.number("age")
        fio2_src = self.source(Quantity.FIO2)
        pb_src = self.source(Quantity.BAROMETRIC_PRESSURE)
        pao2_src, paco2_src = (
            self.source(Quantity.ARTERIAL_PO2),
            self.source(Quantity.ARTERIAL_PCO2),
        )
        self.derive(
            "",
            "sea_level_inspired_po2",
            "mm[Hg]",
            "",
            (),
            lambda: gas_exchange.inspired_po2_mmhg(fio2=c.ROOM_AIR_FIO2, water_vapour_mmhg=ph2o),
        )
        alveolar: float | None = None
        if fio2 is not None:
            self.derive(
                "inspired-po2",
                "inspired_po2",
                "mm[Hg]",
                "PIO2 = FiO2 × (PB − PH2O)",
                fio2_src + pb_src,
                lambda: gas_exchange.inspired_po2_mmhg(
                    fio2=fio2, barometric_mmhg=pb, water_vapour_mmhg=ph2o
                ),
            )
            if paco2 is not None:
                alveolar = self.derive(
                    "alveolar-po2",
                    "alveolar_po2",
                    "mm[Hg]",
                    "alveolar gas equation, full form: PAO2 = FiO2 (PB − PH2O) − PaCO2 "
                    f"[FiO2 + (1 − FiO2)/R], R = {s.respiratory_quotient:g}",
                    fio2_src + pb_src + paco2_src,
                    lambda: gas_exchange.alveolar_po2_mmhg(
                        fio2=fio2,
                        paco2_mmhg=paco2,
                        barometric_mmhg=pb,
                        water_vapour_mmhg=ph2o,
                        respiratory_quotient=s.respiratory_quotient,
                    ),
                )
        if age is not None:
            self.derive(
                "",
                "aa_gradient_mean_for_age",
                "mm[Hg]",
                "",
                (),
                lambda: gas_exchange.aa_gradient_mean_for_age_mmhg(age_years=age),
            )
            limit = self.derive(
                "aa-gradient-upper-limit",
                "aa_gradient_upper_limit",
                "mm[Hg]",
                "room-air age limit: max(2.5 + 0.21 × age (Mellemgaard 1966), age/4 + 4)",
                (),
                lambda: gas_exchange.aa_gradient_upper_limit_mmhg(age_years=age),
            )
        else:
            limit = None
        if pao2 is None:
            return
        if fio2 is not None:
            self.derive(
                "pf-ratio",
                "pf_ratio",
                "mm[Hg]",
                "PaO2 / FiO2",
                pao2_src + fio2_src,
                lambda: gas_exchange.pf_ratio_mmhg(arterial_po2_mmhg=pao2, fio2=fio2),
            )
        if alveolar is None:
            return
        inputs = pao2_src + paco2_src + fio2_src + pb_src
        aa = self.derive(
            "aa-gradient",
            "aa_gradient",
            "mm[Hg]",
            "A-a = PAO2 − PaO2",
            inputs,
            lambda: gas_exchange.aa_gradient_mmhg(
                alveolar_po2_mmhg=alveolar, arterial_po2_mmhg=pao2
            ),
        )
        f["arterial_alveolar_excess"] = pao2 - alveolar
        if aa is not None and limit is not None:
            f["aa_gradient_excess"] = aa - limit
        if alveolar > 0:
            self.derive(
                "a-a-ratio",
                "a_a_ratio",
                "1",
                "a/A = PaO2 / PAO2",
                inputs,
                lambda: gas_exchange.arterial_alveolar_ratio(
                    arterial_po2_mmhg=pao2, alveolar_po2_mmhg=alveolar
                ),
            )

    def content_and_shunt(self, fio2: float | None) -> None:
        s = self.settings
        pao2 = self.out.number("arterial_po2")
        hb = self.out.number("haemoglobin")
        if pao2 is None or hb is None:
            return
        sao2_m = _value(self.gas.get(Quantity.ARTERIAL_SO2))
        functional = sao2_m if sao2_m is not None else saturation.saturation_from_po2(po2_mmhg=pao2)
        saturation_note = "measured SaO2" if sao2_m is not None else "SaO2 from PaO2 (Severinghaus)"
        cohb = _value(self.gas.get(Quantity.CARBOXYHAEMOGLOBIN)) or 0.0
        methb = _value(self.gas.get(Quantity.METHAEMOGLOBIN)) or 0.0
        if cohb or methb:
            saturation_note += ", times (1 − COHb − MetHb)"

        def carried(functional_saturation: float) -> float:
            return oxygen_content.fractional_saturation(
                functional_saturation=functional_saturation,
                carboxyhaemoglobin=cohb,
                methaemoglobin=methb,
            )

        inputs = (
            self.source(Quantity.HAEMOGLOBIN)
            + self.source(Quantity.ARTERIAL_SO2)
            + self.source(Quantity.ARTERIAL_PO2)
            + self.source(Quantity.CARBOXYHAEMOGLOBIN)
            + self.source(Quantity.METHAEMOGLOBIN)
        )
        hufner = s.hufner_ml_per_g
        arterial = self.derive(
            "arterial-o2-content",
            "arterial_o2_content",
            "mL/dL",
            f"CaO2 = {hufner:g} × Hb × SaO2 + 0.003 × PaO2 ({saturation_note})",
            inputs,
            lambda: oxygen_content.oxygen_content_ml_dl(
                haemoglobin_g_dl=hb,
                saturation=carried(functional),
                po2_mmhg=pao2,
                hufner_ml_per_g=hufner,
            ),
        )
        alveolar = self.out.number("alveolar_po2")
        if arterial is None or alveolar is None or alveolar <= pao2:
            return
        capillary_saturation = oxygen_content.end_capillary_saturation(
            alveolar_po2_mmhg=alveolar, arterial_po2_mmhg=pao2, arterial_saturation=sao2_m
        )
        capillary = oxygen_content.oxygen_content_ml_dl(
            haemoglobin_g_dl=hb,
            saturation=carried(capillary_saturation),
            po2_mmhg=alveolar,
            hufner_ml_per_g=hufner,
        )
        venous_so2 = _value(self.gas.get(Quantity.MIXED_VENOUS_SO2))
        venous_po2 = _value(self.gas.get(Quantity.MIXED_VENOUS_PO2))
        if venous_so2 is not None:
            venous_content: float | None = oxygen_content.oxygen_content_ml_dl(
                haemoglobin_g_dl=hb,
                saturation=carried(venous_so2),
                po2_mmhg=venous_po2 if venous_po2 is not None else 40.0,
                hufner_ml_per_g=hufner,
            )
            avd = None
            venous_note = "measured mixed-venous content"
            inputs += self.source(Quantity.MIXED_VENOUS_SO2)
        else:
            venous_content, avd = None, s.assumed_av_difference_ml_dl
            venous_note = f"assumed a-v content difference {avd:g} mL/dL"
        kind = "true shunt" if fio2 is not None and fio2 >= 0.99 else "venous admixture"
        self.derive(
            "shunt-fraction",
            "shunt_fraction",
            "%",
            f"Qs/Qt = (CcO2 − CaO2) / (CcO2 − CvO2), {venous_note}; {kind}",
            inputs + self.source(Quantity.ARTERIAL_PCO2) + self.source(Quantity.FIO2),
            lambda: (
                100.0
                * oxygen_content.shunt_fraction(
                    end_capillary_content_ml_dl=capillary,
                    arterial_content_ml_dl=arterial,
                    mixed_venous_content_ml_dl=venous_content,
                    av_difference_ml_dl=avd,
                )
            ),
        )

    def acid_base(self) -> None:
        ph = self.out.number("arterial_ph")
        paco2 = self.out.number("arterial_pco2")
        hco3 = self.out.number("arterial_hco3")
        if paco2 is None:
            return
        src = self.source(Quantity.ARTERIAL_PCO2)
        self.derive(
            "expected-hco3",
            "expected_hco3_acute",
            "mmol/L",
            "expected HCO3 for an acute respiratory change: 24 + 0.1 per mmHg PaCO2 above 40"
            " (0.2 per mmHg below)",
            src,
            lambda: acid_base.expected_hco3_mmol_l(
                paco2_mmhg=paco2, chronicity=acid_base.Chronicity.ACUTE
            ),
        )
        self.derive(
            "",
            "expected_hco3_chronic",
            "mmol/L",
            "",
            (),
            lambda: acid_base.expected_hco3_mmol_l(
                paco2_mmhg=paco2, chronicity=acid_base.Chronicity.CHRONIC
            ),
        )
        if ph is None or hco3 is None:
            return
        try:
            check = acid_base.henderson_check(ph=ph, paco2_mmhg=paco2, hco3_mmol_l=hco3)
        except PhysiologyError as error:
            self.out.problems.append(f"acid-base: {error}")
            return
        f = self.out.facts
        f["ph_henderson_difference"] = check.ph_difference
        f["ph_henderson_gap"] = abs(check.ph_difference)
        f["hco3_henderson_difference"] = check.hco3_difference_mmol_l
        for chronicity in ("acute", "chronic"):
            expected = self.out.number(f"expected_hco3_{chronicity}")
            if expected is not None:
                f[f"hco3_above_expected_{chronicity}"] = hco3 - expected

    def oximetry(self, fio2: float | None) -> None:
        f = self.out.facts
        spo2 = _value(self.gas.get(Quantity.SPO2))
        sao2 = _value(self.gas.get(Quantity.ARTERIAL_SO2))
        src = self.source(Quantity.SPO2)
        if spo2 is not None and sao2 is not None:
            difference = percent_from_fraction(spo2 - sao2)
            f["spo2_sao2_difference"] = difference
            f["spo2_sao2_gap"] = abs(difference)
        baseline = _value(self.gas.get(Quantity.SPO2_EXERTIONAL_BASELINE))
        nadir = _value(self.gas.get(Quantity.SPO2_EXERTIONAL_NADIR))
        if baseline is not None and nadir is not None:
            f["exertional_desaturation"] = percent_from_fraction(baseline - nadir)
        if spo2 is None:
            return
        if fio2 is not None:
            self.derive(
                "sf-ratio",
                "sf_ratio",
                "1",
                "SpO2 (%) / FiO2",
                src + self.source(Quantity.FIO2),
                lambda: gas_exchange.sf_ratio(spo2=spo2, fio2=fio2),
            )
        if spo2 <= c.IMPUTATION_MAX_SPO2 and spo2 > 0:
            self.derive(
                "imputed-pao2",
                "imputed_pao2",
                "mm[Hg]",
                "exact inverse of the Severinghaus 1979 curve (Brown 2016), SpO2 ≤ 96 %",
                src,
                lambda: saturation.impute_pao2_from_spo2(spo2=spo2),
            )


def derive_gas_facts(
    gas: PairedGas, *, patient: Patient | None, settings: Settings, today: date
) -> GasFacts:
    """Facts and derived values of one gas (no comparison with other gases)."""
    return _Builder(gas, patient, settings, today).build()


def add_serial_facts(index: GasFacts, earlier: list[GasFacts]) -> GasFacts | None:
    """Compare the index gas with the earlier gas furthest from it in FiO2 (latest on a tie).

    Adds ``fio2_change`` (index minus earlier), ``fio2_step`` (higher minus lower FiO2),
    ``pao2_change`` and the venous admixture at the lower and higher FiO2 to the index gas's
    facts; returns the gas compared with, or None. Whether the step is large enough to judge
    the response to oxygen is the rules' decision (parameter ``oxygen_step``).
    """
    fio2 = index.number("fio2")
    if fio2 is None:
        return None
    candidates = [
        (abs(f - fio2), -position, other)
        for position, other in enumerate(earlier)
        if (f := other.number("fio2")) is not None and f != fio2
    ]
    if not candidates:
        return None
    other = max(candidates, key=lambda c: (c[0], c[1]))[2]
    other_fio2 = other.number("fio2")
    assert other_fio2 is not None
    facts = index.facts
    facts["fio2_change"] = fio2 - other_fio2
    facts["fio2_step"] = abs(fio2 - other_fio2)
    pao2, other_pao2 = index.number("arterial_po2"), other.number("arterial_po2")
    if pao2 is not None and other_pao2 is not None:
        facts["pao2_change"] = pao2 - other_pao2
    shunt, other_shunt = index.number("shunt_fraction"), other.number("shunt_fraction")
    if shunt is not None and other_shunt is not None:
        low, high = (other_shunt, shunt) if fio2 > other_fio2 else (shunt, other_shunt)
        facts["shunt_fraction_at_lower_fio2"] = low
        facts["shunt_fraction_at_higher_fio2"] = high
        facts["shunt_fraction_change"] = high - low
    return other
