"""Per-rule results of one evaluation, with their rationale and leaf-by-leaf trace.

Rendering a sentence and building a trace for every rule on every call would cost more
than the evaluation itself, and most callers read them for a handful of rules. A
`RuleResult` therefore shares the evaluation's context (a private copy of the facts and
the state vector) and builds `rationale` and `trace` when they are read. Both are
deterministic: nothing in the context changes after evaluation.
"""

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

from service.engine.compiled import CompiledCondition
from service.engine.facts import FactValue
from service.engine.leaves import Leaf, Threshold, shown_value
from service.engine.logic import Operator, Truth, TruthValue, truth_of
from service.engine.rationale import NO_UNITS, Units
from service.engine.ruleset import Outcome, Rule

__all__ = ["EvaluationContext", "LeafTrace", "RuleResult", "TraceNode"]


@dataclass(frozen=True, slots=True)
class EvaluationContext:
    """What every result of one evaluation shares."""

    facts: Mapping[str, FactValue]
    states: Sequence[TruthValue]
    leaves: Sequence[Leaf]
    blocks: dict[str, "TraceNode"] = field(default_factory=dict, compare=False, repr=False)
    """Each named block's trace, made once per evaluation for all the rules that use it."""
    lines: dict[int, str] = field(default_factory=dict, compare=False, repr=False)
    """Each leaf's trace line after the rule's ``id@version: ``, made once per evaluation for
    all the rules that test it (blocks share leaves)."""


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
class TraceNode:
    """One node of a rule's condition as evaluated: its kind, its value and its parts.

    ``kind`` is ``all``, ``any``, ``not``, ``definitely``, ``ref`` (a named block of the
    manifest, ``name`` says which) or ``leaf`` (``leaf`` holds what it saw). The tree shows why
    an ``all`` is unknown (a part is unknown and none is false) or an ``any`` is true.
    """

    kind: str
    state: Truth
    children: tuple["TraceNode", ...] = ()
    name: str | None = None
    leaf: LeafTrace | None = None
    text: str = ""
    """A leaf as a trace line shows it: ``arterial_pco2 65 mm[Hg] > 45 mm[Hg] (limit)``."""


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

    def rationale_in(self, units: Units = NO_UNITS) -> str:
        """The rationale with numbers shown in ``units`` (see ``rationale.DisplayUnit``)."""
        return self.rule.rationale.render(self.context.facts, units)

    @property
    def tree(self) -> TraceNode:
        """The rule's condition as a tree of evaluated nodes, blocks named, as written."""
        return self._node(self.rule.condition)

    def _node(self, node: CompiledCondition) -> TraceNode:
        states = self.context.states
        if node.kind == "leaf" and node.leaf is not None:
            leaf = self.context.leaves[node.leaf]
            trace = self._leaf_trace(node.leaf)
            value = trace.value
            seen = "missing" if value is None else f"{shown_value(value)}{leaf.shown_unit}"
            text = f"{leaf.fact} {seen} {leaf.shown_test}"
            return TraceNode("leaf", trace.state, leaf=trace, text=text)
        if node.kind == "ref" and node.name is not None:
            made = self.context.blocks.get(node.name)
            if made is None:
                children = tuple(self._node(part) for part in node.parts)
                made = TraceNode("ref", truth_of(node.truth(states)), children, node.name)
                self.context.blocks[node.name] = made
            return made
        children = tuple(self._node(part) for part in node.parts)
        return TraceNode(node.kind, truth_of(node.truth(states)), children, node.name)

    def _leaf_trace(self, index: int) -> LeafTrace:
        leaf = self.context.leaves[index]
        value = self.context.facts.get(leaf.fact)
        return LeafTrace(
            fact=leaf.fact,
            operator=leaf.operator,
            threshold=leaf.threshold,
            parameters=leaf.parameters,
            unit=leaf.unit,
            value=value,
            state=truth_of(self.context.states[index]),
            missing=leaf.fact if value is None else None,
        )

    @property
    def trace(self) -> tuple[LeafTrace, ...]:
        """Every leaf of the rule's condition (blocks expanded), in written order."""
        return tuple(self._leaf_trace(index) for index in self.rule.condition.leaves)

    @property
    def trace_lines(self) -> tuple[str, ...]:
        """One line per condition: ``id@version: fact value op threshold → state``."""
        context = self.context
        made = context.lines
        written = self.rule.condition.leaves
        for index in written:
            if index not in made:
                leaf = context.leaves[index]
                fact = leaf.fact
                value = context.facts.get(fact)
                after, missing = leaf.traced[context.states[index]]  # the fixed text, made once
                if value is None:
                    made[index] = missing
                elif type(value) is float:  # ``shown_value`` of a float, direct
                    made[index] = f"{fact} {value:.4g}{after}"
                else:
                    made[index] = f"{fact} {shown_value(value)}{after}"
        prefix = self.rule.trace_prefix
        return tuple([prefix + made[index] for index in written])

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
