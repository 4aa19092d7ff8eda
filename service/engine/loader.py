"""Loading a rule-set directory: read once, validate everything, compile, or fail whole.

The directory holds `ruleset.yaml` (the manifest: identity, parameters, blocks) and one
YAML file per rule anywhere below it, named `<rule id>.yaml`. Rules under a `retired/`
folder must have status `retired` and retired rules must live there, so the tree shows
the lifecycle at a glance. Hidden files and folders are skipped; other non-YAML files
(a README) are ignored; `.yml` files are refused rather than silently skipped.

This is the engine's only I/O. All problems are collected and raised together as one
`RuleSetError`; a rule set either loads completely or not at all.
"""

import difflib
import hashlib
import json
from collections.abc import Mapping
from pathlib import Path

from service.engine.catalogue import FactCatalogue
from service.engine.conditions import ConditionCompiler, Location
from service.engine.documents import parse_yaml, validate_document
from service.engine.errors import RuleProblem, RuleSetError
from service.engine.parameters import MANIFEST, build_parameters
from service.engine.rationale import compile_template
from service.engine.rule_checks import discriminator_problems, priority_problems, read_rule
from service.engine.ruleset import (
    Discriminator,
    FindingDeclaration,
    FindingOutcome,
    GasExchangeOutcome,
    HypoxaemiaOutcome,
    MechanismOutcome,
    Outcome,
    RetiredRule,
    Rule,
    RuleSet,
)
from service.engine.schema import ManifestModel, OutcomeModel, RuleModel
from service.engine.vocabulary import (
    FindingCode,
    GasExchangeStatus,
    Grade,
    HypoxaemiaStatus,
    RuleStatus,
)

__all__ = ["build_ruleset", "content_hash", "load_ruleset", "read_directory"]


def read_directory(directory: Path) -> tuple[dict[str, bytes], list[RuleProblem]]:
    """Read every rule-set file below `directory`, keyed by relative POSIX path."""
    documents: dict[str, bytes] = {}
    problems: list[RuleProblem] = []
    for path in sorted(directory.rglob("*")):
        relative = path.relative_to(directory)
        if any(part.startswith(".") for part in relative.parts) or not path.is_file():
            continue
        name = relative.as_posix()
        if path.suffix == ".yml":
            problems.append(
                RuleProblem(
                    name, None, "", "rule-set files end in .yaml", f"rename to {path.stem}.yaml"
                )
            )
        elif path.suffix == ".yaml":
            documents[name] = path.read_bytes()
    return documents, problems


def content_hash(documents: Mapping[str, bytes], overrides: Mapping[str, float]) -> str:
    """sha256 over sorted (path, bytes) pairs and the canonical JSON of the overrides.

    Every chunk is length-prefixed so that moving bytes between a path and a file body
    cannot produce the same digest.
    """
    digest = hashlib.sha256()
    for path in sorted(documents):
        for chunk in (path.encode("utf-8"), documents[path]):
            digest.update(len(chunk).to_bytes(8, "big"))
            digest.update(chunk)
    canonical = json.dumps(
        {name: float(value) for name, value in overrides.items()},
        sort_keys=True,
        separators=(",", ":"),
        allow_nan=False,
    )
    digest.update(b"overrides:" + canonical.encode("utf-8"))
    return digest.hexdigest()


def load_ruleset(
    directory: Path,
    *,
    catalogue: FactCatalogue,
    overrides: Mapping[str, float] | None = None,
) -> RuleSet:
    """Load, check and compile the rule set in `directory`; raise `RuleSetError` if broken."""
    directory = Path(directory)
    if not directory.is_dir():
        raise RuleSetError(
            str(directory),
            [
                RuleProblem(
                    str(directory),
                    None,
                    "",
                    "not a directory",
                    f"pass the folder that holds {MANIFEST}",
                )
            ],
        )
    documents, problems = read_directory(directory)
    return _build(documents, catalogue, overrides or {}, str(directory), problems)


def build_ruleset(
    documents: Mapping[str, bytes],
    *,
    catalogue: FactCatalogue,
    overrides: Mapping[str, float] | None = None,
    source: str = "<memory>",
) -> RuleSet:
    """Build a rule set from file contents keyed by relative path, as `load_ruleset` does."""
    return _build(documents, catalogue, overrides or {}, source, [])


def _outcome(model: OutcomeModel) -> Outcome:
    if model.mechanism is not None:
        assert model.priority is not None  # the schema pairs them
        return MechanismOutcome(model.mechanism.code, Grade(model.mechanism.grade), model.priority)
    if model.finding is not None:
        return FindingOutcome(model.finding.code, model.finding.severity)
    if model.gas_exchange is not None:
        return GasExchangeOutcome(GasExchangeStatus(model.gas_exchange))
    assert model.hypoxaemia is not None  # the schema requires exactly one kind
    return HypoxaemiaOutcome(HypoxaemiaStatus(model.hypoxaemia))


BUILT_IN_FINDINGS = frozenset(code.value for code in FindingCode)
DECLARE_HINT = (
    "use a built-in finding code, or declare this one in ruleset.yaml under `findings:` "
    "with a display and a description, e.g. findings: {{{code}: {{display: ..., "
    "description: ...}}}} (no code change is needed)"
)


