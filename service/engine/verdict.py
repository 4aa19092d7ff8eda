"""From rule results to a verdict: grades, findings, hypoxaemia, pattern, data requested.

Only active rules count; `testing` rules are shadow-evaluated and reported only.

* Each mechanism takes the grade of the fired rule with the lowest priority. Rules that
  tie at that priority agree on the grade (the loader guarantees it) and are listed
  together. A rule may itself grade `not-assessable` (saying why in its rationale); a
  mechanism no rule fired for is `not-assessable` too, naming the missing facts.
* Hypoxaemia is `present` if a fired rule says so, else `absent` if one says that, else
  `unknown`. Present wins a conflict because wrongly reassuring is the worse error. Gas
  exchange is decided the same way: `defect` wins over `normal`.
* The pattern is `not-classifiable` when an error finding fired or neither
  `arterial_po2` nor `spo2` is known; then no grade may stay `likely`: it is demoted to
  `possible` and its rationale says why. Otherwise `no-hypoxaemia` when hypoxaemia is
  absent and nothing is likely; `single` when one mechanism is likely and it explains the
  gas exchange too (it is a gas-exchange mechanism, or gas exchange is normal); `mixed`
  when two or more are likely, or one beside a gas-exchange defect (or a gas exchange that
  could not be judged) whose type is still open; else `indeterminate`.
* Data requested joins the discriminator requests of `possible` grades (known or not:
  they ask for a new value) and, for each `not-assessable` mechanism, the missing facts
  that keep its unknown rules undecided. A missing derived fact is replaced by its
  missing inputs, so the request names something that can be measured or recorded.
"""

from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass

from service.engine.catalogue import FactCatalogue
from service.engine.data_requests import DataRequest, DataRequests
from service.engine.facts import FactValue
from service.engine.logic import TruthValue, value_of
from service.engine.rationale import NO_UNITS, Units
from service.engine.results import RuleResult
from service.engine.ruleset import Discriminator, MechanismOutcome, VerdictPlan
from service.engine.vocabulary import (
    GasExchangeStatus,
    Grade,
    HypoxaemiaStatus,
    Mechanism,
    Pattern,
    Severity,
)

__all__ = [
    "GAS_EXCHANGE_MECHANISMS",
    "OXYGENATION_FACTS",
    "REPEAT_SAMPLE",
    "SEVERITY_RANK",
    "DataRequest",
    "FindingResult",
    "MechanismAssessment",
    "Verdict",
    "decide",
    "decide_states",
    "finding_order",
    "pattern_of",
]

OXYGENATION_FACTS = ("arterial_po2", "spo2")
"""Without at least one of these, nothing about oxygenation can be classified."""
REPEAT_SAMPLE_FACTS = ("arterial_po2", "arterial_pco2", "fio2")
"""What a not-classifiable verdict asks for when no rule asked for anything: a trusted gas."""
REPEAT_SAMPLE = Discriminator(
    "Correct the data problem named in the findings (repeat the sample if needed); the grade "
    "can then be judged on trusted data.",
    REPEAT_SAMPLE_FACTS,
)
"""What would settle a grade demoted because the data are not trusted."""

SEVERITY_RANK: Mapping[Severity, int] = {severity: rank for rank, severity in enumerate(Severity)}
"""The order findings are listed in: errors first, then warnings, then information (the order
of `Severity`)."""
# Enum member and class iteration are slow on Python 3.11; the hot path uses these.
_MECHANISMS = tuple(Mechanism)
_LIKELY, _POSSIBLE, _NOT_ASSESSABLE = Grade.LIKELY, Grade.POSSIBLE, Grade.NOT_ASSESSABLE
_PRESENT, _ABSENT = HypoxaemiaStatus.PRESENT, HypoxaemiaStatus.ABSENT
_DEFECT, _NORMAL = GasExchangeStatus.DEFECT, GasExchangeStatus.NORMAL
_NO_STATUS, _NO_EXCHANGE = HypoxaemiaStatus.UNKNOWN, GasExchangeStatus.UNKNOWN
GAS_EXCHANGE_MECHANISMS = frozenset(
    {Mechanism.VQ_MISMATCH, Mechanism.SHUNT, Mechanism.DIFFUSION_LIMITATION}
)
"""Mechanisms that themselves explain a gas-exchange defect (a raised A-a gradient)."""
_ERROR = Severity.ERROR


