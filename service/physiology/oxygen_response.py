"""Fitting a patient's shunt and V/Q term to titration points (the inverse of the model).

Given two or more points (SpO2, SaO2 or PaO2, each on a known FiO2), find the shunt and the
V/Q term ΔPO2 of ``oxygen_exchange`` that best explain them, by weighted least squares in the
units measured, as Sapsford & Jones (Eur J Anaesthesiol 1995;12:375), Kjærgaard et al.
(Intensive Care Med 2003;29:727) and Karbing et al. (Crit Care 2007;11:R118) fit the same
two parameters. Also fit the one-parameter "effective shunt" model (ΔPO2 held at 0; Karbing
2007), which is what remains when the points cannot tell the two apart.

Weights. Each residual is divided by its expected error: the measurement's own (SpO2 0.02,
SaO2 0.01, PaO2 √(2² + (5 % of PaO2)²) mmHg — our defaults, see below) combined with the
error the point's FiO2 uncertainty causes through the model's slope (the "effective
variance" treatment of an uncertain abscissa; Orear J, Am J Phys 1982;50:912, from memory).
An SpO2 above 97 % is left out: there the curve is flat, a point says only "saturation is
full", and oximeter error is as large as the signal (SpO2 ≤ 97 % is the validity limit of
S/F, Rice TW et al., Chest 2007;132:410; Matthay MA et al., Am J Respir Crit Care Med
2024;209:37). Left-out points are still checked against the fitted curve and reported.

Solver. A projected Levenberg–Marquardt on (shunt odds = shunt / (1 − shunt), ΔPO2) with the
analytic Jacobian (the model's slopes by implicit differentiation of the content balance,
including how a point's expected error moves with them), started from the best of a grid over
ΔPO2 on which the shunt odds have a closed form (the mass balance is linear in them). Each step
uses the Gauss–Newton Hessian JᵀJ or, where it foretold the last step better, the full Hessian
with the analytic second derivatives (the adaptive choice of NL2SOL: Dennis JE, Gay DM &
Welsch RE, ACM Trans Math Softw 1981;7:348, from memory): Gauss–Newton alone crawls when the
residuals stay large, as in a poor fit or the effective shunt of a lung with a V/Q term. A
two-parameter search that ends at a local minimum fitting worse than the effective shunt
(the same model at ΔPO2 = 0) is run again from it.

Written by hand, not with scipy: scipy is not a runtime dependency (tens of MB, and importing
``scipy.optimize`` took 0.7–1.4 s here), and one ``scipy.optimize.least_squares`` call on the
same residuals and Jacobian takes about three times as long as this whole fit, ranges
included (``python -m tests.benchmarks.oxygen_response`` measures both); the tests check that
this solver reaches scipy's minimum.

Confidence ranges, 95 %. Two-parameter fit: profile-likelihood ranges (Venzon DJ & Moolgavkar
SH, Appl Stat 1988;37:87, from memory), the values of each parameter for which the best χ²
over the other stays within 3.84 of the minimum — computed in content space, where the odds
enter linearly (``_ContentSpace``). Unlike ranges from the linearised covariance they widen
where the model bends, which it does most for oximetry on the shoulder of the curve: in
simulated titrations (tests) the linearised ranges covered the true values far less often than
stated. Effective shunt: ± 1.96 linearised standard errors (the model is nearly linear in its
one parameter). Both are scaled up by χ²/ν when the fit is worse than the stated errors
predict.

Identifiability. The two-parameter fit is refused — and only the effective shunt reported,
labelled so — when fewer than two points are informative, when they do not span at least 0.03
of FiO2, when the information matrix is singular or the fit does not converge, or when the
95 % range of the shunt is wider than 0.20 or that of ΔPO2 wider than 75 mmHg (10 kPa). The
widths are our method settings: a range of 20 points of shunt cannot tell a normal shunt
(below 8 %, Smith HL & Jones JG, Arch Dis Child Fetal Neonatal Ed 2001;85:F127) from an
ARDS-sized one, and 10 kPa is the distance from the normal right shift (6 kPa) to the mean in
bronchopulmonary dysplasia (16.5 kPa; Quine D et al., Arch Dis Child Fetal Neonatal Ed
2006;91:F409).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from enum import StrEnum
from typing import NamedTuple

from service.physiology import constants as c
from service.physiology.bounds import require_possible
from service.physiology.goodness_of_fit import chi_square_survival
from service.physiology.oxygen_affinity import (
    OxygenAffinity,
    oxygen_affinity,
    standard_po2,
    standard_saturation,
    standard_saturation_slope,
)
from service.physiology.oxygen_exchange import (
    HAEMOGLOBIN_SENSITIVITY_G_DL,
    MIN_END_CAPILLARY_PO2_MMHG,
    PACO2_SENSITIVITY_MMHG,
    SHUNT_LIMITS,
    STANDARD_CONDITIONS,
    VQ_DROP_LIMITS_MMHG,
    ExchangeConditions,
    ExchangeState,
    alveolar_terms,
    exchange_state,
    shunt_from_odds,
)
from service.physiology.titration import DroppedPoint, MeasuredKind, TitrationPoint

# Above this SpO2 a point is left out of the fit (see the module docstring).
SPO2_INFORMATIVE_MAX = 0.97
# Expected measurement errors (1 SD), our defaults: oximeters claim 2–3 % Arms and ISO
# 80601-2-61 allows 4 % (from memory); a co-oximeter's SaO2 is within about 1 %, the
# Severinghaus curve itself within 0.55 %; a PaO2 varies by a few percent between samples
# (common practice).
SPO2_SD = 0.02
SAO2_SD = 0.01
PAO2_SD_FLOOR_MMHG = 2.0
PAO2_SD_RELATIVE = 0.05
# Identifiability settings (module docstring); a caller may pass others (IdentifiabilityLimits).
MIN_FIO2_STEP = 0.03
MAX_SHUNT_RANGE_WIDTH = 0.20
MAX_VQ_DROP_RANGE_WIDTH_MMHG = 75.0
MIN_RECIPROCAL_CONDITION = 1e-10
# A range given for an FiO2 is read as its 95 % interval.
Z_95 = 1.959964

_MAX_ITERATIONS = 60
# Stop when a full Gauss–Newton step would lower χ² by less than this: the estimate is then
# within 0.001 standard errors of the minimum.
_DECREMENT_TOLERANCE = 1e-6
_START_DROPS_MMHG = (0.0, 5.0, 10.0, 20.0, 35.0, 50.0, 75.0, 100.0, 150.0, 200.0, 300.0, 450.0)
# The profile ranges: first step outwards from the estimate, bisections of each end, ΔPO2
# slices searched for the odds range (see _ContentSpace.ranges).
_RANGE_FIRST_STEP_MMHG = 5.0
_EDGE_STEPS = 6
_RANGE_SLICES = 8
# Δχ² of a 95 % profile-likelihood range for one parameter: the χ²(1) upper 5 % point.
DELTA_CHI_SQUARE_95 = 3.841459
_MAX_SHUNT_ODDS = SHUNT_LIMITS[1] / (1.0 - SHUNT_LIMITS[1])


@dataclass(frozen=True, slots=True)
class IdentifiabilityLimits:
    """When the two-parameter fit counts as identified (module docstring): the least FiO2
    span of the informative points and the widest 95 % ranges of shunt and ΔPO2. Method
    settings with sourced defaults, so that a rule set or a site may tighten them."""

    min_fio2_span: float = MIN_FIO2_STEP
    max_shunt_range_width: float = MAX_SHUNT_RANGE_WIDTH
    max_vq_drop_range_width_mmhg: float = MAX_VQ_DROP_RANGE_WIDTH_MMHG

    def __post_init__(self) -> None:
        require_possible("min_fio2_span", self.min_fio2_span, 0.0, 0.9, "1")
        require_possible("max_shunt_range_width", self.max_shunt_range_width, 0.01, 0.95, "1")
        require_possible(
            "max_vq_drop_range_width_mmhg", self.max_vq_drop_range_width_mmhg, 1.0, 700.0, "mm[Hg]"
        )


DEFAULT_LIMITS = IdentifiabilityLimits()


class Refusal(StrEnum):
    """Why the two-parameter fit is not reported (the rule numbers of the module docstring)."""

    NO_POINTS = "no-informative-points"  # none, or every SpO2 above the informative limit
    ONE_POINT = "one-informative-point"  # rule 1
    NARROW_SPAN = "narrow-fio2-span"  # rule 2
    NOT_CONVERGED = "not-converged"  # rule 3
    NOT_SEPARABLE = "not-separable"  # rule 3: the information matrix is singular
    SHUNT_RANGE_WIDE = "shunt-range-wide"  # rule 4
    VQ_RANGE_WIDE = "vq-range-wide"  # rule 4


class FitModel(StrEnum):
    """Which model a fit used."""

    SHUNT_AND_VQ = "shunt-and-vq"  # both parameters fitted
    EFFECTIVE_SHUNT = "effective-shunt"  # ΔPO2 held at 0: shunt and V/Q not separated


@dataclass(frozen=True, slots=True)
class Estimate:
    """A fitted value with its 95 % range and standard error; ``fixed`` when the model held
    it (ΔPO2 = 0 in the effective-shunt model) rather than fitting it; ``profile`` when the
    range is a profile-likelihood range (the two-parameter fit) rather than ± 1.96 SE."""

    value: float
    low: float
    high: float
    standard_error: float  # linearised, from (JᵀJ)⁻¹
    fixed: bool = False
    profile: bool = False  # low/high from the profile likelihood, not the linearised SE

    @property
    def width(self) -> float:
        """high − low."""
        return self.high - self.low


@dataclass(frozen=True, slots=True)
class PointFit:
    """How one point sits against a fitted curve, in the point's own unit (fraction for
    saturations, mm[Hg] for PaO2): ``residual`` is observed − predicted, ``expected_error``
    the SD it was weighted by (measurement and FiO2 uncertainty), ``standardised_residual``
    their ratio. ``used`` is False for a point left out of the fit (``note`` says why)."""

    point: TitrationPoint
    used: bool
    predicted: float
    residual: float
    expected_error: float
    standardised_residual: float
    paco2_mmhg: float
    paco2_assumed: bool
    note: str = ""


@dataclass(frozen=True, slots=True)
class Sensitivity:
    """How the fitted parameters move when an assumed value is moved across its plausible
    range (``method``: "exact" or "linearised at the fit")."""

    assumption: str
    assumed_value: float
    low_value: float
    high_value: float
    shunt_at_low: float
    shunt_at_high: float
    vq_drop_at_low_mmhg: float
    vq_drop_at_high_mmhg: float
    method: str


@dataclass(frozen=True, slots=True)
class ModelFit:
    """One fitted model. ``covariance`` is that of (shunt odds, ΔPO2), for prediction ranges."""

    model: FitModel
    shunt: Estimate
    vq_drop_mmhg: Estimate
    shunt_odds: float
    covariance: tuple[float, float, float]  # var(odds), cov(odds, ΔPO2), var(ΔPO2)
    chi_square: float
    degrees_of_freedom: int
    fit_probability: float | None  # None without spare degrees of freedom
    converged: bool
    iterations: int
    points: tuple[PointFit, ...]
    sensitivities: tuple[Sensitivity, ...]

    @property
    def label(self) -> str:
        """A plain label that says what was fitted."""
        if self.model is FitModel.EFFECTIVE_SHUNT:
            return "effective shunt (one parameter: shunt and V/Q mismatch not separated)"
        return "shunt and V/Q term (two parameters)"

    @property
    def correlation(self) -> float:
        """Correlation of the shunt-odds and ΔPO2 estimates (0 when ΔPO2 is held)."""
        var_o, cov, var_d = self.covariance
        if var_o <= 0.0 or var_d <= 0.0:
            return 0.0
        return cov / math.sqrt(var_o * var_d)


@dataclass(frozen=True, slots=True)
class OxygenResponse:
    """Everything the fit found: both models, why the two-parameter one may be refused, the
    points left out, and the conditions and blood state used for predictions."""

    conditions: ExchangeConditions
    two_parameter: ModelFit | None
    effective_shunt: ModelFit | None
    refusal: str | None  # why ``two_parameter`` is None (None when it is reported)
    refusal_reason: Refusal | None  # the same, as a code
    excluded: tuple[DroppedPoint, ...]
    points_used: int
    fio2_span: float
    vq_term_p_value: float | None  # does adding ΔPO2 improve the fit (χ²(1) likelihood ratio)
    prediction_paco2_mmhg: float  # PaCO2 of the latest point (own, borrowed or assumed)
    prediction_paco2_assumed: bool
    prediction_affinity: OxygenAffinity

    @property
    def preferred(self) -> ModelFit | None:
        """The two-parameter fit when it is identified, else the effective shunt."""
        return self.two_parameter if self.two_parameter is not None else self.effective_shunt


@dataclass(frozen=True, slots=True)
class _Observation:
    """One point, prepared for the inner loop: what does not depend on the parameters."""

    point: TitrationPoint
    is_pressure: bool
    observed: float
    measurement_sd: float
    fio2_sd: float
    paco2_mmhg: float
    paco2_assumed: bool
    scale: float
    alveolar_po2_mmhg: float
    alveolar_slope_fio2: float
    bracket: float


class _Evaluation(NamedTuple):
    """The model at every used point for one (odds, ΔPO2): standardised residuals, their
    Jacobian columns, χ², the expected errors and the states."""

    residuals: list[float]
    d_odds: list[float]
    d_drop: list[float]
    chi_square: float
    sds: list[float]
    states: list[ExchangeState]


@dataclass(frozen=True, slots=True)
class _Solution:
    odds: float
    drop: float
    evaluation: _Evaluation | None
    covariance: tuple[float, float, float]
    converged: bool
    iterations: int
    # 95 % profile ranges ((odds low, high), (ΔPO2 low, high)) of the two-parameter fit.
    ranges: tuple[tuple[float, float], tuple[float, float]] | None

    @property
    def chi_square(self) -> float:
        return math.inf if self.evaluation is None else self.evaluation.chi_square


def fit_oxygen_response(
    *,
    points: Sequence[TitrationPoint],
    conditions: ExchangeConditions = STANDARD_CONDITIONS,
    spo2_informative_max: float = SPO2_INFORMATIVE_MAX,
    spo2_sd: float = SPO2_SD,
    sao2_sd: float = SAO2_SD,
    limits: IdentifiabilityLimits = DEFAULT_LIMITS,
) -> OxygenResponse:
    """Fit both models to ``points`` (any order; see ``titration.select_titration_points``).

    Returns the two-parameter fit when the points identify it (else None, with the reason in
    ``refusal``), the effective shunt whenever at least one point is informative, and the
    points left out. Only the preferred fit carries sensitivities to the assumed values.

    Raises:
        ImpossibleValueError: an SpO2 limit or a measurement SD outside its possible range.
    """
    require_possible("spo2_informative_max", spo2_informative_max, 0.5, 1.0, "1")
    require_possible("spo2_sd", spo2_sd, 0.001, 0.2, "1")
    require_possible("sao2_sd", sao2_sd, 0.001, 0.2, "1")
    ordered = sorted(points, key=lambda p: p.time)
    used: list[_Observation] = []
    left_out: list[tuple[_Observation, str]] = []
    for point in ordered:
        obs = _observation(point, conditions, spo2_sd, sao2_sd)
        if point.spo2 is not None and point.spo2 > spo2_informative_max:
            left_out.append((obs, f"SpO2 above {spo2_informative_max:.0%}: flat part of the curve"))
        else:
            used.append(obs)
    latest = ordered[-1] if ordered else None
    paco2, paco2_assumed = _paco2_of(latest, conditions)
    fio2s = [o.point.inspired.fio2 for o in used]

    def response(
        two: ModelFit | None,
        one: ModelFit | None,
        refusal: tuple[Refusal, str] | None,
        p: float | None,
    ) -> OxygenResponse:
        return OxygenResponse(
            conditions=conditions,
            two_parameter=two,
            effective_shunt=one,
            refusal=None if refusal is None else refusal[1],
            refusal_reason=None if refusal is None else refusal[0],
            excluded=tuple(DroppedPoint(o.point, reason) for o, reason in left_out),
            points_used=len(used),
            fio2_span=max(fio2s) - min(fio2s) if fio2s else 0.0,
            vq_term_p_value=p,
            prediction_paco2_mmhg=paco2,
            prediction_paco2_assumed=paco2_assumed,
            prediction_affinity=_affinity_of(latest, conditions),
        )

    if not used:
        reason = (
            f"every SpO2 is above {spo2_informative_max:.0%}: they show a full saturation, "
            "not how much shunt or V/Q mismatch it hides"
            if ordered
            else "no points"
        )
        return response(None, None, (Refusal.NO_POINTS, reason), None)
    one_solution = _solve(used, conditions, fit_drop=False)
    one = _model_fit(used, left_out, conditions, one_solution, fit_drop=False)
    refusal = _refusal_before_fit(used, limits)
    two: ModelFit | None = None
    two_solution: _Solution | None = None
    if refusal is None:
        two_solution = _solve(used, conditions, fit_drop=True, effective=one_solution)
        two = _model_fit(used, left_out, conditions, two_solution, fit_drop=True)
        refusal = _refusal_after_fit(two, limits)
    if refusal is not None or two is None or two_solution is None:
        one = replace(one, sensitivities=_sensitivities(used, one_solution, conditions, False))
        return response(None, one, refusal, None)
    two = replace(two, sensitivities=_sensitivities(used, two_solution, conditions, True))
    improvement = max(0.0, one.chi_square - two.chi_square)
    p_value = chi_square_survival(chi_square=improvement, degrees_of_freedom=1)
    return response(two, one, None, p_value)


def _observation(
    point: TitrationPoint, conditions: ExchangeConditions, spo2_sd: float, sao2_sd: float
) -> _Observation:
    paco2, assumed = _paco2_of(point, conditions)
    if point.pao2_mmhg is not None:
        observed = point.pao2_mmhg
        sd = math.hypot(PAO2_SD_FLOOR_MMHG, PAO2_SD_RELATIVE * observed)
    else:
        observed = point.value
        sd = spo2_sd if point.kind is MeasuredKind.SPO2 else sao2_sd
    alveolar, slope_fio2, bracket = alveolar_terms(point.inspired.fio2, paco2, conditions)
    return _Observation(
        point=point,
        is_pressure=point.pao2_mmhg is not None,
        observed=observed,
        measurement_sd=sd,
        fio2_sd=point.inspired.half_range / Z_95,
        paco2_mmhg=paco2,
        paco2_assumed=assumed,
        scale=_affinity_of(point, conditions).scale,
        alveolar_po2_mmhg=alveolar,
        alveolar_slope_fio2=slope_fio2,
        bracket=bracket,
    )


def _paco2_of(point: TitrationPoint | None, conditions: ExchangeConditions) -> tuple[float, bool]:
    if point is None or point.paco2_mmhg is None:
        return conditions.assumed_paco2_mmhg, True
    return point.paco2_mmhg, False


def _affinity_of(point: TitrationPoint | None, conditions: ExchangeConditions) -> OxygenAffinity:
    """The point's own curve: the conditions' P50 at pH 7.40 and 37 °C moved by the point's
    pH and temperature; the conditions' curve as it is for a point without them, or when the
    conditions carry a P50 measured in vivo. A PaCO2 without a pH does not move the curve
    here: the pH it implies depends on how long the PaCO2 has been high, and the patients
    titrated with care (those at risk of hypercapnia) are often compensated."""
    base = conditions.affinity
    if point is None or base.in_vivo or (point.ph is None and point.temperature_cel is None):
        return base
    return oxygen_affinity(
        ph=point.ph,
        temperature_cel=point.temperature_cel,
        standard_p50_mmhg=base.standard_p50_mmhg,
    )


# --- the model at the points ------------------------------------------------------------------


def _evaluate(
    used: list[_Observation],
    odds: float,
    drop: float,
    conditions: ExchangeConditions,
    near: _Evaluation | None = None,
    starts: Sequence[float] | None = None,
) -> _Evaluation | None:
    """The model at every used point; None where it has no steady state at some point.

    Jacobian by implicit differentiation of CaO2(PaO2) = Cc'O2 − odds × avd:
        dPaO2/d odds = −avd / C'(PaO2);  dPaO2/dΔPO2 = −C'(Pc'O2) / C'(PaO2);
        dPaO2/dFiO2 = C'(Pc'O2) dPAO2/dFiO2 / C'(PaO2);  dSaO2 = S'(PaO2) dPaO2.
    Each residual is divided by √(measurement SD² + (dy/dFiO2 × FiO2 SD)²). ``near``, an
    evaluation at nearby parameters, starts each point's PaO2 solve from its answer there;
    ``starts``, when there is none, gives PaO2s to start from (the observed ones).
    """
    kh = conditions.carrying_capacity_ml_dl
    avd = conditions.av_difference_ml_dl
    residuals: list[float] = []
    d_odds: list[float] = []
    d_drop: list[float] = []
    sds: list[float] = []
    states: list[ExchangeState] = []
    chi2 = 0.0
    if near is not None:
        starts = [st.arterial_po2_mmhg for st in near.states]
    for i, obs in enumerate(used):
        start = starts[i] if starts is not None else 0.0
        state = exchange_state(obs.alveolar_po2_mmhg, drop, odds, kh, avd, obs.scale, start)
        if state is None:
            return None
        to_observed = 1.0 if obs.is_pressure else state.saturation_slope
        per_pao2 = to_observed / state.content_slope_arterial
        if obs.fio2_sd > 0.0:
            dy_dfio2 = per_pao2 * state.content_slope_capillary * obs.alveolar_slope_fio2
            sd = math.hypot(obs.measurement_sd, dy_dfio2 * obs.fio2_sd)
        else:
            sd = obs.measurement_sd
        predicted = state.arterial_po2_mmhg if obs.is_pressure else state.arterial_saturation
        r = (predicted - obs.observed) / sd
        residuals.append(r)
        chi2 += r * r
        d_odds.append(-avd * per_pao2 / sd)
        d_drop.append(-state.content_slope_capillary * per_pao2 / sd)
        sds.append(sd)
        states.append(state)
    return _Evaluation(residuals, d_odds, d_drop, chi2, sds, states)


# --- the solver -------------------------------------------------------------------------------


class _ContentSpace:
    """The least-squares objective carried into arterial oxygen content, where the shunt odds
    enter linearly: CaO2 = Cc'O2(ΔPO2) − odds × avd.

    Each observation becomes an observed content (SpO2/SaO2 → k Hb S + 0.003 PO2(S); PaO2 →
    its content) with its error carried into content by the slope (the delta method; for a
    saturation the map is linear but for the small dissolved term, so the two objectives agree
    closely). For a fixed ΔPO2 the weighted χ² is then an exact parabola in the odds,

        χ²(odds) = χ²_u + A (odds − odds_u)²,   A = avd² Σw,  odds_u = Σ w g / (avd Σw),

    with g = Cc'O2 − CaO2_observed: so the profile over ΔPO2 and the whole joint confidence
    region cost one pass over the points per ΔPO2. This gives the solver its start and the
    two-parameter fit its profile-likelihood ranges (Venzon DJ & Moolgavkar SH, Appl Stat
    1988;37:87), which, unlike the linearised ones, widen where the model bends.
    """

    def __init__(self, used: list[_Observation], conditions: ExchangeConditions) -> None:
        self.kh = conditions.carrying_capacity_ml_dl
        self.avd = conditions.av_difference_ml_dl
        alpha = c.O2_SOLUBILITY_ML_DL_PER_MMHG
        self.rows: list[tuple[float, float, float, float, float]] = []
        self.po2s: list[float] = []  # the observed PaO2s, or those of the observed saturations
        for obs in used:
            if obs.is_pressure:
                p = obs.observed
                s = standard_saturation(obs.scale * p)
                slope = self.kh * obs.scale * standard_saturation_slope(obs.scale * p) + alpha
                sd_content = slope * obs.measurement_sd
            else:
                s = min(max(obs.observed, 0.01), 0.999)
                p = standard_po2(s) / obs.scale
                ds_dp = obs.scale * standard_saturation_slope(obs.scale * p)
                sd_content = (self.kh + alpha / ds_dp) * obs.measurement_sd
            self.po2s.append(p)
            self.rows.append(
                (
                    obs.alveolar_po2_mmhg,
                    obs.scale,
                    self.kh * s + alpha * p,
                    sd_content * sd_content,
                    obs.alveolar_slope_fio2 * obs.fio2_sd,
                )
            )

    def at(self, drop: float) -> tuple[float, float, float, float] | None:
        """(odds_u, χ²_u, A, the largest odds with a steady state) at ``drop``; None where
        some point has no steady state even without a shunt."""
        kh, alpha, avd = self.kh, c.O2_SOLUBILITY_ML_DL_PER_MMHG, self.avd
        floor = MIN_END_CAPILLARY_PO2_MMHG
        sw = swg = swgg = 0.0
        least = math.inf  # the least end-capillary content
        for alveolar, scale, content, variance, alveolar_sd in self.rows:
            cap = alveolar - drop
            if cap < floor:
                return None
            # Severinghaus eq. 1 and its slope, inlined: this loop runs some 40 times a fit.
            p_std = scale * cap
            x = p_std * (p_std * p_std + 150.0)
            d = x + 23400.0
            c_cap = kh * x / d + alpha * cap
            if c_cap < least:
                least = c_cap
            if alveolar_sd > 0.0:
                slope = kh * scale * 23400.0 * (3.0 * p_std * p_std + 150.0) / (d * d) + alpha
                spread = slope * alveolar_sd
                variance = variance + spread * spread
            w = 1.0 / variance
            g = c_cap - content
            sw += w
            wg = w * g
            swg += wg
            swgg += wg * g
        if least <= avd:
            return None
        odds_u = swg / (avd * sw)
        odds_max = min(_MAX_SHUNT_ODDS, (least - avd) / avd)
        return odds_u, max(0.0, swgg - swg * swg / sw), avd * avd * sw, odds_max

    def profile(self, drop: float) -> tuple[float, float] | None:
        """(min over the odds of χ², the minimising odds) at ``drop``, odds within limits."""
        values = self.at(drop)
        if values is None:
            return None
        odds_u, chi2_u, curvature, odds_max = values
        odds = min(max(odds_u, 0.0), odds_max)
        return chi2_u + curvature * (odds - odds_u) ** 2, odds

    def best(self, drops: Sequence[float], max_drop: float) -> tuple[float, float]:
        """(odds, ΔPO2) at the lowest profile χ² over the grid ``drops`` up to ``max_drop``."""
        best = (math.inf, 0.0, 0.0)
        for drop in drops:
            if drop > max_drop:
                break
            values = self.profile(drop)
            if values is not None and values[0] < best[0]:
                best = (values[0], values[1], drop)
        return best[1], best[2]

    def ranges(
        self, threshold: float, max_drop: float, estimate: tuple[float, float]
    ) -> tuple[tuple[float, float], tuple[float, float]]:
        """95 % profile ranges ((odds low, high), (ΔPO2 low, high)): where the least χ² over
        the other parameter stays at or below ``threshold``.

        From the least-squares ``estimate`` (odds, ΔPO2) the ΔPO2 range is bracketed by steps
        that double from 5 mmHg, each end then bisected to within 1/64 of its bracket; the
        odds range is the hull of parabola slices across it, each end refined between slices
        (``_odds_range``). Both ranges hold the estimate.
        """
        odds_est, drop_est = estimate
        drop_low = self._edge(threshold, drop_est, 0.0)
        drop_high = self._edge(threshold, drop_est, max_drop)
        return _odds_range(self, threshold, (drop_low, drop_high), odds_est)

    def _inside(self, drop: float, threshold: float) -> bool:
        values = self.profile(drop)
        return values is not None and values[0] <= threshold

    def _edge(self, threshold: float, start: float, limit: float) -> float:
        """The end of the region from ``start`` towards ``limit`` (``limit`` if reached)."""
        if start == limit:
            return limit
        inner = start
        step = _RANGE_FIRST_STEP_MMHG
        direction = 1.0 if limit >= start else -1.0
        while True:
            trial = start + direction * step
            if direction * (trial - limit) >= 0.0:
                if self._inside(limit, threshold):
                    return limit
                outer = limit
                break
            if not self._inside(trial, threshold):
                outer = trial
                break
            inner = trial
            step *= 2.0
        for _ in range(_EDGE_STEPS):
            middle = (inner + outer) / 2.0
            if self._inside(middle, threshold):
                inner = middle
            else:
                outer = middle
        return inner


def _max_drop(used: list[_Observation], conditions: ExchangeConditions) -> float:
    """The largest ΔPO2 that leaves every point a steady state with no shunt: an end-capillary
    PO2 above the model's floor whose content still exceeds the a-v difference."""
    needed_saturation = min(
        0.999, conditions.av_difference_ml_dl / conditions.carrying_capacity_ml_dl
    )
    room = min(
        o.alveolar_po2_mmhg
        - max(MIN_END_CAPILLARY_PO2_MMHG, standard_po2(needed_saturation) / o.scale)
        for o in used
    )
    return max(0.0, min(VQ_DROP_LIMITS_MMHG[1], room - 1.0))


