"""Shape of the rule-set files, as pydantic models that forbid unknown fields.

These models check *shape* only: types, required fields, closed vocabularies, exactly one
operator per leaf, exactly one kind of outcome. Everything that needs context (does the
fact exist, do the units agree, does the block resolve) is checked by the loader, which
can name the file and rule in its messages.

A condition is one of:

    all: [condition, ...]       true when every part is true
    any: [condition, ...]       true when some part is true
    not: condition              swaps true and false
    definitely: condition       true when the condition is true, false otherwise (never unknown)
    ref: block_name             a named condition from the manifest's `blocks`
    {fact: ..., <operator>: ..., unit: ...}   a leaf

Leaf operators: `lt le gt ge eq` take a number or `{param: name}`; `between` takes
`[low, high]` (inclusive, each a number or `{param: name}`); `present` takes true or
false; `is` (boolean facts) takes true or false; `in` (code facts) takes a list of codes.
"""

import re
from typing import Annotated, Any, Literal

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Discriminator,
    Field,
    Strict,
    StrictBool,
    StrictInt,
    Tag,
    model_validator,
)
from pydantic_core import PydanticCustomError

from service.engine.logic import Operator
from service.engine.vocabulary import Mechanism, RuleStatus, Severity

__all__ = [
    "UNION_TAGS",
    "AllNode",
    "AnyNode",
    "Condition",
    "DefinitelyNode",
    "DiscriminatorModel",
    "FindingDeclarationModel",
    "FindingModel",
    "LeafNode",
    "ManifestModel",
    "MechanismModel",
    "NotNode",
    "OutcomeModel",
    "ParameterModel",
    "ParameterRef",
    "RefNode",
    "RuleModel",
    "ThresholdValue",
]

SEMVER = re.compile(
    r"^(0|[1-9]\d*)\.(0|[1-9]\d*)\.(0|[1-9]\d*)"
    r"(?:-[0-9A-Za-z-]+(?:\.[0-9A-Za-z-]+)*)?(?:\+[0-9A-Za-z-]+(?:\.[0-9A-Za-z-]+)*)?$"
)
KEBAB = re.compile(r"^[a-z0-9]+(?:-[a-z0-9]+)*$")
SNAKE = re.compile(r"^[a-z][a-z0-9]*(?:_[a-z0-9]+)*$")

Number = Annotated[float, Strict()]  # strict: a YAML `true` must not become 1.0
Text = Annotated[str, Strict(), Field(min_length=1)]


def _semver(value: str) -> str:
    if not SEMVER.match(value):
        raise PydanticCustomError(
            "semver", "version '{value}' is not MAJOR.MINOR.PATCH", {"value": value}
        )
    return value


def _kebab(value: str) -> str:
    if not KEBAB.match(value):
        raise PydanticCustomError("kebab_id", "id '{value}' is not kebab-case", {"value": value})
    return value


def _snake(value: str) -> str:
    if not SNAKE.match(value):
        raise PydanticCustomError(
            "snake_name", "name '{value}' is not snake_case", {"value": value}
        )
    return value


SemVer = Annotated[Text, AfterValidator(_semver)]
KebabId = Annotated[Text, AfterValidator(_kebab)]
SnakeName = Annotated[Text, AfterValidator(_snake)]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class ParameterRef(_Strict):
    """`{param: name}`: a threshold taken from the manifest's parameters."""

    param: Text


def _threshold_tag(value: Any) -> str | None:
    if isinstance(value, dict | ParameterRef):
        return "parameter-ref"
    if isinstance(value, int | float) and not isinstance(value, bool):
        return "number"
    return None


# Tags name union members in pydantic's error locations; the loader strips them again.
ThresholdValue = Annotated[
    Annotated[Number, Tag("number")] | Annotated[ParameterRef, Tag("parameter-ref")],
    Discriminator(
        _threshold_tag,
        custom_error_type="threshold",
        custom_error_message="expected a number or {param: name}",
    ),
]

_LEAF_OPERATORS = tuple(op.value for op in Operator)


class LeafNode(_Strict):
    """A single test on one fact."""

    fact: Text
    unit: Text | None = None
    lt: ThresholdValue | None = None
    le: ThresholdValue | None = None
    gt: ThresholdValue | None = None
    ge: ThresholdValue | None = None
    eq: ThresholdValue | None = None
    between: tuple[ThresholdValue, ThresholdValue] | None = None
    present: StrictBool | None = None
    is_: StrictBool | None = Field(default=None, alias="is")
    in_: tuple[Text, ...] | None = Field(default=None, alias="in", min_length=1)

    @model_validator(mode="after")
    def _one_operator(self) -> "LeafNode":
        given = [name for name in _LEAF_OPERATORS if self.argument(Operator(name)) is not None]
        if len(given) != 1:
            found = ", ".join(given) if given else "none"
            raise PydanticCustomError(
                "leaf_operator",
                "a leaf needs exactly one operator (found: {found})",
                {"found": found},
            )
        return self

    def argument(self, operator: Operator) -> object:
        """The value written after `operator`, or None when this leaf does not use it."""
        name = {Operator.IS: "is_", Operator.IN: "in_"}.get(operator, operator.value)
        value: object = getattr(self, name)
        return value

    @property
    def operator(self) -> Operator:
        """The one operator this leaf uses."""
        return next(op for op in Operator if self.argument(op) is not None)


class AllNode(_Strict):
    """`all: [...]`."""

    all: list["Condition"] = Field(min_length=1)


