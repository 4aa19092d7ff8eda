"""What a healthy adult's blood gas should be: the reference the verdicts are measured against.

Three references, each from published data on healthy subjects:

* **PaO2 for age** at sea level on room air — Cerveri I et al., "Reference values of arterial
  oxygen tension in the middle-aged and elderly", Am J Respir Crit Care Med 1995;152:934–941:
  40–74 years, PaO2 = 143.6 − 0.39 × age − 0.56 × BMI − 0.57 × PaCO2 (SEE 7.48 mmHg);
  75 years and over, no dependence on age, BMI or PaCO2: mean 83.4 mmHg, 5th centile 68.4.
  The lower limit is the 5th centile (mean − 1.645 SEE below 75). Below 40 years the
  regression is extrapolated (said so in the method text); below 18 the age-18 value is used.
* **The normal A-a gradient at any alveolar PO2**, from a model of the healthy lung of that
  age. A normal lung has a small true shunt (bronchial and Thebesian veins, a few unventilated
  units) and a little V/Q inequality (Mellemgaard K, Acta Physiol Scand 1966;67:10: most of
  the normal gradient is V/Q inequality, which grows with age). Both are fitted, per age, to
  two published anchors with the two-parameter model of pulmonary oxygen exchange
  (``oxygen_exchange``: a shunt and a V/Q term, Kjærgaard S et al., Intensive Care Med
  2003;29:727), at the reference haemoglobin of the iso-shunt diagram (14 g/dL) and a-v
  difference (5 mL/dL):

  - on room air at sea level, the PaO2 reference for age above (Cerveri 1995);
  - on 100 % oxygen, the A-a gradient of healthy men: 48 (31–60) mmHg at mean age 25 and
    93 (60–108) at 50 ("Gas exchange in two male age groups in relation to inspiratory oxygen
    fraction…", Upsala J Med Sci); a line in age through the two groups, held beyond 50 (not
    extrapolated past the data).

  The expected gradient comes from the means, the upper limit from the lower limit of PaO2
  on air and the top of the range on oxygen. The model then gives the normal at any alveolar
  PO2: it narrows at altitude (healthy subjects in controlled hypoxia, J Lab Clin Med
  1984;104:685; Grocott MPW et al., N Engl J Med 2009;360:140: A-a 5.4 mmHg at 8,400 m) and
  widens on oxygen to a plateau once haemoglobin is saturated (12 healthy men at six alveolar
  PO2s: the gradient rose from 100 to 174 mmHg and then stayed level). Where the two anchors
  cannot both be met (the young: the oxygen anchor asks for more shunt than the room-air
  anchor allows), the room-air anchor wins and the V/Q term is zero.
* **PaCO2 for the altitude**, for residents and for newly arrived visitors (see
  ``expected_paco2``).

An a/A ratio is also reported: its lower limit at this alveolar PO2 is 1 − upper limit / PAO2.

Everything is in mm[Hg]; FiO2 and ratios are fractions.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from enum import StrEnum
from functools import lru_cache

from service.physiology import constants as c
from service.physiology.atmosphere import barometric_pressure_west_mmhg
from service.physiology.bounds import AGE_YEARS, PRESSURE_BAROMETRIC_MMHG, require_possible
from service.physiology.gas_exchange import alveolar_po2_mmhg
from service.physiology.oxygen_exchange import STANDARD_CONDITIONS, exchange_state
from service.physiology.water_vapour import water_vapour_pressure_mmhg

# --- PaO2 for age: Cerveri et al. 1995 --------------------------------------------------------
CERVERI_INTERCEPT_MMHG = 143.6
CERVERI_PER_YEAR_MMHG = 0.39
CERVERI_PER_BMI_MMHG = 0.56
CERVERI_PER_PACO2 = 0.57
CERVERI_SEE_MMHG = 7.48
CERVERI_ELDERLY_FROM_YEARS = 75.0
CERVERI_ELDERLY_MEAN_MMHG = 83.4
CERVERI_ELDERLY_FIFTH_CENTILE_MMHG = 68.4
CERVERI_STUDIED_FROM_YEARS = 40.0
ADULT_REFERENCE_FROM_YEARS = 18.0
# One-sided 5th centile of a normal distribution (the lower limit of normal).
LOWER_LIMIT_Z = 1.645
# The reference person: BMI 25 kg/m² (the boundary of the normal range, WHO) and PaCO2
# 40 mmHg (the centre of the 35–45 mmHg reference range, common practice).
REFERENCE_BMI_KG_M2 = 25.0
REFERENCE_PACO2_MMHG = c.NORMAL_PACO2_MMHG


def _reference_age(age_years: float) -> float:
    require_possible("age_years", age_years, *AGE_YEARS, "a")
    return max(age_years, ADULT_REFERENCE_FROM_YEARS)


def expected_pao2_mmhg(*, age_years: float, bmi_kg_m2: float = REFERENCE_BMI_KG_M2) -> float:
    """Mean PaO2 of healthy adults of this age, at sea level on room air, PaCO2 40 (mm[Hg]).

    Cerveri et al. 1995 (module docstring): 143.6 − 0.39 age − 0.56 BMI − 0.57 × 40 below
    75 years; 83.4 mmHg from 75 on.
    """
    age = _reference_age(age_years)
    if age >= CERVERI_ELDERLY_FROM_YEARS:
        return CERVERI_ELDERLY_MEAN_MMHG
    return (
        CERVERI_INTERCEPT_MMHG
        - CERVERI_PER_YEAR_MMHG * age
        - CERVERI_PER_BMI_MMHG * bmi_kg_m2
        - CERVERI_PER_PACO2 * REFERENCE_PACO2_MMHG
    )


def pao2_lower_limit_mmhg(*, age_years: float, bmi_kg_m2: float = REFERENCE_BMI_KG_M2) -> float:
    """Lower limit of normal PaO2 for age (5th centile), sea level, room air (mm[Hg]).

    Below 75 years the regression mean minus 1.645 × SEE (7.48 mmHg); from 75 the published
    5th centile, 68.4 mmHg (Cerveri et al. 1995).
    """
    age = _reference_age(age_years)
    if age >= CERVERI_ELDERLY_FROM_YEARS:
        return CERVERI_ELDERLY_FIFTH_CENTILE_MMHG
    mean = expected_pao2_mmhg(age_years=age, bmi_kg_m2=bmi_kg_m2)
    return mean - LOWER_LIMIT_Z * CERVERI_SEE_MMHG


def reference_method(age_years: float) -> str:
    """How the PaO2 reference was obtained for this age, in words (for method texts)."""
    if age_years < ADULT_REFERENCE_FROM_YEARS:
        return "Cerveri 1995 adult reference, age 18 used"
    if age_years < CERVERI_STUDIED_FROM_YEARS:
        return "Cerveri 1995 regression, extrapolated below 40 years"
    if age_years < CERVERI_ELDERLY_FROM_YEARS:
        return "Cerveri 1995 regression (40–74 years)"
    return "Cerveri 1995, 75 years and over"


@lru_cache(maxsize=16)
def reference_alveolar_po2_mmhg(
    *, respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT
) -> float:
    """Alveolar PO2 of the reference person: sea level (760 mmHg), room air, PaCO2 40, 37 °C.

    Full alveolar gas equation with PH2O at 37 °C (IAPWS-IF97): about 101.8 mmHg. Cached:
    it depends only on the respiratory quotient (a site setting), and every normal A-a
    gradient asks for it.
    """
    return alveolar_po2_mmhg(
        fio2=c.ROOM_AIR_FIO2,
        paco2_mmhg=REFERENCE_PACO2_MMHG,
        barometric_mmhg=c.SEA_LEVEL_PRESSURE_MMHG,
        water_vapour_mmhg=water_vapour_pressure_mmhg(temperature_cel=c.NORMAL_BODY_TEMPERATURE_CEL),
        respiratory_quotient=respiratory_quotient,
    )


# Normal A-a gradient on 100 % oxygen: Upsala J Med Sci, two male age groups, mean (range):
# 48 (31–60) mmHg at mean age 25, 93 (60–108) at 50.
OXYGEN_ANCHOR_AGES = (25.0, 50.0)
OXYGEN_ANCHOR_MEAN_MMHG = (48.0, 93.0)
OXYGEN_ANCHOR_UPPER_MMHG = (60.0, 108.0)
_SHUNT_ODDS_MAX = 0.5  # a third of the cardiac output: far beyond any healthy lung
_BISECTIONS = 60


@dataclass(frozen=True, slots=True)
class HealthyLung:
    """The shunt (as odds, shunt / (1 − shunt)) and V/Q term (mm[Hg]) of a healthy lung."""

    shunt_odds: float
    vq_drop_mmhg: float


@dataclass(frozen=True, slots=True)
class NormalGradient:
    """The A-a gradient of a healthy person of this age at this alveolar PO2 (mm[Hg])."""

    expected: float
    upper_limit: float


def _oxygen_anchor(age_years: float, values: tuple[float, float]) -> float:
    # A line through the two groups, not extrapolated past the older one (held from 50).
    (young_age, old_age), (young, old) = OXYGEN_ANCHOR_AGES, values
    age = min(_reference_age(age_years), old_age)
    return young + (old - young) * (age - young_age) / (old_age - young_age)


def _arterial(alveolar_po2_mmhg: float, lung: HealthyLung) -> float | None:
    conditions = STANDARD_CONDITIONS
    state = exchange_state(
        alveolar_po2_mmhg,
        lung.vq_drop_mmhg,
        lung.shunt_odds,
        conditions.carrying_capacity_ml_dl,
        conditions.av_difference_ml_dl,
        conditions.affinity.scale,
    )
    return None if state is None else state.arterial_po2_mmhg


def _odds_for(alveolar: float, target_pao2: float, vq_drop: float) -> float:
    """The shunt odds that bring the arterial PO2 to ``target_pao2`` (bisection: PaO2 falls
    as the shunt grows); 0 when even no shunt leaves the PaO2 below the target."""
    low, high = 0.0, _SHUNT_ODDS_MAX
    for _ in range(_BISECTIONS):
        middle = 0.5 * (low + high)
        pao2 = _arterial(alveolar, HealthyLung(middle, vq_drop))
        if pao2 is not None and pao2 > target_pao2:
            low = middle
        else:
            high = middle
    return low


@lru_cache(maxsize=512)
def healthy_lung(age_years: int, limit: bool, respiratory_quotient: float) -> HealthyLung:
    """The healthy lung of this age (``limit``: the one at the lower limit of normal), fitted
    to the room-air and 100 %-oxygen anchors (module docstring). Cached: ages are whole."""
    air_alveolar = reference_alveolar_po2_mmhg(respiratory_quotient=respiratory_quotient)
    oxygen_alveolar = alveolar_po2_mmhg(
        fio2=1.0,
        paco2_mmhg=REFERENCE_PACO2_MMHG,
        water_vapour_mmhg=water_vapour_pressure_mmhg(temperature_cel=c.NORMAL_BODY_TEMPERATURE_CEL),
        respiratory_quotient=respiratory_quotient,
    )
    age = float(age_years)
    if limit:
        air_target = pao2_lower_limit_mmhg(age_years=age)
        oxygen_target = oxygen_alveolar - _oxygen_anchor(age, OXYGEN_ANCHOR_UPPER_MMHG)
    else:
        air_target = expected_pao2_mmhg(age_years=age)
        oxygen_target = oxygen_alveolar - _oxygen_anchor(age, OXYGEN_ANCHOR_MEAN_MMHG)

    def air_excess(vq_drop: float) -> tuple[float, HealthyLung]:
        lung = HealthyLung(_odds_for(oxygen_alveolar, oxygen_target, vq_drop), vq_drop)
        pao2 = _arterial(air_alveolar, lung)
        return (-1.0 if pao2 is None else pao2 - air_target), lung

    excess, _ = air_excess(0.0)
    if excess <= 0.0:
        # The oxygen anchor's shunt alone lowers the room-air PaO2 below its reference: the
        # room-air anchor wins, with no V/Q term.
        return HealthyLung(_odds_for(air_alveolar, air_target, 0.0), 0.0)
    low, high = 0.0, air_alveolar - air_target
    for _ in range(_BISECTIONS):
        middle = 0.5 * (low + high)
        excess, _ = air_excess(middle)
        if excess > 0.0:
            low = middle
        else:
            high = middle
    return air_excess(low)[1]


def normal_aa_gradient(
    *,
    age_years: float,
    alveolar_po2_mmhg: float,
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT,
) -> NormalGradient:
    """The normal A-a gradient, expected and upper limit, for age at this alveolar PO2.

    Above the reference alveolar PO2 (sea level, air, PaCO2 40): the gradient of the healthy
    lung of that age (``healthy_lung``). At or below it: the room-air values scaled by
    PAO2 / PAO2_ref (the a/A ratio holds). The two meet at the reference.

    Raises:
        ImpossibleValueError: an impossible age.
    """
    return NormalGradient(
        normal_aa_gradient_mmhg(
            age_years=age_years,
            alveolar_po2_mmhg=alveolar_po2_mmhg,
            respiratory_quotient=respiratory_quotient,
            limit=False,
        ),
        normal_aa_gradient_mmhg(
            age_years=age_years,
            alveolar_po2_mmhg=alveolar_po2_mmhg,
            respiratory_quotient=respiratory_quotient,
            limit=True,
        ),
    )


def normal_aa_gradient_mmhg(
    *,
    age_years: float,
    alveolar_po2_mmhg: float,
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT,
    limit: bool,
) -> float:
    """One of ``normal_aa_gradient``'s two values (``limit``: the upper limit, else the
    expected gradient), for a caller that needs only one: the same number, at half the cost.

    Raises:
        ImpossibleValueError: an impossible age.
    """
    reference_pao2 = reference_alveolar_po2_mmhg(respiratory_quotient=respiratory_quotient)
    alveolar = max(alveolar_po2_mmhg, 0.0)
    if alveolar <= reference_pao2:
        reference = pao2_lower_limit_mmhg if limit else expected_pao2_mmhg
        return (reference_pao2 - reference(age_years=age_years)) * (alveolar / reference_pao2)
    age = round(_reference_age(age_years))
    pao2 = _arterial(alveolar, healthy_lung(age, limit, respiratory_quotient))
    return alveolar if pao2 is None else alveolar - pao2


def projected_pao2_mmhg(*, a_a_ratio: float, alveolar_po2_mmhg: float) -> float:
    """PaO2 expected at another alveolar PO2 (e.g. on room air) if the a/A ratio holds.

    The a/A ratio's published use: predicting the PaO2 after a change of FiO2 (Gilbert R,
    Keighley JF, Am Rev Respir Dis 1974, from memory). An estimate: true shunt makes the ratio
    fall as FiO2 rises.
    """
    return a_a_ratio * max(alveolar_po2_mmhg, 0.0)


# --- PaCO2 for the altitude ------------------------------------------------------------------


class Residence(StrEnum):
    """Whether the patient lives at the altitude of the gas or has just arrived there."""

    RESIDENT = "resident"
    VISITOR = "visitor"


@dataclass(frozen=True, slots=True)
class PaCO2Anchor:
    """A published PaCO2 of healthy people at one altitude: mean and upper limit (mm[Hg])."""

    altitude_m: float
    mean_mmhg: float
    upper_limit_mmhg: float
    source: str

    @property
    def barometric_mmhg(self) -> float:
        return barometric_pressure_west_mmhg(altitude_m=self.altitude_m)


SEA_LEVEL_PACO2 = PaCO2Anchor(
    0.0, 40.0, 45.0, "reference range 35–45 mmHg (common practice; BTS: type 2 failure > 6 kPa)"
)
# Healthy long-term residents. Upper limits are the published 97.5th centile, or mean +
# 1.645 SD where only mean ± SD is published.
RESIDENT_PACO2: tuple[PaCO2Anchor, ...] = (
    SEA_LEVEL_PACO2,
    PaCO2Anchor(
        2240.0,
        30.2,
        30.2 + LOWER_LIMIT_Z * 3.4,
        "Cid-Juárez S et al., Rev Invest Clin 2023 (Mexico City, 217 healthy adults: 30.2 ± 3.4)",
    ),
    # Residents higher up run about the same: Quito (2,800 m) men 32.5, women 31.5, 97.5th
    # centile 36.1 mmHg (Moina Veloz AP et al., Univ Med Pinareña 2023); Cusco (3,350 m) 30.6
    # (Pereira-Victorio CJ et al., Rev Peru Med Exp Salud Publica 2014;31:473).
    PaCO2Anchor(3350.0, 30.6, 36.1, "Pereira-Victorio 2014 (Cusco) and Moina Veloz 2023 (Quito)"),
    PaCO2Anchor(4500.0, 30.6, 36.1, "held level to the highest towns"),
)
# Newly arrived visitors: ventilation rises little until the alveolar PO2 falls to about
# 60 mmHg, near 3,000 m (Rahn H, Otis AB, Am J Physiol 1949;157:445, acute-exposure line; from
# memory), then PaCO2 falls towards the acclimatised climbers' 13.3 mmHg (range 10.3–15.7) at
# 8,400 m (Grocott et al. 2009).
VISITOR_PACO2: tuple[PaCO2Anchor, ...] = (
    SEA_LEVEL_PACO2,
    PaCO2Anchor(3000.0, 40.0, 45.0, "Rahn & Otis 1949: little hyperventilation below ~3,000 m"),
    PaCO2Anchor(8400.0, 13.3, 15.7, "Grocott MPW et al., N Engl J Med 2009;360:140"),
)


@dataclass(frozen=True, slots=True)
class ExpectedPaCO2:
    """PaCO2 of healthy people at this barometric pressure (mm[Hg]) and where it comes from."""

    mean_mmhg: float
    upper_limit_mmhg: float
    method: str


@dataclass(frozen=True, slots=True)
class _Segment:
    """Two neighbouring anchors as the interpolation reads them, with their pressures and
    method text worked out once at import (``PaCO2Anchor.barometric_mmhg`` is West 1996 of
    the altitude, the same number every time)."""

    high_pb: float
    low_pb: float
    high: PaCO2Anchor
    low: PaCO2Anchor
    method: str


@dataclass(frozen=True, slots=True)
class _Anchors:
    """One residence's anchors as the interpolation reads them."""

    top_pb: float
    top: ExpectedPaCO2
    segments: tuple[_Segment, ...]
    bottom: ExpectedPaCO2