def _solve(
    used: list[_Observation],
    conditions: ExchangeConditions,
    *,
    fit_drop: bool,
    effective: _Solution | None = None,
    start: _Solution | None = None,
) -> _Solution:
    """Projected Levenberg–Marquardt on (odds, ΔPO2) within their limits.

    A parameter at a limit whose gradient points outwards is held there for the step (an
    active set); a step that raises χ² or leaves the model's steady state is refused and the
    damping raised. Converged when a full Gauss–Newton step would lower χ² by less than 1e-6
    (the estimate is within 0.001 standard errors of the minimum), when χ² stops falling (1e-9
    relative) or when the step is below 1e-6 in the odds and 1e-4 mmHg in ΔPO2.

    Started from ``start`` when given, else from the best of the content-space grid.
    ``effective``, the effective-shunt solution, is this model at ΔPO2 = 0: a two-parameter
    search that ends at a local minimum fitting worse than it is run again from it (rare), so
    that the two-parameter fit never fits worse than the one-parameter one.
    """
    max_drop = _max_drop(used, conditions) if fit_drop else 0.0
    space = _ContentSpace(used, conditions)
    current: _Evaluation | None
    if start is not None and start.evaluation is not None:
        odds, drop, current = start.odds, start.drop, start.evaluation
    else:
        odds, drop = space.best(_START_DROPS_MMHG if fit_drop else (0.0,), max_drop)
        current = _evaluate(used, odds, drop, conditions, starts=space.po2s)
        while current is None and odds > 1e-9:  # pull a start with no steady state back in
            odds *= 0.5
            current = _evaluate(used, odds, drop, conditions, starts=space.po2s)
    if current is None:
        return _Solution(odds, drop, None, (math.inf, 0.0, math.inf), False, 0, None)
    lows = (0.0, 0.0)
    highs = (_MAX_SHUNT_ODDS, max_drop)
    damping = 1e-3
    converged = False
    iterations = 0
    use_newton = False
    while iterations < _MAX_ITERATIONS:
        iterations += 1
        chi2 = current.chi_square
        g, h, second = _local_model(used, current, conditions, fit_drop)
        params = (odds, drop)
        free = [
            k
            for k in ((0, 1) if fit_drop else (0,))
            if not (params[k] <= lows[k] and g[k] > 0.0)
            and not (params[k] >= highs[k] and g[k] < 0.0)
        ]
        if not free or _decrement(free, g, h) < _DECREMENT_TOLERANCE:
            converged = True
            break
        full = _positive_definite(free, h, second)
        newton = full if use_newton else None
        step = _damped_step(free, g, h if newton is None else newton, damping, h)
        trial_odds = min(max(odds + step[0], lows[0]), highs[0])
        trial_drop = min(max(drop + step[1], lows[1]), highs[1])
        trial = _evaluate(used, trial_odds, trial_drop, conditions, current)
        if trial is not None and trial.chi_square <= chi2:
            small = abs(trial_odds - odds) <= 1e-6 * (1.0 + odds) and abs(
                trial_drop - drop
            ) <= 1e-4 * (1.0 + drop)
            flat = chi2 - trial.chi_square <= 1e-9 * (1.0 + chi2)
            # The next step follows whichever quadratic model foretold this step's fall in
            # χ² better: Gauss–Newton's or the full Hessian's (the adaptive choice of Dennis
            # JE, Gay DM & Welsch RE, ACM Trans Math Softw 1981;7:348, from memory).
            taken = (trial_odds - odds, trial_drop - drop)
            fall = chi2 - trial.chi_square
            use_newton = full is not None and abs(fall - _predicted_fall(g, full, taken)) < abs(
                fall - _predicted_fall(g, h, taken)
            )
            odds, drop, current = trial_odds, trial_drop, trial
            damping = max(damping / 3.0, 1e-12)
            if small or flat:
                converged = True
                break
        elif newton is not None:
            use_newton = False  # the full Hessian misled: Gauss–Newton for the next try
        else:
            damping *= 4.0
            if damping > 1e12:
                break
    if (
        effective is not None
        and effective.evaluation is not None
        and effective.chi_square < current.chi_square
    ):
        return _solve(used, conditions, fit_drop=fit_drop, start=effective)
    covariance = _covariance(current.d_odds, current.d_drop if fit_drop else None)
    ranges = None
    if fit_drop:
        dof = len(used) - 2
        inflation = max(1.0, current.chi_square / dof) if dof > 0 else 1.0
        at_estimate = space.profile(drop)
        floor = at_estimate[0] if at_estimate is not None else current.chi_square
        ranges = space.ranges(floor + DELTA_CHI_SQUARE_95 * inflation, max_drop, (odds, drop))
    return _Solution(odds, drop, current, covariance, converged, iterations, ranges)


