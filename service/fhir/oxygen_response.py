"""The oxygen-response fit and the trend in the result Bundle (plain dicts, as ``render``).

* ``oxygen-response`` parameter: the model and why, each fitted value with its 95 % range and
  the range widened by the assumptions, the fit's quality, the conditions assumed or measured,
  every point (used or not, with its predicted value and standardised residual), the points
  left out and why, the predicted SpO2 and PaO2 from FiO2 0.21 to 1.0 with their 95 % ranges,
  the FiO2 for each target band (which applies, if the rules chose), and the caution.
* An ``oxygen-response`` Observation: the fitted values as components (a ``valueRange`` beside
  each for its range), the FiO2 predicted for the band that applies, the caution as a note,
  ``derivedFrom`` the observations the points came from.
* ``oxygen-trend`` parameter (three or more gases): each measure's series and direction.

Pressures leave in the requested unit; saturations and shunts in %, FiO2 as a fraction.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from service.assess.presentation import PressureUnit, quantity, quantity_of
from service.assess.response_view import (
    CAUTION,
    MODEL_WORDS,
    applicable_band,
    band_words,
    right_shift_mmhg,
)
from service.assess.result import Assessment
from service.assess.titration import Bounds, LeftOut, Titration
from service.physiology.oxygen_prediction import Fio2ForTarget, TargetBand
from service.physiology.oxygen_response import ModelFit, PointFit
from service.physiology.oxygenation_trend import OxygenationTrend
from service.physiology.titration import MeasuredKind

Json = dict[str, Any]
Refer = Callable[[str], Json]
"""How a Reference to an input resource is written (the renderer knows the result's addressing)."""
DERIVED_SYSTEM = "https://oxyrule.org/fhir/CodeSystem/derived"
MODEL_SYSTEM = "https://oxyrule.org/fhir/CodeSystem/oxygen-response-model"
CATEGORY = "http://terminology.hl7.org/CodeSystem/observation-category"
UCUM = "http://unitsofmeasure.org"
OBSERVATION = ("oxygen-response", "Response to oxygen: shunt and V/Q term fitted to a titration")
METHOD = (
    "Two-parameter model of pulmonary oxygen exchange (a shunt and an alveolar to "
    "end-capillary PO2 drop; Sapsford & Jones 1995, Kjaergaard 2003, Karbing 2007) on the "
    "Severinghaus 1979 curve, fitted by weighted least squares to the titration's points with "
    "profile-likelihood 95 % ranges; the effective shunt (one parameter) when the points do "
    "not identify both"
)


def _percent(name: str, fraction: float, unit: PressureUnit) -> Json:
    return quantity(name, 100.0 * fraction, "%", unit)


def _pressure(name: str, mmhg: float, unit: PressureUnit) -> Json:
    return quantity(name, mmhg, "mm[Hg]", unit)


def _decimal(value: float, decimals: int = 3) -> float:
    return round(value, decimals) + 0.0


def _part(name: str, **value: Any) -> Json:
    return {"name": name, **value}


def _bounds_parts(
    prefix: str, bounds: Bounds, fit_range: tuple[float, float], q: Any
) -> list[Json]:
    """value, 95 % range (low, high) and the range widened by the assumptions (least, most)."""
    low, high = fit_range
    parts = [
        _part(prefix, valueQuantity=q(prefix, bounds.value)),
        _part(f"{prefix}-low", valueQuantity=q(prefix, low)),
        _part(f"{prefix}-high", valueQuantity=q(prefix, high)),
        _part(f"{prefix}-least", valueQuantity=q(prefix, bounds.least)),
        _part(f"{prefix}-most", valueQuantity=q(prefix, bounds.most)),
    ]
    if bounds.widened_by:
        parts.append(_part(f"{prefix}-widened-by", valueString="; ".join(bounds.widened_by)))
    return parts


def _point_value(kind: MeasuredKind, value: float, unit: PressureUnit) -> Json:
    if kind is MeasuredKind.PAO2:
        return _pressure("pao2", value, unit)
    return _percent("spo2", value, unit)


def _point(fit: PointFit, unit: PressureUnit, refer: Refer) -> Json:
    p = fit.point
    parts = [
        _part("time", valueDateTime=p.time.isoformat()),
        _part("kind", valueCode=p.kind.value),
        _part("value", valueQuantity=_point_value(p.kind, p.value, unit)),
        _part("fio2", valueDecimal=_decimal(p.inspired.fio2)),
    ]
    if p.inspired.half_range > 0.0:
        parts += [
            _part("fio2-low", valueDecimal=_decimal(p.inspired.low)),
            _part("fio2-high", valueDecimal=_decimal(p.inspired.high)),
        ]
    parts += [
        _part("fio2-source", valueCode=p.inspired.source.value),
        _part("used", valueBoolean=fit.used),
        _part("predicted", valueQuantity=_point_value(p.kind, fit.predicted, unit)),
        _part("standardised-residual", valueDecimal=_decimal(fit.standardised_residual, 2)),
    ]
    if p.reference:
        parts.insert(0, _part("observation", valueReference=refer(p.reference)))
    if p.readings > 1:
        parts.append(_part("readings", valueInteger=p.readings))
    if fit.paco2_assumed:
        parts.append(_part("paco2-assumed", valueQuantity=_pressure("paco2", fit.paco2_mmhg, unit)))
    if fit.note:
        parts.append(_part("note", valueString=fit.note))
    return _part("point", part=parts)


def _left_out(d: LeftOut, unit: PressureUnit, refer: Refer) -> Json:
    parts = [
        _part("observation", valueReference=refer(d.reference)),
        _part("time", valueDateTime=d.time.isoformat()),
        _part("kind", valueCode=d.kind.value),
        _part("value", valueQuantity=_point_value(d.kind, d.value, unit)),
    ]
    if d.fio2 is not None:
        parts.append(_part("fio2", valueDecimal=_decimal(d.fio2)))
    parts.append(_part("reason", valueString=d.reason))
    return _part("left-out", part=parts)


def _target(target: Fio2ForTarget, chosen: TargetBand | None) -> Json:
    parts = [
        _part("band", valueCode=target.band.value),
        _part("band-edges", valueString=band_words(target)),
    ]
    if chosen is not None:
        parts.append(_part("applies", valueBoolean=target.band is chosen))
    for name, value in (
        ("fio2", target.fio2),
        ("fio2-low", target.fio2_low),
        ("fio2-high", target.fio2_high),
        ("fio2-ceiling", target.fio2_ceiling),
    ):
        if value is not None:
            parts.append(_part(name, valueDecimal=_decimal(value)))
    parts.append(_part("note", valueString=target.note))
    return _part("target", part=parts)


def _fit_quality(fit: ModelFit) -> list[Json]:
    parts = [
        _part("chi-square", valueDecimal=_decimal(fit.chi_square)),
        _part("degrees-of-freedom", valueInteger=fit.degrees_of_freedom),
    ]
    if fit.fit_probability is not None:
        parts.append(_part("fit-probability", valueDecimal=_decimal(fit.fit_probability, 4)))
    return parts


def _model_parts(t: Titration) -> list[Json]:
    response, fit = t.response, t.fit
    parts: list[Json] = []
    if fit is not None:
        parts += [
            _part("model", valueCode=fit.model.value),
            _part("model-label", valueString=MODEL_WORDS[fit.model]),
        ]
    if response.refusal is not None:
        parts.append(_part("refusal", valueString=response.refusal))
        if response.refusal_reason is not None:
            parts.append(_part("refusal-code", valueCode=response.refusal_reason.value))
    return [
        *parts,
        _part("points-used", valueInteger=response.points_used),
        _part("fio2-levels", valueInteger=t.fio2_levels),
        _part("fio2-span", valueDecimal=_decimal(response.fio2_span)),
    ]


def _fitted_parts(t: Titration, unit: PressureUnit) -> list[Json]:
    response = t.response
    two, one = response.two_parameter, response.effective_shunt
    parts: list[Json] = []
    if two is not None and t.shunt is not None and t.vq_drop is not None:
        parts += _bounds_parts(
            "shunt", t.shunt, (two.shunt.low, two.shunt.high), lambda n, v: _percent(n, v, unit)
        )
        parts += _bounds_parts(
            "vq-term",
            t.vq_drop,
            (two.vq_drop_mmhg.low, two.vq_drop_mmhg.high),
            lambda n, v: _pressure(n, v, unit),
        )
        low, high = t.vq_drop_limit_mmhg
        parts.append(_part("vq-term-healthy-limit", valueQuantity=_pressure("limit", high, unit)))
        if low != high:
            narrowest = _pressure("limit", low, unit)
            parts.append(_part("vq-term-healthy-limit-narrowest", valueQuantity=narrowest))
        shift = right_shift_mmhg(t)
        if shift is not None:
            parts.append(_part("right-shift-on-air", valueQuantity=_pressure("shift", shift, unit)))
        if response.vq_term_p_value is not None:
            p_value = _decimal(response.vq_term_p_value, 4)
            parts.append(_part("vq-term-p-value", valueDecimal=p_value))
    if one is not None and t.effective_shunt is not None:
        parts += _bounds_parts(
            "effective-shunt",
            t.effective_shunt,
            (one.shunt.low, one.shunt.high),
            lambda n, v: _percent(n, v, unit),
        )
    if t.fit is not None:
        parts += _fit_quality(t.fit)
    return parts


def _condition_parts(t: Titration, unit: PressureUnit) -> list[Json]:
    response = t.response
    c = response.conditions

    def basis(measured: bool) -> str:
        return "measured" if measured else "assumed"

    return [
        _part("haemoglobin", valueQuantity=quantity("hb", c.haemoglobin_g_dl, "g/dL", unit)),
        _part("haemoglobin-basis", valueCode=basis(c.haemoglobin_measured)),
        _part("av-difference", valueQuantity=quantity("avd", c.av_difference_ml_dl, "mL/dL", unit)),
        _part("av-difference-basis", valueCode=basis(c.av_difference_measured)),
        _part("barometric-pressure", valueQuantity=_pressure("pb", c.barometric_mmhg, unit)),
        _part(
            "prediction-paco2",
            valueQuantity=_pressure("paco2", response.prediction_paco2_mmhg, unit),
        ),
        _part("prediction-paco2-basis", valueCode=basis(not response.prediction_paco2_assumed)),
    ]


def _prediction_parts(a: Assessment, t: Titration, unit: PressureUnit) -> list[Json]:
    prediction = t.prediction
    if prediction is None:
        return []
    spo2 = quantity_of("spo2", "%", unit)
    pao2 = quantity_of("pao2", "mm[Hg]", unit)
    parts = [
        {
            "name": "prediction",
            "part": [
                {"name": "fio2", "valueDecimal": _decimal(p.fio2)},
                {"name": "spo2", "valueQuantity": spo2(100.0 * p.saturation)},
                {"name": "spo2-low", "valueQuantity": spo2(100.0 * p.saturation_low)},
                {"name": "spo2-high", "valueQuantity": spo2(100.0 * p.saturation_high)},
                {"name": "pao2", "valueQuantity": pao2(p.pao2_mmhg)},
                {"name": "pao2-low", "valueQuantity": pao2(p.pao2_low_mmhg)},
                {"name": "pao2-high", "valueQuantity": pao2(p.pao2_high_mmhg)},
            ],
        }
        for p in prediction.curve
    ]
    choice = applicable_band(a)
    parts.append(_part("target-band-choice", valueString=choice.reason))
    return parts + [_target(target, choice.band) for target in prediction.targets]


def oxygen_response_parameter(a: Assessment, unit: PressureUnit, refer: Refer) -> Json | None:
    """The ``oxygen-response`` parameter, or None without a titration; ``refer`` makes the
    Reference to an input resource as the result's addressing says."""
    t = a.titration
    if t is None:
        return None
    parts = _model_parts(t) + _fitted_parts(t, unit) + _condition_parts(t, unit)
    if t.fit is not None:
        parts += [_point(p, unit, refer) for p in t.fit.points]
    parts += [_left_out(d, unit, refer) for d in t.dropped]
    parts += _prediction_parts(a, t, unit)
    parts.append(_part("caution", valueString=CAUTION))
    return {"name": "oxygen-response", "part": parts}


def _component(code: str, display: str, **value: Any) -> Json:
    coding = {"system": DERIVED_SYSTEM, "code": code, "display": display}
    return {"code": {"coding": [coding], "text": display}, **value}


def _range(low: Json, high: Json) -> Json:
    return {"valueRange": {"low": low, "high": high}}


def _fraction(value: float) -> Json:
    return {"value": _decimal(value, 2), "unit": "1", "system": UCUM, "code": "1"}


def oxygen_response_observation(
    a: Assessment, about: Json, unit: PressureUnit, refer: Refer
) -> Json | None:
    """The ``oxygen-response`` Observation, or None without a fit (``refer`` as in
    ``oxygen_response_parameter``)."""
    t = a.titration
    if t is None or t.fit is None:
        return None
    fit = t.fit
    components = [
        _component(
            "oxygen-response-model",
            "Model fitted",
            valueCodeableConcept={
                "coding": [{"system": MODEL_SYSTEM, "code": fit.model.value}],
                "text": MODEL_WORDS[fit.model],
            },
        )
    ]
    if t.shunt is not None and t.vq_drop is not None:
        s, d = t.shunt, t.vq_drop
        components += [
            _component(
                "fitted-shunt",
                "Shunt (two-parameter fit)",
                valueQuantity=_percent("s", s.value, unit),
            ),
            _component(
                "fitted-shunt-range",
                "Shunt: range over the 95 % fit range and the assumptions",
                **_range(_percent("s", s.least, unit), _percent("s", s.most, unit)),
            ),
            _component(
                "fitted-vq-term",
                "V/Q term: alveolar to end-capillary PO2 drop",
                valueQuantity=_pressure("d", d.value, unit),
            ),
            _component(
                "fitted-vq-term-range",
                "V/Q term: range over the 95 % fit range and the assumptions",
                **_range(_pressure("d", d.least, unit), _pressure("d", d.most, unit)),
            ),
        ]
    if t.effective_shunt is not None:
        e = t.effective_shunt
        components += [
            _component(
                "effective-shunt",
                "Effective shunt (one parameter)",
                valueQuantity=_percent("e", e.value, unit),
            ),
            _component(
                "effective-shunt-range",
                "Effective shunt: range over the 95 % fit range and the a-v difference",
                **_range(_percent("e", e.least, unit), _percent("e", e.most, unit)),
            ),
        ]
    if fit.fit_probability is not None:
        components.append(
            _component(
                "fit-probability",
                "Goodness of fit: chi-square tail probability",
                valueQuantity=_fraction(fit.fit_probability),
            )
        )
    choice = applicable_band(a)
    prediction = t.prediction
    if prediction is not None and choice.band is not None:
        target = next(x for x in prediction.targets if x.band is choice.band)
        words = band_words(target)
        if target.fio2 is not None:
            components.append(
                _component(
                    "predicted-fio2-for-target",
                    f"FiO2 predicted to reach the target band {words} (model estimate)",
                    valueQuantity=_fraction(target.fio2),
                )
            )
            if target.fio2_low is not None and target.fio2_high is not None:
                components.append(
                    _component(
                        "predicted-fio2-for-target-range",
                        f"Range of the FiO2 predicted for {words}",
                        **_range(_fraction(target.fio2_low), _fraction(target.fio2_high)),
                    )
                )
        else:
            components.append(
                _component(
                    "predicted-target-unreachable",
                    f"The fitted curve does not reach {words} on FiO2 1.0",
                    valueBoolean=True,
                )
            )
    notes = [{"text": CAUTION}]
    if t.response.refusal is not None:
        notes.append({"text": f"Two-parameter fit not reported: {t.response.refusal}."})
    obs: Json = {
        "resourceType": "Observation",
        "id": OBSERVATION[0],
        "status": "final",
        "category": [{"coding": [{"system": CATEGORY, "code": "laboratory"}]}],
        "code": {
            "coding": [
                {"system": DERIVED_SYSTEM, "code": OBSERVATION[0], "display": OBSERVATION[1]}
            ],
            "text": OBSERVATION[1],
        },
        "method": {"text": METHOD},
        **about,
        "component": components,
        "note": notes,
    }
    refs = list(dict.fromkeys(s.reference for s in t.sources))
    if refs:
        obs["derivedFrom"] = [refer(r) for r in refs]
    return obs


def trend_parameter(trend: OxygenationTrend | None) -> Json | None:
    """The ``oxygen-trend`` parameter, or None with fewer than three gases."""
    if trend is None:
        return None
    parts: list[Json] = [
        _part("direction", valueCode=trend.direction.value),
        _part("note", valueString=trend.note),
        _part("fio2-range", valueDecimal=_decimal(trend.fio2_range)),
    ]
    for m in trend.measures:
        measure = [
            _part("code", valueCode=m.measure),
            _part("unit", valueCode=m.unit),
            _part("direction", valueCode=m.direction.value),
            _part("threshold", valueString=m.threshold.source),
        ]
        if m.change is not None:
            measure.append(_part("change", valueDecimal=_decimal(m.change, 4)))
        measure += [
            _part(
                "value",
                part=[
                    _part("time", valueDateTime=time.isoformat()),
                    _part("value", valueDecimal=_decimal(value, 4)),
                ],
            )
            for time, value in m.series
        ]
        parts.append(_part("measure", part=measure))
    return {"name": "oxygen-trend", "part": parts}
