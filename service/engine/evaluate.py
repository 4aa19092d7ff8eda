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

__all__ = ["Evaluation", "RuleRun", "evaluate", "run_rules"]


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
    return run_rules(ruleset, facts).decided(input_errors)


class RuleRun:
    """The first half of an evaluation: the facts checked and stated, every leaf test run.

    `decided` builds the verdict from it. Two runs whose leaves came out the same over the
    same set of known facts have the same rule states, the same undecided facts and so the
    same grades, findings, statuses and data requests (`decide_states` reads the facts' names
    only, never their values): only the numbers in their rationales and traces differ
    (`same_states` says when; `scenarios.evaluate_scenarios` uses it).
    """

    __slots__ = ("known", "leaf_states", "node_states", "rule_states", "ruleset", "sent")

    def __init__(
        self, ruleset: RuleSet, facts: Mapping[str, FactValue], like: "RuleRun | None" = None
    ) -> None:
        # Checked, and a private copy (results render text later and must not see the
        # caller's edits), with every number a rule compares at its stated precision: rules
        # compare values as stated (a rationale rounds the numbers it shows itself).
        self.ruleset = ruleset
        catalogue, compared = ruleset.catalogue, ruleset.compared
        # The facts as sent, a private copy: a run made ``like`` this one reads them again.
        self.sent: dict[str, FactValue] = dict(facts)
        if like is not None and like.ruleset is ruleset:
            known = catalogue.restated(self.sent, compared, like.sent, like.known)
        else:
            known = catalogue.stated(self.sent, compared)
        self.known: dict[str, FactValue] = known  # type: ignore[assignment]
        self.leaf_states, self.rule_states, self.node_states = ruleset.program.run(known)

    def same_states(self, other: "RuleRun") -> bool:
        """Whether `other` ran the same rule set to the same leaf states over the same set
        of known facts (see the class docstring)."""
        return (
            self.ruleset is other.ruleset
            and self.leaf_states == other.leaf_states
            and self.known.keys() == other.known.keys()
        )

    def decided(self, input_errors: Sequence[str] = (), *, ask: bool = True) -> Evaluation:
        """The evaluation: results (made when read) and the verdict (without its data
        requests when ``ask`` is false, see `decide_states`)."""
        ruleset, program = self.ruleset, self.ruleset.program
        known, leaf_states, node_states = self.known, self.leaf_states, self.node_states
        states = BlockStates(leaf_states)
        results = _Results(
            ruleset.evaluated, self.rule_states, EvaluationContext(known, states, ruleset.leaves)
        )

        def undecided_of(position: int) -> tuple[str, ...]:
            return program.undecided(position, leaf_states, node_states)

        verdict = decide_states(
            ruleset.verdict_plan,
            self.rule_states,
            results,
            known,
            ruleset.catalogue,
            input_errors,
            undecided_of,
            ask=ask,
        )
        return Evaluation(ruleset.identity, ruleset.content_hash, verdict, results)


def run_rules(
    ruleset: RuleSet, facts: Mapping[str, FactValue], *, like: RuleRun | None = None
) -> RuleRun:
    """Check and state `facts` and run every leaf test of `ruleset` (see `RuleRun`).

    With ``like``, an earlier run of the same rule set whose facts these mostly repeat (a
    scenario of the representative's), only the facts that differ from its are checked and
    rounded again (``FactCatalogue.restated``); the run is the same either way."""
    return RuleRun(ruleset, facts, like)