def _decrement(free: list[int], g: tuple[float, float], h: tuple[float, float, float]) -> float:
    """gᵀ H⁻¹ g over the free parameters: the fall in χ² a full Gauss–Newton step would
    bring, i.e. the squared distance to the minimum in standard errors."""
    if len(free) == 1:
        k = free[0]
        curvature = h[0] if k == 0 else h[2]
        return g[k] * g[k] / curvature if curvature > 0.0 else math.inf
    det = h[0] * h[2] - h[1] * h[1]
    if det <= 0.0:
        return math.inf
    return (g[0] * g[0] * h[2] - 2.0 * g[0] * g[1] * h[1] + g[1] * g[1] * h[0]) / det


def _damped_step(
    free: list[int],
    g: tuple[float, float],
    h: tuple[float, float, float],
    damping: float,
    gauss_newton: tuple[float, float, float] | None = None,
) -> tuple[float, float]:
    """Solve (H + λ diag D) δ = −g over the free parameters (one or two); D is
    ``gauss_newton`` (JᵀJ) when H is the full Hessian, else H itself."""
    d_of = h if gauss_newton is None else gauss_newton
    if len(free) == 1:
        k = free[0]
        curvature = h[0] + damping * d_of[0] if k == 0 else h[2] + damping * d_of[2]
        delta = -g[k] / (curvature + 1e-300)
        return (delta, 0.0) if k == 0 else (0.0, delta)
    a = h[0] + damping * d_of[0] + 1e-300
    d = h[2] + damping * d_of[2] + 1e-300
    b = h[1]
    det = a * d - b * b
    if det <= 0.0:
        return (-g[0] / a, -g[1] / d)
    return ((-g[0] * d + g[1] * b) / det, (-g[1] * a + g[0] * b) / det)