class AnyNode(_Strict):
    """`any: [...]`."""

    any_: list["Condition"] = Field(alias="any", min_length=1)


class NotNode(_Strict):
    """`not: condition`."""

    not_: "Condition" = Field(alias="not")


class DefinitelyNode(_Strict):
    """`definitely: condition` — true when the condition is true, else false: for checks whose
    missing facts mean "no evidence", not "unknown" (a data-trust check that could not be
    made does not make the data untrusted)."""

    definitely: "Condition"


class RefNode(_Strict):
    """`ref: block_name`."""

    ref: Text


def _condition_tag(value: Any) -> str | None:
    if isinstance(value, BaseModel):
        return _MODEL_TAGS.get(type(value))
    if isinstance(value, dict):
        for key, tag in (
            ("all", "all-of"),
            ("any", "any-of"),
            ("not", "not-of"),
            ("definitely", "definitely-of"),
            ("ref", "block-ref"),
        ):
            if key in value:
                return tag
        if "fact" in value:
            return "leaf"
    return None


Condition = Annotated[
    Annotated[AllNode, Tag("all-of")]
    | Annotated[AnyNode, Tag("any-of")]
    | Annotated[NotNode, Tag("not-of")]
    | Annotated[DefinitelyNode, Tag("definitely-of")]
    | Annotated[RefNode, Tag("block-ref")]
    | Annotated[LeafNode, Tag("leaf")],
    Discriminator(
        _condition_tag,
        custom_error_type="condition_shape",
        custom_error_message="a condition needs one of all, any, not, definitely, ref or fact",
    ),
]

_MODEL_TAGS: dict[type[BaseModel], str] = {
    AllNode: "all-of",
    AnyNode: "any-of",
    NotNode: "not-of",
    DefinitelyNode: "definitely-of",
    RefNode: "block-ref",
    LeafNode: "leaf",
}
UNION_TAGS = frozenset({*_MODEL_TAGS.values(), "number", "parameter-ref"})
"""Union tags pydantic inserts into error locations; they are not fields of the file."""

AllNode.model_rebuild()
AnyNode.model_rebuild()
NotNode.model_rebuild()
DefinitelyNode.model_rebuild()


class ParameterModel(_Strict):
    """A named threshold in the manifest, with the range a site override must respect."""

    value: Number
    unit: Text
    description: Text
    minimum: Number
    maximum: Number
    source: Text


class FindingDeclarationModel(_Strict):
    """A finding code the rule set adds to the built-in ones (``FindingCode``)."""

    display: Text
    """A few words, shown beside the code (FHIR ``Coding.display``)."""
    description: Text
    """What the finding means and when it is raised."""
    about: Literal["patient", "data"] = "patient"
    """What the finding is about: ``patient`` (clinical context, carried with the verdict) or
    ``data`` (a problem with the data sent, reported as a data-quality issue)."""


class ManifestModel(_Strict):
    """`ruleset.yaml` at the root of a rule-set directory."""

    id: KebabId
    version: SemVer
    title: Text
    description: Text
    parameters: dict[SnakeName, ParameterModel] = Field(default_factory=dict)
    blocks: dict[SnakeName, Condition] = Field(default_factory=dict)
    findings: dict[KebabId, FindingDeclarationModel] = Field(default_factory=dict)
    """Finding codes this rule set adds (a site's own), each with its display and meaning."""
    finding_system: (
        Annotated[str, Strict(), Field(min_length=1, pattern=r"^[a-z][a-z0-9+.-]*:\S+$")] | None
    ) = None
    """The URI of the code system of the added codes (default: one named after the rule set)."""


class MechanismModel(_Strict):
    """`mechanism: {code, grade}`."""

    code: Mechanism
    grade: Literal["likely", "possible", "unlikely", "not-assessable"]


class FindingModel(_Strict):
    """`finding: {code, severity}`: a built-in code, or one declared under the manifest's
    `findings` (checked by the loader, which can say how to declare it)."""

    code: KebabId
    severity: Severity


class OutcomeModel(_Strict):
    """Exactly one of `mechanism` (with `priority`), `finding`, `hypoxaemia` or
    `gas_exchange`."""

    mechanism: MechanismModel | None = None
    priority: StrictInt | None = None
    finding: FindingModel | None = None
    hypoxaemia: Literal["present", "absent"] | None = None
    gas_exchange: Literal["defect", "normal"] | None = None

    @model_validator(mode="after")
    def _one_kind(self) -> "OutcomeModel":
        kinds = [self.mechanism, self.finding, self.hypoxaemia, self.gas_exchange]
        if sum(kind is not None for kind in kinds) != 1:
            raise PydanticCustomError(
                "outcome_shape",
                "an outcome needs exactly one of mechanism, finding, hypoxaemia, gas_exchange",
            )
        if (self.mechanism is None) != (self.priority is None):
            raise PydanticCustomError(
                "outcome_priority", "priority goes with a mechanism outcome, and only with one"
            )
        return self


class DiscriminatorModel(_Strict):
    """What would settle a `possible` grade: a sentence and the facts to ask for."""

    text: Text
    requests: list[Text] = Field(min_length=1)


class RuleModel(_Strict):
    """One rule file."""

    id: KebabId
    version: SemVer
    title: Text
    status: RuleStatus
    description: Text
    references: list[Text] = Field(min_length=1)
    outcome: OutcomeModel
    when: Condition
    rationale: Text
    discriminator: DiscriminatorModel | None = None
