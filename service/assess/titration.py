"""The response to oxygen from the record: titration points, the shunt and V/Q fit, its facts.

Every arterial gas (its PaO2) and every SpO2 reading becomes a point on the FiO2 in force when
it was taken — measured, set on a ventilator, or estimated from the device and flow with the
estimate's range (``sources.choose_inspired_oxygen``, the same precedence as a gas) — found
by the same windows as a gas's own values (``pairing``). Points are then taken in time order,
gas or oximetry first alike, within the site's titration window
(``Settings.titration_window_minutes``) that ends at the latest point no later than one
window after the index gas (``physiology.titration.select_titration_points``). Left out, each
with its reason: a value without a time or an FiO2; a point taken sooner after its FiO2 changed
than the site's settling time (``Settings.titration_settle_minutes``; PaO2 reaches 90 % of its
new value 4.2 ± 4.1 min after a rise of FiO2 and 5.5 min after a fall, Cakar N et al.,
Intensive Care Med 2001;27:655); an SpO2 below the oximeter's specified range or beside raised
COHb or MetHb (the rule set's own thresholds: ``oximeter_range_low``, ``carboxyhaemoglobin_high``,
``methaemoglobin_high``).

Nothing is fitted unless the points lie on two or more FiO2 levels: an assessment without a
titration costs only the look at its settings. The fit itself, its ranges and its refusals
are ``physiology.oxygen_response`` (docs/oxygen-response.md); this module adds the patient's
conditions (pressure, Hb, a-v difference: measured or assumed), widens the fit's 95 % ranges
by the assumptions it rests on, compares the V/Q term with the healthy lung of the patient's
age (``physiology.reference``), and names the facts the rules read.

Gas values are used as the analyser reports them, at 37 °C, with the blood's pH moving its
curve, as everywhere in the service.
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Iterable
from dataclasses import dataclass, replace
from datetime import datetime, timedelta

from service.config import Settings
from service.engine.facts import FactKind, FactOrigin, FactSpec, FactValue
from service.exceptions import PhysiologyError
from service.intake.model import Fio2Source as IntakeFio2Source
from service.intake.model import Intake, Measurement, Quantity, Source
from service.physiology import constants as c
from service.physiology.oxygen_content import fractional_saturation, oxygen_content_ml_dl
from service.physiology.oxygen_exchange import (
    SHUNT_LIMITS,
    ExchangeConditions,
    exchange_conditions,
    shunt_from_odds,
)
from service.physiology.oxygen_prediction import (
    TARGET_BAND_LIMITS,
    Fio2ForTarget,
    OxygenPrediction,
    TargetBand,
    predict_oxygen_response,
)
from service.physiology.oxygen_response import (
    FitModel,
    ModelFit,
    OxygenResponse,
    Refusal,
    fit_oxygen_response,
)
from service.physiology.reference import vq_drop_upper_limit_range_mmhg
from service.physiology.titration import (
    DroppedPoint,
    Fio2Source,
    InspiredOxygen,
    MeasuredKind,
    TitrationPoint,
    TitrationSeries,
    same_fio2_step,
    select_titration_points,
)
from service.physiology.units import from_fact_unit

from .pairing import ByQuantity, PairedGas, Windows, group_measurements, pair_at
from .sources import choose_inspired_oxygen

__all__ = [
    "FITTED_FACTS",
    "SETTING_QUANTITIES",
    "Bounds",
    "RecordPoints",
    "Titration",
    "TitrationRules",
    "assess_titration",
    "point_times",
    "record_points",
    "window_end",
]

_Q = Quantity
# The settings a point's FiO2 is known from (``sources.choose_inspired_oxygen``).
SETTING_QUANTITIES = frozenset({_Q.FIO2, _Q.OXYGEN_DEVICE, _Q.OXYGEN_FLOW})
_BLOOD_QUANTITIES = frozenset({_Q.ARTERIAL_PCO2, _Q.ARTERIAL_PH})
_FIO2_SOURCES = {
    IntakeFio2Source.MEASURED.value: Fio2Source.MEASURED,
    IntakeFio2Source.VENTILATOR_SETTING.value: Fio2Source.VENTILATOR_SETTING,
    IntakeFio2Source.DEVICE_ESTIMATE.value: Fio2Source.DEVICE_ESTIMATE,
    IntakeFio2Source.SITE_SETTING.value: Fio2Source.SITE_SETTING,
}
MMHG = "mm[Hg]"
# The most points one fit takes (the latest are kept): a titration has a handful of steps;
# the budget bounds the solver's work whatever a record holds (tested).
MAX_POINTS = 40


def _fitted(
    name: str,
    kind: FactKind,
    unit: str | None,
    description: str,
    limits: tuple[float, float] | None = None,
    decimals: int = 0,
    allowed: frozenset[str] = frozenset(),
) -> FactSpec:
    low, high = limits if limits is not None else (None, None)
    return FactSpec(
        name,
        kind,
        unit,
        description,
        low,
        high,
        allowed=allowed,
        decimals=decimals,
        origin=FactOrigin.FITTED,
    )


_Qk, _Bk, _Ck = FactKind.QUANTITY, FactKind.BOOLEAN, FactKind.CODE
_COUNT = (0.0, float(MAX_POINTS))  # a fit takes at most MAX_POINTS points
_PERCENT = (0.0, 100.0)
_DROP = (0.0, 700.0)
_EXCESS = (-700.0, 700.0)
MODELS = frozenset(m.value for m in FitModel)
REFUSALS = frozenset(r.value for r in Refusal)

# fmt: off
FITTED_FACTS: tuple[FactSpec, ...] = (
    _fitted("titration_points", _Qk, "1", "Points the oxygen-response fit used (SpO2 above "
            "97 % left out)", _COUNT),
    _fitted("titration_fio2_levels", _Qk, "1", "Distinct FiO2 levels among those points",
            _COUNT),
    _fitted("titration_fio2_known_levels", _Qk, "1", "Distinct FiO2 levels among those points "
            "whose FiO2 was measured or set, not estimated", _COUNT),
    _fitted("titration_fio2_span", _Qk, "1", "Highest minus lowest FiO2 of those points",
            (0.0, 1.0), 2),
    _fitted("titration_fio2_highest", _Qk, "1", "Highest FiO2 of those points", (0.0, 1.0), 2),
    _fitted("titration_model", _Ck, None, "The model reported: shunt-and-vq (both fitted) or "
            "effective-shunt (one parameter: the points could not separate them)",
            allowed=MODELS),
    _fitted("titration_refused", _Bk, None, "The two-parameter fit was refused (not identified)"),
    _fitted("titration_refusal", _Ck, None, "Why the two-parameter fit was refused",
            allowed=REFUSALS),
    _fitted("titration_fit_probability", _Qk, "1", "Probability of a χ² at least this large if "
            "the model held (the reported fit's goodness of fit)", (0.0, 1.0), 3),
    _fitted("titration_paco2_assumed", _Bk, None, "A point of the fit had no PaCO2 of its own or "
            "from a gas nearby: the V/Q term then also holds any hypoventilation"),
    _fitted("fitted_shunt", _Qk, "%", "Shunt fitted with the V/Q term (two-parameter model)",
            _PERCENT, 1),
    _fitted("fitted_shunt_least", _Qk, "%", "Lowest fitted shunt over its 95 % range and the "
            "assumed Hb and a-v difference", _PERCENT, 1),
    _fitted("fitted_shunt_most", _Qk, "%", "Highest fitted shunt over its 95 % range and the "
            "assumed Hb and a-v difference", _PERCENT, 1),
    _fitted("fitted_vq_drop", _Qk, MMHG, "V/Q term fitted with the shunt: the alveolar to "
            "end-capillary PO2 drop (ΔPO2)", _DROP),
    _fitted("fitted_vq_drop_least", _Qk, MMHG, "Lowest fitted V/Q term over its 95 % range and "
            "the assumed Hb and PaCO2", _DROP),
    _fitted("fitted_vq_drop_most", _Qk, MMHG, "Highest fitted V/Q term over its 95 % range and "
            "the assumed Hb and PaCO2", _DROP),
    _fitted("vq_drop_upper_limit", _Qk, MMHG, "V/Q term of a healthy lung at the lower limit of "
            "normal for age (the widest limit when the age is not known)", _DROP),
    _fitted("fitted_vq_drop_excess_least", _Qk, MMHG, "fitted_vq_drop_least minus the healthy "
            "limit for age (the widest limit when the age is not known)", _EXCESS),
    _fitted("fitted_vq_drop_excess_most", _Qk, MMHG, "fitted_vq_drop_most minus the healthy "
            "limit for age (the narrowest limit when the age is not known)", _EXCESS),
    _fitted("effective_shunt", _Qk, "%", "Effective shunt: the one-parameter fit (V/Q term held "
            "at 0), shunt and V/Q mismatch together", _PERCENT, 1),
    _fitted("effective_shunt_least", _Qk, "%", "Lowest effective shunt over its 95 % range and "
            "the assumed a-v difference", _PERCENT, 1),
    _fitted("effective_shunt_most", _Qk, "%", "Highest effective shunt over its 95 % range and "
            "the assumed a-v difference", _PERCENT, 1),
    _fitted("predicted_target_reachable", _Bk, None, "The fitted curve reaches the lower edge of "
            "the usual SpO2 target band (94-98 %) on FiO2 1.0 or less"),
    _fitted("predicted_fio2_for_target", _Qk, "1", "FiO2 at which the fitted curve reaches the "
            "lower edge of the usual target band (a model estimate)", (0.0, 1.0), 2),
    _fitted("predicted_fio2_for_target_least", _Qk, "1", "The same, at the upper edge of the "
            "curve's 95 % range", (0.0, 1.0), 2),
    _fitted("predicted_fio2_for_target_most", _Qk, "1", "The same, at the lower edge of the "
            "curve's 95 % range (absent when FiO2 1.0 is not enough there)", (0.0, 1.0), 2),
    _fitted("predicted_hypercapnic_target_reachable", _Bk, None, "The fitted curve reaches the "
            "lower edge of the band for hypercapnic risk (88-92 %) on FiO2 1.0 or less"),
    _fitted("predicted_fio2_for_hypercapnic_target", _Qk, "1", "FiO2 at which the fitted curve "
            "reaches the lower edge of the band for hypercapnic risk (a model estimate)",
            (0.0, 1.0), 2),
    _fitted("predicted_fio2_for_hypercapnic_target_least", _Qk, "1", "The same, at the upper "
            "edge of the curve's 95 % range", (0.0, 1.0), 2),
    _fitted("predicted_fio2_for_hypercapnic_target_most", _Qk, "1", "The same, at the lower "
            "edge of the curve's 95 % range", (0.0, 1.0), 2),
)
# fmt: on


@dataclass(frozen=True, slots=True)
class TitrationRules:
    """What the titration takes from the rule set: the SpO2 below which an oximeter is out of
    its specified range, the COHb and MetHb above which SpO2 is unreliable (fractions), and
    the edges of the two target bands (fractions)."""

    oximeter_low: float = 0.70
    carboxyhaemoglobin_high: float = 0.05
    methaemoglobin_high: float = 0.03
    bands: tuple[tuple[TargetBand, tuple[float, float]], ...] = tuple(TARGET_BAND_LIMITS.items())


@dataclass(frozen=True, slots=True)
class Bounds:
    """A fitted value and the ends of its range widened by the assumptions (``widened_by``
    names them; empty when only the fit's own 95 % range counts)."""

    value: float
    least: float
    most: float
    widened_by: tuple[str, ...]


@dataclass(frozen=True, slots=True)
class LeftOut:
    """A measurement that is not a point of the titration, and why (``fio2`` None when no
    FiO2 was known for it)."""

    reference: str
    time: datetime
    kind: MeasuredKind
    value: float  # a fraction for SpO2, mm[Hg] for PaO2
    fio2: float | None
    reason: str


@dataclass(frozen=True, slots=True)
class Titration:
    """One patient's titration: the points (kept and left out), the fit, the predictions,
    the bounds the rules grade on and the facts they read."""

    series: TitrationSeries
    left_out: tuple[LeftOut, ...]
    response: OxygenResponse
    prediction: OxygenPrediction | None
    shunt: Bounds | None  # the two-parameter fit's, when it is reported
    vq_drop: Bounds | None
    effective_shunt: Bounds | None
    vq_drop_limit_mmhg: tuple[float, float]  # the healthy limit for age (narrowest, widest)
    fio2_levels: int
    fio2_known_levels: int
    sources: tuple[Source, ...]  # the observations behind the points (values and FiO2s)
    facts: dict[str, FactValue]

    @property
    def fit(self) -> ModelFit | None:
        """The fit reported: the two-parameter one when identified, else the effective shunt."""
        return self.response.preferred

    @property
    def dropped(self) -> tuple[LeftOut, ...]:
        """Every measurement left out, before the window and by it, in time order."""
        by_window = tuple(_left_out(d) for d in self.series.dropped)
        return tuple(sorted(self.left_out + by_window, key=lambda d: d.time))


def _left_out(dropped: DroppedPoint) -> LeftOut:
    p = dropped.point
    return LeftOut(p.reference, p.time, p.kind, p.value, p.inspired.fio2, dropped.reason)


# --- points from the record -------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class _Candidate:
    measurement: Measurement
    inspired: InspiredOxygen | None
    fio2_inputs: tuple[Source, ...]
    paired: PairedGas
    reason: str | None


class _Settings:
    """The oxygen settings of the record (FiO2, device, flow), sorted once, and the one in
    force at any moment by the rule of ``pairing``: the latest charted at or before it within
    the setting window, else the nearest within the pairing window, else an untimed one. A
    titration asks this twice per point; pairing each point like a gas would sort every
    kind of value each time."""

    def __init__(self, by_quantity: ByQuantity, windows: Windows, settings: Settings) -> None:
        self.windows = windows
        self.settings = settings
        # The FiO2 each combination of settings in force gives, worked out once: a titration
        # asks for it twice per point, mostly of the same few settings. Keyed by the identity
        # of the measurements chosen, which this object's lists keep alive while it lives.
        self._inspired: dict[tuple[int, ...], tuple[InspiredOxygen | None, tuple[Source, ...]]] = {}
        self.timed: dict[Quantity, tuple[list[datetime], list[Measurement]]] = {}
        self.untimed: dict[Quantity, Measurement] = {}
        for quantity in SETTING_QUANTITIES:
            found = by_quantity.get(quantity, [])
            timed = sorted(
                ((m.time, m) for m in found if m.time is not None), key=lambda pair: pair[0]
            )
            self.timed[quantity] = ([t for t, _ in timed], [m for _, m in timed])
            untimed = [m for m in found if m.time is None]
            if untimed:
                self.untimed[quantity] = untimed[-1]

    def at(self, time: datetime) -> PairedGas:
        gas = PairedGas(anchor=None)
        for quantity, (times, found) in self.timed.items():
            chosen: Measurement | None = None
            i = bisect.bisect_right(times, time)
            if i and time - times[i - 1] <= self.windows.setting:
                chosen = found[i - 1]  # in force: the latest at or before the moment
            else:
                near = [j for j in (i - 1, i) if 0 <= j < len(found)]
                if near:
                    j = min(near, key=lambda k: abs(times[k] - time))
                    if abs(times[j] - time) <= self.windows.context:
                        chosen = found[j]
            if chosen is None:
                chosen = self.untimed.get(quantity)
            if chosen is not None:
                gas.values[quantity] = chosen
        return gas

    def inspired(self, gas: PairedGas) -> tuple[InspiredOxygen | None, tuple[Source, ...]]:
        """``_inspired`` of settings in force (``at``), with the sources it was read from."""
        key = tuple(map(id, gas.values.values()))
        found = self._inspired.get(key)
        if found is None:
            found = self._inspired[key] = _inspired(gas, self.settings)
        return found


def _number(m: Measurement | None) -> float | None:
    return m.value if m is not None and isinstance(m.value, float) else None


def _inspired(
    paired: PairedGas, settings: Settings
) -> tuple[InspiredOxygen | None, tuple[Source, ...]]:
    choice = choose_inspired_oxygen(paired, settings)
    if choice.fio2 is None or choice.source is None:
        return None, ()
    low, high = choice.fio2_range or (choice.fio2, choice.fio2)
    source = _FIO2_SOURCES[choice.source]
    return InspiredOxygen(choice.fio2, min(low, choice.fio2), max(high, choice.fio2), source), (
        choice.inputs
    )


def _settled(
    time: datetime, inspired: InspiredOxygen, index: _Settings, settings: Settings
) -> str | None:
    """Why a point is not in steady state (its FiO2 was changed within the settling time),
    or None. The FiO2 in force that long before the point is compared with the point's own;
    when nothing was charted that early the point is kept."""
    settle = timedelta(minutes=settings.titration_settle_minutes)
    if settle <= timedelta(0):
        return None
    before, _ = index.inspired(index.at(time - settle))
    if before is None or same_fio2_step(before.fio2, inspired.fio2):
        return None
    return (
        f"taken less than {settings.titration_settle_minutes:g} min after the FiO2 changed "
        f"({before.fio2:.2f} to {inspired.fio2:.2f}): not yet in steady state"
    )


def _candidates(
    by_quantity: ByQuantity, windows: Windows, settings: Settings, rules: TitrationRules
) -> list[_Candidate]:
    found: list[_Candidate] = []
    index = _Settings(by_quantity, windows, settings)
    for quantity in (_Q.ARTERIAL_PO2, _Q.SPO2):
        for m in by_quantity.get(quantity, []):
            if m.time is None or not isinstance(m.value, float):
                continue
            paired = index.at(m.time)
            paired.anchor = m
            inspired, inputs = index.inspired(paired)
            if quantity is _Q.ARTERIAL_PO2:
                blood = pair_at(m, by_quantity, windows, only=_BLOOD_QUANTITIES)
                paired.values.update(blood.values)
            reason: str | None = None
            if inspired is None:
                reason = "no FiO2 known for it"
            elif quantity is _Q.SPO2 and m.value < rules.oximeter_low:
                reason = (
                    f"SpO2 below {rules.oximeter_low:.0%}, where oximeter accuracy is not specified"
                )
            else:
                reason = _settled(m.time, inspired, index, settings)
            found.append(_Candidate(m, inspired, inputs, paired, reason))
    return found


def _dyshaemoglobin(by_quantity: ByQuantity, rules: TitrationRules) -> str | None:
    """Why SpO2 cannot be used at all (COHb or MetHb above the rule set's limit), or None."""
    for quantity, limit, name in (
        (_Q.CARBOXYHAEMOGLOBIN, rules.carboxyhaemoglobin_high, "COHb"),
        (_Q.METHAEMOGLOBIN, rules.methaemoglobin_high, "MetHb"),
    ):
        if any((_number(m) or 0.0) > limit for m in by_quantity.get(quantity, [])):
            return f"{name} above {limit:.0%}: SpO2 unreliable"
    return None


def _point(candidate: _Candidate) -> TitrationPoint | str:
    """The candidate as a point, or why it cannot be one (a value outside what the model
    takes). A gas's PaCO2 or pH outside it is left aside, the PaO2 kept."""
    m, inspired = candidate.measurement, candidate.inspired
    assert inspired is not None and m.time is not None and isinstance(m.value, float)
    reference = m.source.reference
    if m.quantity is _Q.SPO2:
        try:
            return TitrationPoint(m.time, inspired, spo2=m.value, reference=reference)
        except ValueError as error:  # ImpossibleValueError among them
            return f"outside what the model takes ({error})"
    paired = candidate.paired
    try:
        return TitrationPoint(
            m.time,
            inspired,
            pao2_mmhg=m.value,
            paco2_mmhg=_number(paired.get(_Q.ARTERIAL_PCO2)),
            ph=_number(paired.get(_Q.ARTERIAL_PH)),
            reference=reference,
        )
    except ValueError:  # a PaCO2 or pH the model does not take is left aside (or the PaO2:
        pass  # the bare point says which)
    try:
        return TitrationPoint(m.time, inspired, pao2_mmhg=m.value, reference=reference)
    except ValueError as error:
        return f"outside what the model takes ({error})"


def _dropped(candidate: _Candidate, reason: str) -> LeftOut:
    m = candidate.measurement
    assert m.time is not None and isinstance(m.value, float)
    kind = MeasuredKind.SPO2 if m.quantity is _Q.SPO2 else MeasuredKind.PAO2
    fio2 = candidate.inspired.fio2 if candidate.inspired is not None else None
    return LeftOut(m.source.reference, m.time, kind, m.value, fio2, reason)


def _one_setting(by_quantity: ByQuantity, settings: Settings) -> bool:
    """True when the record cannot hold two FiO2 levels: at most one moment of oxygen settings
    (or none, on a site that assumes room air). Checked before anything is paired."""
    times = {
        m.time for q in SETTING_QUANTITIES for m in by_quantity.get(q, []) if m.time is not None
    }
    untimed = any(m.time is None for q in SETTING_QUANTITIES for m in by_quantity.get(q, []))
    return len(times) + untimed <= 1


def _sorted_out(
    grouped: ByQuantity, windows: Windows, settings: Settings, rules: TitrationRules
) -> tuple[list[TitrationPoint], list[_Candidate], list[LeftOut]]:
    """Every SpO2 and arterial PO2 of the record as a point (with its candidate) or left out
    with the reason, before any window is chosen."""
    unusable_spo2 = _dyshaemoglobin(grouped, rules)
    kept: list[TitrationPoint] = []
    kept_candidates: list[_Candidate] = []
    left_out: list[LeftOut] = []
    for candidate in _candidates(grouped, windows, settings, rules):
        reason = candidate.reason
        if reason is None and unusable_spo2 and candidate.measurement.quantity is _Q.SPO2:
            reason = unusable_spo2
        point = _point(candidate) if reason is None else reason
        if isinstance(point, TitrationPoint):
            kept.append(point)
            kept_candidates.append(candidate)
        else:
            left_out.append(_dropped(candidate, point))
    return kept, kept_candidates, left_out


@dataclass(frozen=True, slots=True)
class RecordPoints:
    """The record's SpO2 and arterial PO2 sorted out as titration points once (kept, with
    their candidates, and left out), for every titration of one assessment to start from:
    the index gas's and the trend's, one per gas."""

    kept: list[TitrationPoint]
    candidates: list[_Candidate]
    left_out: list[LeftOut]


def record_points(
    intake: Intake,
    *,
    windows: Windows,
    settings: Settings,
    rules: TitrationRules,
    by_quantity: ByQuantity | None = None,
) -> RecordPoints | None:
    """The record's points (``RecordPoints``); None, with nothing paired, when the record
    cannot hold a titration: fewer than two SpO2 and PaO2 values, or one oxygen setting.
    ``by_quantity``: the intake's usable measurements by quantity, when the caller has them."""
    grouped = by_quantity if by_quantity is not None else group_measurements(intake)[0]
    spo2s, gases = grouped.get(_Q.SPO2, []), grouped.get(_Q.ARTERIAL_PO2, [])
    if len(spo2s) + len(gases) < 2 or _one_setting(grouped, settings):
        return None
    return RecordPoints(*_sorted_out(grouped, windows, settings, rules))


def point_times(
    by_quantity: ByQuantity, *, windows: Windows, settings: Settings, rules: TitrationRules
) -> list[datetime]:
    """When the measurements of ``by_quantity`` (usable ones, by quantity) that a titration
    takes as points were taken, earliest first: every SpO2 and arterial PO2 not left out for
    a reason of its own (no FiO2, not settled, out of the oximeter's range or the model's) or
    of the record (COHb or MetHb above the limit, among the values ``by_quantity`` holds).
    These times decide where the window of a titration ends (``window_end``)."""
    kept, _, _ = _sorted_out(by_quantity, windows, settings, rules)
    return sorted(p.time for p in kept)


# --- the fit and its facts --------------------------------------------------------------------


def _conditions(index: dict[str, FactValue], settings: Settings) -> ExchangeConditions:
    """The patient's conditions from the index gas's facts (catalogue units): pressure, water
    vapour, Hb (measured or assumed) and the a-v content difference (from a mixed-venous
    saturation with Hb, else the site's assumed value)."""

    def number(name: str) -> float | None:
        value = index.get(name)
        return value if isinstance(value, float) else None

    def fraction(name: str) -> float:
        value = number(name)
        return 0.0 if value is None else from_fact_unit(value, "%")

    hb = number("haemoglobin")
    avd: float | None = None
    content, svo2 = number("arterial_o2_content"), number("mixed_venous_so2")
    if hb is not None and content is not None and svo2 is not None:
        # COHb and MetHb carry no oxygen, in mixed venous blood as in the arterial content
        # (``admixture.arterial_o2_content``): the saturation is taken of the rest.
        venous = oxygen_content_ml_dl(
            haemoglobin_g_dl=hb,
            saturation=fractional_saturation(
                functional_saturation=fraction("mixed_venous_so2"),
                carboxyhaemoglobin=fraction("carboxyhaemoglobin"),
                methaemoglobin=fraction("methaemoglobin"),
            ),
            po2_mmhg=number("mixed_venous_po2") or c.NORMAL_MIXED_VENOUS_PO2_MMHG,
            hufner_ml_per_g=settings.hufner_ml_per_g,
        )
        measured = content - venous
        avd = measured if 1.0 <= measured <= 12.0 else None
    conditions = exchange_conditions(
        barometric_mmhg=number("barometric_pressure") or c.SEA_LEVEL_PRESSURE_MMHG,
        haemoglobin_g_dl=hb,
        av_difference_ml_dl=avd if avd is not None else settings.assumed_av_difference_ml_dl,
        av_difference_range_ml_dl=settings.av_difference_range_ml_dl,
        hufner_ml_per_g=settings.hufner_ml_per_g,
        respiratory_quotient=settings.respiratory_quotient,
        water_vapour_mmhg=number("water_vapour_pressure") or c.WATER_VAPOUR_TEXTBOOK_MMHG,
    )
    return replace(conditions, av_difference_measured=avd is not None)


def _odds(shunt: float) -> float:
    return shunt / (1.0 - shunt)


def _clamp_shunt(shunt: float) -> float:
    return min(max(shunt, SHUNT_LIMITS[0]), SHUNT_LIMITS[1])


def _sensitivity(fit: ModelFit, assumption: str) -> tuple[float, float, float, float] | None:
    """(shunt change at the low end, at the high end, ΔPO2 change at low, at high) for one
    assumption of the fit, or None when it was not assumed."""
    for s in fit.sensitivities:
        if s.assumption == assumption:
            shunt, drop = fit.shunt.value, fit.vq_drop_mmhg.value
            return (
                s.shunt_at_low - shunt,
                s.shunt_at_high - shunt,
                s.vq_drop_at_low_mmhg - drop,
                s.vq_drop_at_high_mmhg - drop,
            )
    return None


def _bounds(
    fit: ModelFit, conditions: ExchangeConditions, settings: Settings
) -> tuple[Bounds, Bounds]:
    """The fit's 95 % ranges of shunt and ΔPO2 widened by the assumptions: the a-v difference
    over the site's range (exact: the shunt enters the model as odds × a-v difference, so the
    odds at another a-v difference are odds × avd / avd'), Hb over 8–17 g/dL and an assumed
    PaCO2 by ± 10 mmHg (linearised at the fit, ``oxygen_response``)."""
    shunt, drop = fit.shunt, fit.vq_drop_mmhg
    low, high = shunt.low, shunt.high
    shunt_by: list[str] = []
    drop_by: list[str] = []
    if not conditions.av_difference_measured:
        avd = conditions.av_difference_ml_dl
        avd_low, avd_high = settings.av_difference_range_ml_dl
        low = min(low, shunt_from_odds(_odds(low) * avd / avd_high))
        high = max(high, shunt_from_odds(_odds(high) * avd / avd_low))
        shunt_by.append(f"a-v difference {avd_low:g}–{avd_high:g} mL/dL")
    drop_low, drop_high = drop.low, drop.high
    for assumption, label in (
        ("haemoglobin_g_dl", "Hb 8–17 g/dL"),
        ("paco2_mmhg", "PaCO2 ± 10 mmHg"),
    ):
        moved = _sensitivity(fit, assumption)
        if moved is None:
            continue
        s_low, s_high, d_low, d_high = moved
        if assumption == "haemoglobin_g_dl":
            low += min(0.0, s_low, s_high)
            high += max(0.0, s_low, s_high)
            shunt_by.append(label)
        if not drop.fixed:
            drop_low += min(0.0, d_low, d_high)
            drop_high += max(0.0, d_low, d_high)
            drop_by.append(label)
    return (
        Bounds(shunt.value, _clamp_shunt(low), _clamp_shunt(high), tuple(shunt_by)),
        Bounds(drop.value, max(0.0, drop_low), max(0.0, drop_high), tuple(drop_by)),
    )


def _levels(points: list[TitrationPoint]) -> int:
    """Distinct FiO2 levels (within 0.005) among ``points``."""
    fio2s = sorted(p.inspired.fio2 for p in points)
    count = 0
    last = -1.0
    for f in fio2s:
        if not same_fio2_step(f, last):
            count += 1
            last = f
    return count


def _percent(fraction: float) -> float:
    return 100.0 * fraction


def _target_facts(prefix: str, target: Fio2ForTarget) -> dict[str, FactValue]:
    facts: dict[str, FactValue] = {f"predicted_{prefix}_reachable": target.fio2 is not None}
    name = "predicted_fio2_for_target" if prefix == "target" else "predicted_fio2_for_" + prefix
    for suffix, value in (
        ("", target.fio2),
        ("_least", target.fio2_low),
        ("_most", target.fio2_high),
    ):
        if value is not None:
            facts[name + suffix] = value
    return facts


def _facts(
    response: OxygenResponse,
    prediction: OxygenPrediction | None,
    highest: float,
    levels: int,
    known_levels: int,
    shunt: Bounds | None,
    drop: Bounds | None,
    effective: Bounds | None,
    limit: tuple[float, float],
) -> dict[str, FactValue]:
    fit = response.preferred
    facts: dict[str, FactValue] = {
        "titration_points": float(response.points_used),
        "titration_fio2_levels": float(levels),
        "titration_fio2_known_levels": float(known_levels),
        "titration_fio2_span": response.fio2_span,
        "titration_fio2_highest": highest,
        "titration_refused": response.two_parameter is None,
    }
    if response.refusal_reason is not None:
        facts["titration_refusal"] = response.refusal_reason.value
    if fit is None:
        return facts
    facts["titration_model"] = fit.model.value
    if fit.fit_probability is not None:
        facts["titration_fit_probability"] = fit.fit_probability
    facts["titration_paco2_assumed"] = any(p.used and p.paco2_assumed for p in fit.points)
    if shunt is not None and drop is not None and all(map(math.isfinite, limit)):
        facts |= {
            "fitted_shunt": _percent(shunt.value),
            "fitted_shunt_least": _percent(shunt.least),
            "fitted_shunt_most": _percent(shunt.most),
            "fitted_vq_drop": drop.value,
            "fitted_vq_drop_least": drop.least,
            "fitted_vq_drop_most": drop.most,
            "vq_drop_upper_limit": limit[1],
            "fitted_vq_drop_excess_least": drop.least - limit[1],
            "fitted_vq_drop_excess_most": drop.most - limit[0],
        }
    if effective is not None:
        facts |= {
            "effective_shunt": _percent(effective.value),
            "effective_shunt_least": _percent(effective.least),
            "effective_shunt_most": _percent(effective.most),
        }
    if prediction is not None:
        for target in prediction.targets:
            prefix = "target" if target.band is TargetBand.STANDARD else "hypercapnic_target"
            facts |= _target_facts(prefix, target)
    return facts


def _effective_bounds(
    fit: ModelFit | None, conditions: ExchangeConditions, settings: Settings
) -> Bounds | None:
    """The effective shunt's range widened over the a-v difference (exact, as ``_bounds``)."""
    if fit is None:
        return None
    low, high = fit.shunt.low, fit.shunt.high
    widened: tuple[str, ...] = ()
    if not conditions.av_difference_measured:
        avd = conditions.av_difference_ml_dl
        avd_low, avd_high = settings.av_difference_range_ml_dl
        low = min(low, shunt_from_odds(_odds(low) * avd / avd_high))
        high = max(high, shunt_from_odds(_odds(high) * avd / avd_low))
        widened = (f"a-v difference {avd_low:g}–{avd_high:g} mL/dL",)
    return Bounds(fit.shunt.value, _clamp_shunt(low), _clamp_shunt(high), widened)


def assess_titration(
    intake: Intake,
    *,
    index: dict[str, FactValue],
    index_time: datetime | None,
    windows: Windows,
    settings: Settings,
    rules: TitrationRules = TitrationRules(),
    by_quantity: ByQuantity | None = None,
    ending_at_index: bool = False,
    predict: bool = True,
    points: RecordPoints | None = None,
) -> Titration | None:
    """The titration in ``intake`` around the index gas (facts ``index``, taken at
    ``index_time``), fitted; None when its points do not lie on two or more FiO2 levels.

    ``by_quantity``: the intake's usable measurements by quantity, when the caller has them.
    ``ending_at_index``: the window ends at the index gas (for the trend, one titration per
    gas) rather than at the latest point up to one window after it. ``predict``: whether to
    compute the predictions. ``points``: the record's points (``record_points``), when the
    caller has them (then ``intake`` and ``by_quantity`` are not read).
    """
    if points is None:
        points = record_points(
            intake, windows=windows, settings=settings, rules=rules, by_quantity=by_quantity
        )
        if points is None:
            return None
    kept, kept_candidates, left_out = points.kept, points.candidates, points.left_out
    if _levels(kept) < 2:
        return None
    window = timedelta(minutes=settings.titration_window_minutes)
    anchor = (
        index_time if ending_at_index else window_end((p.time for p in kept), index_time, window)
    )
    series = _within_budget(
        select_titration_points(
            points=kept, window_min=settings.titration_window_minutes, anchor=anchor
        )
    )
    informative = [p for p in series.points if p.spo2 is None or p.spo2 <= 0.97]
    levels = _levels(informative)
    if _levels(list(series.points)) < 2:
        return None
    try:
        conditions = _conditions(index, settings)
    except PhysiologyError:
        # A pressure or Hb the model does not take: no fit (the gas's own derived values
        # report the value as a problem).
        return None
    response = fit_oxygen_response(points=series.points, conditions=conditions)
    bands = dict(rules.bands)
    prediction = (
        predict_oxygen_response(response=response, band_limits=bands)
        if predict and response.preferred is not None
        else None
    )
    two = response.two_parameter
    shunt, drop = _bounds(two, conditions, settings) if two is not None else (None, None)
    effective = _effective_bounds(response.effective_shunt, conditions, settings)
    limit = _vq_limit(index, settings)
    known = _levels([p for p in informative if p.inspired.half_range == 0.0])
    start, end = series.window_start, series.window_end
    sources: list[Source] = []
    for used in kept_candidates:
        time = used.measurement.time
        if time is not None and start is not None and end is not None and start <= time <= end:
            sources += [used.measurement.source, *used.fio2_inputs]
    return Titration(
        series=series,
        left_out=tuple(left_out),
        response=response,
        prediction=prediction,
        shunt=shunt,
        vq_drop=drop,
        effective_shunt=effective,
        vq_drop_limit_mmhg=limit,
        fio2_levels=levels,
        fio2_known_levels=known,
        sources=tuple(dict.fromkeys(sources)),
        facts=_facts(
            response,
            prediction,
            max((p.inspired.fio2 for p in informative), default=0.0),
            levels,
            known,
            shunt,
            drop,
            effective,
            limit,
        ),
    )


def _within_budget(series: TitrationSeries) -> TitrationSeries:
    """At most ``MAX_POINTS`` points, the latest kept; the earlier ones are left out with the
    reason (a record of continuous oximetry on a changing FiO2 would otherwise make a fit of
    any length: each point costs every solver step)."""
    if len(series.points) <= MAX_POINTS:
        return series
    cut = len(series.points) - MAX_POINTS
    reason = f"beyond the {MAX_POINTS} latest points a fit takes"
    dropped = tuple(DroppedPoint(p, reason) for p in series.points[:cut])
    return replace(series, points=series.points[cut:], dropped=series.dropped + dropped)


def window_end(
    times: Iterable[datetime], index_time: datetime | None, window: timedelta
) -> datetime | None:
    """The end of the titration window of the index gas taken at ``index_time``, from the
    times of the record's points: the latest point no later than one window after the index
    gas (a titration may follow the gas), the index gas's time when there is none, or None
    without an index time (the series then ends at its latest point)."""
    if index_time is None:
        return None
    before = [t for t in times if t <= index_time + window]
    return max(before) if before else index_time


def _vq_limit(index: dict[str, FactValue], settings: Settings) -> tuple[float, float]:
    age = index.get("age")
    ages = (age, age) if isinstance(age, float) else settings.unknown_age_years
    try:
        return vq_drop_upper_limit_range_mmhg(
            ages=ages, respiratory_quotient=settings.respiratory_quotient
        )
    except PhysiologyError:
        return math.nan, math.nan
