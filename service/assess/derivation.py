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
import math
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field, replace
from functools import partial
from typing import Any

import msgspec

from service.config import Settings
from service.engine.facts import FactKind, FactOrigin, FactSpec, FactValue
from service.exceptions import PhysiologyError
from service.intake.model import Source
from service.physiology.units import from_fact_unit, to_fact_unit

from .step_code import Outcome, Run, write_step
from .table_code import TableRun, write_table

__all__ = [
    "Computed",
    "Derived",
    "DerivedFact",
    "DerivedTable",
    "FactValue",
    "compute_derived",
    "derive_changed",
    "prepare_table",
]

SETTINGS = "settings"


class Computed(msgspec.Struct, frozen=True, gc=False):
    """A computed value (canonical unit) with the method that produced it, for the result.

    A frozen msgspec Struct, as ``Derived`` below: about 20 computations a gas return one,
    and a frozen dataclass's ``__init__`` (each field set through ``object.__setattr__``) was
    several times the cost of the Struct's. It holds a number or a bool and a string, so no
    cycle can run through it (``gc=False``)."""

    value: float | bool
    method: str


class Derived(msgspec.Struct, frozen=True, gc=False):
    """A derived value for the result: value and unit as the catalogue has them, the method,
    and the observations it was computed from (``derivedFrom``).

    A frozen msgspec Struct rather than a frozen dataclass: the loop files about 26 a gas, and
    a frozen dataclass's ``__init__`` (each field set through ``object.__setattr__``) cost
    about 0.26 µs a record against 0.03 µs (``tests/assess/test_step_code.py`` compares the
    loop's records with ones built the long way). No cycles can run through it (numbers,
    strings and a tuple of ``Source``, itself a Struct without gc), hence ``gc=False``."""

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


@dataclass(frozen=True, slots=True)
class _Step:
    """One entry as the loop runs it, with everything looked up once (at plan time, never per
    call): its function, which facts it needs and reads, which of those the catalogue presents
    as percentages (divided by 100 on the way in: ``units.from_fact_unit``), whether its value
    goes out as one, and the range a quantity must lie in."""

    entry: DerivedFact
    name: str
    needed: frozenset[str]
    reads: tuple[str, ...]
    percent_reads: tuple[str, ...]
    """The facts read whose catalogue unit is ``%``."""
    unknown: frozenset[str]
    """Facts read that the catalogue lacks (an error when one of them is known)."""
    read_set: frozenset[str]
    quantity: bool
    out_percent: bool
    compute: Compute
    wants_settings: bool
    spec: FactSpec
    result: str | None
    low: float
    high: float
    """A quantity's accepted range (``FactSpec.minimum``/``maximum``): a value inside it is
    accepted without asking ``FactSpec.problem``, which says the same (it would return None)."""
    run: Run
    """``_outcome`` of this step as one function written for it (``step_code``); the general
    path itself when the entry reads a fact the catalogue lacks."""

    @property
    def needed_order(self) -> tuple[str, ...]:
        """The facts the computation needs, in its signature's order."""
        return self.spec.inputs

    @property
    def unit(self) -> str | None:
        return self.spec.unit

    @property
    def problem(self) -> Callable[[object], str | None]:
        """Why the catalogue refuses a value (None: accepted)."""
        return self.spec.problem


def _unplanned(facts: Mapping[str, FactValue], settings: Settings) -> Outcome:
    raise AssertionError("a step is run only once planned")  # pragma: no cover


def _runner(step: _Step) -> Run:
    """The function that gives ``_outcome(step, facts, settings)``."""
    if step.unknown:
        return partial(_outcome, step)
    return write_step(
        step.compute,
        Computed,
        step.spec.inputs,
        step.entry.optional,
        frozenset(step.percent_reads),
        step.wants_settings,
        step.quantity,
        step.out_percent,
        step.low,
        step.high,
        step.spec.problem,
    )


def _unplanned_table(
    facts: dict[str, Any],
    sources: dict[str, Any],
    settings: Any,
    filed: dict[str, Any],
    problems: list[str],
) -> None:
    raise AssertionError("a table is run only once planned")  # pragma: no cover


