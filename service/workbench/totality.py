"""Totality: does every mechanism get a grade from some rule, whatever the data?

A mechanism that no rule decides is reported `not-assessable` by the engine with only the list
of missing facts; the rule set should instead say why the data cannot speak (a
`not-assessable` rule) or grade it. This module searches for fact states that leave a
mechanism undecided.

The fact states are *reachable* ones: they are made the way the service makes them — random
measurements (present or absent, ordinary or extreme, near the clinical lines) of one patient,
paired, derived and compared by the real assessment code — and then evaluated by the rule set.
The search is seeded, so a run is repeatable; ``oxyrule lint`` runs it with a fixed seed and a
property test runs it with many.
"""

from __future__ import annotations

import random
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta

from service.assess.assess import windows
from service.assess.derive import GasFacts, derive_gas_facts
from service.assess.pairing import pair_gases
from service.assess.serial import serial_facts
from service.assess.titration import assess_titration
from service.config import Settings
from service.engine import Mechanism, RuleSet, evaluate
from service.engine.facts import FactValue
from service.intake.model import Intake, Measurement, Patient, Quantity, Source, Specimen
from service.physiology.oxygen_delivery import OxygenDevice

__all__ = ["Generated", "Hole", "generated", "undecided"]

_Q = Quantity
WHEN = datetime(2026, 1, 1, 12, 0, tzinfo=UTC)


@dataclass(frozen=True, slots=True)
class Hole:
    """A mechanism no rule decided, with one fact state that shows it."""

    mechanism: Mechanism
    facts: dict[str, FactValue]


def _near(rng: random.Random, centre: float, spread: float) -> float:
    return centre + rng.uniform(-spread, spread)


def _value(rng: random.Random, ordinary: tuple[float, float], lines: tuple[float, ...]) -> float:
    """A value: mostly ordinary, sometimes close to a clinical line (where rules turn)."""
    if lines and rng.random() < 0.35:
        return _near(rng, rng.choice(lines), 1.5)
    return rng.uniform(*ordinary)


_Add = Callable[..., None]
_ARTERIAL = Specimen.ARTERIAL
# (how often, quantity, value, specimen) of the values drawn independently.
_DRAWN: tuple[tuple[float, Quantity, Callable[[random.Random], float], Specimen | None], ...] = (
    (
        0.85,
        _Q.ARTERIAL_PO2,
        lambda r: _value(r, (25.0, 560.0), (40.0, 60.0, 68.0, 80.0)),
        _ARTERIAL,
    ),
    (0.8, _Q.ARTERIAL_PCO2, lambda r: _value(r, (14.0, 110.0), (30.0, 36.0, 45.0)), _ARTERIAL),
    (0.6, _Q.ARTERIAL_PH, lambda r: _value(r, (6.9, 7.7), (7.35, 7.40, 7.45)), _ARTERIAL),
    (0.6, _Q.ARTERIAL_HCO3, lambda r: _value(r, (6.0, 45.0), (22.0, 26.0, 28.0)), _ARTERIAL),
    (0.3, _Q.ARTERIAL_SO2, lambda r: _value(r, (0.55, 1.0), (0.88,)), _ARTERIAL),
    (0.1, _Q.ARTERIAL_O2HB, lambda r: r.uniform(0.5, 0.99), _ARTERIAL),
    (0.6, _Q.SPO2, lambda r: _value(r, (0.6, 1.0), (0.88, 0.92, 0.94, 0.97)), None),
    (0.5, _Q.HAEMOGLOBIN, lambda r: r.uniform(6.0, 20.0), None),
    (0.15, _Q.CARBOXYHAEMOGLOBIN, lambda r: r.uniform(0.0, 0.3), None),
    (0.1, _Q.METHAEMOGLOBIN, lambda r: r.uniform(0.0, 0.15), None),
    (0.1, _Q.MIXED_VENOUS_SO2, lambda r: r.uniform(0.4, 0.8), Specimen.MIXED_VENOUS),
    (0.3, _Q.BODY_TEMPERATURE, lambda r: r.uniform(34.0, 41.0), None),
)
_FLOWS = {
    OxygenDevice.NASAL_CANNULA: (1.0, 6.0),
    OxygenDevice.SIMPLE_MASK: (5.0, 10.0),
    OxygenDevice.NON_REBREATHER_MASK: (10.0, 15.0),
}


def _inspired(rng: random.Random, add: _Add) -> None:
    """An FiO2, or a device (with a flow when it takes one), or nothing."""
    choice = rng.random()
    if choice < 0.45:
        add(_Q.FIO2, rng.choice((0.21, 0.24, 0.28, 0.35, 0.5, 0.6, 0.8, 1.0, rng.uniform(0.21, 1))))
    elif choice < 0.7:
        device = rng.choice((*_FLOWS, OxygenDevice.NONE_ROOM_AIR))
        add(_Q.OXYGEN_DEVICE, device.value)
        if device in _FLOWS:
            add(_Q.OXYGEN_FLOW, rng.uniform(*_FLOWS[device]))


def _place(rng: random.Random, add: _Add) -> None:
    """A pressure, or an altitude, or neither; sometimes whether the patient lives there."""
    where = rng.random()
    if where < 0.3:
        add(_Q.BAROMETRIC_PRESSURE, rng.uniform(420.0, 780.0))
    elif where < 0.5:
        add(_Q.ALTITUDE, rng.uniform(0.0, 4500.0))
    if rng.random() < 0.2:
        add(_Q.ALTITUDE_RESIDENCE, rng.choice(("resident", "visitor")))


