"""Pulmonary oxygen exchange with a shunt and a V/Q term: the forward model.

Two parameters describe how a lung turns inspired oxygen into arterial oxygen (Sapsford DJ &
Jones JG, Eur J Anaesthesiol 1995;12:375; Jones JG & Jones SE, J Clin Monit Comput
2000;16:337; Kjærgaard S et al., Intensive Care Med 2003;29:727; Karbing DS et al., Crit Care
2007;11:R118):

- a **shunt** (fraction of cardiac output that meets no alveolar gas), which flattens the curve
  of saturation against inspired PO2 and caps it below full saturation, and
- a **V/Q term**, here the PO2 drop from ideal alveolar gas to end-capillary blood (ΔPO2,
  Kjærgaard 2003), which moves the curve to the right along the inspired-PO2 axis and is
  overcome by enough oxygen. Sapsford & Jones divide the inspired-to-arterial PO2 difference
  into the same three steps: inspired → ideal alveolar (ventilation against uptake),
  alveolar → end-capillary (V/Q inequality), end-capillary → arterial (shunt).

The equations, for one FiO2 (pressures mm[Hg], contents mL O2/dL):

    PAO2 = FiO2 (PB − PH2O) − PaCO2 [FiO2 + (1 − FiO2) / R]      alveolar gas equation
    Pc'O2 = PAO2 − ΔPO2                                          the V/Q term
    Cc'O2 = k Hb S(Pc'O2) + 0.003 Pc'O2                           end-capillary content
    CaO2 = Cc'O2 − avd × shunt / (1 − shunt)                      oxygen mass balance
    PaO2: k Hb S(PaO2) + 0.003 PaO2 = CaO2;  SaO2 = S(PaO2)

The mass balance is the shunt equation, Qs/Qt = (Cc' − Ca) / (Cc' − Cv), with the mixed venous
content Cv = Ca − avd (avd = VO2 / Qt, the arterial–mixed-venous content difference, measured
or assumed). With ΔPO2 = 0 it is the iso-shunt model (Benatar SR, Hewlett AM & Nunn JF, Br J
Anaesth 1973;45:711). S is the Severinghaus 1979 curve shifted to the blood's P50
(``oxygen_affinity``). The right shift of the inspired-PO2 curve that Jones and colleagues
report (PIO2 − Pc'O2; normal below 7 kPa, Smith HL & Jones JG, Arch Dis Child Fetal Neonatal Ed
2001;85:F127) is ΔPO2 plus the alveolar gas equation's drop; ``right_shift_mmhg`` gives it.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

from service.exceptions import OutsideModelRangeError
from service.physiology import constants as c
from service.physiology.bounds import (
    HAEMOGLOBIN_G_DL,
    PARTIAL_PRESSURE_MMHG,
    PRESSURE_BAROMETRIC_MMHG,
    RESPIRATORY_QUOTIENT,
    require_possible,
)
from service.physiology.oxygen_affinity import (
    STANDARD_AFFINITY,
    OxygenAffinity,
    standard_po2,
    standard_saturation,
)
from service.physiology.oxygen_content import AV_DIFFERENCE_RANGE_ML_DL, HUFNER_RANGE_ML_PER_G
from service.physiology.units import FIO2_LIMITS

# Normal adult haemoglobin assumed when none is measured: the value of the iso-shunt diagram
# (Benatar, Hewlett & Nunn 1973). Its sensitivity is reported with every fit.
ASSUMED_HAEMOGLOBIN_G_DL = 14.0
# Ranges over which an assumed value is varied to show its effect on a fit: Hb from anaemia
# to the upper normal (common practice); the a-v difference over the conditions' range
# (``ExchangeConditions.av_difference_range_ml_dl``).
HAEMOGLOBIN_SENSITIVITY_G_DL = (8.0, 17.0)
PACO2_SENSITIVITY_MMHG = 10.0  # an assumed PaCO2 varied by ± this (common practice)

SHUNT_LIMITS = (0.0, 0.95)
VQ_DROP_LIMITS_MMHG = (0.0, 700.0)
# Below this end-capillary PO2 the blood leaving the lung is nearly desaturated and the model
# no longer describes a living steady state.
MIN_END_CAPILLARY_PO2_MMHG = 5.0

_NEWTON_TOLERANCE = 1e-12  # relative to the content: PaO2 within 1e-8 mmHg
_NEWTON_MAX_STEPS = 60
_FLAT_SATURATION = 0.97  # above it, Newton runs on PO2 rather than on saturation
_NEAR_MAX_STEPS = 4  # Halley steps from a nearby answer before the general solve takes over


@dataclass(frozen=True, slots=True)
class ExchangeConditions:
    """Everything the forward model needs besides the two parameters, FiO2 and PaCO2, with
    whether each patient value was measured or assumed."""

    barometric_mmhg: float = c.SEA_LEVEL_PRESSURE_MMHG
    haemoglobin_g_dl: float = ASSUMED_HAEMOGLOBIN_G_DL
    haemoglobin_measured: bool = False
    av_difference_ml_dl: float = c.ASSUMED_AV_DIFFERENCE_ML_DL
    av_difference_measured: bool = False
    # The range an assumed a-v difference is varied over (its sensitivity, the rules' ranges).
    av_difference_range_ml_dl: tuple[float, float] = c.ASSUMED_AV_DIFFERENCE_RANGE_ML_DL
    assumed_paco2_mmhg: float = c.NORMAL_PACO2_MMHG  # for points without a PaCO2
    affinity: OxygenAffinity = STANDARD_AFFINITY  # for points without their own
    hufner_ml_per_g: float = c.HUFNER_CONVENTIONAL_ML_PER_G
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT
    water_vapour_mmhg: float = c.WATER_VAPOUR_TEXTBOOK_MMHG

    @property
    def carrying_capacity_ml_dl(self) -> float:
        """k × Hb: mL O2 per dL of fully saturated blood, dissolved O2 aside."""
        return self.hufner_ml_per_g * self.haemoglobin_g_dl

    @property
    def dry_pressure_mmhg(self) -> float:
        """PB − PH2O, the pressure FiO2 applies to."""
        return self.barometric_mmhg - self.water_vapour_mmhg


def exchange_conditions(
    *,
    barometric_mmhg: float = c.SEA_LEVEL_PRESSURE_MMHG,
    haemoglobin_g_dl: float | None = None,
    av_difference_ml_dl: float | None = None,
    av_difference_range_ml_dl: tuple[float, float] = c.ASSUMED_AV_DIFFERENCE_RANGE_ML_DL,
    assumed_paco2_mmhg: float = c.NORMAL_PACO2_MMHG,
    affinity: OxygenAffinity = STANDARD_AFFINITY,
    hufner_ml_per_g: float = c.HUFNER_CONVENTIONAL_ML_PER_G,
    respiratory_quotient: float = c.DEFAULT_RESPIRATORY_QUOTIENT,
    water_vapour_mmhg: float = c.WATER_VAPOUR_TEXTBOOK_MMHG,
) -> ExchangeConditions:
    """Checked conditions. ``None`` for Hb or the a-v difference means "not measured": the
    assumed value (Hb 14 g/dL; avd 5 mL/dL, common practice) is used and marked assumed, and
    ``av_difference_range_ml_dl`` is the range its sensitivity is shown over.

    Raises:
        ImpossibleValueError: a value outside its possible range, or a range whose ends are
            out of order.
    """
    require_possible("barometric_mmhg", barometric_mmhg, *PRESSURE_BAROMETRIC_MMHG, "mm[Hg]")
    require_possible("water_vapour_mmhg", water_vapour_mmhg, 0.0, barometric_mmhg / 2, "mm[Hg]")
    require_possible("assumed_paco2_mmhg", assumed_paco2_mmhg, 1.0, 250.0, "mm[Hg]")
    require_possible("hufner_ml_per_g", hufner_ml_per_g, *HUFNER_RANGE_ML_PER_G, "mL/g")
    require_possible("respiratory_quotient", respiratory_quotient, *RESPIRATORY_QUOTIENT, "1")
    if haemoglobin_g_dl is not None:
        require_possible("haemoglobin_g_dl", haemoglobin_g_dl, *HAEMOGLOBIN_G_DL, "g/dL")
    if av_difference_ml_dl is not None:
        require_possible(
            "av_difference_ml_dl", av_difference_ml_dl, *AV_DIFFERENCE_RANGE_ML_DL, "mL/dL"
        )
    avd_low, avd_high = av_difference_range_ml_dl
    require_possible("av_difference_range_ml_dl[0]", avd_low, *AV_DIFFERENCE_RANGE_ML_DL, "mL/dL")
    require_possible(
        "av_difference_range_ml_dl[1]", avd_high, avd_low, AV_DIFFERENCE_RANGE_ML_DL[1], "mL/dL"
    )
    return ExchangeConditions(
        barometric_mmhg=barometric_mmhg,
        haemoglobin_g_dl=ASSUMED_HAEMOGLOBIN_G_DL if haemoglobin_g_dl is None else haemoglobin_g_dl,
        haemoglobin_measured=haemoglobin_g_dl is not None,
        av_difference_ml_dl=(
            c.ASSUMED_AV_DIFFERENCE_ML_DL if av_difference_ml_dl is None else av_difference_ml_dl
        ),
        av_difference_measured=av_difference_ml_dl is not None,
        av_difference_range_ml_dl=(avd_low, avd_high),
        assumed_paco2_mmhg=assumed_paco2_mmhg,
        affinity=affinity,
        hufner_ml_per_g=hufner_ml_per_g,
        respiratory_quotient=respiratory_quotient,
        water_vapour_mmhg=water_vapour_mmhg,
    )


STANDARD_CONDITIONS = ExchangeConditions()


@dataclass(frozen=True, slots=True)
class ArterialPrediction:
    """What the model predicts for one FiO2: the PO2 cascade and the contents."""

    fio2: float
    inspired_po2_mmhg: float
    alveolar_po2_mmhg: float
    end_capillary_po2_mmhg: float
    arterial_po2_mmhg: float
    arterial_saturation: float
    end_capillary_content_ml_dl: float
    arterial_content_ml_dl: float
    mixed_venous_content_ml_dl: float

    @property
    def right_shift_mmhg(self) -> float:
        """PIO2 − Pc'O2: how far right of the dissociation curve the inspired-PO2 curve lies
        (the "shift" of Jones and colleagues)."""
        return self.inspired_po2_mmhg - self.end_capillary_po2_mmhg


class ExchangeState(NamedTuple):
    """The model past the alveoli at one point, with the slopes the fit needs (a kernel result,
    unchecked; a NamedTuple because a fit builds hundreds and a frozen dataclass costs more).

    ``content_slope_*`` are dC/dPO2 (mL/dL per mm[Hg]) at arterial and end-capillary PO2;
    ``saturation_slope`` is dSaO2/dPaO2 (per mm[Hg])."""

    end_capillary_po2_mmhg: float
    end_capillary_saturation: float
    end_capillary_content_ml_dl: float
    arterial_content_ml_dl: float
    arterial_po2_mmhg: float
    arterial_saturation: float
    saturation_slope: float
    content_slope_arterial: float
    content_slope_capillary: float


def exchange_state(
    alveolar_po2_mmhg: float,
    vq_drop_mmhg: float,
    shunt_odds: float,
    carrying_capacity_ml_dl: float,
    av_difference_ml_dl: float,
    affinity_scale: float,
    start_po2: float = 0.0,
) -> ExchangeState | None:
    """The model from alveolar gas onwards, unchecked and positional (the fit's inner loop).

    ``shunt_odds`` is shunt / (1 − shunt), the form in which the shunt enters the mass
    balance linearly; ``carrying_capacity_ml_dl`` is k × Hb; ``start_po2`` a nearby PaO2 to
    start the solve from (0 for none). Returns None where the model has
    no living steady state: end-capillary PO2 below 5 mmHg, or a mixed venous content at or
    below zero.
    """
    capillary = alveolar_po2_mmhg - vq_drop_mmhg
    if capillary < MIN_END_CAPILLARY_PO2_MMHG:
        return None
    kh = carrying_capacity_ml_dl
    alpha = c.O2_SOLUBILITY_ML_DL_PER_MMHG
    scale = affinity_scale
    # Severinghaus eq. 1 and its slope at both PO2s, inlined (the fit's hot loop; the same
    # arithmetic as oxygen_affinity.standard_saturation and standard_saturation_slope).
    q = scale * capillary
    x = q * (q * q + 150.0)
    d = x + 23400.0
    s_cap = x / d
    slope_s_cap = scale * 23400.0 * (3.0 * q * q + 150.0) / (d * d)
    c_cap = kh * s_cap + alpha * capillary
    c_art = c_cap - shunt_odds * av_difference_ml_dl
    if c_art <= av_difference_ml_dl:
        return None
    p_art = -1.0
    if start_po2 > 0.0:
        p_art = _po2_near(c_art, kh, alpha, scale, capillary, start_po2)
    if p_art < 0.0:
        p_art = _po2_from_content(c_art, kh, alpha, scale, capillary, s_cap, start_po2)
    q = scale * p_art
    x = q * (q * q + 150.0)
    d = x + 23400.0
    slope_s_art = scale * 23400.0 * (3.0 * q * q + 150.0) / (d * d)
    return ExchangeState(
        capillary,
        s_cap,
        c_cap,
        c_art,
        p_art,
        x / d,
        slope_s_art,
        kh * slope_s_art + alpha,
        kh * slope_s_cap + alpha,
    )


def alveolar_terms(
    fio2: float, paco2_mmhg: float, conditions: ExchangeConditions
) -> tuple[float, float, float]:
    """(PAO2, dPAO2/dFiO2, bracket) by the alveolar gas equation, unchecked; bracket =
    FiO2 + (1 − FiO2)/R, so that dPAO2/dPaCO2 = −bracket."""
    r = conditions.respiratory_quotient
    bracket = fio2 + (1.0 - fio2) / r
    alveolar = fio2 * conditions.dry_pressure_mmhg - paco2_mmhg * bracket
    return alveolar, conditions.dry_pressure_mmhg - paco2_mmhg * (1.0 - 1.0 / r), bracket


def _po2_near(
    content: float, kh: float, alpha: float, scale: float, upper: float, start: float
) -> float:
    """The PO2 in (0, upper] at which k Hb S(PO2) + 0.003 PO2 = content, by Halley's method
    on PO2 from ``start``, a nearby answer (the fit's previous step, the prediction's previous
    FiO2); −1 when it does not settle within a few steps (the caller then uses
    ``_po2_from_content``).

    Halley's step, −2 f f′ / (2 f′² − f f″), uses the curve's second derivative, analytic like
    the first (Severinghaus 1979 eq. 1, S = x / (x + 23400), x = P³ + 150 P:
    S′ = 23400 x′ / (x + 23400)², S″ = 23400 (x″ (x + 23400) − 2 x′²) / (x + 23400)³); from a
    start within a few percent of the root it converges cubically, so one or two steps reach
    the same 1e-12 of the content as ``_po2_from_content``, with no cube roots. The iterates
    are kept inside the bracket the function's signs give, 0 < PO2 ≤ upper.
    """
    p = start if start < upper else upper
    low, high = 0.0, upper
    tolerance = _NEWTON_TOLERANCE * content
    for _ in range(_NEAR_MAX_STEPS):
        q = scale * p
        q2 = q * q
        x = q * (q2 + 150.0)
        d = x + 23400.0
        f = kh * x / d + alpha * p - content
        if -tolerance <= f <= tolerance:
            return p
        if f > 0.0:
            high = p
        else:
            low = p
        x1 = 3.0 * q2 + 150.0
        slope = kh * scale * 23400.0 * x1 / (d * d) + alpha
        bend = kh * scale * scale * 23400.0 * (6.0 * q * d - 2.0 * x1 * x1) / (d * d * d)
        nxt = p - 2.0 * f * slope / (2.0 * slope * slope - f * bend)
        if not low < nxt < high:
            return -1.0
        p = nxt
    return -1.0


def _po2_from_content(
    content: float,
    kh: float,
    alpha: float,
    scale: float,
    upper: float,
    s_upper: float,
    start_po2: float = 0.0,
) -> float:
    """The PO2 in (0, upper] at which k Hb S(PO2) + 0.003 PO2 = content.

    Newton's method, on whichever variable makes the equation nearly straight. Where the
    saturation to find is below 0.97 (the steep part of the curve) it runs on the saturation
    u: f(u) = k Hb u + 0.003 PO2(u) − content is nearly linear there and convex towards u = 1,
    so started to the right of the root — at content / k Hb, since dissolved oxygen is never
    negative — the iterates fall monotonically onto it. On the flat part it runs on PO2
    itself, where f is nearly linear in PO2 (dissolved oxygen dominates its slope) and
    concave, so the iterates approach monotonically after at most one step past the root.
    (Newton on PO2 alone crawls on the steep-to-flat shoulder, where its slope drops a
    hundredfold; on u alone it crawls on the flat part.) Two to four steps reach 1e-12 of the
    content; one or two from ``start_po2``, a nearby answer when there is one (a step left of
    the root first overshoots it, capped at the cold start, then the iterates fall monotonically
    as before).
    """
    if kh * s_upper + alpha * upper - content <= 0.0:
        return upper
    bound = content / kh
    if bound >= _FLAT_SATURATION and s_upper >= _FLAT_SATURATION:
        start = min(start_po2, upper) if start_po2 > 0.0 else upper
        return _po2_from_content_flat(content, kh, alpha, scale, upper, start)
    u = high = min(bound, s_upper)  # right of the root
    if 0.0 < start_po2 < upper:  # a nearby answer (the fit's previous step) starts closer
        u = min(u, standard_saturation(scale * start_po2))
    low = 0.0
    p_std = standard_po2(u) if u > 0.0 else 0.0
    for _ in range(_NEWTON_MAX_STEPS):
        f = kh * u + alpha * p_std / scale - content
        if abs(f) <= _NEWTON_TOLERANCE * content:
            break
        if f < 0.0:  # only by rounding: the iterates stay right of the root
            low = u
        x = p_std * (p_std * p_std + 150.0)  # Severinghaus eq. 1's slope, inlined (hot loop)
        d = x + 23400.0
        slope = kh + alpha * d * d / (scale * 23400.0 * (3.0 * p_std * p_std + 150.0))
        nxt = u - f / slope
        if nxt <= low:
            nxt = 0.5 * (low + u)
        elif nxt > high:  # a step from far left of the root can pass saturation 1
            nxt = high
        if nxt == u:
            break
        u = nxt
        p_std = standard_po2(u)
    return p_std / scale


def _po2_from_content_flat(
    content: float, kh: float, alpha: float, scale: float, upper: float, start: float
) -> float:
    """Newton on PO2 from ``start``, bracketed by 0 and ``upper``."""
    low, high = 0.0, upper
    p = start
    for _ in range(_NEWTON_MAX_STEPS):
        x_std = scale * p
        x = x_std * (x_std * x_std + 150.0)
        d = x + 23400.0
        f = kh * x / d + alpha * p - content
        if abs(f) <= _NEWTON_TOLERANCE * content:
            return p
        if f > 0.0:
            high = p
        else:
            low = p
        slope = kh * scale * 23400.0 * (3.0 * x_std * x_std + 150.0) / (d * d) + alpha
        nxt = p - f / slope
        if not low < nxt < high:
            nxt = 0.5 * (low + high)
        if nxt == p:
            return p
        p = nxt
    return p


def predict_arterial_oxygen(
    *,
    shunt_fraction: float,
    vq_drop_mmhg: float,
    fio2: float,
    paco2_mmhg: float,
    conditions: ExchangeConditions = STANDARD_CONDITIONS,
    affinity: OxygenAffinity | None = None,
) -> ArterialPrediction:
    """PaO2 and SaO2 for a lung with ``shunt_fraction`` and V/Q term ``vq_drop_mmhg`` (ΔPO2)
    breathing ``fio2``, by the equations in the module docstring.

    ``affinity`` defaults to the conditions' curve.

    Raises:
        ImpossibleValueError: an input outside its possible range.
        OutsideModelRangeError: end-capillary PO2 below 5 mmHg, or a mixed venous content at
            or below zero (the assumed a-v difference cannot be met at this shunt).
    """
    require_possible("shunt_fraction", shunt_fraction, *SHUNT_LIMITS, "1")
    require_possible("vq_drop_mmhg", vq_drop_mmhg, *VQ_DROP_LIMITS_MMHG, "mm[Hg]")
    require_possible("fio2", fio2, *FIO2_LIMITS, "1")
    require_possible("paco2_mmhg", paco2_mmhg, *PARTIAL_PRESSURE_MMHG, "mm[Hg]")
    curve = conditions.affinity if affinity is None else affinity
    alveolar, _, _ = alveolar_terms(fio2, paco2_mmhg, conditions)
    state = exchange_state(
        alveolar,
        vq_drop_mmhg,
        shunt_fraction / (1.0 - shunt_fraction),
        conditions.carrying_capacity_ml_dl,
        conditions.av_difference_ml_dl,
        curve.scale,
    )
    if state is None:
        raise _no_steady_state(shunt_fraction, vq_drop_mmhg, alveolar)
    return ArterialPrediction(
        fio2=fio2,
        inspired_po2_mmhg=fio2 * conditions.dry_pressure_mmhg,
        alveolar_po2_mmhg=alveolar,
        end_capillary_po2_mmhg=state.end_capillary_po2_mmhg,
        arterial_po2_mmhg=state.arterial_po2_mmhg,
        arterial_saturation=state.arterial_saturation,
        end_capillary_content_ml_dl=state.end_capillary_content_ml_dl,
        arterial_content_ml_dl=state.arterial_content_ml_dl,
        mixed_venous_content_ml_dl=state.arterial_content_ml_dl - conditions.av_difference_ml_dl,
    )


def _no_steady_state(shunt: float, vq_drop: float, alveolar: float) -> OutsideModelRangeError:
    """The located error for a parameter set with no living steady state."""
    if alveolar - vq_drop < MIN_END_CAPILLARY_PO2_MMHG:
        return OutsideModelRangeError(
            "vq_drop_mmhg",
            vq_drop,
            f"leaves an end-capillary PO2 below {MIN_END_CAPILLARY_PO2_MMHG:g} mmHg "
            f"(alveolar PO2 {alveolar:.0f} mmHg)",
        )
    return OutsideModelRangeError(
        "shunt_fraction",
        shunt,
        "with this a-v content difference the mixed venous content would be at or below zero",
    )


def shunt_from_odds(shunt_odds: float) -> float:
    """shunt = odds / (1 + odds), the inverse of odds = shunt / (1 − shunt)."""
    return shunt_odds / (1.0 + shunt_odds)