@dataclass(frozen=True, slots=True)
class _Plan:
    """The steps of one table against one catalogue."""

    steps: tuple[_Step, ...]
    names: frozenset[str]
    distinct: bool
    """Whether no two entries share a name (what re-deriving part of a table relies on)."""
    ordered: bool
    """Whether no entry reads a fact that it or a later entry sets: what lets ``derive_changed``
    start from every kept value and compute again only the entries a change reaches."""
    order: tuple[str, ...]
    """The entries' names in table order."""
    reached: dict[frozenset[str], tuple[_Step, ...]] = field(default_factory=dict)
    """For a set of changed facts, the entries that read one of them or a fact set by an
    entry that does, in table order (worked out on first use)."""
    table: TableRun = _unplanned_table
    """The whole table as one written function (``table_code``): what ``_compute`` runs."""


def _plan(entries: tuple[DerivedFact, ...], specs: Mapping[str, FactSpec]) -> _Plan:
    steps = []
    for entry in entries:
        spec = entry.spec
        unknown = frozenset(name for name in entry.reads if name not in specs)
        quantity = spec.kind is FactKind.QUANTITY
        steps.append(
            _Step(
                entry=entry,
                name=spec.name,
                needed=frozenset(spec.inputs),
                reads=entry.reads,
                percent_reads=tuple(
                    name for name in entry.reads if name not in unknown and specs[name].unit == "%"
                ),
                unknown=unknown,
                read_set=frozenset(entry.reads),
                quantity=quantity,
                out_percent=quantity and spec.unit == "%",
                compute=entry.compute,
                wants_settings=entry.wants_settings,
                spec=spec,
                result=entry.result,
                low=spec.minimum if spec.minimum is not None else math.inf,
                high=spec.maximum if spec.maximum is not None else -math.inf,
                run=_unplanned,
            )
        )
        steps[-1] = replace(steps[-1], run=_runner(steps[-1]))
    names = [step.name for step in steps]
    ordered = all(step.read_set.isdisjoint(names[index:]) for index, step in enumerate(steps))
    table = write_table(steps, Computed, Derived)
    return _Plan(
        tuple(steps),
        frozenset(names),
        len(set(names)) == len(names),
        ordered,
        tuple(names),
        {},
        table,
    )


# Plans of the tables in use, by the identity of the table (a tuple) and the catalogue, each
# kept with both so that an identity is never reused for another table.
_PLANS: dict[tuple[int, int], tuple[object, object, _Plan]] = {}


def _plan_of(entries: Iterable[DerivedFact], specs: Mapping[str, FactSpec]) -> _Plan:
    if not isinstance(entries, tuple):
        return _plan(tuple(entries), specs)
    key = (id(entries), id(specs))
    found = _PLANS.get(key)
    if found is not None and found[0] is entries and found[1] is specs:
        return found[2]
    plan = _plan(entries, specs)
    if len(_PLANS) > 16:  # tables built many times (tests): start afresh
        _PLANS.clear()
    _PLANS[key] = (entries, specs, plan)
    return plan


def _arguments(step: _Step, facts: Mapping[str, FactValue], settings: Settings) -> dict[str, Any]:
    """The known facts ``step`` reads, in canonical units (``units.from_fact_unit``), and the
    settings if it takes them."""
    if step.unknown and not step.unknown.isdisjoint(facts):
        # The first known one the table reads that the catalogue lacks, as a lookup would.
        raise KeyError(next(n for n in step.reads if n in step.unknown and n in facts))
    # A loop, not a comprehension: in Python 3.11 a comprehension is a function call.
    arguments: dict[str, Any] = {}
    for name in step.reads:
        if name in facts:
            arguments[name] = facts[name]
    for name in step.percent_reads:
        value = arguments.get(name)
        if isinstance(value, float):
            arguments[name] = from_fact_unit(value, "%")
    if step.wants_settings:
        arguments[SETTINGS] = settings
    return arguments


def _outcome(
    step: _Step, facts: Mapping[str, FactValue], settings: Settings
) -> tuple[FactValue | None, str, str | None]:
    """(value in the catalogue unit or None, method, problem) of ``step`` on ``facts``,
    whose needed facts are all known."""
    try:
        out = step.compute(**_arguments(step, facts, settings))
    except PhysiologyError as error:
        return None, "", str(error)
    if out is None:
        return None, "", None
    if isinstance(out, Computed):
        value, method = out.value, out.method
    else:
        value, method = out, ""
    if step.quantity:
        assert not isinstance(value, bool)
        value = float(value)
        if step.out_percent:
            value = to_fact_unit(value, "%")
        if step.low <= value <= step.high:
            return value, method, None
    problem = step.spec.problem(value)
    if problem is not None:
        return None, method, f"{problem}; not used"
    return value, method, None