def _lung_function(rng: random.Random, add: _Add) -> None:
    """A DLCO (sometimes with its lower limit) and a walk test's oximetry."""
    if rng.random() < 0.25:
        add(_Q.DLCO_PERCENT_PREDICTED, rng.uniform(0.2, 1.2))
        if rng.random() < 0.4:
            add(_Q.DLCO_PERCENT_LOWER_LIMIT, rng.uniform(0.6, 0.85))
    if rng.random() < 0.25:
        baseline = rng.uniform(0.88, 1.0)
        add(_Q.SPO2_EXERTIONAL_BASELINE, baseline)
        add(_Q.SPO2_EXERTIONAL_NADIR, max(baseline - rng.uniform(0.0, 0.15), 0.6))


def _measurements(rng: random.Random, time: datetime) -> list[Measurement]:
    found: list[Measurement] = []

    def add(quantity: Quantity, value: float | str, specimen: Specimen | None = None) -> None:
        source = Source(f"Observation/{quantity.value}-{len(found)}", f"generated {quantity.value}")
        found.append(Measurement(quantity, value, time, source, specimen))

    for chance, quantity, draw, specimen in _DRAWN:
        if rng.random() < chance:
            add(quantity, draw(rng), specimen)
    _inspired(rng, add)
    _place(rng, add)
    _lung_function(rng, add)
    return found


def _titration(rng: random.Random) -> list[Measurement]:
    """Two to six FiO2 steps (measured, or a nasal cannula's flow) in the two hours before
    the gas, an SpO2 reading on each: the points of an oxygen titration."""
    found: list[Measurement] = []
    steps = rng.randint(2, 6)
    measured = rng.random() < 0.7
    for i in range(steps):
        at = WHEN - timedelta(minutes=110 - i * 100 / steps)
        label = f"titration-{i}"
        if measured:
            fio2 = rng.choice((0.21, 0.24, 0.28, 0.31, 0.35, 0.4, 0.5, 0.6, 0.8, 1.0))
            found.append(Measurement(_Q.FIO2, fio2, at, Source(f"Observation/{label}", label)))
        else:
            device = OxygenDevice.NASAL_CANNULA.value
            found.append(Measurement(_Q.OXYGEN_DEVICE, device, at, Source("Observation/d", "d")))
            flow = float(rng.randint(1, 6))
            found.append(Measurement(_Q.OXYGEN_FLOW, flow, at, Source("Observation/f", "f")))
        spo2 = _value(rng, (0.7, 1.0), (0.88, 0.92, 0.97))
        found.append(
            Measurement(_Q.SPO2, spo2, at + timedelta(minutes=8), Source("Observation/s", "s"))
        )
    return found


@dataclass(frozen=True, slots=True)
class Generated:
    """One generated patient: every gas's facts (index first) as the service derives them,
    and the facts fitted to its titration when its values lie on two or more FiO2s."""

    gases: list[GasFacts]
    fitted: dict[str, FactValue]

    @property
    def facts(self) -> dict[str, FactValue]:
        return self.gases[0].facts


_FLAGS: dict[str, FactValue] = {"specimen_unknown": False, "specimen_not_arterial": False}


def generated(seed: int, count: int, *, settings: Settings) -> Iterator[Generated]:
    """``count`` generated patients, made by the real pairing and derivation code."""
    rng = random.Random(seed)
    today = date(2026, 1, 1)
    for _ in range(count):
        measurements = _measurements(rng, WHEN)
        if rng.random() < 0.25:  # an earlier gas on another FiO2
            earlier = WHEN - timedelta(hours=rng.uniform(0.5, 6.0))
            measurements += [
                m
                for m in _measurements(rng, earlier)
                if m.quantity in (_Q.ARTERIAL_PO2, _Q.ARTERIAL_PCO2, _Q.FIO2, _Q.HAEMOGLOBIN)
            ]
        if rng.random() < 0.2:  # an oxygen titration before it: SpO2 on FiO2 steps
            measurements += _titration(rng)
        born = today - timedelta(days=365.25 * rng.uniform(18, 95))
        intake = Intake(Patient("Patient/generated", None if rng.random() < 0.3 else born, None))
        intake.measurements.extend(measurements)
        pairing = pair_gases(intake, windows=windows(settings))
        gases = [
            derive_gas_facts(g, patient=intake.patient, settings=settings, today=today)
            for g in pairing.gases
        ]
        titration = assess_titration(
            intake,
            index=gases[0].facts,
            index_time=gases[0].gas.time,
            windows=windows(settings),
            settings=settings,
            by_quantity=pairing.by_quantity,
            predict=True,
        )
        yield Generated(gases, titration.facts if titration is not None else {})


def undecided(
    ruleset: RuleSet, *, settings: Settings, seed: int = 2026, count: int = 2000
) -> list[Hole]:
    """One hole per mechanism that some generated fact state leaves without a deciding rule,
    in the evaluation of the data as sent (the ranges of uncertain inputs are generated too:
    an FiO2 or an age missing, or present at any value)."""
    holes: dict[Mechanism, Hole] = {}
    for patient in generated(seed, count, settings=settings):
        facts = {
            **patient.facts,
            **serial_facts(patient.gases, settings=settings),
            **patient.fitted,
            **_FLAGS,
        }
        evaluation = evaluate(ruleset, facts)
        for item in evaluation.verdict.mechanisms:
            if not item.deciding and item.mechanism not in holes:
                holes[item.mechanism] = Hole(item.mechanism, dict(patient.facts))
        if len(holes) == len(Mechanism):
            break
    return list(holes.values())