@dataclass(frozen=True, slots=True)
class MechanismAssessment:
    """The grade of one mechanism and the results of the rules that decided it."""

    mechanism: Mechanism
    grade: Grade
    deciding: tuple[RuleResult, ...] = ()
    """Fired rules at the winning priority (empty when not assessable)."""
    losing: tuple[RuleResult, ...] = ()
    """Rules that also fired for this mechanism at a higher (losing) priority."""
    demoted_because: str | None = None
    """Why a `likely` grade was lowered to `possible`, if it was."""
    undecided: tuple[str, ...] = ()
    """When not assessable: the missing facts that kept this mechanism's rules unknown."""
    uncertain_because: str | None = None
    """When the grade differs across the range of an uncertain input (see `scenarios`): the
    sentence saying so; the grade is then `possible`."""
    settled_by: tuple[Discriminator, ...] = ()
    """What would settle an uncertainty named in `uncertain_because`."""

    @property
    def rules(self) -> tuple[str, ...]:
        """`id@version` of the deciding rules."""
        return tuple(result.ref for result in self.deciding)

    @property
    def superseded(self) -> tuple[str, ...]:
        """`id@version` of rules that fired at a losing priority."""
        return tuple(result.ref for result in self.losing)

    @property
    def demoted(self) -> bool:
        """Whether the grade was demoted from `likely` to `possible`."""
        return self.demoted_because is not None

    @property
    def rationales(self) -> tuple[str, ...]:
        """The deciding rules' rationales, plus a sentence on any demotion; for a mechanism
        no rule decided, what was missing."""
        return self.rationales_in(NO_UNITS)

    def rationales_in(self, units: Units) -> tuple[str, ...]:
        """``rationales`` with numbers shown in ``units`` (see ``rationale.DisplayUnit``)."""
        if self.uncertain_because is not None:
            return (self.uncertain_because,)
        if self.grade is _NOT_ASSESSABLE and not self.deciding:
            if self.undecided:
                return ("Not assessable: missing " + ", ".join(self.undecided),)
            return ("Not assessable: no rule applied to these data",)
        texts = [result.rationale_in(units) for result in self.deciding]
        if self.demoted_because is not None:
            texts.append(
                "Demoted from likely to possible: the gas is not classifiable "
                f"({self.demoted_because})."
            )
        return tuple(texts)

    @property
    def discriminators(self) -> tuple[Discriminator, ...]:
        """What would settle the grade: the deciding rules' discriminators, or for a grade
        demoted on untrusted data, trusted data (``REPEAT_SAMPLE``)."""
        if self.demoted_because is not None:
            return (REPEAT_SAMPLE,)
        if self.uncertain_because is not None:
            return self.settled_by
        deciding = self.deciding
        if len(deciding) == 1:  # the usual case: one rule decided
            only = deciding[0].rule.discriminator
            return () if only is None else (only,)
        found = (result.rule.discriminator for result in deciding)
        return tuple(dict.fromkeys(item for item in found if item is not None))


@dataclass(frozen=True, slots=True)
class FindingResult:
    """A finding raised by a fired rule."""

    code: str
    """A built-in ``FindingCode`` or a code the rule set declares."""
    severity: Severity
    result: RuleResult

    @property
    def rule(self) -> str:
        """`id@version` of the rule that raised it."""
        return self.result.ref

    @property
    def rationale(self) -> str:
        """The rule's rationale with this evaluation's values."""
        return self.result.rationale

    def rationale_in(self, units: Units) -> str:
        """The rationale with numbers shown in ``units``."""
        return self.result.rationale_in(units)


