"""One verdict from several evaluations of the same data under uncertain inputs.

Some inputs are known only as a range: an FiO2 estimated from a device, a barometric pressure
assumed because neither pressure nor altitude was sent, an age without a birth date, a
residence at altitude. The caller evaluates the rule set once with the inputs as sent (the
*representative* evaluation, whose findings and rationales the result shows) and once per
*scenario* — each combination of the ends of the ranges. A conclusion holds only if it holds
in every scenario:

* a mechanism whose grade is the same in every scenario keeps it (with the representative's
  rationale when it agrees, else the first scenario's);
* a grade that differs becomes `possible`, and its rationale says which input decides it and
  what would settle it;
* hypoxaemia and gas exchange are known only when every scenario agrees;
* a finding is shown when the representative evaluation raised it, or when every scenario did;
* when the representative lacks the uncertain input (FiO2 or age not sent), a data request
  stands only when every scenario makes it too, beside what would settle a differing grade;
* the pattern is worked out again from the combined grades.

Scenarios whose data raised an error finding are left out when others did not: the data
themselves refute that end of the range (an arterial PO2 above the alveolar PO2 at an
assumed FiO2, for example). When every scenario has the error, it stands.
"""

from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field

from service.engine.data_requests import DataRequest
from service.engine.evaluate import Evaluation, RuleRun, run_rules
from service.engine.facts import FactValue
from service.engine.ruleset import Discriminator, RuleSet
from service.engine.verdict import MechanismAssessment, Verdict, finding_order, pattern_of
from service.engine.vocabulary import (
    GasExchangeStatus,
    Grade,
    HypoxaemiaStatus,
    Mechanism,
    Severity,
)

__all__ = ["Scenario", "Uncertainty", "combine", "evaluate_scenarios"]


@dataclass(frozen=True, slots=True)
class Uncertainty:
    """An input known only as a range, said in words, and what would settle it."""

    what: str
    """E.g. "FiO2 (estimated from the device: 0.26 to 0.40)"."""
    settle: Discriminator
    only_for: frozenset[Mechanism] | None = None
    """The mechanisms it bears on (None: all)."""


@dataclass(frozen=True, slots=True)
class Scenario:
    """One evaluation with the uncertain inputs at one combination of their ends."""

    label: str
    """E.g. "FiO2 0.26, resident"."""
    evaluation: Evaluation
    only_for: frozenset[Mechanism] | None = None
    """When set, the scenario bears only on these mechanisms (an assumption whose other
    consequences the result states rather than bounds: the pressure assumed at sea level)."""
    complete: Callable[[], Evaluation] | None = field(default=None, compare=False, repr=False)
    """When set, ``evaluation`` was decided without data requests (they are empty) and this
    gives the evaluation with them, decided when first asked for (see `evaluate_scenarios`)."""


def _complete(scenario: Scenario) -> Evaluation:
    """The scenario's evaluation with its data requests."""
    return scenario.evaluation if scenario.complete is None else scenario.complete()


class _Decided:
    """A rule run's complete evaluation, decided once, when first asked for."""

    __slots__ = ("_input_errors", "_made", "_run")

    def __init__(self, run: RuleRun, input_errors: Sequence[str]) -> None:
        self._run, self._input_errors = run, input_errors
        self._made: Evaluation | None = None

    def __call__(self) -> Evaluation:
        if self._made is None:
            self._made = self._run.decided(self._input_errors)
        return self._made


def evaluate_scenarios(
    ruleset: RuleSet,
    scenarios: Iterable[tuple[str, Mapping[str, FactValue], frozenset[Mechanism] | None]],
    *,
    input_errors: Sequence[str] = (),
    ask: bool = True,
    like: RuleRun | None = None,
) -> list[Scenario]:
    """One `Scenario` per (label, facts, only_for), each evaluated over its facts.

    A scenario whose rules ran to the same states as an earlier one bearing on the same
    mechanisms (``RuleRun.same_states``) shares that one's evaluation instead of deciding
    again: it has the same grades, findings, statuses and data requests, which is all that
    `combine` reads of a later scenario. The text of a scenario's evaluation (rationales,
    traces) is read only from the first scenario that agrees with it (``standing[0]``, the
    first bearing scenario of a grade, the first general scenario's findings), and the
    earlier scenario always comes first wherever the later one does, so no text changes.

    With ``ask`` false, each evaluation is decided without its data requests (a quarter of
    deciding), which `combine` reads of a scenario only when the representative is not itself
    a point of the ranges (``representative_counts`` false: pass ``ask`` true then) or when
    the representative is refuted and a scenario's verdict stands in for it; the latter is
    then decided again with them (``Scenario.complete``).

    ``like`` is the representative's run, whose facts every scenario's mostly repeat: only the
    facts that differ are checked and rounded again (``run_rules``).
    """
    made: list[tuple[Scenario, RuleRun]] = []
    for label, facts, only_for in scenarios:
        run = run_rules(ruleset, facts, like=like)
        same = next(
            (s for s, r in made if s.only_for == only_for and r.same_states(run)),
            None,
        )
        if same is not None:
            scenario = Scenario(label, same.evaluation, only_for, same.complete)
        elif ask:
            scenario = Scenario(label, run.decided(input_errors), only_for)
        else:
            light = run.decided(input_errors, ask=False)
            scenario = Scenario(label, light, only_for, _Decided(run, input_errors))
        made.append((scenario, run))
    return [scenario for scenario, _ in made]