def prepare_table(entries: Iterable[DerivedFact], specs: Mapping[str, FactSpec]) -> None:
    """Plan and write a table now rather than on its first use (``Runtime.load`` does so for
    the service's table: writing and compiling it takes ~30 ms and ~7 MiB for a moment)."""
    _plan_of(entries, specs)


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
    return _compute(_plan_of(entries, specs), facts, sources, settings)


def _compute(
    plan: _Plan,
    facts: dict[str, FactValue],
    sources: dict[str, tuple[Source, ...]],
    settings: Settings,
) -> tuple[dict[str, Derived], list[str]]:
    filed: dict[str, Derived] = {}
    problems: list[str] = []
    plan.table(facts, sources, settings, filed, problems)
    return filed, problems


_MISSING = object()


def _same(a: object, b: object) -> bool:
    """Whether two fact values are the same value: the same type and equal, and for numbers
    the same sign of zero (a NaN is never the same, which only costs a recomputation)."""
    if type(a) is not type(b) or a != b:
        return False
    return not isinstance(a, float) or math.copysign(1.0, a) == math.copysign(
        1.0,
        b,  # type: ignore[arg-type]
    )


_KEPT_REACHES = 64  # sets of changed facts per plan: the few inputs a scenario varies


def _reached(plan: _Plan, changed: frozenset[str]) -> tuple[_Step, ...]:
    """The entries of ``plan`` that read a fact of ``changed`` or one set by such an entry,
    in table order: the only ones a change of ``changed`` can make compute anything else."""
    found = plan.reached.get(changed)
    if found is None:
        touched = set(changed)
        steps = []
        for step in plan.steps:
            if not touched.isdisjoint(step.read_set):
                touched.add(step.name)
                steps.append(step)
        found = tuple(steps)
        if len(plan.reached) >= _KEPT_REACHES:
            plan.reached.clear()
        plan.reached[changed] = found
    return found


def _again(
    plan: _Plan,
    facts: dict[str, FactValue],
    derived: Mapping[str, FactValue],
    changed: set[str],
    settings: Settings,
) -> bool:
    """Compute again, in ``facts`` (which holds every kept value), each entry that reads a
    fact of ``changed``, which grows by every fact whose value or presence that changes.
    Returns whether a fact was added that ``derived`` lacks (``facts`` is then out of order)."""
    known = facts.keys()
    added = False
    for step in _reached(plan, frozenset(changed)):
        if changed.isdisjoint(step.read_set):
            continue
        name = step.name
        before = derived.get(name, _MISSING)
        value = None
        if known >= step.needed:
            value, _, _ = step.run(facts, settings)
        if value is None:
            if before is not _MISSING:
                del facts[name]
        else:
            added = added or before is _MISSING
            facts[name] = value
        if not _same(_MISSING if value is None else value, before):
            changed.add(name)
    return added


def derive_changed(
    entries: Iterable[DerivedFact],
    measured: Mapping[str, FactValue],
    derived: Mapping[str, FactValue],
    changes: Mapping[str, FactValue],
    specs: Mapping[str, FactSpec],
    settings: Settings,
    *,
    in_order: bool = False,
) -> dict[str, FactValue]:
    """The facts ``compute_derived`` gives from ``measured`` with ``changes`` applied, given
    ``derived``, the facts it set from ``measured`` alone; problems are not reported.

    Each entry's outcome is a pure function of the facts it reads (and the settings), so only
    an entry that reads a fact whose value or presence changed is computed again; every other
    one keeps its value from ``derived``. Computing everything again gives the same facts
    (``tests/assess/test_derivation.py`` compares the two). ``in_order``: ``derived`` holds
    only names the table sets, in table order (as ``compute_derived`` sets them), so it is
    taken whole instead of name by name.
    """
    plan = _plan_of(entries, specs)
    facts = {**measured, **changes}
    if not plan.distinct or not plan.ordered or not plan.names.isdisjoint(facts):
        # An entry that overwrites an input or another entry, or reads a fact set after it:
        # no shortcut, all again.
        _compute(plan, facts, {}, settings)
        return facts
    changed = {
        name for name, value in changes.items() if not _same(measured.get(name, _MISSING), value)
    }
    # Every kept value first, in table order: an entry the change does not reach keeps its
    # own, and one it reaches is overwritten in place or dropped, which keeps the order.
    if in_order:
        facts.update(derived)
    else:
        for name in plan.order:
            if name in derived:
                facts[name] = derived[name]
    if changed and _again(plan, facts, derived, changed, settings):
        # A fact set now and not before goes where the table sets it.
        ordered = {**measured, **changes}
        for name in plan.order:
            if name in facts:
                ordered[name] = facts[name]
        return ordered
    return facts
