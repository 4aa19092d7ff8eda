"""Turn one paired gas into the facts the rules read and the derived values the result files.

The steps, in order: the measured facts (in the unit the catalogue presents them), the
barometric pressure and FiO2 with their sources (``sources``), then every entry of the
derived-fact table (``derived``) whose inputs are known. Every number is computed by
``service.physiology``; every fact is checked against its catalogue entry as it is set, so
the engine never meets a value it refuses, and a value that cannot be used is a problem the
result reports (with nothing computed from it).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import date

from service.config import Settings
from service.engine.facts import FactSpec
from service.intake.model import Patient, Quantity, Source
from service.physiology.units import to_fact_unit

from .catalogue import AGE, DEFAULT_CATALOGUE, MEASURED_FACTS
from .derivation import Derived, FactValue, compute_derived, derive_changed, prepare_table
from .derived import DERIVED_FACTS
from .pairing import PairedGas
from .sources import barometric_pressure, inspired_oxygen_fraction

__all__ = [
    "Derivation",
    "Derived",
    "FactValue",
    "GasFacts",
    "age_years",
    "derive_again",
    "derive_gas_facts",
    "with_fio2_raised",
]


@dataclass(frozen=True, slots=True)
class Derivation:
    """The derived facts set from a gas's measured facts, and the settings used."""

    settings: Settings
    facts: dict[str, FactValue]


_KEPT_SCENARIOS = 32  # per gas: the product of a few ranges' ends, with room to spare
_DERIVED_NAMES = tuple(entry.name for entry in DERIVED_FACTS)
# The names the derived-fact table files in the result: on a new FiO2 each is either computed
# again or gone, never kept from the old FiO2.
_FILED_NAMES = frozenset(entry.result for entry in DERIVED_FACTS if entry.result is not None)


def _derivation(facts: dict[str, FactValue], settings: Settings) -> Derivation:
    return Derivation(settings, {name: facts[name] for name in _DERIVED_NAMES if name in facts})


@dataclass(slots=True)
class GasFacts:
    """What one gas contributes: rule facts, derived values, where PB and FiO2 came from, and
    the observations behind each fact."""

    gas: PairedGas
    facts: dict[str, FactValue] = field(default_factory=dict)
    derived: dict[str, Derived] = field(default_factory=dict)
    sources: dict[str, tuple[Source, ...]] = field(default_factory=dict)
    barometric_source: str | None = None
    fio2_source: str | None = None
    fio2_range: tuple[float, float] | None = None
    problems: list[str] = field(default_factory=list)
    measured: dict[str, FactValue] = field(default_factory=dict)
    """The facts before derivation (measured, PB and FiO2 with their flags): what a scenario
    with other inputs derives from again."""
    measured_sources: dict[str, tuple[Source, ...]] = field(default_factory=dict)
    base: Derivation | None = field(default=None, repr=False)
    """What the derivation from ``measured`` set, for a scenario to derive only what its
    changes touch (None: derive everything again)."""
    again: dict[tuple[tuple[str, str, str], ...], dict[str, FactValue]] = field(
        default_factory=dict, repr=False, compare=False
    )
    """The facts of each scenario derived so far (with ``base``'s settings), by its changes:
    the verdict and the deficit partition ask for the same ones."""

    def number(self, name: str) -> float | None:
        value = self.facts.get(name)
        return value if isinstance(value, float) else None

    def set_fact(self, name: str, value: FactValue, sources: tuple[Source, ...] = ()) -> None:
        """Set a fact if its catalogue entry accepts the value, else record a problem (and
        drop any earlier value of it)."""
        problem = DEFAULT_CATALOGUE[name].problem(value)
        if problem is not None:
            self.problems.append(f"{name}: {problem}; not used")
            self.facts.pop(name, None)
            return
        self.facts[name] = value
        self.sources[name] = sources


def age_years(birth: date, at: date) -> float:
    """Age in whole years at ``at`` (the way ages are stated clinically)."""
    years = at.year - birth.year - ((at.month, at.day) < (birth.month, birth.day))
    return float(years)


# The measured facts as ``_measured`` reads them, looked up once: (quantity, fact name, the
# unit the catalogue presents it in, its catalogue entry, and the range inside which a float
# is accepted without asking the entry), in the catalogue's order. The range is the entry's
# own when it is finite (``FactSpec.problem`` then says None for a float inside it, as it
# would), else empty, so that every value goes to ``FactSpec.problem``.
def _accepted(spec: FactSpec) -> tuple[float, float]:
    low, high = spec.minimum, spec.maximum  # None but for a quantity (FactSpec checks)
    if low is None or high is None or not (math.isfinite(low) and math.isfinite(high)):
        return math.inf, -math.inf
    return low, high


_MEASURED_PLAN = tuple(
    (m.quantity, m.name, m.unit, DEFAULT_CATALOGUE[m.name], *_accepted(DEFAULT_CATALOGUE[m.name]))
    for m in MEASURED_FACTS
)