def _refuted(evaluation: Evaluation) -> bool:
    return any(f.severity is Severity.ERROR for f in evaluation.verdict.findings)


def _agreed(values: Sequence[object], unknown: object) -> object:
    return values[0] if all(v == values[0] for v in values) else unknown


def combine(
    representative: Evaluation,
    scenarios: Sequence[Scenario],
    uncertainties: Sequence[Uncertainty],
    *,
    representative_counts: bool = True,
) -> Verdict:
    """The verdict that holds across ``scenarios`` (see the module docstring).

    ``representative_counts``: the representative evaluation is itself a point of the ranges
    (every uncertain input has a value there, as an estimated FiO2 does) and joins the
    comparison; it does not when an input is simply missing from it (FiO2 or age not sent).
    """
    verdict = representative.verdict
    standing = [s for s in scenarios if not _refuted(s.evaluation)] or list(scenarios)
    if not standing:
        return verdict
    if _refuted(representative) and not any(_refuted(s.evaluation) for s in standing):
        # The inputs as sent are refuted by the data; a possible end of the ranges stands in.
        verdict = _complete(standing[0]).verdict
        representative_counts = False
    shown_point = [Scenario("the values as sent", representative)] if representative_counts else []
    general = shown_point + [s for s in standing if s.only_for is None]
    verdicts = [s.evaluation.verdict for s in general] or [verdict]
    mechanisms: list[MechanismAssessment] = []
    asked: list[Discriminator] = []
    # Scenarios that bear on some mechanisms only are rare: without them, every mechanism's
    # bearing scenarios are the general ones.
    some_only = any(s.only_for is not None for s in standing)
    for position, shown in enumerate(verdict.mechanisms):
        bearing = (
            shown_point
            + [s for s in standing if s.only_for is None or shown.mechanism in s.only_for]
            if some_only
            else general
        )
        if not bearing:
            mechanisms.append(shown)
            continue
        pairs = [(s, s.evaluation.verdict.mechanisms[position]) for s in bearing]
        # A scenario that cannot assess the mechanism (a value beyond a model's range at the
        # end of a range) says nothing against the others.
        graded = [pair for pair in pairs if pair[1].grade is not Grade.NOT_ASSESSABLE] or pairs
        first = graded[0][1]
        if all(m.grade is first.grade for _, m in graded):  # the usual case: they agree
            mechanisms.append(shown if shown.grade is first.grade else first)
            continue
        bearing = [s for s, _ in graded]
        found = [m for _, m in graded]
        bearing_on = [
            u for u in uncertainties if u.only_for is None or shown.mechanism in u.only_for
        ]
        settle = tuple(dict.fromkeys(u.settle for u in bearing_on))
        what = "; ".join(u.what for u in bearing_on)
        asked.extend(settle)
        by_grade = ", ".join(
            f"{item.grade.value} with {scenario.label}"
            for scenario, item in zip(bearing, found, strict=True)
        )
        mechanisms.append(
            MechanismAssessment(
                shown.mechanism,
                Grade.POSSIBLE,
                uncertain_because=f"Depends on {what}: {by_grade}.",
                settled_by=settle,
            )
        )
    hypoxaemia = _agreed([v.hypoxaemia for v in verdicts], HypoxaemiaStatus.UNKNOWN)
    gas_exchange = _agreed([v.gas_exchange for v in verdicts], GasExchangeStatus.UNKNOWN)
    assert isinstance(hypoxaemia, HypoxaemiaStatus)
    assert isinstance(gas_exchange, GasExchangeStatus)
    demotion = verdict.pattern_reason if verdict.pattern.value == "not-classifiable" else None
    pattern, reason = pattern_of(demotion, hypoxaemia, gas_exchange, mechanisms)
    shown_codes = {f.code for f in verdict.findings}
    everywhere = [
        f
        for f in verdicts[0].findings
        if f.code not in shown_codes
        and all(any(g.code == f.code for g in v.findings) for v in verdicts[1:])
    ]
    findings = tuple(sorted((*verdict.findings, *everywhere), key=finding_order))
    requested = list(verdict.data_requested)
    if not representative_counts and len(verdicts) > 0 and general:
        # What the representative lacked only because the uncertain input was missing is
        # filled in every scenario; a request stands when every scenario still makes it.
        still = [{r.fact for r in _complete(s).verdict.data_requested} for s in general]
        requested = [r for r in requested if all(r.fact in asked_by for asked_by in still)]
    known = {r.fact for r in requested}
    for item in dict.fromkeys(asked):
        for fact in item.requests:
            if fact not in known:
                requested.append(DataRequest(fact, (), ()))
                known.add(fact)
    return Verdict(  # every field (``replace`` would look them up one by one)
        pattern=pattern,
        pattern_reason=reason,
        hypoxaemia=hypoxaemia,
        hypoxaemia_rules=verdict.hypoxaemia_rules,
        mechanisms=tuple(mechanisms),
        findings=findings,
        data_requested=tuple(requested),
        gas_exchange=gas_exchange,
        gas_exchange_rules=verdict.gas_exchange_rules,
    )
