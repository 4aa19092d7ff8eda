"""Checks on single rule files that need more than their schema.

`read_rule` parses and validates one file and checks that its id matches its file name
and its status matches its folder; `discriminator_problems` checks that a `possible`
grade says what would settle it; `priority_problems` checks that active rules cannot
disagree about a mechanism at the same priority.
"""

from collections import defaultdict
from pathlib import PurePosixPath

from service.engine.catalogue import FactCatalogue
from service.engine.documents import parse_yaml, validate_document
from service.engine.errors import RuleProblem
from service.engine.ruleset import MechanismOutcome, Rule
from service.engine.schema import RuleModel
from service.engine.vocabulary import RuleStatus

__all__ = ["RETIRED_FOLDER", "discriminator_problems", "priority_problems", "read_rule"]

RETIRED_FOLDER = "retired"


def read_rule(path: str, data: bytes) -> tuple[RuleModel | None, list[RuleProblem]]:
    """Parse and validate one rule file; check its id against its name, status against folder."""
    parsed, problem = parse_yaml(data, path)
    if problem is not None:
        return None, [problem]
    written_id = parsed.get("id") if isinstance(parsed, dict) else None
    rule_id = written_id if isinstance(written_id, str) else None
    model, problems = validate_document(RuleModel, parsed, path, rule_id)
    if model is None:
        return None, problems
    file = PurePosixPath(path)
    if model.id != file.stem:
        problems.append(
            RuleProblem(
                path,
                model.id,
                "id",
                f"id {model.id} differs from the file name {file.name}",
                f"rename the file to {model.id}.yaml or set id: {file.stem}",
            )
        )
    in_retired = RETIRED_FOLDER in file.parts[:-1]
    if in_retired != (model.status is RuleStatus.RETIRED):
        hint = (
            "set status: retired or move the file out of retired/"
            if in_retired
            else "move the file into a retired/ folder or change its status"
        )
        problems.append(
            RuleProblem(
                path,
                model.id,
                "status",
                f"status {model.status} does not match the file's folder",
                hint,
            )
        )
    return model, problems


def discriminator_problems(
    model: RuleModel, path: str, catalogue: FactCatalogue
) -> list[RuleProblem]:
    """A `possible` grade needs a discriminator; nothing else may have one."""
    problems: list[RuleProblem] = []
    mechanism = model.outcome.mechanism
    possible = mechanism is not None and mechanism.grade == "possible"
    if possible and model.discriminator is None:
        problems.append(
            RuleProblem(
                path,
                model.id,
                "discriminator",
                "a possible grade needs a discriminator",
                "add discriminator: {text: ..., requests: [fact, ...]} naming the facts "
                "that would settle it",
            )
        )
    if not possible and model.discriminator is not None:
        problems.append(
            RuleProblem(
                path,
                model.id,
                "discriminator",
                "a discriminator only goes with a possible grade",
                "remove the discriminator or change the grade to possible",
            )
        )
    if model.discriminator is not None:
        for index, name in enumerate(model.discriminator.requests):
            if name not in catalogue:
                problems.append(
                    RuleProblem(
                        path,
                        model.id,
                        f"discriminator.requests[{index}]",
                        f"unknown fact {name}",
                        "request a fact from the catalogue",
                    )
                )
    return problems


def priority_problems(rules: list[Rule]) -> list[RuleProblem]:
    """Active rules on one mechanism at one priority must agree on the grade.

    Otherwise the verdict would depend on file order. Testing rules are exempt: they
    never decide, and a candidate replacement often sits at the priority it will take.
    """
    groups: dict[tuple[str, int], list[tuple[Rule, MechanismOutcome]]] = defaultdict(list)
    for rule in rules:
        if rule.status is RuleStatus.ACTIVE and isinstance(rule.outcome, MechanismOutcome):
            groups[(rule.outcome.mechanism, rule.outcome.priority)].append((rule, rule.outcome))
    problems: list[RuleProblem] = []
    for (mechanism, priority), group in groups.items():
        if len({outcome.grade for _, outcome in group}) < 2:
            continue
        listing = ", ".join(f"{rule.id} ({outcome.grade})" for rule, outcome in group)
        for rule, _ in group:
            problems.append(
                RuleProblem(
                    rule.file,
                    rule.id,
                    "outcome.priority",
                    f"active rules grade {mechanism} differently at priority {priority}: {listing}",
                    "give these rules different priorities or the same grade",
                )
            )
    return problems