def _predicted_fall(
    g: tuple[float, float], h: tuple[float, float, float], step: tuple[float, float]
) -> float:
    """The fall in χ² = Σ r² that the quadratic model with gradient g = Jᵀr and Hessian H
    (both of ½χ²) foretells for ``step`` δ: −2 gᵀδ − δᵀHδ."""
    s0, s1 = step
    return -2.0 * (g[0] * s0 + g[1] * s1) - (h[0] * s0 * s0 + 2.0 * h[1] * s0 * s1 + h[2] * s1 * s1)


def _local_model(
    used: list[_Observation],
    evaluation: _Evaluation,
    conditions: ExchangeConditions,
    fit_drop: bool,
) -> tuple[tuple[float, float], tuple[float, float, float], tuple[float, float, float]]:
    """The quadratic model of ½χ² at ``evaluation``: its gradient g = Jᵀr, the Gauss–Newton
    Hessian JᵀJ, and the second-order term Σ rᵢ ∇²yᵢ / sdᵢ that Gauss–Newton leaves out.

    J here is the whole derivative of the standardised residuals rᵢ = (yᵢ − observedᵢ) / sdᵢ,
    including that of a point's expected error where its FiO2 is uncertain (sdᵢ grows with the
    model's slope dyᵢ/dFiO2, which moves with the parameters): ∂rᵢ = (∂yᵢ − rᵢ ∂sdᵢ) / sdᵢ,
    ∂sdᵢ = qᵢ σᵢ² ∂qᵢ / sdᵢ with qᵢ = dyᵢ/dFiO2 and σᵢ the FiO2 SD. Without that term the
    gradient is not the gradient of the χ² being minimised, and the solver can stall short of
    the minimum. (The reported covariance keeps the usual form, with each sd held fixed.)

    Second derivatives by differentiating CaO2(PaO2) = Cc'O2(PAO2 − ΔPO2) − odds × avd
    twice (C', C'' the content curve's slopes; Pa_o = dPaO2/d odds, Pa_d = dPaO2/dΔPO2):
        Pa_oo = −C''(Pa) Pa_o² / C'(Pa);  Pa_od = −C''(Pa) Pa_o Pa_d / C'(Pa);
        Pa_dd = (C''(Pc') − C''(Pa) Pa_d²) / C'(Pa);
    for a saturation y = S(Pa), y_θφ = S''(Pa) Pa_θ Pa_φ + S'(Pa) Pa_θφ; and for q, with
    T = (dy/dPaO2) / C'(Pa): q = T C'(Pc') dPAO2/dFiO2, ∂q = (T' Pa_θ C'(Pc') − T C''(Pc')
    ∂Pc'_θ) dPAO2/dFiO2.
    """
    kh = conditions.carrying_capacity_ml_dl
    avd = conditions.av_difference_ml_dl
    g0 = g1 = h00 = h01 = h11 = t00 = t01 = t11 = 0.0
    rows = zip(
        used,
        evaluation.states,
        evaluation.residuals,
        evaluation.sds,
        evaluation.d_odds,
        evaluation.d_drop,
        strict=True,
    )
    for obs, state, r, sd, j_o, j_d in rows:
        scale = obs.scale
        # S'' of Severinghaus 1979 eq. 1, S = x / (x + 23400) with x = q³ + 150 q (q the
        # standard-curve PO2): 23400 (x'' (x + 23400) − 2 x'²) / (x + 23400)³, x'' = 6 q.
        q = scale * state.arterial_po2_mmhg
        x1 = 3.0 * q * q + 150.0
        d = q * (q * q + 150.0) + 23400.0
        s2_art = scale * scale * 23400.0 * (6.0 * q * d - 2.0 * x1 * x1) / (d * d * d)
        c1_art = state.content_slope_arterial
        c1_cap = state.content_slope_capillary
        c2_art = kh * s2_art
        if fit_drop or obs.fio2_sd > 0.0:
            q = scale * state.end_capillary_po2_mmhg
            x1 = 3.0 * q * q + 150.0
            d = q * (q * q + 150.0) + 23400.0
            c2_cap = kh * scale * scale * 23400.0 * (6.0 * q * d - 2.0 * x1 * x1) / (d * d * d)
        else:
            c2_cap = 0.0
        pa_o = -avd / c1_art
        pa_d = -c1_cap / c1_art
        pa_oo = -c2_art * pa_o * pa_o / c1_art
        pa_od = -c2_art * pa_o * pa_d / c1_art
        pa_dd = (c2_cap - c2_art * pa_d * pa_d) / c1_art
        if obs.is_pressure:
            to_observed, to_observed_slope = 1.0, 0.0
            y_oo, y_od, y_dd = pa_oo, pa_od, pa_dd
        else:
            to_observed, to_observed_slope = state.saturation_slope, s2_art
            y_oo = s2_art * pa_o * pa_o + to_observed * pa_oo
            y_od = s2_art * pa_o * pa_d + to_observed * pa_od
            y_dd = s2_art * pa_d * pa_d + to_observed * pa_dd
        if obs.fio2_sd > 0.0:
            per_pao2 = to_observed / c1_art
            per_pao2_slope = (to_observed_slope * c1_art - to_observed * c2_art) / (c1_art * c1_art)
            q = per_pao2 * c1_cap * obs.alveolar_slope_fio2
            q_o = per_pao2_slope * pa_o * c1_cap * obs.alveolar_slope_fio2
            q_d = (per_pao2_slope * pa_d * c1_cap - per_pao2 * c2_cap) * obs.alveolar_slope_fio2
            spread = r * q * obs.fio2_sd * obs.fio2_sd / (sd * sd)
            j_o -= spread * q_o
            j_d -= spread * q_d
        g0 += j_o * r
        h00 += j_o * j_o
        weight = r / sd
        t00 += weight * y_oo
        if fit_drop:
            g1 += j_d * r
            h01 += j_o * j_d
            h11 += j_d * j_d
            t01 += weight * y_od
            t11 += weight * y_dd
    return (g0, g1), (h00, h01, h11), (t00, t01, t11)


