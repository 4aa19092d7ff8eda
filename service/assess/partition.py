"""The PaO2 deficit partition of each gas, as every surface shows it (FHIR, HL7 v2, text, HTML).

A gas has one partition, read from its derived facts (``deficit``): the PaO2 expected for age at
sea level on air, and the fall from it split into inspired PO2, ventilation, gas exchange and an
unattributed rest (``service.physiology.deficit``). When the one thing missing is whether the
patient lives at the altitude of the gas — the PaCO2 expected there depends on it, and the
assessment has evaluated both (``uncertainty``) — the gas has one partition per residence, each
labelled with its assumption: the facts the rules read in those scenarios (``derive_again``),
never a guess between them. Otherwise it has none, and ``absent_reason`` says why.

The steps of the waterfall, the parts shown and their order come from
``service.physiology.deficit_steps``; the labels and the method text are here, once.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

from service.config import Settings
from service.intake.model import Source
from service.physiology import reference as ref
from service.physiology.deficit import DeficitPartition
from service.physiology.deficit_steps import (
    GAS_EXCHANGE,
    INSPIRED,
    UNATTRIBUTED,
    VENTILATION,
    Step,
    shown_parts,
    waterfall,
)

from . import deficit as deficit_facts
from .derivation import FactValue
from .derive import GasFacts, derive_again
from .result import Assessment

__all__ = [
    "PART_LABELS",
    "PART_MEANINGS",
    "GasPartitions",
    "ShownPartition",
    "absent_reason",
    "assessment_partitions",
    "partitions",
]

PART_LABELS = {
    INSPIRED: "inspired PO2",
    VENTILATION: "ventilation",
    GAS_EXCHANGE: "gas exchange",
    UNATTRIBUTED: "unattributed",
}
PART_MEANINGS = {
    INSPIRED: "the setting: altitude and FiO2 (negative: an oxygen credit)",
    VENTILATION: "PaCO2 above (negative: below) the value expected for the setting",
    GAS_EXCHANGE: "A-a gradient above the normal for age at this alveolar PO2",
    UNATTRIBUTED: "ventilation and gas exchange together: no PaCO2 to tell them apart",
}
_RESIDENCES = tuple(r.value for r in ref.Residence)
RESIDENCE_WORDS = {
    ref.Residence.RESIDENT.value: "if the patient lives at this altitude",
    ref.Residence.VISITOR.value: "if the patient has come from lower down",
}
# The facts of one partition, as ``service.assess.deficit`` and ``normals`` name them.
_PARTS = {
    INSPIRED: "deficit_inspired",
    VENTILATION: "deficit_ventilation",
    GAS_EXCHANGE: "deficit_gas_exchange",
    UNATTRIBUTED: "deficit_unattributed",
}
# What the partition reads (``deficit.pao2_fall``'s inputs and optional facts): the sources of
# a partition computed for an assumed residence.
_READS = next(entry.reads for entry in deficit_facts.FACTS if entry.name == "pao2_fall")


@dataclass(frozen=True, slots=True)
class ShownPartition:
    """One partition of one gas, with what it assumed and where its numbers came from."""

    partition: DeficitPartition
    residence: str | None
    """The residence assumed (``resident``/``visitor``), None when the data settled it or it
    does not matter."""
    imputed: bool
    """Whether the PaO2 was imputed from SpO2 (no arterial PO2 measured)."""
    lower_limit_mmhg: float | None
    method: str
    inputs: tuple[Source, ...]

    @property
    def parts(self) -> tuple[tuple[str, float], ...]:
        """(key, mm[Hg]) of each part shown, in order; positive lowers the PaO2."""
        return shown_parts(self.partition)

    @property
    def steps(self) -> tuple[Step, ...]:
        """The waterfall from the expected PaO2 to the measured PaO2."""
        return waterfall(self.partition)

    @property
    def assumption(self) -> str | None:
        """The assumption in words, or None."""
        return None if self.residence is None else RESIDENCE_WORDS[self.residence]

    @property
    def pao2_label(self) -> str:
        return "PaO2 imputed from SpO2" if self.imputed else "PaO2"

    def share(self, part: float) -> float | None:
        """``part`` as a fraction of everything that lowers the PaO2 (None: nothing does)."""
        return self.partition.share(part)


@dataclass(frozen=True, slots=True)
class GasPartitions:
    """The partitions of one assessed gas (empty: none, ``absent`` says why)."""

    gas: GasFacts
    index: bool
    shown: tuple[ShownPartition, ...]
    absent: str | None

    @property
    def reference(self) -> str | None:
        """The gas's PaO2 Observation, when it has one."""
        anchor = self.gas.gas.anchor
        return None if anchor is None else anchor.source.reference


def _number(facts: dict[str, FactValue], name: str) -> float | None:
    value = facts.get(name)
    return value if isinstance(value, float) else None


def _partition(facts: dict[str, FactValue]) -> DeficitPartition | None:
    expected, fall = _number(facts, "pao2_expected"), _number(facts, "pao2_fall")
    inspired = _number(facts, _PARTS[INSPIRED])
    unattributed = _number(facts, _PARTS[UNATTRIBUTED])
    if expected is None or fall is None or inspired is None or unattributed is None:
        return None
    return DeficitPartition(
        expected_pao2=expected,
        arterial_po2=expected - fall,
        inspired=inspired,
        ventilation=_number(facts, _PARTS[VENTILATION]),
        gas_exchange=_number(facts, _PARTS[GAS_EXCHANGE]),
        unattributed=unattributed,
    )


