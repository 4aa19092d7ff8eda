"""Evaluating a rule set against one mapping of facts.

A fact absent from the mapping is *missing*: leaves on it are unknown, never errors.
Facts that break the catalogue (unknown name, wrong kind, out of range, NaN) raise
`FactError` before anything is evaluated. The steps are: check the facts, run every
distinct leaf test once into the state vector, read each rule's truth from the vector,
then build the verdict from the active rules. Rationales and traces are built when read
(see `results`), so evaluation itself formats no text.
"""

from collections.abc import Mapping
from dataclasses import dataclass

from service.engine.facts import FactValue
from service.engine.logic import Truth, TruthValue
from service.engine.results import EvaluationContext, RuleResult
from service.engine.ruleset import RuleSet
from service.engine.verdict import Verdict, decide

__all__ = ["Evaluation", "evaluate"]

_TRUTH: dict[TruthValue, Truth] = {True: Truth.TRUE, False: Truth.FALSE, None: Truth.UNKNOWN}


@dataclass(frozen=True, slots=True)
class Evaluation:
    """Everything one evaluation produced."""

    ruleset: str
    """`id|version` of the rule set used."""
    content_hash: str
    """The rule set's content hash, so a result can be tied to exact files and overrides."""
    results: tuple[RuleResult, ...]
    """One result per active or testing rule, in rule-file order."""
    verdict: Verdict

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


def evaluate(ruleset: RuleSet, facts: Mapping[str, FactValue]) -> Evaluation:
    """Evaluate every active and testing rule of `ruleset` over `facts`."""
    ruleset.catalogue.check(facts)
    # A private copy: results render text later and must not see the caller's edits.
    known = dict(facts)
    states = tuple([test(known) for test in ruleset.leaf_tests])
    context = EvaluationContext(known, states, ruleset.leaves)
    truth = _TRUTH
    results = tuple(
        [
            RuleResult(rule, truth[rule.condition.truth(states)], context)
            for rule in ruleset.evaluated
        ]
    )
    return Evaluation(
        ruleset=ruleset.identity,
        content_hash=ruleset.content_hash,
        results=results,
        verdict=decide(results, known, ruleset.catalogue),
    )