@dataclass(frozen=True, slots=True)
class Verdict:
    """The engine's answer for one set of facts."""

    pattern: Pattern
    pattern_reason: str
    hypoxaemia: HypoxaemiaStatus
    hypoxaemia_rules: tuple[str, ...]
    mechanisms: tuple[MechanismAssessment, ...]
    """One assessment per mechanism, in `Mechanism` order."""
    findings: tuple[FindingResult, ...]
    """Fired findings, errors first."""
    data_requested: tuple[DataRequest, ...]
    """In catalogue order."""
    gas_exchange: GasExchangeStatus = GasExchangeStatus.UNKNOWN
    gas_exchange_rules: tuple[str, ...] = ()

    def assessment(self, mechanism: Mechanism) -> MechanismAssessment:
        """The assessment of one mechanism."""
        return next(item for item in self.mechanisms if item.mechanism is mechanism)

    def grade(self, mechanism: Mechanism) -> Grade:
        """The grade of one mechanism."""
        return self.assessment(mechanism).grade


def _graded(
    fired: Sequence[tuple[int, MechanismOutcome]], result_of: Callable[[int], RuleResult]
) -> tuple[Grade, tuple[RuleResult, ...], tuple[RuleResult, ...]]:
    """The grade, deciding and losing results of a mechanism several rules fired for
    (`fired` in rule order)."""
    best = min([outcome.priority for _, outcome in fired])
    grade = next(outcome.grade for _, outcome in fired if outcome.priority == best)
    deciding = tuple([result_of(p) for p, outcome in fired if outcome.priority == best])
    losing = tuple([result_of(p) for p, outcome in fired if outcome.priority != best])
    return grade, deciding, losing


def _stated(
    rules: Sequence[tuple[int, object, str]], states: Sequence[TruthValue]
) -> dict[object, list[str]]:
    """What fired rules of one kind (hypoxaemia, gas exchange) state, with their refs."""
    said: dict[object, list[str]] = {}
    for position, stated, ref in rules:
        if states[position] is True:
            said.setdefault(stated.status, []).append(ref)  # type: ignore[attr-defined]
    return said


# Not assessable carries nothing of an evaluation: one immutable answer per mechanism.
_UNASSESSED = {
    mechanism: MechanismAssessment(mechanism, _NOT_ASSESSABLE) for mechanism in _MECHANISMS
}


def pattern_of(
    demotion: str | None,
    hypoxaemia: HypoxaemiaStatus,
    gas_exchange: GasExchangeStatus,
    mechanisms: Sequence[MechanismAssessment],
) -> tuple[Pattern, str]:
    """The pattern of a verdict and why (see the module docstring); ``demotion`` is why the
    gas is not classifiable, or None."""
    if demotion is not None:
        return Pattern.NOT_CLASSIFIABLE, demotion
    likely = [item.mechanism for item in mechanisms if item.grade is _LIKELY]
    if not likely:
        if hypoxaemia is _ABSENT:
            return Pattern.NO_HYPOXAEMIA, "hypoxaemia is absent"
        return Pattern.INDETERMINATE, "no mechanism is likely"
    names = ", ".join(m.value for m in likely)
    if len(likely) > 1:
        return Pattern.MIXED, f"{len(likely)} mechanisms are likely: {names}"
    if likely[0] in GAS_EXCHANGE_MECHANISMS or gas_exchange is _NORMAL:
        return Pattern.SINGLE, f"one mechanism is likely: {names}"
    open_types = [
        item.mechanism.value
        for item in mechanisms
        if item.mechanism in GAS_EXCHANGE_MECHANISMS and item.grade is _POSSIBLE
    ]
    which = f" ({' or '.join(open_types)} possible)" if open_types else ""
    if gas_exchange is _DEFECT:
        return Pattern.MIXED, f"{names} is likely beside a gas-exchange defect of open type{which}"
    return (
        Pattern.MIXED,
        f"{names} is likely; gas exchange could not be judged, so a second cause is open{which}",
    )


