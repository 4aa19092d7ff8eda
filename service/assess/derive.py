"""Turn one paired gas into the facts the rules read and the derived values the result files.

The steps, in order: the measured facts (in the unit the catalogue presents them), the
barometric pressure and FiO2 with their sources (``sources``), then every entry of the
derived-fact table (``derived``) whose inputs are known. Every number is computed by
``service.physiology``; every fact is checked against its catalogue entry as it is set, so
the engine never meets a value it refuses, and a value that cannot be used is a problem the
result reports (with nothing computed from it).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date

from service.config import Settings
from service.intake.model import Patient, Quantity, Source
from service.physiology.units import to_fact_unit

from .catalogue import AGE, DEFAULT_CATALOGUE, MEASURED_FACTS
from .derivation import Derived, FactValue, compute_derived
from .derived import DERIVED_FACTS
from .pairing import PairedGas
from .sources import barometric_pressure, inspired_oxygen_fraction

__all__ = ["Derived", "FactValue", "GasFacts", "age_years", "derive_gas_facts"]


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


def _measured(out: GasFacts, patient: Patient | None, today: date) -> None:
    gas = out.gas
    for measured in MEASURED_FACTS:
        m = gas.get(measured.quantity)
        if m is None:
            continue
        value = m.value if isinstance(m.value, str) else to_fact_unit(m.value, measured.unit)
        out.set_fact(measured.name, value, (m.source,))
    out.facts["arterial_gas_present"] = Quantity.ARTERIAL_PO2 in gas.values
    out.facts["sao2_by_cooximetry"] = Quantity.ARTERIAL_SO2 in gas.values
    if patient is not None and patient.birth_date is not None:
        at = gas.time.date() if gas.time else today
        out.set_fact(AGE, age_years(patient.birth_date, at))


def derive_gas_facts(
    gas: PairedGas, *, patient: Patient | None, settings: Settings, today: date
) -> GasFacts:
    """Facts and derived values of one gas (no comparison with other gases)."""
    out = GasFacts(gas=gas)
    _measured(out, patient, today)
    barometric_pressure(out, settings)
    inspired_oxygen_fraction(out, settings)
    filed, problems = compute_derived(
        DERIVED_FACTS, out.facts, out.sources, DEFAULT_CATALOGUE, settings
    )
    out.derived.update(filed)
    out.problems += problems
    return out