def _declared_findings(
    manifest: ManifestModel,
) -> tuple[dict[str, FindingDeclaration], list[RuleProblem]]:
    """The manifest's added finding codes; a code that is already built in is a problem."""
    system = manifest.finding_system or f"urn:oxyrule:ruleset:{manifest.id}:finding"
    declared: dict[str, FindingDeclaration] = {}
    problems: list[RuleProblem] = []
    for code, model in manifest.findings.items():
        if code in BUILT_IN_FINDINGS:
            problems.append(
                RuleProblem(
                    MANIFEST,
                    None,
                    f"findings.{code}",
                    f"{code} is a built-in finding code",
                    "remove the declaration: rules may use the built-in code as it is",
                )
            )
            continue
        declared[code] = FindingDeclaration(
            code, model.display, model.description, system, model.about
        )
    return declared, problems


def _finding_problems(
    model: RuleModel, path: str, declared: Mapping[str, FindingDeclaration]
) -> list[RuleProblem]:
    finding = model.outcome.finding
    if finding is None or finding.code in BUILT_IN_FINDINGS or finding.code in declared:
        return []
    known = sorted(BUILT_IN_FINDINGS | set(declared))
    close = difflib.get_close_matches(finding.code, known, n=3)
    suggestion = f" (did you mean {', '.join(close)}?)" if close else ""
    return [
        RuleProblem(
            path,
            model.id,
            "outcome.finding.code",
            f"unknown finding code {finding.code}{suggestion}",
            DECLARE_HINT.format(code=finding.code),
        )
    ]


def _compile_rule(
    model: RuleModel, path: str, compiler: ConditionCompiler
) -> tuple[Rule, list[RuleProblem]]:
    condition = compiler.compile(model.when, Location(path, model.id, "when"))
    template, template_problems = compile_template(
        model.rationale, compiler.catalogue, compiler.parameters
    )
    problems = [
        RuleProblem(path, model.id, "rationale", message, hint)
        for message, hint in template_problems
    ]
    problems.extend(discriminator_problems(model, path, compiler.catalogue))
    discriminator = (
        Discriminator(model.discriminator.text, tuple(model.discriminator.requests))
        if model.discriminator is not None
        else None
    )
    rule = Rule(
        id=model.id,
        version=model.version,
        title=model.title,
        status=model.status,
        description=model.description,
        references=tuple(model.references),
        outcome=_outcome(model.outcome),
        rationale=template,
        discriminator=discriminator,
        file=path,
        condition=condition,
    )
    return rule, problems


def _build(
    documents: Mapping[str, bytes],
    catalogue: FactCatalogue,
    overrides: Mapping[str, float],
    source: str,
    problems: list[RuleProblem],
) -> RuleSet:
    manifest: ManifestModel | None = None
    if MANIFEST not in documents:
        problems.append(
            RuleProblem(
                MANIFEST,
                None,
                "",
                "the rule set has no manifest",
                f"create {MANIFEST} at the root with id, version, title, description",
            )
        )
    else:
        parsed, problem = parse_yaml(documents[MANIFEST], MANIFEST)
        if problem is not None:
            problems.append(problem)
        else:
            manifest, found = validate_document(ManifestModel, parsed, MANIFEST, None)
            problems.extend(found)

    models: list[tuple[str, RuleModel]] = []
    first_file: dict[str, str] = {}
    for path in sorted(documents):
        if path == MANIFEST:
            continue
        model, found = read_rule(path, documents[path])
        problems.extend(found)
        if model is None:
            continue
        if model.id in first_file:
            problems.append(
                RuleProblem(
                    path,
                    model.id,
                    "id",
                    f"id {model.id} is also used by {first_file[model.id]}",
                    "give each rule a unique id (ids are never reused, even when retired)",
                )
            )
            continue
        first_file[model.id] = path
        models.append((path, model))

    if manifest is None:
        # Without parameters and blocks every rule would report spurious unknown names.
        raise RuleSetError(source, problems)

    accepted, parameters, found = build_parameters(
        manifest.parameters, overrides, frozenset(catalogue)
    )
    problems.extend(found)
    declared, found = _declared_findings(manifest)
    problems.extend(found)
    compiler = ConditionCompiler(catalogue, parameters, manifest.blocks)
    compiler.compile_blocks()
    rules: list[Rule] = []
    retired: list[RetiredRule] = []
    for path, model in models:
        if model.status is RuleStatus.RETIRED:
            retired.append(RetiredRule(model.id, model.version, model.title, path))
            continue
        rule, found = _compile_rule(model, path, compiler)
        problems.extend(found)
        problems.extend(_finding_problems(model, path, declared))
        rules.append(rule)
    problems.extend(compiler.problems)
    problems.extend(priority_problems(rules))
    if problems:
        raise RuleSetError(source, problems)
    return RuleSet(
        id=manifest.id,
        version=manifest.version,
        title=manifest.title,
        description=manifest.description,
        content_hash=content_hash(documents, accepted),
        parameters=parameters,
        overrides=accepted,
        catalogue=catalogue,
        rules=tuple(rules),
        retired=tuple(retired),
        leaves=tuple(compiler.leaves),
        findings=declared,
    )
