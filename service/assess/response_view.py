"""The oxygen-response fit as every output shows it (FHIR, explain, demo, report): its words,
which target band applies, and the points in display order.

Which band applies is the rule set's decision: the rule that raised the
``fio2-for-target-predicted`` finding names it (``fio2-for-hypercapnic-target-predicted`` for
88-92 %), and ``target-band-unreachable`` names the band the curve does not reach. Without
either (the hypercapnic risk not known, or no two-parameter fit) no band is chosen and both are
shown.
"""

from __future__ import annotations

from dataclasses import dataclass

from service.physiology.oxygen_exchange import predict_arterial_oxygen
from service.physiology.oxygen_prediction import CAUTION, Fio2ForTarget, TargetBand
from service.physiology.oxygen_response import FitModel, ModelFit
from service.physiology.titration import Fio2Source, MeasuredKind

from .result import Assessment
from .titration import Titration

__all__ = [
    "CAUTION",
    "FIO2_SOURCE_WORDS",
    "KIND_WORDS",
    "MODEL_WORDS",
    "applicable_band",
    "band_words",
    "right_shift_mmhg",
    "summary_line",
]

MODEL_WORDS = {
    FitModel.SHUNT_AND_VQ: "shunt and V/Q term (two parameters)",
    FitModel.EFFECTIVE_SHUNT: "effective shunt (one parameter: shunt and V/Q mismatch together)",
}
KIND_WORDS = {
    MeasuredKind.SPO2: "SpO2",
    MeasuredKind.SAO2: "SaO2",
    MeasuredKind.PAO2: "PaO2",
}
FIO2_SOURCE_WORDS = {
    Fio2Source.MEASURED: "measured",
    Fio2Source.VENTILATOR_SETTING: "ventilator setting",
    Fio2Source.DEVICE_ESTIMATE: "device estimate",
    Fio2Source.SITE_SETTING: "site setting",
}
STANDARD_RULE = "fio2-for-target-predicted"
HYPERCAPNIC_RULE = "fio2-for-hypercapnic-target-predicted"
UNREACHABLE_RULE = "target-band-unreachable"


@dataclass(frozen=True, slots=True)
class BandChoice:
    """The band the rule set chose (None: not chosen) and why, in words."""

    band: TargetBand | None
    reason: str


def applicable_band(a: Assessment) -> BandChoice:
    """The target band that applies to this patient, by the rules that fired."""
    fired = {f.rule.split("@", 1)[0] for f in a.findings if f.rule}
    if HYPERCAPNIC_RULE in fired:
        return BandChoice(TargetBand.HYPERCAPNIC_RISK, "hypercapnic failure present or risked")
    if STANDARD_RULE in fired:
        return BandChoice(TargetBand.STANDARD, "no hypercapnic failure present or risked")
    titration = a.titration
    if UNREACHABLE_RULE in fired and titration is not None:
        facts = titration.facts
        standard = facts.get("predicted_target_reachable") is False
        hypercapnic = facts.get("predicted_hypercapnic_target_reachable") is False
        if standard and not hypercapnic:
            return BandChoice(TargetBand.STANDARD, "no hypercapnic failure present or risked")
        if hypercapnic and not standard:
            return BandChoice(TargetBand.HYPERCAPNIC_RISK, "hypercapnic failure present or risked")
    return BandChoice(
        None,
        "not chosen: whether hypercapnic failure is present or risked is not known, or the "
        "fit cannot predict below its points",
    )


def band_words(target: Fio2ForTarget) -> str:
    """'94-98 %' for a band's edges."""
    return f"{target.target_low:.0%}–{target.target_high:.0%}".replace("%–", "–")


def right_shift_mmhg(titration: Titration) -> float | None:
    """The right shift of the fitted curve on room air (PIO2 − Pc'O2, the measure of Sapsford
    & Jones; normal below 7 kPa, Smith & Jones 2001), at the PaCO2 the predictions hold; None
    without a two-parameter fit or a steady state on air."""
    fit: ModelFit | None = titration.response.two_parameter
    if fit is None:
        return None
    response = titration.response
    try:
        on_air = predict_arterial_oxygen(
            shunt_fraction=fit.shunt.value,
            vq_drop_mmhg=fit.vq_drop_mmhg.value,
            fio2=0.21,
            paco2_mmhg=response.prediction_paco2_mmhg,
            conditions=response.conditions,
            affinity=response.prediction_affinity,
        )
    except ValueError:
        return None
    return on_air.right_shift_mmhg


def summary_line(titration: Titration) -> str:
    """The fit in one line: model, parameters with their ranges, points and quality."""
    fit = titration.fit
    points = int(titration.response.points_used)
    span = titration.response.fio2_span
    where = f"{points} points on {titration.fio2_levels} FiO2 levels (span {span:.2f})"
    if fit is None:
        return f"Response to oxygen: nothing to fit ({titration.response.refusal}); {where}"
    quality = (
        f"fit probability {fit.fit_probability:.2f}"
        if fit.fit_probability is not None
        else "no spare points to test the fit"
    )
    if titration.shunt is not None and titration.vq_drop is not None:
        s, d = titration.shunt, titration.vq_drop
        return (
            f"Response to oxygen: shunt {s.value:.0%} ({s.least:.0%}–{s.most:.0%}), V/Q term "
            f"{d.value:.0f} mmHg ({d.least:.0f}–{d.most:.0f}); {where}; {quality}"
        )
    effective = titration.effective_shunt
    assert effective is not None
    return (
        f"Response to oxygen: effective shunt {effective.value:.0%} ({effective.least:.0%}–"
        f"{effective.most:.0%}), shunt and V/Q not separated ({titration.response.refusal}); "
        f"{where}; {quality}"
    )
