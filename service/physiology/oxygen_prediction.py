"""What a fitted lung should do on other FiO2s: predicted saturation and PaO2, and the FiO2
estimated to reach a target SpO2 band — as a model estimate, with its range and its caution.

Target bands: 94–98 % for most acutely ill adults, 88–92 % for those at risk of hypercapnic
respiratory failure (O'Driscoll BR et al., BTS guideline for oxygen use in adults in healthcare
and emergency settings, Thorax 2017;72 Suppl 1:ii1–ii90). Which band applies is the caller's
(the clinician's) choice.

Ranges are 95 %, from the fitted parameters' covariance carried through the model's slopes
(the delta method); they say how well the points pin the curve down, not how far a single
oximeter reading may fall from it. Predictions hold the latest point's PaCO2 and blood P50;
oxygen can raise PaCO2 in patients at risk of hypercapnia (O'Driscoll 2017), which the model
does not foresee.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from enum import StrEnum

from service.physiology.bounds import require_possible
from service.physiology.oxygen_exchange import ExchangeState, exchange_state
from service.physiology.oxygen_response import Z_95, FitModel, ModelFit, OxygenResponse
from service.physiology.units import FIO2_LIMITS

CAUTION = (
    "Model estimate from the fitted oxygen-response curve: it does not replace titration to "
    "the measured SpO2. Decision support for qualified clinicians, not a diagnosis; it defers "
    "to clinical judgement, local protocols and licensed practice."
)
ROOM_AIR_FIO2 = 0.21
_FIO2_TOLERANCE = 0.001  # FiO2 for a target is found to within this


class TargetBand(StrEnum):
    """SpO2 target bands of the BTS guideline (O'Driscoll et al. 2017)."""

    STANDARD = "94-98"  # most acutely ill patients
    HYPERCAPNIC_RISK = "88-92"  # at risk of hypercapnic respiratory failure


TARGET_BAND_LIMITS: dict[TargetBand, tuple[float, float]] = {
    TargetBand.STANDARD: (0.94, 0.98),
    TargetBand.HYPERCAPNIC_RISK: (0.88, 0.92),
}


@dataclass(frozen=True, slots=True)
class PredictedOxygenation:
    """The model's arterial oxygen on one FiO2, each with its 95 % range."""

    fio2: float
    saturation: float
    saturation_low: float
    saturation_high: float
    pao2_mmhg: float
    pao2_low_mmhg: float
    pao2_high_mmhg: float


@dataclass(frozen=True, slots=True)
class Fio2ForTarget:
    """The lowest FiO2 at which the predicted saturation reaches a band's lower edge, with
    its range (``fio2_low`` from the optimistic edge of the saturation range, ``fio2_high``
    from the pessimistic one; None where FiO2 1.0 is not enough), and the FiO2 above which
    the predicted saturation passes the band's upper edge (None if it never does)."""

    band: TargetBand
    target_low: float
    target_high: float
    fio2: float | None
    fio2_low: float | None
    fio2_high: float | None
    fio2_ceiling: float | None
    note: str


@dataclass(frozen=True, slots=True)
class OxygenPrediction:
    """Predictions for one fitted patient, with the caution that travels with them."""

    model: FitModel
    model_label: str
    curve: tuple[PredictedOxygenation, ...]
    targets: tuple[Fio2ForTarget, ...]
    paco2_mmhg: float
    paco2_assumed: bool
    caution: str = CAUTION


def predict_oxygen_response(
    *,
    response: OxygenResponse,
    fio2_step: float = 0.05,
    bands: Sequence[TargetBand] = (TargetBand.STANDARD, TargetBand.HYPERCAPNIC_RISK),
    band_limits: Mapping[TargetBand, tuple[float, float]] = TARGET_BAND_LIMITS,
) -> OxygenPrediction | None:
    """Predicted saturation and PaO2 from FiO2 0.21 to 1.0 (room air, the multiples of
    ``fio2_step`` between, and 1.0) for the preferred fit of ``response``, and the FiO2 for
    each target band. None when nothing was fitted. ``band_limits`` (fractions) lets a rule
    set or a site set the bands' edges (default: the BTS guideline's).

    Raises:
        ImpossibleValueError: ``fio2_step`` outside 0.001–0.79, or a band's edges outside
            0.5–1.0 or out of order.
    """
    require_possible("fio2_step", fio2_step, 0.001, 0.79, "1")
    for band in bands:
        low, high = band_limits[band]
        require_possible(f"{band.value} lower edge", low, 0.5, 1.0, "1")
        require_possible(f"{band.value} upper edge", high, low, 1.0, "1")
    fit = response.preferred
    if fit is None:
        return None
    model = _FittedCurve(fit, response)
    # Room air, then the round multiples of the step above it (0.25, 0.30, ...), then 1.0.
    first = math.floor(round(ROOM_AIR_FIO2 / fio2_step, 9)) + 1
    last = math.ceil(round(FIO2_LIMITS[1] / fio2_step, 9))
    steps = [round(k * fio2_step, 9) for k in range(first, last)]
    fio2s = [ROOM_AIR_FIO2, *steps, FIO2_LIMITS[1]]
    grid: list[tuple[float, _Values]] = []
    for fio2 in fio2s:
        values = model.values(fio2, grid[-1][1][3] if grid else 0.0)
        if values is not None:
            grid.append((fio2, values))
    curve = tuple(PredictedOxygenation(f, *values) for f, values in grid)
    return OxygenPrediction(
        model=fit.model,
        model_label=fit.label,
        curve=curve,
        targets=tuple(_fio2_for_target(model, grid, band, band_limits[band]) for band in bands),
        paco2_mmhg=response.prediction_paco2_mmhg,
        paco2_assumed=response.prediction_paco2_assumed,
    )


_Values = tuple[float, float, float, float, float, float]  # the fields of PredictedOxygenation
_CENTRAL, _LOWER, _UPPER = 0, 1, 2  # saturation, its lower and upper edges, in _Values


class _FittedCurve:
    """The fitted model as a function of FiO2, with its delta-method range."""

    def __init__(self, fit: ModelFit, response: OxygenResponse) -> None:
        self.fit = fit
        self.conditions = response.conditions
        self.paco2 = response.prediction_paco2_mmhg
        self.scale = response.prediction_affinity.scale
        # What every FiO2 shares, looked up once (``values`` runs some 40 times a prediction).
        self._fixed = (
            fit.vq_drop_mmhg.value,
            fit.shunt_odds,
            self.conditions.carrying_capacity_ml_dl,
            self.conditions.av_difference_ml_dl,
            self.scale,
        )
        self._dry_mmhg = self.conditions.dry_pressure_mmhg
        self._quotient = self.conditions.respiratory_quotient

    def state(self, fio2: float, start_po2: float = 0.0) -> ExchangeState | None:
        # The alveolar gas equation as in ``alveolar_terms``, the same arithmetic.
        bracket = fio2 + (1.0 - fio2) / self._quotient
        alveolar = fio2 * self._dry_mmhg - self.paco2 * bracket
        return exchange_state(alveolar, *self._fixed, start_po2)

    def values(self, fio2: float, start_po2: float = 0.0) -> _Values | None:
        """(SaO2, its 95 % low, high, PaO2, its low, high) at ``fio2``; None where the model
        has no steady state. ``start_po2``: a nearby PaO2 to start the solve from."""
        state = self.state(fio2, start_po2)
        if state is None:
            return None
        sd_pao2 = self._pao2_sd(state)
        sd_sat = state.saturation_slope * sd_pao2
        sat, pao2 = state.arterial_saturation, state.arterial_po2_mmhg
        return (
            sat,
            max(0.0, sat - Z_95 * sd_sat),
            min(1.0, sat + Z_95 * sd_sat),
            pao2,
            max(0.0, pao2 - Z_95 * sd_pao2),
            pao2 + Z_95 * sd_pao2,
        )

    def _pao2_sd(self, state: ExchangeState) -> float:
        """SD of PaO2 from the parameters' covariance: gᵀ Σ g with g = dPaO2/d(odds, ΔPO2)."""
        var_o, cov, var_d = self.fit.covariance
        g_o = -self.conditions.av_difference_ml_dl / state.content_slope_arterial
        g_d = -state.content_slope_capillary / state.content_slope_arterial
        variance = g_o * g_o * var_o + 2.0 * g_o * g_d * cov + g_d * g_d * var_d
        return math.sqrt(variance) if math.isfinite(variance) and variance > 0.0 else 0.0

    def saturation(self, fio2: float, which: int, start_po2: float) -> tuple[float, float]:
        """(one of the saturation values, PaO2) at ``fio2``; (0, 0) without a steady state."""
        values = self.values(fio2, start_po2)
        return (0.0, 0.0) if values is None else (values[which], values[3])


def _lowest_fio2_reaching(
    curve: _FittedCurve, grid: list[tuple[float, _Values]], target: float, which: int
) -> float | None:
    """The lowest FiO2 in 0.21–1.0 whose predicted saturation (``which``) reaches ``target``,
    on the 0.001 grid the answer is given to (rounded up, so that the FiO2 given still reaches
    it); None if FiO2 1.0 does not. Bracketed on the curve's grid, then searched for on the
    0.001 grid (``_lowest_step_reaching``)."""
    for i, (fio2, values) in enumerate(grid):
        if values[which] >= target:
            if i == 0:
                return fio2
            return _lowest_step_reaching(curve, grid, i, target, which)
    return None


def _logit(saturation: float) -> float:
    """ln(S / (1 − S)): the saturation on a scale where its rise with FiO2 is nearly straight
    (the Hill plot's); ±inf at a saturation of 1 or 0."""
    if saturation <= 0.0 or saturation >= 1.0:
        return math.copysign(math.inf, saturation - 0.5)
    return math.log(saturation / (1.0 - saturation))


def _lowest_step_reaching(
    curve: _FittedCurve, grid: list[tuple[float, _Values]], i: int, target: float, which: int
) -> float:
    """The lowest multiple of 0.001 between grid points i − 1 (which does not reach
    ``target``) and i (which does) whose saturation reaches it.

    Steps are counted as whole numbers: ``low`` does not reach, ``high`` does, and the search
    ends when they are neighbours, so the answer is exact whatever the probes. Each probe is
    the step at or above where the straight line between the two ends reaches the target
    (false position, Illinois variant: an end kept twice running has its distance from the
    target halved; Dowell M & Jarratt P, BIT 1971;11:168), kept strictly between them, so that
    a probe just below a reaching end checks it in one solve. The line is drawn on the logit
    of the saturation, where its rise with FiO2 is nearly straight, or on the saturation
    itself where a logit is not finite (a range edge held at full or no saturation). Two or
    three solves, mostly, against seven for bisection.
    """
    (below, lower), (above, upper) = grid[i - 1], grid[i]
    low = math.floor(round(below / _FIO2_TOLERANCE, 6))
    high = math.ceil(round(above / _FIO2_TOLERANCE, 6))
    scale = _logit if math.isfinite(_logit(lower[which]) + _logit(upper[which])) else _same
    goal = scale(target)
    if not math.isfinite(goal):
        scale, goal = _same, target
    x_low, x_high = below / _FIO2_TOLERANCE, above / _FIO2_TOLERANCE
    g_low, g_high = scale(lower[which]) - goal, scale(upper[which]) - goal
    pao2 = upper[3]
    side = 0
    while high - low > 1:
        guess = x_low - g_low * (x_high - x_low) / (g_high - g_low)
        step = min(max(math.ceil(round(guess, 6)), low + 1), high - 1)
        saturation, pao2 = curve.saturation(step * _FIO2_TOLERANCE, which, pao2)
        if saturation >= target:
            high, x_high, g_high = step, step, scale(saturation) - goal
            if side == -1:
                g_low /= 2.0
            side = -1
        else:
            low, x_low, g_low = step, step, scale(saturation) - goal
            if side == 1:
                g_high /= 2.0
            side = 1
    return min(FIO2_LIMITS[1], high * _FIO2_TOLERANCE)


def _same(saturation: float) -> float:
    return saturation


def _fio2_for_target(
    curve: _FittedCurve,
    grid: list[tuple[float, _Values]],
    band: TargetBand,
    limits: tuple[float, float],
) -> Fio2ForTarget:
    target_low, target_high = limits
    central = _lowest_fio2_reaching(curve, grid, target_low, _CENTRAL)
    optimistic = _lowest_fio2_reaching(curve, grid, target_low, _UPPER)
    pessimistic = _lowest_fio2_reaching(curve, grid, target_low, _LOWER)
    ceiling = _lowest_fio2_reaching(curve, grid, math.nextafter(target_high, 1.0), _CENTRAL)
    if central is None:
        note = (
            f"the model predicts SpO2 below {target_low:.0%} even on FiO2 1.0: oxygen alone "
            "is not expected to reach the band (a shunt of this size)"
        )
    elif central == ROOM_AIR_FIO2:
        note = f"the model predicts SpO2 of at least {target_low:.0%} on room air"
    else:
        note = f"the model predicts SpO2 {target_low:.0%} at FiO2 {central:.2f}"
    if ceiling is not None and (central is None or ceiling <= central + _FIO2_TOLERANCE):
        note += f"; it passes {target_high:.0%} already at FiO2 {ceiling:.2f}"
    return Fio2ForTarget(
        band=band,
        target_low=target_low,
        target_high=target_high,
        fio2=central,
        fio2_low=optimistic,
        fio2_high=pessimistic,
        fio2_ceiling=ceiling,
        note=note,
    )