def _positive_definite(
    free: list[int], h: tuple[float, float, float], second: tuple[float, float, float]
) -> tuple[float, float, float] | None:
    """The full Hessian h + ``second`` when it is positive definite (with a margin) over the
    free parameters, else None."""
    a, b, d = h[0] + second[0], h[1] + second[1], h[2] + second[2]
    if len(free) == 1:
        curvature, base = (a, h[0]) if free[0] == 0 else (d, h[2])
        return (a, b, d) if curvature > 1e-6 * base else None
    if a > 1e-6 * h[0] and d > 1e-6 * h[2] and a * d - b * b > 1e-6 * (h[0] * h[2] - h[1] * h[1]):
        return (a, b, d)
    return None


def _covariance(j_odds: list[float], j_drop: list[float] | None) -> tuple[float, float, float]:
    """(JᵀJ)⁻¹ as (var odds, cov, var ΔPO2); infinite variances when JᵀJ is singular
    (reciprocal condition number below 1e-10)."""
    a = _dot(j_odds, j_odds)
    if j_drop is None:
        return (1.0 / a if a > 0.0 else math.inf), 0.0, 0.0
    b = _dot(j_odds, j_drop)
    d = _dot(j_drop, j_drop)
    det = a * d - b * b
    half_trace = (a + d) / 2.0
    root = math.sqrt(max(half_trace * half_trace - det, 0.0))
    largest, smallest = half_trace + root, half_trace - root
    if largest <= 0.0 or det <= 0.0 or smallest / largest < MIN_RECIPROCAL_CONDITION:
        return math.inf, 0.0, math.inf
    return d / det, -b / det, a / det


