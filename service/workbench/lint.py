"""``oxyrule lint``: everything that can be checked about a rule set without a patient.

Schema and cross-checks come from the engine's loader (file, rule, field and a fix for each);
on top of them, the checks of ``CHECKS``: the lock file, conditions that can never be true or
never false, parameters and blocks nobody uses; totality — every mechanism decided by some
rule in every generated fact state (``totality``; lint only, not at every load: it takes
about a second); and, when fixture directories are given, fixture coverage — every active
rule must fire in some fixture and stay silent in another.

The service serves only what lint accepts. ``verified_runtime`` is how ``oxyrule serve``
(start-up, ``SIGHUP``, every worker of a multi-worker server) and ``oxyrule mllp`` load a rule
set: the loader, then ``check_loaded`` — the same function lint calls, with the same
``CHECKS`` — and any error refuses the set. A rule set with a rule file deleted (or all of
them) used to be served, answering every mechanism ``not-assessable`` with a ``success``
GuidanceResponse; the lock file now refuses it, at start and at reload alike.

To add a check, write a ``RuleSetCheck`` and append it to ``CHECKS``: lint runs it, and so does
every load for service, with nothing else to change. Checks see the runtime exactly as it
will serve (site parameter overrides applied), must not read fixtures, and should stay quick:
they run at every start and reload (all three: ~0.15 s on the shipped set).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from service.config import Settings
from service.engine import RuleSet, RuleSetError, RuleStatus, Truth
from service.exceptions import ServiceError
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


# One check of a loaded rule set: its directory and the runtime that serves it, in; what it
# finds, out (severity "error" refuses the set, at lint and at every load for service).
RuleSetCheck = Callable[[Path, Runtime], list["LintMessage"]]


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
    # Totality is lint's alone: it generates fact states (about a second), too slow for every
    # start and reload; CI runs lint on every change to the rules.
    messages = check_loaded(directory, runtime) + _totality(runtime)
    if fixtures is not None:
        messages += _coverage_scope(fixtures)
        present = [f for f in fixtures if f.exists()]
        if present:
            messages += _coverage(runtime.ruleset, runtime, present)
    return messages


def check_loaded(directory: Path, runtime: Runtime) -> list[LintMessage]:
    """What every check of ``CHECKS`` finds in a loaded rule set: the one function lint and
    loading for service share (no fixtures needed)."""
    return [message for check in CHECKS for message in check(directory, runtime)]


class RuleSetRefused(ServiceError):
    """A rule set that loads but that lint rejects: it must not be served."""

    def __init__(self, directory: Path, errors: list[LintMessage]) -> None:
        self.directory, self.errors = directory, errors
        listed = "".join(f"\n  - {e}" for e in errors[:20])
        more = f"\n  (and {len(errors) - 20} more)" if len(errors) > 20 else ""
        super().__init__(
            f"the rule set {directory} fails `oxyrule lint` with {len(errors)} "
            f"error{'s' if len(errors) > 1 else ''}:{listed}{more}"
        )


def verified_runtime(settings: Settings) -> Runtime:
    """Load the runtime as ``Runtime.load`` does, then refuse it unless every lint check
    passes (fixtures are not needed): how every surface that serves loads a rule set.

    Raises:
        RuleSetError, SiteFileError, LocatedError: as ``Runtime.load``.
        RuleSetRefused: the set loads, but lint finds errors (listed).
    """
    runtime = Runtime.load(settings)
    errors = [m for m in check_loaded(settings.rules_dir, runtime) if m.severity == "error"]
    if errors:
        raise RuleSetRefused(settings.rules_dir, errors)
    return runtime


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


def _lock(directory: Path, runtime: Runtime) -> list[LintMessage]:
    ruleset = runtime.ruleset
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


def _reachability(_directory: Path, runtime: Runtime) -> list[LintMessage]:
    ruleset = runtime.ruleset
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


def _totality(runtime: Runtime) -> list[LintMessage]:
    ruleset, settings = runtime.ruleset, runtime.settings
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


def _unused(_directory: Path, runtime: Runtime) -> list[LintMessage]:
    ruleset = runtime.ruleset
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


# Every check of a loaded rule set, run by `oxyrule lint` and by every load for service
# (`verified_runtime`) alike. Append a check here and it applies to both.
CHECKS: tuple[RuleSetCheck, ...] = (_lock, _reachability, _unused)


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
