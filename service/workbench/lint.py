"""``oxyrule lint``: everything that can be checked about a rule set without a patient.

Schema and cross-checks come from the engine's loader (file, rule, field and a fix for each);
on top of them: the lock file, conditions that can never be true or never false, parameters
and blocks nobody uses, the local-code ConceptMap, totality — every mechanism decided by some
rule in every generated fact state (``totality``) — and fixture coverage: every active rule
must fire in some fixture and stay silent in another.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from service.config import Settings
from service.engine import RuleSet, RuleSetError, RuleStatus, Truth
from service.fhir.outcome import LocatedError
from service.runtime import Runtime

from .expectations import FixtureError, find_cases
from .lock import compare, current_entries, read_lock
from .runner import run_cases
from .satisfiability import reachability
from .totality import undecided


@dataclass(frozen=True, slots=True)
class LintMessage:
    """One finding of lint: where, what, and how to fix it."""

    severity: str  # error | warning
    file: str
    rule: str
    field: str
    message: str
    fix: str

    def __str__(self) -> str:
        where = self.file + (f" rule {self.rule}" if self.rule else "")
        where += f" field {self.field}" if self.field else ""
        return f"{self.severity}: {where}: {self.message} (fix: {self.fix})"


def lint(directory: Path, *, fixtures: Sequence[Path] | None = None) -> list[LintMessage]:
    """Every problem found in the rule set at ``directory`` (empty when clean).

    ``fixtures`` are the folders (or expected-outcome files) whose cases must cover every
    active rule; None leaves coverage out on purpose. A folder that does not exist, or an
    empty list, is an error: a coverage gate that checked nothing must not pass.
    """
    try:
        runtime = Runtime.load(Settings(rules_dir=directory))
    except RuleSetError as error:
        return [
            LintMessage("error", p.file, p.rule_id or "", p.field, p.message, p.hint)
            for p in error.problems
        ]
    except LocatedError as error:
        return [
            LintMessage("error", "concept-map.json", "", p.expression, p.diagnostics, "fix the map")
            for p in error.problems
        ]
    ruleset = runtime.ruleset
    messages = _lock(directory, ruleset) + _reachability(ruleset) + _unused(ruleset)
    messages += _totality(ruleset, runtime.settings)
    if fixtures is not None:
        messages += _coverage_scope(fixtures)
        present = [f for f in fixtures if f.exists()]
        if present:
            messages += _coverage(ruleset, runtime, present)
    return messages


NO_FIXTURES_FIX = (
    "name the fixture folder with --fixtures DIR (or pass --no-coverage to leave the "
    "coverage check out on purpose)"
)


def _coverage_scope(fixtures: Sequence[Path]) -> list[LintMessage]:
    """An error for each fixture folder that is not there, or for none at all."""
    if not fixtures:
        return [
            LintMessage(
                "error",
                "",
                "",
                "",
                "no fixture folder found (none named, no fixtures/ here or beside the rule "
                "set): fixture coverage was not checked",
                NO_FIXTURES_FIX,
            )
        ]
    return [
        LintMessage(
            "error",
            str(path),
            "",
            "",
            "this fixture folder does not exist: fixture coverage was not checked against it",
            NO_FIXTURES_FIX,
        )
        for path in fixtures
        if not path.exists()
    ]


def plural(count: int, word: str) -> str:
    """``1 error``, ``2 errors``."""
    return f"{count} {word}" + ("" if count == 1 else "s")


def _lock(directory: Path, ruleset: RuleSet) -> list[LintMessage]:
    recorded = read_lock(directory)
    if recorded is None:
        return [
            LintMessage(
                "error", "ruleset.lock", "", "", "no lock file", "run `oxyrule lint --update-lock`"
            )
        ]
    current = current_entries(directory, ruleset)
    return [
        LintMessage("error", p.file, p.name, "version", p.message, p.fix)
        for p in compare(recorded, current)
    ]


def _reachability(ruleset: RuleSet) -> list[LintMessage]:
    messages = []
    for rule in ruleset.rules:
        found = reachability(ruleset, rule)
        if found is None:
            continue
        can_true, can_false = found
        if not can_true:
            messages.append(
                LintMessage(
                    "error",
                    rule.file,
                    rule.id,
                    "when",
                    "the condition can never be true (contradictory or unreachable)",
                    "check thresholds that exclude each other under `all`",
                )
            )
        elif not can_false:
            messages.append(
                LintMessage(
                    "warning",
                    rule.file,
                    rule.id,
                    "when",
                    "the condition is true whenever its facts are known (it decides nothing)",
                    "add the condition that should distinguish the cases",
                )
            )
    return messages


TOTALITY_STATES = 1000
"""Generated fact states lint tries (about a second); the property test tries many more."""


def _totality(ruleset: RuleSet, settings: Settings) -> list[LintMessage]:
    messages = []
    for hole in undecided(ruleset, settings=settings, count=TOTALITY_STATES):
        shown = ", ".join(
            f"{name}={value:.4g}" if isinstance(value, float) else f"{name}={value}"
            for name, value in sorted(hole.facts.items())
            if not isinstance(value, bool) or value
        )
        messages.append(
            LintMessage(
                "error",
                "",
                "",
                "",
                f"no rule decides {hole.mechanism} in a reachable fact state: {shown}",
                f"grade {hole.mechanism} for that state, or add a not-assessable rule that says "
                "why the data cannot speak",
            )
        )
    return messages


def _unused(ruleset: RuleSet) -> list[LintMessage]:
    used = {p for leaf in ruleset.leaves for p in leaf.parameters}
    return [
        LintMessage(
            "warning",
            "ruleset.yaml",
            "",
            f"parameters.{name}",
            "parameter is not used by any condition",
            "use it in a condition or remove it",
        )
        for name in ruleset.parameters
        if name not in used
    ]


def _coverage(ruleset: RuleSet, runtime: Runtime, fixtures: list[Path]) -> list[LintMessage]:
    try:
        cases = find_cases(fixtures)
    except FixtureError as error:
        return [LintMessage("error", str(fixtures[0]), "", "", str(error), "fix the fixture file")]
    fires: dict[str, int] = {}
    silent: dict[str, int] = {}
    for result in run_cases(cases, runtime):
        evaluation = result.assessment.evaluation if result.assessment else None
        for r in getattr(evaluation, "results", ()):
            bucket = fires if r.state is Truth.TRUE else silent
            bucket[r.rule.id] = bucket.get(r.rule.id, 0) + 1
    messages = []
    for rule in ruleset.rules:
        if rule.status is not RuleStatus.ACTIVE:
            continue
        for counts, what in ((fires, "fires"), (silent, "stays silent")):
            if not counts.get(rule.id):
                messages.append(
                    LintMessage(
                        "error",
                        rule.file,
                        rule.id,
                        "",
                        f"no fixture in which the rule {what}",
                        f"add a fixture case in which {rule.id} {what}",
                    )
                )
    return messages
