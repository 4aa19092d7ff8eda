"""Turning rule-set file bytes into plain data, and validation errors into problems.

YAML is read with a `yaml.SafeLoader` subclass (no object construction, exactly as safe
as `yaml.safe_load`) that additionally refuses duplicate keys: plain safe loading keeps
the last of two `gt:` keys without a word, which in a rule file silently changes a
threshold.
"""

from collections.abc import Hashable
from typing import Any, TypeVar

import yaml
from pydantic import BaseModel, ValidationError
from pydantic_core import ErrorDetails

from service.engine.errors import RuleProblem
from service.engine.schema import UNION_TAGS

__all__ = ["FORMAT_DOC", "field_path", "parse_yaml", "validate_document"]

M = TypeVar("M", bound=BaseModel)

FORMAT_DOC = "service/engine/README.md"


class _UniqueKeyLoader(yaml.SafeLoader):
    """SafeLoader that rejects a mapping with the same key twice."""


def _construct_unique_mapping(loader: _UniqueKeyLoader, node: yaml.MappingNode) -> dict[Any, Any]:
    seen: set[Hashable] = set()
    # Checked before merge keys (`<<`) are flattened: overriding a merged key is legitimate.
    for key_node, _ in node.value:
        if key_node.tag == "tag:yaml.org,2002:merge":
            continue
        key = loader.construct_object(key_node)
        if key in seen:
            raise yaml.constructor.ConstructorError(
                "while reading a mapping",
                node.start_mark,
                f"found the key {key!r} twice",
                key_node.start_mark,
            )
        seen.add(key)
    loader.flatten_mapping(node)
    return loader.construct_mapping(node)


_UniqueKeyLoader.add_constructor(
    yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _construct_unique_mapping
)


def parse_yaml(data: bytes, file: str) -> tuple[Any, RuleProblem | None]:
    """Parse one YAML document; return its data, or None and the problem that stopped it."""
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as error:
        return None, RuleProblem(
            file, None, "", f"not UTF-8 text (byte {error.start})", "save the file as UTF-8"
        )
    try:
        return yaml.load(text, Loader=_UniqueKeyLoader), None  # a SafeLoader subclass
    except yaml.MarkedYAMLError as error:
        mark = error.problem_mark or error.context_mark
        where = f"line {mark.line + 1}, column {mark.column + 1}" if mark else "unknown position"
        detail = error.problem or error.context or "malformed YAML"
        hint = f'correct the YAML at {where}; quote values with brackets, e.g. unit: "mm[Hg]"'
        return None, RuleProblem(file, None, "", f"YAML error at {where}: {detail}", hint)
    except yaml.YAMLError as error:
        return None, RuleProblem(file, None, "", f"YAML error: {error}", "correct the YAML")


def field_path(loc: tuple[int | str, ...]) -> str:
    """Render a pydantic location as a path in the file, e.g. `when.all[1].gt`."""
    parts: list[str] = []
    for item in loc:
        if isinstance(item, int):
            parts.append(f"[{item}]")
        elif item in UNION_TAGS or item == "[key]":
            continue
        else:
            parts.append(f".{item}" if parts else item)
    return "".join(parts)


_HINTS: dict[str, str] = {
    "missing": "add the field '{name}'",
    "extra_forbidden": "remove '{name}' or correct its spelling; see " + FORMAT_DOC,
    "string_type": 'write text here; quote values that YAML reads as numbers, e.g. "1.0.0"',
    "float_type": "write a plain number",
    "int_type": "write a whole number",
    "bool_type": "write true or false",
    "enum": "use one of the values listed in the message",
    "literal_error": "use one of the values listed in the message",
    "too_short": "give at least one entry",
    "too_long": "remove the extra entries",
    "dict_type": "write a mapping (key: value)",
    "model_type": "write a mapping (key: value)",
    "list_type": "write a list",
    "tuple_type": "write a list",
    "condition_shape": "write a mapping with one of all, any, not, ref or fact",
    "threshold": "write a number or {{param: parameter_name}}",
    "leaf_operator": "keep exactly one of lt, le, gt, ge, eq, between, present, is, in",
    "outcome_shape": "keep exactly one of mechanism, finding, hypoxaemia, gas_exchange",
    "outcome_priority": "give an integer priority with a mechanism outcome and with nothing else",
    "semver": 'write the version as MAJOR.MINOR.PATCH in quotes, e.g. "1.2.0"',
    "kebab_id": "use lower-case words joined by hyphens, e.g. shunt-on-high-fio2",
    "snake_name": "use lower-case words joined by underscores, e.g. hypercapnia_threshold",
}


def _problem(detail: ErrorDetails, file: str, rule_id: str | None) -> RuleProblem:
    loc = tuple(detail["loc"])
    names = [item for item in loc if isinstance(item, str) and item not in UNION_TAGS]
    name = names[-1] if names else ""
    hint = _HINTS.get(detail["type"], "see " + FORMAT_DOC).format(name=name)
    return RuleProblem(file, rule_id, field_path(loc), detail["msg"], hint)


def validate_document(
    model: type[M], data: Any, file: str, rule_id: str | None
) -> tuple[M | None, list[RuleProblem]]:
    """Validate parsed YAML against `model`; return the model or the problems found."""
    if not isinstance(data, dict):
        return None, [
            RuleProblem(file, rule_id, "", "the file is not a YAML mapping", "see " + FORMAT_DOC)
        ]
    try:
        return model.model_validate(data), []
    except ValidationError as error:
        return None, [_problem(detail, file, rule_id) for detail in error.errors()]
