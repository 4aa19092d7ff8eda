"""The derived-fact table: each derived fact is one entry and one pure function.

An entry names the fact, its unit, its possible range, its display precision and its
description; the function computes it. The function's keyword parameters *are* its inputs:
a parameter without a default is a fact the computation needs (the catalogue's ``inputs``,
from which the verdict turns a request for a missing derived fact into requests for what can
be measured), a parameter defaulting to None is a fact read when it is known, and a parameter
named ``settings`` receives the site's ``Settings``. There is no second list to keep in step:
``tests/assess/test_derivation.py`` checks that a function reads facts only through its
parameters.

Inputs arrive in canonical physiology units (fractions, not percentages: the catalogue unit
decides, through ``units.from_fact_unit``), and the value returned is canonical too. A
function returns a number (or a bool for a boolean fact), a ``Computed`` when it also says how
(the method text filed with the result), or None when the fact does not apply to these
values (SpO2 too high to impute a PaO2 from). A ``PhysiologyError`` becomes a problem the
result reports; so does a value outside the fact's possible range, which is then not used,
and neither is anything computed from it.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

from service.config import Settings
from service.engine.facts import FactKind, FactOrigin, FactSpec, FactValue
from service.exceptions import PhysiologyError
from service.intake.model import Source
from service.physiology.units import from_fact_unit, to_fact_unit

__all__ = [
    "Computed",
    "Derived",
    "DerivedFact",
    "DerivedTable",
    "FactValue",
    "compute_derived",
]

SETTINGS = "settings"


@dataclass(frozen=True, slots=True)
class Computed:
    """A computed value (canonical unit) with the method that produced it, for the result."""

    value: float | bool
    method: str


@dataclass(frozen=True, slots=True)
class Derived:
    """A derived value for the result: value and unit as the catalogue has them, the method,
    and the observations it was computed from (``derivedFrom``)."""

    value: float
    unit: str
    method: str
    inputs: tuple[Source, ...]


Compute = Callable[..., float | bool | Computed | None]


@dataclass(frozen=True, slots=True)
class DerivedFact:
    """One derived fact: its catalogue entry, its computation, and the name it is filed under
    in the result (None: a fact for the rules only)."""

    spec: FactSpec
    compute: Compute = field(repr=False)
    optional: tuple[str, ...]
    """Facts the computation reads when they are known."""
    wants_settings: bool
    result: str | None = None

    @property
    def name(self) -> str:
        return self.spec.name

    @property
    def inputs(self) -> tuple[str, ...]:
        """Facts the computation needs (the catalogue's ``inputs``)."""
        return self.spec.inputs

    @property
    def reads(self) -> tuple[str, ...]:
        """Every fact the computation may read: needed, then optional."""
        return self.spec.inputs + self.optional


def _parameters(compute: Compute) -> tuple[tuple[str, ...], tuple[str, ...], bool]:
    """(needed facts, optional facts, wants settings) from the function's signature."""
    needed: list[str] = []
    optional: list[str] = []
    wants_settings = False
    for parameter in inspect.signature(compute).parameters.values():
        if parameter.kind is not inspect.Parameter.KEYWORD_ONLY:
            raise TypeError(f"{compute.__name__}: derived-fact parameters are keyword-only")
        if parameter.name == SETTINGS:
            wants_settings = True
        elif parameter.default is inspect.Parameter.empty:
            needed.append(parameter.name)
        elif parameter.default is None:
            optional.append(parameter.name)
        else:
            raise TypeError(f"{compute.__name__}: an optional fact defaults to None")
    return tuple(needed), tuple(optional), wants_settings


class DerivedTable:
    """The entries of one concern (gas exchange, acid-base, ...), in dependency order."""

    def __init__(self) -> None:
        self.facts: list[DerivedFact] = []

    def quantity(
        self,
        name: str,
        unit: str,
        limits: tuple[float, float],
        decimals: int,
        description: str,
        *,
        result: str | None = None,
    ) -> Callable[[Compute], DerivedFact]:
        """Register a derived quantity computed by the decorated function."""
        low, high = limits

        def register(compute: Compute) -> DerivedFact:
            needed, optional, wants_settings = _parameters(compute)
            spec = FactSpec(
                name,
                FactKind.QUANTITY,
                unit,
                description,
                low,
                high,
                decimals=decimals,
                origin=FactOrigin.DERIVED,
                inputs=needed,
                optional_inputs=optional,
            )
            entry = DerivedFact(spec, compute, optional, wants_settings, result)
            self.facts.append(entry)
            return entry

        return register

    def flag(self, name: str, description: str) -> Callable[[Compute], DerivedFact]:
        """Register a derived boolean computed by the decorated function."""

        def register(compute: Compute) -> DerivedFact:
            needed, optional, wants_settings = _parameters(compute)
            spec = FactSpec(
                name,
                FactKind.BOOLEAN,
                None,
                description,
                origin=FactOrigin.DERIVED,
                inputs=needed,
                optional_inputs=optional,
            )
            entry = DerivedFact(spec, compute, optional, wants_settings)
            self.facts.append(entry)
            return entry

        return register


def check_order(entries: Iterable[DerivedFact], known: Iterable[str]) -> None:
    """Raise ValueError unless every fact an entry reads is measured or derived before it."""
    available = set(known)
    for entry in entries:
        late = [name for name in entry.reads if name not in available]
        if late:
            raise ValueError(f"{entry.name} reads {', '.join(late)} before it is derived")
        available.add(entry.name)


def _canonical(value: FactValue, spec: FactSpec) -> FactValue:
    if isinstance(value, float):
        assert spec.unit is not None  # a quantity has a unit (FactSpec checks)
        return from_fact_unit(value, spec.unit)
    return value


def compute_derived(
    entries: Iterable[DerivedFact],
    facts: dict[str, FactValue],
    sources: dict[str, tuple[Source, ...]],
    specs: Mapping[str, FactSpec],
    settings: Settings,
) -> tuple[dict[str, Derived], list[str]]:
    """Compute every entry whose needed facts are known, in table order, into ``facts``.

    ``sources`` maps each known fact to the observations behind it and gains an entry per
    derived fact (the union over what it read). Returns the values filed in the result and
    the problems met (each ``fact: why``).
    """
    filed: dict[str, Derived] = {}
    problems: list[str] = []
    for entry in entries:
        if any(name not in facts for name in entry.inputs):
            continue
        read = [name for name in entry.reads if name in facts]
        arguments: dict[str, Any] = {name: _canonical(facts[name], specs[name]) for name in read}
        if entry.wants_settings:
            arguments[SETTINGS] = settings
        try:
            out = entry.compute(**arguments)
        except PhysiologyError as error:
            problems.append(f"{entry.name}: {error}")
            continue
        if out is None:
            continue
        value, method = (out.value, out.method) if isinstance(out, Computed) else (out, "")
        spec = entry.spec
        if spec.kind is FactKind.QUANTITY:
            assert spec.unit is not None and not isinstance(value, bool)
            value = to_fact_unit(float(value), spec.unit)
        problem = spec.problem(value)
        if problem is not None:
            problems.append(f"{entry.name}: {problem}; not used")
            continue
        facts[entry.name] = value
        used = tuple(dict.fromkeys(s for name in read for s in sources.get(name, ())))
        sources[entry.name] = used
        if entry.result is not None:  # only quantities are filed (see DerivedTable.flag)
            assert spec.unit is not None and not isinstance(value, bool)
            filed[entry.result] = Derived(value, spec.unit, method, used)
    return filed, problems