def _dot(x: list[float], y: list[float]) -> float:
    return sum(a * b for a, b in zip(x, y, strict=True))


# --- from a solution to a fit -----------------------------------------------------------------


def _model_fit(
    used: list[_Observation],
    left_out: list[tuple[_Observation, str]],
    conditions: ExchangeConditions,
    solution: _Solution,
    *,
    fit_drop: bool,
) -> ModelFit:
    dof = len(used) - (2 if fit_drop else 1)
    chi2 = solution.chi_square
    inflation = max(1.0, chi2 / dof) if dof > 0 and math.isfinite(chi2) else 1.0
    var_o, cov, var_d = (v * inflation for v in solution.covariance)
    shunt = _shunt_estimate(solution.odds, var_o)
    if solution.ranges is not None and math.isfinite(var_o) and math.isfinite(var_d):
        (odds_low, odds_high), (drop_low, drop_high) = solution.ranges
        se_d = math.sqrt(var_d)
        shunt = replace(
            shunt, low=shunt_from_odds(odds_low), high=shunt_from_odds(odds_high), profile=True
        )
        drop = Estimate(solution.drop, drop_low, drop_high, se_d, profile=True)
        # Widen the covariance, which the prediction ranges use, to the profile ranges where
        # those are wider than the linearised ones (keeping the correlation).
        widen_o = max(1.0, (odds_high - odds_low) / (2.0 * Z_95 * math.sqrt(var_o) + 1e-300))
        widen_d = max(1.0, (drop_high - drop_low) / (2.0 * Z_95 * se_d + 1e-300))
        var_o, cov, var_d = var_o * widen_o**2, cov * widen_o * widen_d, var_d * widen_d**2
    elif fit_drop:
        se_d = math.sqrt(var_d) if math.isfinite(var_d) else math.inf
        drop = Estimate(
            solution.drop,
            max(VQ_DROP_LIMITS_MMHG[0], solution.drop - Z_95 * se_d),
            min(VQ_DROP_LIMITS_MMHG[1], solution.drop + Z_95 * se_d),
            se_d,
        )
    else:
        drop = Estimate(0.0, 0.0, 0.0, 0.0, fixed=True)
    evaluation = solution.evaluation
    fits: list[PointFit] = []
    if evaluation is not None:
        for obs, state, sd in zip(used, evaluation.states, evaluation.sds, strict=True):
            fits.append(_point_fit(obs, state, sd, used=True, note=""))
    for obs, reason in left_out:
        single = _evaluate([obs], solution.odds, solution.drop, conditions)
        if single is None:
            continue
        fits.append(_point_fit(obs, single.states[0], single.sds[0], used=False, note=reason))
    return ModelFit(
        model=FitModel.SHUNT_AND_VQ if fit_drop else FitModel.EFFECTIVE_SHUNT,
        shunt=shunt,
        vq_drop_mmhg=drop,
        shunt_odds=solution.odds,
        covariance=(var_o, cov, var_d),
        chi_square=chi2,
        degrees_of_freedom=dof,
        fit_probability=(
            chi_square_survival(chi_square=chi2, degrees_of_freedom=dof)
            if dof > 0 and math.isfinite(chi2)
            else None
        ),
        converged=solution.converged and evaluation is not None,
        iterations=solution.iterations,
        points=tuple(sorted(fits, key=lambda f: f.point.time)),
        sensitivities=(),
    )