def finding_order(item: FindingResult) -> tuple[int, str, str]:
    return SEVERITY_RANK[item.severity], item.code, item.result.rule.ref


def _demotion(
    findings: Sequence[FindingResult],
    facts: Mapping[str, FactValue],
    input_errors: Sequence[str],
) -> str | None:
    """Why the gas is not classifiable, or None when it is."""
    errors = sorted({str(item.code) for item in findings if item.severity is _ERROR})
    reasons: list[str] = []
    if errors:
        reasons.append("error finding fired: " + ", ".join(errors))
    if input_errors:
        reasons.append("error in the input: " + ", ".join(sorted(set(input_errors))))
    if not any(name in facts for name in OXYGENATION_FACTS):
        reasons.append("neither " + " nor ".join(OXYGENATION_FACTS) + " is known")
    return "; ".join(reasons) if reasons else None


def _missing(
    grading: Sequence[tuple[int, MechanismOutcome]],
    states: Sequence[TruthValue],
    refs: Sequence[str],
    undecided_of: Callable[[int], tuple[str, ...]],
    requests: DataRequests,
) -> tuple[str, ...]:
    """The missing facts that keep a mechanism's unknown rules unknown (each asked for)."""
    undecided: dict[str, None] = {}
    for position, _ in grading:
        if states[position] is None:
            missing = undecided_of(position)
            if missing:
                undecided.update(dict.fromkeys(missing))
                requests.ask_all(missing, refs[position])
    return tuple(undecided)


def _undecided_from(result_of: Callable[[int], RuleResult]) -> Callable[[int], tuple[str, ...]]:
    def undecided_of(position: int) -> tuple[str, ...]:
        return result_of(position).undecided

    return undecided_of


class _Unasked(DataRequests):
    """Collects nothing: for a verdict whose reader never looks at its data requests (a
    scenario that `scenarios.combine` compares by grades, findings and statuses only)."""

    __slots__ = ()

    def __init__(self) -> None:  # no facts, no catalogue: nothing is ever translated
        pass

    def ask_all(
        self,
        facts: Iterable[str],
        rule: str,
        *,
        even_if_known: bool = False,
        wanted: str | None = None,
    ) -> None:
        """Asks for nothing."""

    @property
    def empty(self) -> bool:
        """Never empty, so the verdict adds no request of its own."""
        return False

    def collected(self) -> tuple[DataRequest, ...]:
        """No requests."""
        return ()


_UNASKED = _Unasked()


def _ask_discriminators(deciding: Sequence[RuleResult], requests: DataRequests) -> None:
    """A `possible` grade: what its deciding rules say would settle it, known or not."""
    for result in deciding:
        rule = result.rule
        if rule.discriminator is not None:
            requests.ask_all(rule.discriminator.requests, rule.ref, even_if_known=True)


def decide(
    results: Sequence[RuleResult],
    facts: Mapping[str, FactValue],
    catalogue: FactCatalogue,
    input_errors: Sequence[str] = (),
) -> Verdict:
    """Build the verdict from rule results; shadow (testing) results are skipped."""
    rules = [result.rule for result in results]
    states = [value_of(result.state) for result in results]
    return decide_states(
        VerdictPlan.of(rules), states, results.__getitem__, facts, catalogue, input_errors
    )


