"""Per-rule results of one evaluation, with their rationale and leaf-by-leaf trace.

Rendering a sentence and building a trace for every rule on every call would cost more
than the evaluation itself, and most callers read them for a handful of rules. A
`RuleResult` therefore shares the evaluation's context (a private copy of the facts and
the state vector) and builds `rationale` and `trace` when they are read. Both are
deterministic: nothing in the context changes after evaluation.
"""

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

from service.engine.facts import FactValue
from service.engine.leaves import Leaf, Threshold, shown_value
from service.engine.logic import Operator, Truth, TruthValue, truth_of
from service.engine.ruleset import Outcome, Rule

__all__ = ["EvaluationContext", "LeafTrace", "RuleResult"]


@dataclass(frozen=True, slots=True)
class EvaluationContext:
    """What every result of one evaluation shares."""

    facts: Mapping[str, FactValue]
    states: Sequence[TruthValue]
    leaves: Sequence[Leaf]


@dataclass(frozen=True, slots=True)
class LeafTrace:
    """What one leaf saw and concluded."""

    fact: str
    operator: Operator
    threshold: Threshold
    parameters: tuple[str, ...]
    """Parameters the threshold came from, if any."""
    unit: str | None
    value: FactValue | None
    """The fact's value, or None when it was missing."""
    state: Truth
    missing: str | None
    """The fact's name when it was missing (a leaf other than `present` is then unknown)."""


@dataclass(frozen=True, slots=True)
class RuleResult:
    """The outcome of one rule in one evaluation."""

    rule: Rule
    state: Truth
    context: EvaluationContext = field(repr=False, compare=False)

    @property
    def ref(self) -> str:
        """`id@version` of the rule."""
        return self.rule.ref

    @property
    def shadow(self) -> bool:
        """True for `testing` rules: reported, never part of the verdict."""
        return self.rule.shadow

    @property
    def outcome(self) -> Outcome:
        """What the rule asserts when it fires."""
        return self.rule.outcome

    @property
    def rationale(self) -> str:
        """The rule's rationale with this evaluation's values and units filled in."""
        return self.rule.rationale.render(self.context.facts)

    @property
    def trace(self) -> tuple[LeafTrace, ...]:
        """Every leaf of the rule's condition (blocks expanded), in written order."""
        facts, states, leaves = self.context.facts, self.context.states, self.context.leaves
        traces: list[LeafTrace] = []
        for index in self.rule.condition.leaves:
            leaf = leaves[index]
            value = facts.get(leaf.fact)
            traces.append(
                LeafTrace(
                    fact=leaf.fact,
                    operator=leaf.operator,
                    threshold=leaf.threshold,
                    parameters=leaf.parameters,
                    unit=leaf.unit,
                    value=value,
                    state=truth_of(states[index]),
                    missing=leaf.fact if value is None else None,
                )
            )
        return tuple(traces)

    @property
    def trace_lines(self) -> tuple[str, ...]:
        """One line per condition: ``id@version: fact value op threshold → state``."""
        facts, states, leaves = self.context.facts, self.context.states, self.context.leaves
        ref = self.rule.ref
        lines = []
        for index in self.rule.condition.leaves:
            leaf = leaves[index]
            value = facts.get(leaf.fact)
            seen = "missing" if value is None else f"{shown_value(value)}{leaf.shown_unit}"
            state = truth_of(states[index]).value
            lines.append(f"{ref}: {leaf.fact} {seen} {leaf.shown_test} → {state}")
        return tuple(lines)

    @property
    def missing(self) -> tuple[str, ...]:
        """Facts tested by this rule that were missing, in written order."""
        leaves, facts = self.context.leaves, self.context.facts
        names = (leaves[index].fact for index in self.rule.condition.leaves)
        return tuple(dict.fromkeys(name for name in names if name not in facts))

    @property
    def undecided(self) -> tuple[str, ...]:
        """Missing facts that keep this rule unknown; empty unless the state is unknown.

        Facts under a part that is already decided are left out: knowing them could not
        change the rule's state.
        """
        indices = self.rule.condition.undecided(self.context.states)
        if not indices:
            return ()
        leaves = self.context.leaves
        written = (index for index in self.rule.condition.leaves if index in indices)
        return tuple(dict.fromkeys(leaves[index].fact for index in written))