def _shunt_estimate(odds: float, var_odds: float) -> Estimate:
    """The shunt and its range, computed on the odds scale (where the model is linear in the
    parameter) and mapped back, so the range stays inside 0–0.95."""
    se_odds = math.sqrt(var_odds) if math.isfinite(var_odds) else math.inf
    low = shunt_from_odds(max(0.0, odds - Z_95 * se_odds))
    high_odds = odds + Z_95 * se_odds
    high = shunt_from_odds(high_odds) if math.isfinite(high_odds) else SHUNT_LIMITS[1]
    se = se_odds / (1.0 + odds) ** 2
    return Estimate(shunt_from_odds(odds), low, min(high, SHUNT_LIMITS[1]), se)


def _point_fit(
    obs: _Observation, state: ExchangeState, sd: float, *, used: bool, note: str
) -> PointFit:
    predicted = state.arterial_po2_mmhg if obs.is_pressure else state.arterial_saturation
    residual = obs.observed - predicted
    return PointFit(
        point=obs.point,
        used=used,
        predicted=predicted,
        residual=residual,
        expected_error=sd,
        standardised_residual=residual / sd,
        paco2_mmhg=obs.paco2_mmhg,
        paco2_assumed=obs.paco2_assumed,
        note=note,
    )


def _refusal_before_fit(
    used: list[_Observation], limits: IdentifiabilityLimits
) -> tuple[Refusal, str] | None:
    if len(used) < 2:
        return (
            Refusal.ONE_POINT,
            "only one informative point: two parameters need at least two FiO2 levels",
        )
    fio2s = [o.point.inspired.fio2 for o in used]
    if max(fio2s) - min(fio2s) < limits.min_fio2_span:
        return (
            Refusal.NARROW_SPAN,
            f"all informative points lie within {limits.min_fio2_span:g} of one FiO2 "
            f"({min(fio2s):.2f}–{max(fio2s):.2f}): the response to oxygen is not seen",
        )
    return None


def _refusal_after_fit(fit: ModelFit, limits: IdentifiabilityLimits) -> tuple[Refusal, str] | None:
    if not fit.converged:
        return Refusal.NOT_CONVERGED, "the two-parameter fit did not converge"
    if not (
        math.isfinite(fit.shunt.standard_error) and math.isfinite(fit.vq_drop_mmhg.standard_error)
    ):
        return (
            Refusal.NOT_SEPARABLE,
            "the points cannot separate shunt from V/Q mismatch (their effects coincide)",
        )
    if fit.shunt.width > limits.max_shunt_range_width:
        return (
            Refusal.SHUNT_RANGE_WIDE,
            f"the shunt is not identified: its 95 % range would span "
            f"{fit.shunt.low:.0%}–{fit.shunt.high:.0%} "
            f"(limit {limits.max_shunt_range_width:.0%} wide)",
        )
    if fit.vq_drop_mmhg.width > limits.max_vq_drop_range_width_mmhg:
        return (
            Refusal.VQ_RANGE_WIDE,
            f"the V/Q term is not identified: its 95 % range would span "
            f"{fit.vq_drop_mmhg.low:.0f}–{fit.vq_drop_mmhg.high:.0f} mmHg "
            f"(limit {limits.max_vq_drop_range_width_mmhg:.0f} mmHg wide)",
        )
    return None


# --- sensitivity to assumptions ---------------------------------------------------------------