def decide_states(
    plan: VerdictPlan,
    states: Sequence[TruthValue],
    result_of: Callable[[int], RuleResult],
    facts: Mapping[str, FactValue],
    catalogue: FactCatalogue,
    input_errors: Sequence[str] = (),
    undecided_of: Callable[[int], tuple[str, ...]] | None = None,
    *,
    ask: bool = True,
) -> Verdict:
    """`decide` from the rules' states (True, False, None) as `evaluate` has them.

    `plan` positions index `states`; `result_of(position)` gives that rule's result, and is
    asked only for the rules the verdict cites. `input_errors` are the codes of error
    findings met before the rules (values the input reader refused): they make the gas not
    classifiable, as an error finding of a rule does. `undecided_of(position)` is that
    rule's `RuleResult.undecided` (by default read from `result_of`), which `evaluate` has
    without making the result. With ``ask`` false, no data requests are worked out and
    ``data_requested`` is empty; everything else is the same.
    """
    if undecided_of is None:
        undecided_of = _undecided_from(result_of)
    refs = plan.refs
    found_states = plan.finding_states(states)
    findings = (
        [
            FindingResult(found.code, found.severity, result_of(position))
            for (position, found), state in zip(plan.findings, found_states, strict=True)
            if state is True
        ]
        if True in found_states  # states are True, False or None: `in` finds only True
        else []
    )
    if len(findings) > 1:
        findings.sort(key=finding_order)
    said = _stated(plan.hypoxaemia, states)
    hypoxaemia = _PRESENT if _PRESENT in said else _ABSENT if _ABSENT in said else _NO_STATUS
    exchange_said = _stated(plan.gas_exchange, states)
    gas_exchange = (
        _DEFECT
        if _DEFECT in exchange_said
        else _NORMAL
        if _NORMAL in exchange_said
        else _NO_EXCHANGE
    )
    demotion = _demotion(findings, facts, input_errors)
    requests = DataRequests(facts, catalogue) if ask else _UNASKED
    mechanisms: list[MechanismAssessment] = []
    deciding: tuple[RuleResult, ...]
    losing: tuple[RuleResult, ...]
    for (mechanism, grading), states_of in zip(plan.mechanisms, plan.grading_states, strict=True):
        graded_states = states_of(states)
        count = graded_states.count(True)  # states are True, False or None: counts only True
        if not count:  # no rule fired: not assessable, naming what was missing
            undecided = _missing(grading, states, refs, undecided_of, requests)
            mechanisms.append(
                MechanismAssessment(mechanism, _NOT_ASSESSABLE, undecided=undecided)
                if undecided
                else _UNASSESSED[mechanism]
            )
            continue
        if count == 1:  # the usual case: one rule fired, it decides
            position, outcome = grading[graded_states.index(True)]
            grade, deciding, losing = outcome.grade, (result_of(position),), ()
        else:
            fired = [pair for pair, state in zip(grading, graded_states, strict=True) if state]
            grade, deciding, losing = _graded(fired, result_of)
        if grade is _NOT_ASSESSABLE:
            # A rule said why the data cannot speak; still ask for what would let them.
            undecided = _missing(grading, states, refs, undecided_of, requests)
            assessment = MechanismAssessment(
                mechanism, grade, deciding, losing, undecided=undecided
            )
        elif grade is _LIKELY and demotion is not None:
            assessment = MechanismAssessment(mechanism, _POSSIBLE, deciding, losing, demotion)
            _ask_discriminators(deciding, requests)
        else:
            assessment = MechanismAssessment(mechanism, grade, deciding, losing)
            if grade is _POSSIBLE:
                _ask_discriminators(deciding, requests)
        mechanisms.append(assessment)
    pattern, reason = pattern_of(demotion, hypoxaemia, gas_exchange, mechanisms)
    if pattern is Pattern.NOT_CLASSIFIABLE and requests.empty:
        requests.ask_all(REPEAT_SAMPLE.requests, "", even_if_known=True)  # by the verdict itself
    return Verdict(
        pattern=pattern,
        pattern_reason=reason,
        hypoxaemia=hypoxaemia,
        hypoxaemia_rules=tuple(said.get(hypoxaemia, ())),
        mechanisms=tuple(mechanisms),
        findings=tuple(findings),
        data_requested=requests.collected(),
        gas_exchange=gas_exchange,
        gas_exchange_rules=tuple(exchange_said.get(gas_exchange, ())),
    )
