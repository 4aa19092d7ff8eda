"""The fact catalogue: every name a rule may test, with its kind, unit and range.

A rule set is loaded against one catalogue (the default rule set's is assembled outside the
engine, in ``service.assess.catalogue``, from the tables that own each fact); references to
names outside it, unit mismatches and unknown codes are load errors. At evaluation time the
same catalogue checks the facts handed in, so a value in the wrong unit or of the wrong kind
cannot slip silently past a threshold.
"""

import math
from collections.abc import Iterable, Iterator, Mapping

from service.engine.errors import FactError, FactProblem
from service.engine.facts import FactKind, FactOrigin, FactSpec

__all__ = [
    "FactCatalogue",
    "FactKind",
    "FactOrigin",
    "FactSpec",
    "catalogue_markdown",
]


KEPT_SETS = 256
"""How many sets of known facts a catalogue keeps data-request answers for."""


class FactCatalogue(Mapping[str, FactSpec]):
    """An immutable mapping of fact name to `FactSpec`."""

    __slots__ = (
        "_booleans",
        "_codes",
        "_decimals",
        "_needs",
        "_order",
        "_quantities",
        "_ranges",
        "_requests",
        "_specs",
        "_tables",
    )

    def __init__(self, specs: Iterable[FactSpec]) -> None:
        table: dict[str, FactSpec] = {}
        for spec in specs:
            if spec.name in table:
                raise ValueError(f"fact {spec.name} is defined twice in the catalogue")
            table[spec.name] = spec
        for spec in table.values():
            unknown = [name for name in spec.inputs if name not in table]
            if unknown:
                raise ValueError(f"fact {spec.name} lists unknown inputs: {', '.join(unknown)}")
        self._specs = table
        self._order = {name: position for position, name in enumerate(table)}
        # What `check` lets through without asking the spec: a number inside finite bounds,
        # a bool for a boolean fact, an allowed code. Anything else gets the spec's answer.
        self._ranges = {
            spec.name: (spec.minimum, spec.maximum)
            for spec in table.values()
            if spec.kind is FactKind.QUANTITY
            and spec.minimum is not None
            and spec.maximum is not None
            and math.isfinite(spec.minimum)
            and math.isfinite(spec.maximum)
        }
        self._decimals = {n: s.decimals for n, s in table.items() if s.kind is FactKind.QUANTITY}
        self._booleans = frozenset(n for n, s in table.items() if s.kind is FactKind.BOOLEAN)
        self._codes = {n: s.allowed for n, s in table.items() if s.kind is FactKind.CODE}
        # `stated`'s quick path: a number's bounds and decimals in one look-up.
        self._quantities: dict[str, tuple[float, float, int | None]] = {
            n: (*bounds, self._decimals[n]) for n, bounds in self._ranges.items()
        }
        self._tables: dict[frozenset[str], dict[str, tuple[float, float, int | None]]] = {}
        self._requests: dict[tuple[str, ...], dict[str, tuple[str, ...]]] = {}
        self._needs = {
            spec.name: (spec.inputs, spec.optional_inputs)
            for spec in table.values()
            if spec.inputs or spec.optional_inputs
        }

    def __getitem__(self, name: str) -> FactSpec:
        return self._specs[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self._specs)

    def __len__(self) -> int:
        return len(self._specs)

    def __repr__(self) -> str:
        return f"FactCatalogue({len(self._specs)} facts)"

    def position(self, name: str) -> int:
        """Where `name` stands in catalogue order (for stable, readable listings)."""
        return self._order[name]

    @property
    def positions(self) -> Mapping[str, int]:
        """`position` of every fact, as a mapping (a sort key without a call per item)."""
        return self._order

    def as_stated(self, facts: Mapping[str, object]) -> dict[str, object]:
        """The facts with every number rounded to its stated precision (``decimals``).

        Rules compare a value as it is stated, never its binary noise: 6.0 kPa is 45.004 mmHg
        after conversion and must not cross a "> 45 mmHg" line; a fall from 0.94 to 0.90 is
        3.9999 points and must meet a "≥ 4 points" one. Rationales show the same rounding.
        """
        decimals = self._decimals
        return {
            name: round(value, decimals[name])
            if type(value) is float and name in decimals
            else value
            for name, value in facts.items()
        }

    def check(self, facts: Mapping[str, object]) -> None:
        """Raise `FactError` listing every fact that is unknown or breaks its spec.

        Absent facts are fine (they are *missing*); `None` is rejected rather than read as
        missing so that the caller's intent stays explicit: leave the name out instead.
        """
        ranges, booleans, codes = self._ranges, self._booleans, self._codes
        for name, value in facts.items():
            kind = type(value)
            if kind is float or kind is int:
                bounds = ranges.get(name)
                if bounds is not None and bounds[0] <= value <= bounds[1]:  # type: ignore[operator]
                    continue
            elif kind is bool:
                if name in booleans:
                    continue
            elif kind is str:
                allowed = codes.get(name)
                if allowed is not None and value in allowed:
                    continue
            self._raise_problems(facts)

    @property
    def needs(self) -> Mapping[str, tuple[tuple[str, ...], tuple[str, ...]]]:
        """``inputs`` and ``optional_inputs`` of every fact that has any, by name."""
        return self._needs

    def stated(
        self, facts: Mapping[str, object], compared: frozenset[str] | None = None
    ) -> dict[str, object]:
        """``check`` the facts, then return them ``as_stated``: one pass, one look-up a fact.

        A private copy in either case; the value ``check`` lets through and ``as_stated``
        rounds are the same (``tests/engine/test_catalogue_stated.py`` compares them). With
        ``compared``, only the numbers of those facts are rounded (a rule set's tested facts:
        a rationale rounds what it shows itself, so rounding the rest here would be wasted).
        """
        quantities = self._quantities if compared is None else self._rounding(compared)
        booleans, codes = self._booleans, self._codes
        stated: dict[str, object] = {}
        for name, value in facts.items():
            kind = type(value)
            if kind is float or kind is int:
                found = quantities.get(name)
                if found is not None and found[0] <= value <= found[1]:  # type: ignore[operator]
                    if kind is float and found[2] is not None:  # an int is stated as it is
                        value = round(value, found[2])  # type: ignore[call-overload]
                    stated[name] = value
                    continue
            elif kind is bool:
                if name in booleans:
                    stated[name] = value
                    continue
            elif kind is str:
                allowed = codes.get(name)
                if allowed is not None and value in allowed:
                    stated[name] = value
                    continue
            self._raise_problems(facts)
            # No problem after all (a quantity with an open bound): stated as `as_stated` has it.
            stated.update(self.as_stated({name: value}))
        return stated

    def restated(
        self,
        facts: Mapping[str, object],
        compared: frozenset[str] | None,
        before: Mapping[str, object],
        stated_before: Mapping[str, object],
    ) -> dict[str, object]:
        """``stated(facts, compared)`` for facts that mostly repeat ``before``, which
        ``stated(before, compared)`` turned into ``stated_before``: a value that is the very
        object ``before`` holds under its name was checked and rounded there, so its stated
        value is taken from ``stated_before``; only the others are checked and rounded again
        (a scenario of uncertain inputs changes a dozen facts of seventy). The same mapping,
        in the same order, and the same error as ``stated`` (a fact taken from ``before``
        passed its checks: every problem is among the others)."""
        out: dict[str, object] = {}
        fresh: dict[str, object] = {}
        seen = before.get
        for name, value in facts.items():
            if seen(name) is value:  # never None: ``stated`` refuses a None value
                out[name] = stated_before[name]
            else:
                out[name] = fresh[name] = value
        if fresh:
            out.update(self.stated(fresh, compared))  # every key is in ``out``: order kept
        return out

    def kept_requests(self, known: tuple[str, ...]) -> dict[str, tuple[str, ...]]:
        """A place to keep, for the known facts named in ``known``, what a data request for
        each missing fact turns into (``data_requests``: a function of which facts are known
        alone). Bounded: past ``KEPT_SETS`` sets it starts afresh."""
        kept = self._requests.get(known)
        if kept is None:
            if len(self._requests) >= KEPT_SETS:
                self._requests.clear()
            kept = self._requests[known] = {}
        return kept

    def _rounding(self, compared: frozenset[str]) -> Mapping[str, tuple[float, float, int | None]]:
        """``stated``'s table for ``compared``: decimals only for the facts in it (made once)."""
        table = self._tables.get(compared)
        if table is None:
            table = self._tables[compared] = {
                name: (low, high, decimals if name in compared else None)
                for name, (low, high, decimals) in self._quantities.items()
            }
        return table

    def _raise_problems(self, facts: Mapping[str, object]) -> None:
        """Raise `FactError` with every problem (the checks of `FactSpec.problem`)."""
        problems: list[FactProblem] = []
        specs = self._specs
        for name, value in facts.items():
            spec = specs.get(name)
            if spec is None:
                problems.append(FactProblem(name, "not in the fact catalogue"))
                continue
            if value is None:
                problems.append(FactProblem(name, "None given; leave a missing fact out"))
                continue
            message = spec.problem(value)
            if message is not None:
                problems.append(FactProblem(name, message))
        if problems:
            raise FactError(problems)


def _range(spec: FactSpec) -> str:
    if spec.kind is FactKind.QUANTITY:
        return f"{spec.minimum:g} to {spec.maximum:g}"
    if spec.kind is FactKind.CODE:
        return ", ".join(f"`{code}`" for code in sorted(spec.allowed))
    return "true, false"


def catalogue_markdown(catalogue: FactCatalogue) -> str:
    """Render the catalogue as a Markdown table, in catalogue order, for documentation."""
    lines = [
        "| Fact | Kind | Unit (UCUM) | Accepted values | Origin | Description |",
        "| --- | --- | --- | --- | --- | --- |",
    ]
    for spec in catalogue.values():
        unit = f"`{spec.unit}`" if spec.unit else ""
        description = spec.description.replace("|", "\\|")
        if spec.inputs:
            description += " (needs " + ", ".join(f"`{name}`" for name in spec.inputs) + ")"
        lines.append(
            f"| `{spec.name}` | {spec.kind} | {unit} | {_range(spec)} | {spec.origin} "
            f"| {description} |"
        )
    return "\n".join(lines) + "\n"