def _sensitivities(
    used: list[_Observation], solution: _Solution, conditions: ExchangeConditions, fit_drop: bool
) -> tuple[Sensitivity, ...]:
    """How the fit depends on each assumed value.

    The a-v difference enters the model only as odds × avd, so a fit with another avd has
    exactly odds × avd / avd' and the same ΔPO2. Haemoglobin and an assumed PaCO2 are
    linearised at the fit: Δparams = −(JᵀJ)⁻¹ Jᵀ (∂r/∂assumption) × Δassumption, with
        dPaO2/dHb = k (Sc'O2 − SaO2) / C'(PaO2);  dPaO2/dPaCO2 = −bracket C'(Pc'O2) / C'(PaO2).
    """
    evaluation = solution.evaluation
    if evaluation is None:
        return ()
    out: list[Sensitivity] = []
    odds, drop = solution.odds, solution.drop
    avd = conditions.av_difference_ml_dl
    if not conditions.av_difference_measured:
        low, high = conditions.av_difference_range_ml_dl
        out.append(
            Sensitivity(
                "av_difference_ml_dl",
                avd,
                low,
                high,
                shunt_from_odds(odds * avd / low),
                shunt_from_odds(odds * avd / high),
                drop,
                drop,
                "exact",
            )
        )
    columns: list[tuple[str, float, float, float, list[float]]] = []
    rows = list(zip(used, evaluation.states, evaluation.sds, strict=True))
    if not conditions.haemoglobin_measured:
        column = [
            (1.0 if o.is_pressure else s.saturation_slope)
            * conditions.hufner_ml_per_g
            * (s.end_capillary_saturation - s.arterial_saturation)
            / s.content_slope_arterial
            / sd
            for o, s, sd in rows
        ]
        low, high = HAEMOGLOBIN_SENSITIVITY_G_DL
        columns.append(("haemoglobin_g_dl", conditions.haemoglobin_g_dl, low, high, column))
    if any(o.paco2_assumed for o in used):
        column = [
            -(1.0 if o.is_pressure else s.saturation_slope)
            * o.bracket
            * s.content_slope_capillary
            / s.content_slope_arterial
            / sd
            if o.paco2_assumed
            else 0.0
            for o, s, sd in rows
        ]
        base = conditions.assumed_paco2_mmhg
        low, high = base - PACO2_SENSITIVITY_MMHG, base + PACO2_SENSITIVITY_MMHG
        columns.append(("paco2_mmhg", base, low, high, column))
    var_o, cov, var_d = solution.covariance
    if not (math.isfinite(var_o) and math.isfinite(var_d)):
        return tuple(out)
    for name, value, low, high, column in columns:
        g_o = _dot(evaluation.d_odds, column)
        g_d = _dot(evaluation.d_drop, column) if fit_drop else 0.0
        d_odds = -(var_o * g_o + cov * g_d)
        d_drop = -(cov * g_o + var_d * g_d) if fit_drop else 0.0
        s_low, d_low = _moved(odds, drop, d_odds, d_drop, low - value)
        s_high, d_high = _moved(odds, drop, d_odds, d_drop, high - value)
        out.append(
            Sensitivity(
                name, value, low, high, s_low, s_high, d_low, d_high, "linearised at the fit"
            )
        )
    return tuple(out)


def _moved(
    odds: float, drop: float, d_odds: float, d_drop: float, delta: float
) -> tuple[float, float]:
    """(shunt, ΔPO2) after a linearised move of an assumption by ``delta``, within limits."""
    return (
        shunt_from_odds(min(max(odds + d_odds * delta, 0.0), _MAX_SHUNT_ODDS)),
        max(0.0, drop + d_drop * delta),
    )


# --- the odds range between slices -------------------------------------------------------------

_GOLDEN_SECTION = (math.sqrt(5.0) - 1.0) / 2.0
# Golden-section steps: two slice intervals shrink to 5.6 % of themselves. The end sought is a
# maximum, flat where it is found, so the odds found are within about 3e-6 of the shunt's end
# (300 random titrations; twelve steps gave the same to 0.1 %): finer than the ΔPO2 range's
# own bracketing (1/64 of its bracket) and than the 0.1 % shown.
_REFINE_STEPS = 6


def _odds_range(
    space: _ContentSpace,
    threshold: float,
    drops: tuple[float, float],
    odds_estimate: float,
) -> tuple[tuple[float, float], tuple[float, float]]:
    """The odds range of ``_ContentSpace.ranges`` over the ΔPO2 range ``drops``: the hull of
    the estimate and of the region's parabola slices at evenly spaced ΔPO2s across it, each
    end then refined between slices.

    The hull of evenly spaced slices misses an end that lies between two of them: where the
    region is tilted its extreme odds sit near a narrow tip, and the slices' hull was up to a
    point of shunt too narrow (two co-oximetry steps, tests). So each end is searched for by
    golden section over the two slice intervals beside the slice that holds it.
    """
    drop_low, drop_high = drops
    step = (drop_high - drop_low) / _RANGE_SLICES

    def ends(drop: float) -> tuple[float, float] | None:
        """(low, high) odds of the region's slice at ``drop``; None off the region."""
        values = space.at(drop)
        if values is None or values[1] > threshold:
            return None
        odds_u, chi2_u, curvature, odds_max = values
        half = math.sqrt((threshold - chi2_u) / curvature)
        return max(0.0, odds_u - half), min(odds_max, odds_u + half)

    cached: dict[float, tuple[float, float]] = {}
    for i in range(_RANGE_SLICES + 1):
        slice_ends = ends(drop_low + step * i)
        if slice_ends is not None:
            cached[drop_low + step * i] = slice_ends
    odds_low = min([odds_estimate, *(low for low, _ in cached.values())])
    odds_high = max([odds_estimate, *(high for _, high in cached.values())])
    if step <= 0.0:
        return (odds_low, odds_high), drops
    for k in (0, 1):
        sign = 1.0 if k else -1.0  # outwards: the low end down, the high end up

        def outward(drop: float, k: int = k, sign: float = sign) -> float:
            found = ends(drop)
            return -math.inf if found is None else sign * found[k]

        def reach(drop: float, k: int = k, sign: float = sign) -> float:
            return sign * cached[drop][k]

        best = max(cached, key=reach, default=None)
        if best is None:
            continue
        found = _golden_section_max(
            outward, max(drop_low, best - step), min(drop_high, best + step)
        )
        if math.isfinite(found) and k == 0:
            odds_low = min(odds_low, -found)
        elif math.isfinite(found):
            odds_high = max(odds_high, found)
    return (odds_low, odds_high), drops


def _golden_section_max(function: Callable[[float], float], low: float, high: float) -> float:
    """The largest value of ``function`` found by golden section over [low, high]."""
    a, b = low, high
    c, d = b - _GOLDEN_SECTION * (b - a), a + _GOLDEN_SECTION * (b - a)
    fc, fd = function(c), function(d)
    for _ in range(_REFINE_STEPS):
        if fc > fd:
            b, d, fd = d, c, fc
            c = b - _GOLDEN_SECTION * (b - a)
            fc = function(c)
        else:
            a, c, fc = c, d, fd
            d = a + _GOLDEN_SECTION * (b - a)
            fd = function(d)
    return max(fc, fd)