def _measured(out: GasFacts, patient: Patient | None, today: date) -> None:
    gas = out.gas
    values = gas.values
    facts, sources, problems = out.facts, out.sources, out.problems
    for quantity, name, unit, spec, low, high in _MEASURED_PLAN:
        m = values.get(quantity)
        if m is None:
            continue
        value = m.value if isinstance(m.value, str) else to_fact_unit(m.value, unit)
        if type(value) is float and low <= value <= high:
            facts[name] = value  # what GasFacts.set_fact does with an accepted value
            sources[name] = (m.source,)
            continue
        # GasFacts.set_fact, with the catalogue entry looked up once.
        problem = spec.problem(value)
        if problem is not None:
            problems.append(f"{name}: {problem}; not used")
            facts.pop(name, None)
            continue
        facts[name] = value
        sources[name] = (m.source,)
    facts["arterial_gas_present"] = Quantity.ARTERIAL_PO2 in values
    facts["sao2_by_cooximetry"] = Quantity.ARTERIAL_SO2 in values
    if patient is not None and patient.birth_date is not None:
        at = gas.time.date() if gas.time else today
        out.set_fact(AGE, age_years(patient.birth_date, at))


def prepare() -> None:
    """Write the derived-fact table's code now (see ``derivation.prepare_table``)."""
    prepare_table(DERIVED_FACTS, DEFAULT_CATALOGUE)


def derive_gas_facts(
    gas: PairedGas, *, patient: Patient | None, settings: Settings, today: date
) -> GasFacts:
    """Facts and derived values of one gas (no comparison with other gases)."""
    out = GasFacts(gas=gas)
    _measured(out, patient, today)
    barometric_pressure(out, settings)
    inspired_oxygen_fraction(out, settings)
    out.measured = dict(out.facts)
    out.measured_sources = dict(out.sources)
    filed, problems = compute_derived(
        DERIVED_FACTS, out.facts, out.sources, DEFAULT_CATALOGUE, settings
    )
    out.derived.update(filed)
    out.problems += problems
    out.base = _derivation(out.facts, settings)
    return out


def derive_again(
    gas: GasFacts, changes: dict[str, FactValue], *, settings: Settings
) -> dict[str, FactValue]:
    """The facts of ``gas`` derived again with some inputs changed (a scenario): ``changes``
    are facts in catalogue units (``fio2``, ``barometric_pressure``, ``age``,
    ``altitude_residence``). Problems met are not reported again.

    Only the facts that read what the changes touch are computed again (``derive_changed``),
    and each set of changes once per gas; the caller gets its own mapping."""
    base = gas.base
    if base is None or not (base.settings is settings or base.settings == settings):
        facts = {**gas.measured, **changes}
        compute_derived(DERIVED_FACTS, facts, {}, DEFAULT_CATALOGUE, settings)
        return facts
    # The key tells apart what equality would not (1.0 and True, 0.0 and -0.0); the order of
    # the changes is the order of the facts they add.
    key = tuple((name, type(value).__name__, repr(value)) for name, value in changes.items())
    found = gas.again.get(key)
    if found is None:
        found = derive_changed(
            DERIVED_FACTS,
            gas.measured,
            base.facts,
            changes,
            DEFAULT_CATALOGUE,
            settings,
            in_order=True,  # _derivation keeps the table's names in table order
        )
        if len(gas.again) >= _KEPT_SCENARIOS:
            gas.again.clear()
        gas.again[key] = found
    return dict(found)


def with_fio2_raised(gas: GasFacts, fio2: float, *, settings: Settings) -> GasFacts:
    """``gas`` as the result shows it when its PaO2 proves the FiO2 at least ``fio2``, above
    the device estimate: every value derived from the FiO2 again, and the FiO2's method saying
    why it was raised (an arterial PO2 cannot exceed the alveolar PO2)."""
    out = GasFacts(
        gas=gas.gas,
        barometric_source=gas.barometric_source,
        fio2_source=gas.fio2_source,
        fio2_range=gas.fio2_range,
        problems=list(gas.problems),
        measured={**gas.measured, "fio2": fio2},
        measured_sources=dict(gas.measured_sources),
    )
    out.facts = dict(out.measured)
    out.sources = dict(out.measured_sources)
    filed, _ = compute_derived(DERIVED_FACTS, out.facts, out.sources, DEFAULT_CATALOGUE, settings)
    out.base = _derivation(out.facts, settings)
    kept = {name: d for name, d in gas.derived.items() if name not in _FILED_NAMES}
    out.derived = {**kept, **filed}
    before = gas.derived.get("fio2")
    method = (before.method + "; " if before is not None else "") + (
        f"raised to {fio2:.2f}, the least FiO2 that gives this PaO2"
    )
    inputs = before.inputs if before is not None else ()
    out.derived["fio2"] = Derived(fio2, "1", method, inputs)
    return out
