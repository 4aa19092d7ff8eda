"""Rule-set parameters: named thresholds with a unit, a sensible range and a source.

A parameter's range is the physiologically sensible span for that threshold. It is
checked for the value in the manifest and again for every site override, so a site can
tune a cut-off but cannot switch a rule off by moving its threshold somewhere absurd.
"""

import math
from collections.abc import Mapping
from dataclasses import dataclass

from service.engine.errors import RuleProblem
from service.engine.schema import ParameterModel

__all__ = ["MANIFEST", "Parameter", "build_parameters"]

MANIFEST = "ruleset.yaml"


@dataclass(frozen=True, slots=True)
class Parameter:
    """A threshold as used in evaluation: `value` already includes any site override."""

    name: str
    value: float
    unit: str
    description: str
    minimum: float
    maximum: float
    source: str
    default: float
    """The value written in the manifest, before any override."""

    @property
    def overridden(self) -> bool:
        """Whether a site override replaced the manifest value."""
        return self.value != self.default


def _override_problem(name: str, value: object, model: ParameterModel) -> RuleProblem | None:
    field = f"parameters.{name}"
    if type(value) is not float and type(value) is not int:
        return RuleProblem(
            "(overrides)", None, field, "override is not a number", "give a plain number"
        )
    if not math.isfinite(value):
        return RuleProblem(
            "(overrides)", None, field, "override is not finite", "give a finite number"
        )
    if not model.minimum <= value <= model.maximum:
        return RuleProblem(
            "(overrides)",
            None,
            field,
            f"override {value:g} {model.unit} is outside {model.minimum:g} to {model.maximum:g}",
            f"choose a value between {model.minimum:g} and {model.maximum:g} {model.unit}",
        )
    return None


def build_parameters(
    models: Mapping[str, ParameterModel],
    overrides: Mapping[str, object],
    fact_names: frozenset[str],
) -> tuple[dict[str, float], dict[str, Parameter], list[RuleProblem]]:
    """Check the manifest's parameters and apply site overrides.

    Returns the accepted overrides as floats (for the content hash), the parameters and
    the problems found. Parameter names may not shadow fact names because both fill the
    same `{name}` placeholders in rationales.
    """
    problems: list[RuleProblem] = []
    for name, model in models.items():
        field = f"parameters.{name}"
        if name in fact_names:
            problems.append(
                RuleProblem(
                    MANIFEST, None, field, f"parameter {name} has the name of a fact",
                    "rename the parameter, e.g. with a _threshold or _limit suffix",
                )
            )  # fmt: skip
        if not model.minimum <= model.maximum:
            problems.append(
                RuleProblem(
                    MANIFEST, None, f"{field}.minimum", "minimum is above maximum",
                    "swap minimum and maximum",
                )
            )  # fmt: skip
        elif not model.minimum <= model.value <= model.maximum:
            problems.append(
                RuleProblem(
                    MANIFEST, None, f"{field}.value",
                    f"value {model.value:g} is outside {model.minimum:g} to {model.maximum:g}",
                    "correct the value or widen the range if the source supports it",
                )
            )  # fmt: skip
    accepted: dict[str, float] = {}
    for name, value in sorted(overrides.items()):
        target = models.get(name)
        if target is None:
            known = ", ".join(sorted(models)) or "none"
            problems.append(
                RuleProblem(
                    "(overrides)", None, f"parameters.{name}",
                    f"override names unknown parameter {name}",
                    f"override one of the manifest's parameters ({known})",
                )
            )  # fmt: skip
            continue
        problem = _override_problem(name, value, target)
        if problem is not None:
            problems.append(problem)
            continue
        accepted[name] = float(value)  # type: ignore[arg-type]
    parameters = {
        name: Parameter(
            name=name,
            value=accepted.get(name, model.value),
            unit=model.unit,
            description=model.description,
            minimum=model.minimum,
            maximum=model.maximum,
            source=model.source,
            default=model.value,
        )
        for name, model in models.items()
    }
    return accepted, parameters, problems
