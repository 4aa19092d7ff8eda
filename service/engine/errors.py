"""Exceptions raised by the engine.

`RuleSetError` collects *every* problem found while loading a rule set, so an author can
fix a broken directory in one pass instead of one error per run. Each problem names the
file, the rule id (when there is one), the field path inside the file and a fix hint.

`FactError` reports facts handed to `evaluate` that break the catalogue's contract. Its
messages name facts, kinds and permitted ranges but never the offending value: the
values are patient data and exception text tends to end up in logs.
"""

from dataclasses import dataclass

__all__ = ["FactError", "FactProblem", "RuleProblem", "RuleSetError"]


@dataclass(frozen=True, slots=True)
class RuleProblem:
    """One defect in a rule set.

    `file` is relative to the rule-set directory, `rule_id` is None for the manifest and
    for files whose id could not be read, `field` is a dotted path such as
    `when.all[1].gt`, and `hint` says how to fix it.
    """

    file: str
    rule_id: str | None
    field: str
    message: str
    hint: str

    def __str__(self) -> str:
        rule = f" rule {self.rule_id}" if self.rule_id else ""
        field = f" field {self.field}" if self.field else ""
        return f"{self.file}{rule}{field}: {self.message} (fix: {self.hint})"


class RuleSetError(Exception):
    """A rule set could not be loaded; `.problems` lists every defect found."""

    def __init__(self, source: str, problems: list[RuleProblem]) -> None:
        self.source = source
        self.problems = problems
        super().__init__(source, problems)

    def __str__(self) -> str:
        count = len(self.problems)
        noun = "problem" if count == 1 else "problems"
        lines = [f"rule set {self.source} has {count} {noun}:"]
        lines.extend(f"  - {problem}" for problem in self.problems)
        return "\n".join(lines)


@dataclass(frozen=True, slots=True)
class FactProblem:
    """One fact that breaks the catalogue contract (the value itself is never kept)."""

    fact: str
    message: str

    def __str__(self) -> str:
        return f"{self.fact}: {self.message}"


class FactError(ValueError):
    """Facts passed to `evaluate` do not match the catalogue; `.problems` lists them."""

    def __init__(self, problems: list[FactProblem]) -> None:
        self.problems = problems
        super().__init__(problems)

    def __str__(self) -> str:
        return "facts rejected: " + "; ".join(str(problem) for problem in self.problems)