def _anchors(anchors: tuple[PaCO2Anchor, ...]) -> _Anchors:
    # Anchors run from high to low pressure (sea level first); outside them, the end value.
    first, last = anchors[0], anchors[-1]
    return _Anchors(
        first.barometric_mmhg,
        ExpectedPaCO2(first.mean_mmhg, first.upper_limit_mmhg, first.source),
        tuple(
            _Segment(
                high.barometric_mmhg,
                low.barometric_mmhg,
                high,
                low,
                f"interpolated between {high.source} and {low.source}",
            )
            for high, low in itertools.pairwise(anchors)
        ),
        ExpectedPaCO2(last.mean_mmhg, last.upper_limit_mmhg, last.source),
    )


def _interpolate(anchors: _Anchors, barometric_mmhg: float) -> ExpectedPaCO2:
    if barometric_mmhg >= anchors.top_pb:
        return anchors.top
    for segment in anchors.segments:
        if barometric_mmhg >= segment.low_pb:
            high, low = segment.high, segment.low
            t = (segment.high_pb - barometric_mmhg) / (segment.high_pb - segment.low_pb)
            return ExpectedPaCO2(
                high.mean_mmhg + t * (low.mean_mmhg - high.mean_mmhg),
                high.upper_limit_mmhg + t * (low.upper_limit_mmhg - high.upper_limit_mmhg),
                segment.method,
            )
    return anchors.bottom