def _method(gas: GasFacts, facts: dict[str, FactValue], settings: Settings) -> str:
    imputed = "arterial_po2" not in facts
    expected = gas.derived.get("pao2-expected")
    residence = facts.get("altitude_residence")
    return _method_text(
        imputed,
        expected.method if expected is not None else "",
        _number(facts, "barometric_pressure"),
        residence if isinstance(residence, str) else None,
        "arterial_pco2" not in facts or imputed,
        settings.respiratory_quotient,
    )


@lru_cache(maxsize=256)
def _method_text(
    imputed: bool,
    expected_method: str,
    pb: float | None,
    residence: str | None,
    no_paco2: bool,
    respiratory_quotient: float,
) -> str:
    """The method of a partition in words, from all it depends on: kept, as the gases of one
    site share a few (writing it, with the expected PaCO2's source, cost more than the rest of
    the partition)."""
    used = "PaO2 imputed from SpO2 (Brown 2016)" if imputed else "PaO2"
    reference = f" ({expected_method})" if expected_method else ""
    paco2 = ""
    if pb is not None:
        who = ref.Residence(residence) if residence is not None else ref.Residence.RESIDENT
        paco2 = f" ({ref.expected_paco2(barometric_mmhg=pb, residence=who).method})"
    rest = (
        "; without a PaCO2, ventilation and gas exchange are reported together as unattributed"
        if no_paco2
        else ""
    )
    return (
        f"PaO2 deficit partition: the fall of the {used} below the PaO2 expected for age at sea "
        f"level on air{reference}, split through the full alveolar gas equation "
        f"(R {respiratory_quotient:g}) into inspired PO2 (altitude, FiO2), PaCO2 above "
        f"the value expected for the setting{paco2}, and A-a gradient above the normal for age "
        "at this alveolar PO2 (healthy-lung model: Cerveri 1995 on air, healthy men on 100 % "
        f"oxygen){rest}"
    )


def _shown(
    gas: GasFacts,
    facts: dict[str, FactValue],
    residence: str | None,
    inputs: tuple[Source, ...],
    settings: Settings,
) -> ShownPartition | None:
    partition = _partition(facts)
    if partition is None:
        return None
    return ShownPartition(
        partition=partition,
        residence=residence,
        imputed="arterial_po2" not in facts,
        lower_limit_mmhg=_number(facts, "pao2_lower_limit"),
        method=_method(gas, facts, settings),
        inputs=inputs,
    )


def _read_sources(gas: GasFacts) -> tuple[Source, ...]:
    found = (s for name in _READS for s in gas.sources.get(name, ()))
    return tuple(dict.fromkeys(found))


def _residence_matters(gas: GasFacts) -> bool:
    """Whether the partition is missing only because the residence is not known."""
    facts = gas.facts
    has_pao2 = "arterial_po2" in facts or "imputed_pao2" in facts
    needed = ("pao2_expected", "fio2", "barometric_pressure", "water_vapour_pressure")
    return (
        "pao2_fall" not in facts
        and "altitude_residence" not in facts
        and has_pao2
        and all(name in facts for name in needed)
    )


def partitions(gas: GasFacts, settings: Settings) -> tuple[ShownPartition, ...]:
    """The partitions of ``gas``: one, one per residence, or none (``absent_reason``)."""
    if "pao2_fall" in gas.facts:
        fall = gas.derived.get("pao2-fall")
        inputs = fall.inputs if fall is not None else _read_sources(gas)
        found = _shown(gas, gas.facts, None, inputs, settings)
        return () if found is None else (found,)
    if not _residence_matters(gas):
        return ()
    inputs = _read_sources(gas)
    shown = []
    for residence in _RESIDENCES:
        facts = derive_again(gas, {"altitude_residence": residence}, settings=settings)
        found = _shown(gas, facts, residence, inputs, settings)
        if found is None:
            return ()
        shown.append(found)
    return tuple(shown)


def absent_reason(gas: GasFacts) -> str:
    """Why ``gas`` has no partition, in words."""
    facts = gas.facts
    if "arterial_po2" not in facts and "imputed_pao2" not in facts:
        return "no arterial PO2, and no SpO2 of 96 % or less to impute one from"
    if "age" not in facts:
        return "age not known: the expected PaO2 depends on it"
    if "fio2" not in facts:
        return "FiO2 not known: the inspired part depends on it"
    if "barometric_pressure" not in facts:
        return "barometric pressure not known"
    return "not computable from these data (see the value-out-of-range findings)"


def assessment_partitions(a: Assessment, settings: Settings) -> tuple[GasPartitions, ...]:
    """The partitions of every arterial gas, index first; the index is always there (with no
    arterial gas, its PaO2 imputed from SpO2, if any)."""
    targets = [(g.facts, g.index) for g in a.gases]
    if not any(index for _, index in targets):
        targets.insert(0, (a.index, True))
    out = []
    for gas, index in targets:
        shown = partitions(gas, settings)
        out.append(GasPartitions(gas, index, shown, None if shown else absent_reason(gas)))
    return tuple(out)
