"""The oxygen-exchange model written out again, independently of the service, for the
titration fixtures and the tests that check them.

Every function here is the published equation coded afresh, with general-purpose numerics
from the package registry (``scipy``'s Brent root finder and ODE integrator, ``iapws`` for
the water vapour pressure) rather than the service's own solvers:

* Severinghaus JW, J Appl Physiol 1979;46:599: eq. 1, S = 1 / (23400 / (P³ + 150 P) + 1);
  eq. 4, the Bohr coefficient d ln PO2 / d pH = (PO2 / 26.6)^0.184 − 2.2, integrated
  numerically from pH 7.40 and the curve's own P50 (the PO2 at which eq. 1 gives 0.5).
* Oxygen content, C = 1.34 × Hb × S + 0.003 × PO2 (common practice; mL/dL).
* The alveolar gas equation, full form: PAO2 = FiO2 (PB − PH2O) − PaCO2 [FiO2 + (1 − FiO2)/R],
  R 0.8 (West, Respiratory Physiology); PH2O at 37 °C from IAPWS-IF97 (``iapws``).
* The two-parameter model (Sapsford DJ & Jones JG, Eur J Anaesthesiol 1995;12:375; Kjærgaard
  S et al., Intensive Care Med 2003;29:727): end-capillary PO2 = PAO2 − ΔPO2, and the shunt
  equation (Berggren SM, Acta Physiol Scand 1942;4 Suppl 11) with the mixed venous content
  CaO2 − avd: CaO2 = Cc'O2 − avd × shunt / (1 − shunt).
* The effective shunt carried to room air (Karbing DS et al., Crit Care 2007;11:R118): the
  content deficit Cc'O2 − CaO2 of the gas, held on FiO2 0.21.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

from iapws.iapws97 import _PSat_T
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

PA_PER_MMHG = 133.322387415  # BIPM SI Brochure: 1 mmHg = 133.322 387 415 Pa
HUFNER = 1.34  # mL O2 per g Hb (common practice)
ALPHA = 0.003  # mL O2 per dL blood per mmHg (common practice)
R = 0.8  # respiratory exchange ratio (West)
STANDARD_PH = 7.40


def ph2o_37_mmhg() -> float:
    """Saturated water vapour pressure at 37 °C, IAPWS-IF97 (``iapws``), in mm[Hg]."""
    return float(_PSat_T(310.15)) * 1e6 / PA_PER_MMHG


def saturation_eq1(po2: float) -> float:
    """Severinghaus 1979 eq. 1 (standard blood: 37 °C, pH 7.40)."""
    if po2 <= 0.0:
        return 0.0
    return 1.0 / (23400.0 / (po2**3 + 150.0 * po2) + 1.0)


@lru_cache(maxsize=1)
def p50_eq1() -> float:
    """The PO2 at which eq. 1 gives a saturation of 0.5 (Brent's method)."""
    return float(brentq(lambda p: saturation_eq1(p) - 0.5, 10.0, 50.0, xtol=1e-12))


@lru_cache(maxsize=64)
def p50_at_ph(ph: float) -> float:
    """The P50 moved from pH 7.40 by Severinghaus 1979 eq. 4, integrated numerically."""
    if ph == STANDARD_PH:
        return p50_eq1()
    solution = solve_ivp(
        lambda _, y: [(math.exp(y[0]) / 26.6) ** 0.184 - 2.2],
        (STANDARD_PH, ph),
        [math.log(p50_eq1())],
        rtol=1e-12,
        atol=1e-12,
    )
    return float(math.exp(solution.y[0][-1]))


def saturation(po2: float, p50: float) -> float:
    """The curve scaled along the PO2 axis to the blood's P50."""
    return saturation_eq1(po2 * p50_eq1() / p50)


def content(po2: float, hb: float, p50: float) -> float:
    """Oxygen content (mL/dL) at ``po2`` on the blood's curve."""
    return HUFNER * hb * saturation(po2, p50) + ALPHA * po2


def po2_for_content(target: float, hb: float, p50: float, upper: float) -> float:
    """The PO2 in (0, upper] whose content is ``target`` (Brent's method)."""
    return float(brentq(lambda p: content(p, hb, p50) - target, 1e-6, upper, xtol=1e-10))


def alveolar(fio2: float, paco2: float, pb: float, ph2o: float) -> float:
    """The alveolar gas equation, full form, R 0.8."""
    return fio2 * (pb - ph2o) - paco2 * (fio2 + (1.0 - fio2) / R)


@dataclass(frozen=True)
class Arterial:
    """What the two-parameter model gives on one FiO2."""

    alveolar_po2: float
    pao2: float
    sao2: float


def arterial(
    *,
    shunt: float,
    drop: float,
    fio2: float,
    paco2: float,
    pb: float,
    ph2o: float,
    hb: float = 14.0,
    avd: float = 5.0,
    p50: float | None = None,
) -> Arterial:
    """PaO2 and SaO2 of a lung with ``shunt`` and V/Q term ``drop`` (mm[Hg]) on ``fio2``."""
    p50 = p50_eq1() if p50 is None else p50
    pa = alveolar(fio2, paco2, pb, ph2o)
    capillary = pa - drop
    ca = content(capillary, hb, p50) - avd * shunt / (1.0 - shunt)
    pao2 = po2_for_content(ca, hb, p50, capillary)
    return Arterial(pa, pao2, saturation(pao2, p50))


def room_air_projection(
    *,
    pao2: float,
    fio2: float,
    paco2: float,
    pb: float,
    ph2o: float,
    hb: float = 14.0,
    p50: float | None = None,
) -> float:
    """The PaO2 this gas's effective shunt gives on FiO2 0.21 (same PB, PaCO2, curve)."""
    p50 = p50_eq1() if p50 is None else p50
    pa = alveolar(fio2, paco2, pb, ph2o)
    deficit = content(pa, hb, p50) - content(min(pao2, pa), hb, p50)
    pa_air = alveolar(0.21, paco2, pb, ph2o)
    return po2_for_content(content(pa_air, hb, p50) - deficit, hb, p50, pa_air)


def pao2_at(alveolar_po2: float, shunt: float, drop: float) -> float:
    """PaO2 of the model at an alveolar PO2 (Hb 14 g/dL, a-v difference 5 mL/dL, the standard
    curve of Severinghaus 1979 eq. 1)."""
    hb, avd, p50 = 14.0, 5.0, p50_eq1()
    capillary = alveolar_po2 - drop
    arterial_content = content(capillary, hb, p50) - avd * shunt / (1.0 - shunt)
    return po2_for_content(arterial_content, hb, p50, capillary)


def lung_meeting(
    air: float, oxygen: float, air_target: float, oxygen_target: float
) -> tuple[float, float]:
    """(shunt, V/Q term in mm[Hg]) of the lung whose PaO2 is ``air_target`` at the room-air
    alveolar PO2 ``air`` and ``oxygen_target`` at the 100 %-oxygen one ``oxygen`` (Brent's
    method, nested); the room-air target alone, with no V/Q term, where the shunt that meets
    the oxygen target already lowers the room-air PaO2 below it."""

    def shunt_for(alveolar_po2: float, target: float, drop: float) -> float:
        return float(
            brentq(lambda s: pao2_at(alveolar_po2, s, drop) - target, 0.0, 0.3, xtol=1e-14)
        )

    def air_excess(drop: float) -> float:
        return pao2_at(air, shunt_for(oxygen, oxygen_target, drop), drop) - air_target

    if air_excess(0.0) <= 0.0:
        return shunt_for(air, air_target, 0.0), 0.0
    drop = float(brentq(air_excess, 0.0, air - air_target, xtol=1e-12))
    return shunt_for(oxygen, oxygen_target, drop), drop


def fio2_for_saturation(
    target: float,
    *,
    shunt: float,
    drop: float,
    paco2: float,
    pb: float,
    ph2o: float,
    hb: float = 14.0,
    avd: float = 5.0,
    p50: float | None = None,
) -> float | None:
    """The FiO2 in 0.21–1.0 at which the model's SaO2 reaches ``target`` (Brent's method);
    None when FiO2 1.0 does not reach it."""

    def gap(fio2: float) -> float:
        found = arterial(
            shunt=shunt,
            drop=drop,
            fio2=fio2,
            paco2=paco2,
            pb=pb,
            ph2o=ph2o,
            hb=hb,
            avd=avd,
            p50=p50,
        )
        return found.sao2 - target

    if gap(1.0) < 0.0:
        return None
    if gap(0.21) >= 0.0:
        return 0.21
    return float(brentq(gap, 0.21, 1.0, xtol=1e-9))


# --- The titration fixtures (fixtures/cases/titration) ----------------------------------------
#
# Each scenario is an invented patient whose readings come from the model above with chosen
# parameters ("the truth"), rounded the way they are charted (SpO2 to whole percent, PaO2 to
# whole mmHg). ``python -m tests.titration_reference fixtures`` writes the Bundles and the
# expected-outcome files, their numbers computed here and quoted as [calc] values.

VENTURI = "venturi"  # FiO2 charted as a measured FiO2 (3150-0)
VENTILATOR = "ventilator"  # FiO2 set on a ventilator (19994-3)
NASAL = "nasal"  # a nasal cannula and its flow (the service estimates the FiO2)


@dataclass(frozen=True)
class Step:
    """One FiO2 step: set at ``minute`` (from the scenario's start), with SpO2 readings and an
    arterial gas taken the given minutes after it was set. ``fio2`` is the FiO2 charted (for
    a nasal cannula the true FiO2 the readings are made at; the flow is charted)."""

    minute: float
    fio2: float
    spo2_after: tuple[float, ...] = ()
    gas_after: float | None = None
    flow: float | None = None
    spo2_override: tuple[float, ...] = ()  # charted SpO2 (%) instead of the model's


@dataclass(frozen=True)
class Scenario:
    """An invented patient with a titration."""

    name: str
    birth_date: str
    start: str  # ISO time of the first step (UTC)
    delivery: str
    shunt: float
    drop: float
    paco2: float
    ph: float
    hco3: float
    steps: tuple[Step, ...]
    hb: float | None = 14.0  # sent when not None (the model uses 14 otherwise)
    pb: float = 760.0  # sent as a measured ambient pressure


def _spo2_readings(scenario: Scenario, step: Step, ph2o: float) -> list[float]:
    if step.spo2_override:
        return list(step.spo2_override)
    found = arterial(
        shunt=scenario.shunt,
        drop=scenario.drop,
        fio2=step.fio2,
        paco2=scenario.paco2,
        pb=scenario.pb,
        ph2o=ph2o,
        hb=scenario.hb or 14.0,
        p50=p50_at_ph(scenario.ph),
    )
    return [round(100.0 * found.sao2) for _ in step.spo2_after]


def charted(scenario: Scenario) -> list[tuple[str, float, str, float | str]]:
    """(minute, what, value) rows of what the scenario charts, in time order: ``what`` is
    fio2, flow, device, spo2, pao2, paco2, ph, hco3, hb or pb."""
    ph2o = ph2o_37_mmhg()
    rows: list[tuple[str, float, str, float | str]] = []
    p50 = p50_at_ph(scenario.ph)
    for step in scenario.steps:
        if scenario.delivery == NASAL:
            rows.append(("setting", step.minute, "device", "nasal-cannula"))
            assert step.flow is not None
            rows.append(("setting", step.minute, "flow", step.flow))
        else:
            rows.append(("setting", step.minute, "fio2", step.fio2))
        for after, value in zip(step.spo2_after, _spo2_readings(scenario, step, ph2o), strict=True):
            rows.append(("spo2", step.minute + after, "spo2", value))
        if step.gas_after is not None:
            found = arterial(
                shunt=scenario.shunt,
                drop=scenario.drop,
                fio2=step.fio2,
                paco2=scenario.paco2,
                pb=scenario.pb,
                ph2o=ph2o,
                hb=scenario.hb or 14.0,
                p50=p50,
            )
            at = step.minute + step.gas_after
            rows += [
                ("gas", at, "pb", scenario.pb),
                ("gas", at, "pao2", float(round(found.pao2))),
                ("gas", at, "paco2", scenario.paco2),
                ("gas", at, "ph", scenario.ph),
                ("gas", at, "hco3", scenario.hco3),
            ]
            if scenario.hb is not None:
                rows.append(("gas", at, "hb", scenario.hb))
    if not any(row[2] == "pb" for row in rows):  # SpO2 alone: beside the latest reading
        rows.append(("spo2", max(r[1] for r in rows), "pb", scenario.pb))
    return sorted(rows, key=lambda r: r[1])


HTEST_TAG = {
    "system": "http://terminology.hl7.org/CodeSystem/v3-ActReason",
    "code": "HTEST",
    "display": "test health data",
}
_LOINC = "http://loinc.org"
_UCUM = "http://unitsofmeasure.org"
_CODES: dict[str, tuple[str, str, str]] = {  # what: (LOINC, display, UCUM unit)
    "spo2": ("59408-5", "Oxygen saturation in Arterial blood by Pulse oximetry", "%"),
    "pao2": ("2703-7", "Oxygen [Partial pressure] in Arterial blood", "mm[Hg]"),
    "paco2": ("2019-8", "Carbon dioxide [Partial pressure] in Arterial blood", "mm[Hg]"),
    "ph": ("2744-1", "pH of Arterial blood", "[pH]"),
    "hco3": ("1960-4", "Bicarbonate [Moles/volume] in Arterial blood", "mmol/L"),
    "hb": ("718-7", "Hemoglobin [Mass/volume] in Blood", "g/dL"),
    "pb": ("76268-2", "Ambient air pressure", "mm[Hg]"),
    "flow": ("3151-8", "Inhaled oxygen flow rate", "L/min"),
    "venturi": ("3150-0", "Inhaled oxygen concentration", "%"),
    "ventilator": ("19994-3", "Oxygen/Gas total [Pure volume fraction] Inhaled gas", "%"),
}


def _time(start: str, minute: float) -> str:
    from datetime import datetime, timedelta

    moment = datetime.fromisoformat(start) + timedelta(minutes=minute)
    return moment.isoformat().replace("+00:00", "Z")


def _resource(resource: dict[str, object]) -> dict[str, object]:
    return {"meta": {"tag": [dict(HTEST_TAG)]}, **resource}


def bundle_of(scenario: Scenario) -> dict[str, object]:
    """The scenario as a FHIR Bundle (collection), every resource tagged HTEST."""
    entries: list[dict[str, object]] = []

    def add(resource: dict[str, object]) -> None:
        kind, rid = resource["resourceType"], resource["id"]
        entries.append({"fullUrl": f"urn:oxyrule:{kind}/{rid}", "resource": _resource(resource)})

    add({"resourceType": "Patient", "id": "pt", "birthDate": scenario.birth_date})
    counts: dict[str, int] = {}

    def observation(what: str, minute: float, value: float | str) -> None:
        counts[what] = counts.get(what, 0) + 1
        rid = f"{what}-{counts[what]}"
        resource: dict[str, object] = {
            "resourceType": "Observation",
            "id": rid,
            "status": "final",
            "subject": {"reference": "Patient/pt"},
            "effectiveDateTime": _time(scenario.start, minute),
        }
        if what == "device":
            resource["code"] = {"coding": [{"system": _LOINC, "code": "107117-4"}]}
            resource["valueCodeableConcept"] = {
                "coding": [
                    {
                        "system": "https://oxyrule.org/fhir/CodeSystem/oxygen-device",
                        "code": str(value),
                    }
                ]
            }
        else:
            key = scenario.delivery if what == "fio2" else what
            code, display, unit = _CODES[key]
            number = float(value) * 100.0 if what == "fio2" else float(value)
            resource["code"] = {"coding": [{"system": _LOINC, "code": code, "display": display}]}
            resource["valueQuantity"] = {
                "value": round(number, 2),
                "unit": unit,
                "system": _UCUM,
                "code": unit,
            }
        add(resource)

    for _, minute, what, value in charted(scenario):
        observation(what, minute, value)
    return {
        "resourceType": "Bundle",
        "id": scenario.name,
        "meta": {"tag": [dict(HTEST_TAG)]},
        "type": "collection",
        "entry": entries,
    }


SCENARIOS: tuple[Scenario, ...] = (
    Scenario(
        "shunt-pneumonia-venturi",
        "1952-09-14",
        "2026-03-02T08:00:00+00:00",
        VENTURI,
        shunt=0.22,
        drop=0.0,
        paco2=36.0,
        ph=7.45,
        hco3=24.6,
        hb=13.0,
        steps=(
            Step(0, 0.21, (8,), 10),
            Step(20, 0.28, (8,)),
            Step(40, 0.35, (8,), 12),
            Step(60, 0.40, (8,)),
            Step(80, 0.60, (8,), 12),
        ),
    ),
    Scenario(
        "vq-asthma-venturi",
        "1990-05-03",
        "2026-03-03T09:00:00+00:00",
        VENTURI,
        shunt=0.02,
        drop=70.0,
        paco2=34.0,
        ph=7.46,
        hco3=23.8,
        hb=14.2,
        steps=(
            Step(0, 0.21, (8,), 10),
            Step(20, 0.24, (8,)),
            Step(40, 0.28, (8,)),
            Step(60, 0.35, (8,), 12),
        ),
    ),
    Scenario(
        "mixed-shunt-and-vq",
        "1959-11-20",
        "2026-03-04T10:00:00+00:00",
        VENTURI,
        shunt=0.16,
        drop=60.0,
        paco2=38.0,
        ph=7.42,
        hco3=24.3,
        hb=12.6,
        steps=(
            Step(0, 0.21, (8,), 10),
            Step(20, 0.28, (8,)),
            Step(40, 0.35, (8,)),
            Step(60, 0.50, (8,), 12),
        ),
    ),
    Scenario(
        "spo2-only-shunt-step-down",
        "1967-02-08",
        "2026-03-05T14:00:00+00:00",
        VENTURI,
        shunt=0.30,
        drop=40.0,
        paco2=40.0,
        ph=7.40,
        hco3=24.0,
        hb=None,
        steps=(
            Step(0, 0.60, (8, 12)),
            Step(20, 0.50, (8,)),
            Step(40, 0.40, (8,)),
            Step(60, 0.30, (8,)),
            Step(80, 0.24, (8,)),
            Step(100, 0.21, (8,)),
        ),
    ),
    Scenario(
        "spo2-only-vq-step-down",
        "1949-06-30",
        "2026-03-06T11:00:00+00:00",
        VENTURI,
        shunt=0.06,
        drop=60.0,
        paco2=40.0,
        ph=7.40,
        hco3=24.0,
        hb=None,
        steps=(
            Step(0, 0.35, (8,)),
            Step(20, 0.31, (8,)),
            Step(40, 0.28, (8,)),
            Step(60, 0.24, (8,)),
            Step(80, 0.21, (8, 12)),
        ),
    ),
    Scenario(
        "hypercapnic-small-steps",
        "1953-01-19",
        "2026-03-07T07:30:00+00:00",
        VENTURI,
        shunt=0.05,
        drop=35.0,
        paco2=58.0,
        ph=7.37,
        hco3=32.6,
        hb=15.4,
        steps=(
            Step(0, 0.21, (8,)),
            Step(20, 0.24, (8, 15)),
            Step(45, 0.28, (8,), 25),
        ),
    ),
    Scenario(
        "icu-fio2-steps",
        "1974-04-22",
        "2026-03-08T02:00:00+00:00",
        VENTILATOR,
        shunt=0.35,
        drop=20.0,
        paco2=42.0,
        ph=7.36,
        hco3=23.2,
        hb=10.5,
        steps=(
            Step(0, 0.40, (), 10),
            Step(30, 0.50, (), 10),
            Step(60, 0.60, (), 10),
            Step(90, 0.80, (), 10),
            Step(120, 1.0, (), 10),
        ),
    ),
    Scenario(
        "unidentifiable-high-fio2",
        "1961-12-01",
        "2026-03-09T15:00:00+00:00",
        VENTILATOR,
        shunt=0.12,
        drop=40.0,
        paco2=40.0,
        ph=7.39,
        hco3=23.8,
        hb=None,
        steps=(Step(0, 0.50, (), 15), Step(30, 0.60, (), 15), Step(60, 0.70, (), 15)),
    ),
    Scenario(
        "poor-fit-deteriorating",
        "1956-08-11",
        "2026-03-10T16:00:00+00:00",
        VENTURI,
        shunt=0.15,
        drop=30.0,
        paco2=39.0,
        ph=7.41,
        hco3=24.1,
        hb=12.8,
        steps=(
            Step(0, 0.28, (8,)),
            Step(20, 0.35, (8,), spo2_override=(93,)),
            Step(40, 0.40, (8,), spo2_override=(88,)),
            Step(60, 0.50, (8,), spo2_override=(85,)),
            Step(80, 0.60, (8,), 12, spo2_override=(84,)),
        ),
    ),
    Scenario(
        "nasal-cannula-estimated",
        "1948-03-25",
        "2026-03-11T10:00:00+00:00",
        NASAL,
        shunt=0.10,
        drop=60.0,
        paco2=41.0,
        ph=7.40,
        hco3=24.8,
        hb=13.6,
        steps=(
            Step(0, 0.25, (8,), flow=1.0),
            Step(20, 0.29, (8,), 12, flow=2.0),
            Step(40, 0.33, (8,), flow=3.0),
            Step(60, 0.37, (8,), flow=4.0),
        ),
    ),
)


# --- What each fixture must show, and the numbers it is checked against -----------------------

SPO2_SD = 0.02  # the fit's stated SpO2 error (docs/oxygen-response.md), 1 SD
PAO2_SD_FLOOR, PAO2_SD_RELATIVE = 2.0, 0.05  # PaO2: √(2² + (5 % of PaO2)²) mmHg, 1 SD


def _points(scenario: Scenario) -> list[tuple[str, float, float]]:
    """(kind, FiO2, value) of every charted reading: SpO2 as a fraction, PaO2 in mm[Hg]."""
    rows = charted(scenario)
    fio2_at: list[tuple[float, float]] = []
    for step in scenario.steps:
        fio2_at.append((step.minute, step.fio2))
    out: list[tuple[str, float, float]] = []
    for _, minute, what, value in rows:
        if what in ("spo2", "pao2"):
            fio2 = max((m, f) for m, f in fio2_at if m <= minute)[1]
            number = float(value) / 100.0 if what == "spo2" else float(value)
            out.append((what, fio2, number))
    return out


def effective_shunt_fit(scenario: Scenario) -> tuple[float, float, int]:
    """(effective shunt, χ², degrees of freedom) of the one-parameter model (ΔPO2 = 0) fitted
    by weighted least squares to the scenario's charted points, each with a measured FiO2,
    SpO2 above 0.97 left out (``scipy.optimize.least_squares``, independent of the service's
    solver)."""
    from scipy.optimize import least_squares

    ph2o = ph2o_37_mmhg()
    p50 = p50_at_ph(scenario.ph)
    hb = scenario.hb or 14.0
    used = [p for p in _points(scenario) if not (p[0] == "spo2" and p[2] > 0.97)]

    def residuals(x: list[float]) -> list[float]:
        shunt = x[0] / (1.0 + x[0])
        out = []
        for kind, fio2, value in used:
            found = arterial(
                shunt=shunt,
                drop=0.0,
                fio2=fio2,
                paco2=scenario.paco2,
                pb=scenario.pb,
                ph2o=ph2o,
                hb=hb,
                p50=p50,
            )
            if kind == "spo2":
                out.append((found.sao2 - value) / SPO2_SD)
            else:
                sd = math.hypot(PAO2_SD_FLOOR, PAO2_SD_RELATIVE * value)
                out.append((found.pao2 - value) / sd)
        return out

    solution = least_squares(residuals, [0.2], bounds=([0.0], [5.0]), xtol=1e-12, ftol=1e-12)
    chi2 = float(sum(r * r for r in solution.fun))
    return solution.x[0] / (1.0 + solution.x[0]), chi2, len(used) - 1


def index_gas(scenario: Scenario) -> tuple[float, float] | None:
    """(FiO2, PaO2) of the latest arterial gas, or None without one."""
    gases = [p for p in _points(scenario) if p[0] == "pao2"]
    return (gases[-1][1], gases[-1][2]) if gases else None


# The demo's titration (``oxyrule demo``), written into fixtures/demo.
DEMO_SCENARIOS: tuple[Scenario, ...] = (
    Scenario(
        "venturi-titration",
        "1964-10-05",
        "2026-04-14T09:00:00+00:00",
        VENTURI,
        shunt=0.12,
        drop=45.0,
        paco2=37.0,
        ph=7.44,
        hco3=24.5,
        hb=13.4,
        steps=(
            Step(0, 0.21, (8,), 10),
            Step(20, 0.24, (8,)),
            Step(40, 0.28, (8,)),
            Step(60, 0.35, (8,)),
            Step(80, 0.40, (8,), 12),
        ),
    ),
)


@dataclass(frozen=True)
class Expected:
    """What a case must show, decided from the physiology of its truth (not copied from the
    service): the verdict, findings, rules, and which model the points can identify."""

    description: str
    pattern: str
    grades: dict[str, str]
    findings: tuple[str, ...]
    fire: tuple[str, ...]
    silent: tuple[str, ...]
    model: str
    refusal: str | None = None
    hypercapnic: bool = False
    checks: tuple[str, ...] = ("fitted", "target")  # which [calc] values apply


def _grades(lio: str, hv: str, dl: str, vq: str, sh: str) -> dict[str, str]:
    return {
        "low-inspired-oxygen": lio,
        "hypoventilation": hv,
        "diffusion-limitation": dl,
        "vq-mismatch": vq,
        "shunt": sh,
    }


EXPECTED: dict[str, Expected] = {
    "venturi-titration": Expected(
        "Invented (the demo's titration). A 61-year-old with pneumonia titrated on a Venturi "
        "mask from air to FiO2 0.40, SpO2 at each step, gases on air and at the end. Truth: "
        "shunt 12 %, V/Q term 45 mmHg. The fit puts the V/Q term above a healthy "
        "61-year-old's over its whole range (V/Q mismatch likely); the shunt's range, widened "
        "by the assumed a-v difference (3.5-7 mL/dL), reaches down across 8 %: possible. It "
        "predicts SpO2 94 % at about FiO2 0.25.",
        "single",
        _grades("unlikely", "unlikely", "possible", "likely", "possible"),
        ("fio2-for-target-predicted", "hypoxaemia-mild", "oxygen-masks-gas-exchange-defect"),
        ("vq-mismatch-likely-fitted", "shunt-possible-fitted", "fio2-for-target-predicted"),
        ("shunt-likely-fitted", "vq-mismatch-possible-fitted", "shunt-possible-fit-narrow"),
        "shunt-and-vq",
    ),
    "shunt-pneumonia-venturi": Expected(
        "Invented. A 73-year-old with lobar pneumonia, titrated on a Venturi mask from air to "
        "FiO2 0.60 (FiO2 charted at each step), SpO2 at each step and three gases. Truth: "
        "shunt 22 %, no V/Q term. The saturation rises little with oxygen (a capped curve): "
        "the fit puts the shunt at about 22 % (above 8 % over its whole range) and the V/Q "
        "term within a healthy 73-year-old's: shunt likely, V/Q and diffusion unlikely, "
        "graded from the fit (it outranks the two-gas admixture comparison, which agrees).",
        "single",
        _grades("unlikely", "unlikely", "unlikely", "unlikely", "likely"),
        ("fio2-for-target-predicted", "hypoxaemia-moderate", "oxygen-masks-gas-exchange-defect"),
        (
            "shunt-likely-fitted",
            "vq-mismatch-unlikely-fitted",
            "diffusion-limitation-unlikely-fitted",
            "gas-exchange-defect-fitted",
            "fio2-for-target-predicted",
        ),
        ("shunt-possible-fit-narrow", "vq-mismatch-likely-fitted", "target-band-unreachable"),
        "shunt-and-vq",
    ),
    "vq-asthma-venturi": Expected(
        "Invented. A 35-year-old with acute asthma, titrated on a Venturi mask from air to FiO2 "
        "0.35: SpO2 77 % on air rising to 99 %, gases on air and at the end. Truth: shunt 2 %, "
        "V/Q term 70 mmHg. The curve is shifted right and oxygen overcomes it: the fit puts the "
        "V/Q term far above a healthy 35-year-old's and the shunt within normal: V/Q mismatch "
        "likely, shunt unlikely (from the fit); diffusion stays possible at rest.",
        "single",
        _grades("unlikely", "unlikely", "possible", "likely", "unlikely"),
        (
            "fio2-for-target-predicted",
            "hypoxaemia-mild",
            "oxygen-masks-gas-exchange-defect",
            "spo2-above-target-band",
        ),
        ("vq-mismatch-likely-fitted", "shunt-unlikely-fitted", "gas-exchange-defect-fitted"),
        ("shunt-likely-fitted", "vq-mismatch-unlikely-fitted", "shunt-possible-fitted"),
        "shunt-and-vq",
    ),
    "mixed-shunt-and-vq": Expected(
        "Invented. A 66-year-old with pneumonia on a background of emphysema, titrated from air "
        "to FiO2 0.50 on a Venturi mask, gases at both ends. Truth: shunt 16 %, V/Q term 60 "
        "mmHg. The curve is both shifted and capped: the fit separates them, both beyond "
        "normal over their whole ranges: shunt and V/Q mismatch likely, a mixed pattern.",
        "mixed",
        _grades("unlikely", "unlikely", "possible", "likely", "likely"),
        ("fio2-for-target-predicted", "hypoxaemia-moderate", "oxygen-masks-gas-exchange-defect"),
        ("shunt-likely-fitted", "vq-mismatch-likely-fitted", "gas-exchange-defect-fitted"),
        ("shunt-possible-fitted", "vq-mismatch-possible-fitted"),
        "shunt-and-vq",
    ),
    "spo2-only-shunt-step-down": Expected(
        "Invented. A 59-year-old weaned from oxygen on the ward by SpO2 alone: Venturi FiO2 "
        "0.60 stepped down to air, SpO2 at each step, no gas, no Hb. Truth: shunt 30 %, V/Q "
        "term 40 mmHg. Even over the assumed Hb (8-17 g/dL) and a-v difference the fitted "
        "shunt stays above 8 %: shunt likely from oximetry alone; the V/Q term's range, "
        "widened by the unknown PaCO2, reaches across a healthy lung's: possible. Without a "
        "PaCO2 the hypercapnic risk is unknown, so no target band is chosen (both are given).",
        "single",
        _grades("unlikely", "possible", "possible", "possible", "likely"),
        ("hypoxaemia-moderate", "no-arterial-gas"),
        ("shunt-likely-fitted", "vq-mismatch-possible-fitted", "gas-exchange-defect-fitted"),
        ("fio2-for-target-predicted", "vq-mismatch-likely-fitted"),
        "shunt-and-vq",
        checks=("fitted",),
    ),
    "spo2-only-vq-step-down": Expected(
        "Invented. A 76-year-old with an exacerbation of COPD weaned on the ward by SpO2 alone, "
        "Venturi FiO2 0.35 down to air (76 % on air), no gas. Truth: shunt 6 %, V/Q term 60 "
        "mmHg. The curve is shifted far right, but with no PaCO2 a raised PaCO2 would shift "
        "it the same way: V/Q mismatch stays possible (hypoventilation not excluded); the "
        "small shunt's range, widened by the assumptions, reaches across 8 %: possible.",
        "indeterminate",
        _grades("unlikely", "possible", "possible", "possible", "possible"),
        ("hypoxaemia-moderate", "no-arterial-gas"),
        ("vq-mismatch-possible-fit-paco2-assumed", "shunt-possible-fitted"),
        ("vq-mismatch-likely-fitted", "gas-exchange-defect-fitted"),
        "shunt-and-vq",
        checks=("fitted",),
    ),
    "hypercapnic-small-steps": Expected(
        "Invented. A 73-year-old with chronic hypercapnic COPD (PaCO2 58, HCO3 32.6): SpO2 on "
        "air, then controlled small steps on a Venturi mask (FiO2 0.24, 0.28), a gas at the "
        "end. Truth: shunt 5 %, V/Q term 35 mmHg. Three FiO2 levels spanning 0.07: the fit "
        "is reported but does not reach far enough to grade on, so shunt and V/Q stay "
        "possible (no second gas to compare). Hypercapnic failure is present: the target is "
        "88-92 %, and the fit gives the FiO2 for it; SpO2 96 % on 0.28 is above it.",
        "mixed",
        _grades("unlikely", "likely", "possible", "possible", "possible"),
        (
            "chronic-respiratory-acidosis",
            "fio2-for-target-predicted",
            "hypercapnia",
            "hypoxaemia-mild",
            "oxygen-masks-gas-exchange-defect",
            "oxygen-masks-hypercapnia",
            "spo2-above-target-band",
        ),
        (
            "shunt-possible-fit-narrow",
            "vq-mismatch-possible-fit-narrow",
            "fio2-for-hypercapnic-target-predicted",
        ),
        ("fio2-for-target-predicted", "shunt-likely-fitted", "vq-mismatch-likely-fitted"),
        "shunt-and-vq",
        hypercapnic=True,
    ),
    "icu-fio2-steps": Expected(
        "Invented. A 51-year-old ventilated for ARDS: ventilator FiO2 stepped 0.40, 0.50, 0.60, "
        "0.80, 1.0 with a gas at each. Truth: shunt 35 %, V/Q term 20 mmHg. On FiO2 0.4 and "
        "above the V/Q term barely acts, so the fit cannot identify it (refused: the V/Q "
        "term's range is too wide) and reports the effective shunt. The grades fall back to "
        "the two-gas comparison: venous admixture fixed across FiO2 0.4 to 1.0 and above 20 % "
        "on high FiO2: shunt likely. The effective shunt from points reaching FiO2 1.0 "
        "predicts SpO2 below 94 % even on pure oxygen.",
        "single",
        _grades("unlikely", "unlikely", "unlikely", "unlikely", "likely"),
        ("hypoxaemia-severe", "oxygen-masks-gas-exchange-defect", "target-band-unreachable"),
        (
            "shunt-likely-fixed",
            "shunt-likely-high-fio2",
            "shunt-possible-fit-unidentified",
            "target-band-unreachable",
        ),
        ("shunt-likely-fitted", "vq-mismatch-likely-fitted", "fio2-for-target-predicted"),
        "effective-shunt",
        refusal="vq-range-wide",
        checks=("effective",),
    ),
    "unidentifiable-high-fio2": Expected(
        "Invented. A 64-year-old ventilated after abdominal surgery, three gases on FiO2 0.50, "
        "0.60 and 0.70, no Hb sent. Truth: shunt 12 %, V/Q term 40 mmHg. Points only on high "
        "FiO2 cannot tell shunt from V/Q mismatch: the two-parameter fit is refused, the "
        "effective shunt is reported, and with no Hb there is no admixture comparison to fall "
        "back on: both stay possible. The effective shunt, carried below its points, would "
        "promise too much, so no target FiO2 is predicted.",
        "indeterminate",
        _grades("unlikely", "unlikely", "possible", "possible", "possible"),
        ("hypoxaemia-mild", "oxygen-masks-gas-exchange-defect"),
        ("shunt-possible-fit-unidentified", "vq-mismatch-possible-fit-unidentified"),
        ("fio2-for-target-predicted", "target-band-unreachable", "shunt-likely-fitted"),
        "effective-shunt",
        refusal="vq-range-wide",
        checks=("effective",),
    ),
    "poor-fit-deteriorating": Expected(
        "Invented. A 69-year-old whose SpO2 fell from 95 % to 84 % while the Venturi FiO2 was "
        "raised from 0.28 to 0.60 (a worsening lung during the titration), a gas at the end. "
        "No constant shunt and V/Q term explain points that fall as oxygen rises: the fit is "
        "poor (probability far below 1 %) and shunt and V/Q mismatch stay possible, before "
        "any comparison of two of its readings.",
        "indeterminate",
        _grades("unlikely", "unlikely", "possible", "possible", "possible"),
        ("hypoxaemia-mild", "oxygen-masks-gas-exchange-defect", "spo2-below-target-band"),
        (
            "shunt-possible-fit-poor",
            "vq-mismatch-possible-fit-poor",
            "shunt-possible-fit-unidentified",
        ),
        ("fio2-for-target-predicted", "target-band-unreachable", "shunt-likely-fitted"),
        "effective-shunt",
        refusal="vq-range-wide",
        checks=("poor",),
    ),
    "nasal-cannula-estimated": Expected(
        "Invented. A 77-year-old on a nasal cannula turned up from 1 to 4 L/min, SpO2 at each "
        "flow and a gas at 2 L/min. No FiO2 was measured: each is an estimate with a wide range "
        "(Wettstein 2005), so the steps the fit rests on are not known: shunt and V/Q mismatch "
        "stay possible, whatever the fit found.",
        "indeterminate",
        _grades("unlikely", "unlikely", "possible", "possible", "possible"),
        ("fio2-estimated-from-flow", "hypoxaemia-mild", "oxygen-masks-gas-exchange-defect"),
        ("shunt-possible-fit-fio2-estimated", "vq-mismatch-possible-fit-fio2-estimated"),
        ("shunt-likely-fitted", "fio2-for-target-predicted"),
        "effective-shunt",
        refusal="vq-range-wide",
        checks=(),
    ),
}


def _informative(scenario: Scenario) -> int:
    """Points a fit can use: each gas, and each FiO2 step's SpO2 readings as one (their
    median) when at or below 0.97."""
    count = 0
    for step in scenario.steps:
        readings = _spo2_readings(scenario, step, ph2o_37_mmhg())
        if readings:
            ordered = sorted(readings)
            middle = len(ordered) // 2
            median = (ordered[middle] + ordered[~middle]) / 2.0
            count += median <= 97.0
        count += step.gas_after is not None
    return count


def _yaml_list(items: tuple[str, ...] | list[str]) -> str:
    return "[" + ", ".join(sorted(items)) + "]"


def expected_yaml(scenario: Scenario, expected: Expected) -> str:
    """The expected-outcome file, its numbers computed here ([calc] comments)."""
    from textwrap import fill

    ph2o = ph2o_37_mmhg()
    lines = [
        "description: >-",
        fill(expected.description, 96, initial_indent="  ", subsequent_indent="  "),
        "expect:",
        f"  pattern: {expected.pattern}",
        "  mechanisms:",
        *(f"    {k}: {v}" for k, v in expected.grades.items()),
        f"  findings: {_yaml_list(expected.findings)}",
        f"  rules_fire: {_yaml_list(expected.fire)}",
        f"  rules_silent: {_yaml_list(expected.silent)}",
    ]
    derived: list[str] = []
    gas = index_gas(scenario)
    if gas is not None:
        fio2, pao2 = gas
        pa = alveolar(fio2, scenario.paco2, scenario.pb, ph2o)
        derived += [
            f"    # [calc] {fio2:.2f} x ({scenario.pb:.2f} - {ph2o:.2f}) - {scenario.paco2:.2f} x "
            f"({fio2:.2f} + {1 - fio2:.2f}/0.8) = {pa:.2f} (alveolar gas equation, PH2O "
            "IAPWS-IF97 at 37 C).",
            f'    alveolar-po2: {{value: {pa:.2f}, unit: "mm[Hg]", tolerance: 0.1}}',
        ]
        if fio2 > 0.21:
            air = room_air_projection(
                pao2=pao2,
                fio2=fio2,
                paco2=scenario.paco2,
                pb=scenario.pb,
                ph2o=ph2o,
                hb=scenario.hb or 14.0,
                p50=p50_at_ph(scenario.ph),
            )
            derived += [
                f"    # [calc] effective shunt of this gas carried to FiO2 0.21 (Karbing "
                f"2007): content deficit at PAO2 {pa:.2f} and PaO2 {pao2:.0f} held on air, Hb "
                f"{scenario.hb or 14.0:g}, curve at pH {scenario.ph:g} = {air:.2f}.",
                f'    room-air-pao2: {{value: {air:.2f}, unit: "mm[Hg]", tolerance: 0.1}}',
            ]
    if derived:
        lines += ["  derived:", *derived]
    lines += ["  oxygen_response:", f"    model: {expected.model}"]
    if expected.refusal:
        lines.append(f"    refusal: {expected.refusal}")
    lines += [
        f"    # [calc] each gas, and each FiO2 step's SpO2 (median) at or below 97 %: "
        f"{_informative(scenario)}.",
        f"    points: {_informative(scenario)}",
    ]
    values: list[str] = []
    if "fitted" in expected.checks:
        values += [
            f"      # [calc] the truth the points were made from: shunt {100 * scenario.shunt:g} "
            "% (SpO2 charted to whole percent, PaO2 to whole mmHg: within 3 points).",
            f'      fitted-shunt: {{value: {100 * scenario.shunt:.1f}, unit: "%", tolerance: 3.0}}',
            f"      # [calc] the truth: V/Q term {scenario.drop:g} mmHg (within 10 mmHg, 1.3 kPa: "
            "inside Rowe 2010's limits of agreement of the right shift, -2.9 to +3.6 kPa).",
            f'      fitted-vq-drop: {{value: {scenario.drop:.1f}, unit: "mm[Hg]", '
            "tolerance: 10.0}",
        ]
    if "target" in expected.checks:
        target = 0.88 if expected.hypercapnic else 0.94
        fio2_target = fio2_for_saturation(
            target,
            shunt=scenario.shunt,
            drop=scenario.drop,
            paco2=scenario.paco2,
            pb=scenario.pb,
            ph2o=ph2o,
            hb=scenario.hb or 14.0,
            p50=p50_at_ph(scenario.ph),
        )
        assert fio2_target is not None
        name = "predicted-fio2-for-" + ("hypercapnic-target" if expected.hypercapnic else "target")
        values += [
            f"      # [calc] the truth's SaO2 reaches {target:.0%} at FiO2 {fio2_target:.3f} "
            "(Brent's method on the model above, at the latest PaCO2 and pH).",
            f'      {name}: {{value: {fio2_target:.3f}, unit: "1", tolerance: 0.03}}',
        ]
    if "effective" in expected.checks or "poor" in expected.checks:
        shunt, chi2, dof = effective_shunt_fit(scenario)
        from scipy.stats import chi2 as chi2_distribution

        if "effective" in expected.checks:
            values += [
                f"      # [calc] one-parameter least squares on the charted points "
                f"(scipy.optimize.least_squares, SpO2 SD 0.02, PaO2 SD sqrt(2^2 + (5 %)^2)): "
                f"{100 * shunt:.2f} %.",
                f'      effective-shunt: {{value: {100 * shunt:.2f}, unit: "%", tolerance: 0.5}}',
            ]
        if "poor" in expected.checks:
            p = float(chi2_distribution.sf(chi2, dof))
            values += [
                f"      # [calc] chi-square {chi2:.1f} on {dof} degrees of freedom of that fit: "
                f"tail probability {p:.1e} (scipy.stats.chi2).",
                f'      titration-fit-probability: {{value: {p:.3f}, unit: "1", tolerance: 0.005}}',
            ]
    if values:
        lines += ["    values:", *values]
    lines.append("known_gap: null")
    return "\n".join(lines) + "\n"


def write_fixtures(root: str) -> None:
    """Write every scenario's Bundle and expected-outcome file under the fixture root
    ``root``: the titration cases into ``cases/titration``, the demo's into ``demo``."""
    import json
    from pathlib import Path

    for folder, scenarios in (("cases/titration", SCENARIOS), ("demo", DEMO_SCENARIOS)):
        out = Path(root) / folder
        out.mkdir(parents=True, exist_ok=True)
        for scenario in scenarios:
            bundle = json.dumps(bundle_of(scenario), indent=1, ensure_ascii=False) + "\n"
            (out / f"{scenario.name}.bundle.json").write_text(bundle, encoding="utf-8")
            text = expected_yaml(scenario, EXPECTED[scenario.name])
            (out / f"{scenario.name}.expected.yaml").write_text(text, encoding="utf-8")


if __name__ == "__main__":
    import sys

    write_fixtures(sys.argv[1] if len(sys.argv) > 1 else "fixtures")