_RESIDENT_ANCHORS = _anchors(RESIDENT_PACO2)
_VISITOR_ANCHORS = _anchors(VISITOR_PACO2)


def expected_paco2(*, barometric_mmhg: float, residence: Residence) -> ExpectedPaCO2:
    """PaCO2 of healthy people breathing air at this pressure, by residence.

    Linear in barometric pressure between published anchors (``RESIDENT_PACO2``,
    ``VISITOR_PACO2``); the anchors' altitudes are turned into pressures by West 1996. At or
    above sea-level pressure: mean 40, upper limit 45 mmHg.
    """
    require_possible("barometric_mmhg", barometric_mmhg, *PRESSURE_BAROMETRIC_MMHG, "mm[Hg]")
    anchors = _RESIDENT_ANCHORS if residence is Residence.RESIDENT else _VISITOR_ANCHORS
    return _interpolate(anchors, barometric_mmhg)


# --- The V/Q term of a healthy lung -----------------------------------------------------------


def vq_drop_upper_limit_mmhg(
    *, age_years: float, respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT
) -> float:
    """The V/Q term (ΔPO2, mm[Hg]) of the healthy lung at the lower limit of normal for this
    age (``healthy_lung``): the largest ΔPO2 a healthy person of this age shows, by the same
    two anchors as the normal A-a gradient (Cerveri 1995 on air; healthy men on 100 % oxygen).
    About 9 mmHg at 18 years, 19 at 50 and 32 at 74; 28 from 75 on, where Cerveri's
    reference no longer depends on age.

    Raises:
        ImpossibleValueError: an impossible age.
    """
    age = round(_reference_age(age_years))
    return healthy_lung(age, True, respiratory_quotient).vq_drop_mmhg


def vq_drop_upper_limit_range_mmhg(
    *,
    ages: tuple[float, float],
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT,
) -> tuple[float, float]:
    """(narrowest, widest) ``vq_drop_upper_limit_mmhg`` over the ages ``ages`` (low, high):
    the limits to use when the age is not known. The limit rises with age up to 74 and is
    constant from 75 (both anchors are linear in age there; the tests check every whole year),
    so the extremes lie at the ends of the range and at 74.

    Raises:
        ImpossibleValueError: an impossible age.
    """
    low, high = ages
    last_rising = CERVERI_ELDERLY_FROM_YEARS - 1.0
    candidates = [low, high] + ([last_rising] if low <= last_rising <= high else [])
    limits = [
        vq_drop_upper_limit_mmhg(age_years=a, respiratory_quotient=respiratory_quotient)
        for a in candidates
    ]
    return min(limits), max(limits)
