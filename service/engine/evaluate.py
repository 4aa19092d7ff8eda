"""Evaluating a rule set against one mapping of facts.

A fact absent from the mapping is *missing*: leaves on it are unknown, never errors.
Facts that break the catalogue (unknown name, wrong kind, out of range, NaN) raise
`FactError` before anything is evaluated. The steps are: check the facts, run every
distinct leaf test once into the state vector, read each rule's truth from the vector,
then build the verdict from the active rules. Rationales and traces are built when read
(see `results`), and so is each rule's `RuleResult`: the verdict asks only for the rules
it cites or asks about, `Evaluation.results` makes the rest when it is first read.
"""

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

from service.engine.compiled import BlockStates
from service.engine.facts import FactValue
from service.engine.logic import TruthValue, truth_of
from service.engine.results import EvaluationContext, RuleResult
from service.engine.ruleset import Rule, RuleSet
from service.engine.verdict import Verdict, decide_states

__all__ = ["Evaluation", "evaluate"]


_TRUTH = {value: truth_of(value) for value in (True, False, None)}


class _Results:
    """The results of one evaluation, each made once, when first asked for."""

    __slots__ = ("_all", "_context", "_made", "_rules", "_states")

    def __init__(
        self, rules: Sequence[Rule], states: Sequence[TruthValue], context: EvaluationContext
    ) -> None:
        self._rules, self._states, self._context = rules, states, context
        self._made: list[RuleResult | None] = [None] * len(rules)
        self._all: tuple[RuleResult, ...] | None = None

    def __call__(self, position: int) -> RuleResult:
        made = self._made[position]
        if made is None:
            state = _TRUTH[self._states[position]]
            made = self._made[position] = RuleResult(self._rules[position], state, self._context)
        return made

    def all(self) -> tuple[RuleResult, ...]:
        if self._all is None:
            self._all = tuple([self(position) for position in range(len(self._made))])
        return self._all

    def __eq__(self, other: object) -> bool:
        return isinstance(other, _Results) and self.all() == other.all()

    def __hash__(self) -> int:
        return hash(self.all())

    def __repr__(self) -> str:
        return repr(self.all())


@dataclass(frozen=True, slots=True)
class Evaluation:
    """Everything one evaluation produced."""

    ruleset: str
    """`id|version` of the rule set used."""
    content_hash: str
    """The rule set's content hash, so a result can be tied to exact files and overrides."""
    verdict: Verdict
    _results: _Results = field(repr=False)

    @property
    def results(self) -> tuple[RuleResult, ...]:
        """One result per active or testing rule, in rule-file order."""
        return self._results.all()

    def result(self, rule_id: str) -> RuleResult:
        """The result of the rule with this id (KeyError if it was not evaluated)."""
        for result in self.results:
            if result.rule.id == rule_id:
                return result
        raise KeyError(rule_id)

    @property
    def shadow_results(self) -> tuple[RuleResult, ...]:
        """Results of `testing` rules, which never affect the verdict."""
        return tuple(result for result in self.results if result.shadow)


def evaluate(
    ruleset: RuleSet, facts: Mapping[str, FactValue], *, input_errors: Sequence[str] = ()
) -> Evaluation:
    """Evaluate every active and testing rule of `ruleset` over `facts`.

    `input_errors` are the codes of error findings met before the rules (values the input
    reader refused): like a fired error finding, they make the verdict not classifiable.
    """
    # Checked, and a private copy (results render text later and must not see the caller's
    # edits), with every number a rule compares at its stated precision: rules compare values
    # as stated (a rationale rounds the numbers it shows itself).
    known: dict[str, FactValue] = ruleset.catalogue.stated(facts, ruleset.compared)  # type: ignore[assignment]
    program = ruleset.program
    leaf_states, rule_states, node_states = program.run(known)
    states = BlockStates(leaf_states)
    results = _Results(
        ruleset.evaluated, rule_states, EvaluationContext(known, states, ruleset.leaves)
    )

    def undecided_of(position: int) -> tuple[str, ...]:
        return program.undecided(position, leaf_states, node_states)

    verdict = decide_states(
        ruleset.verdict_plan,
        rule_states,
        results,
        known,
        ruleset.catalogue,
        input_errors,
        undecided_of,
    )
    return Evaluation(ruleset.identity, ruleset.content_hash, verdict, results)
