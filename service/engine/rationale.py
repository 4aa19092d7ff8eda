"""Rationale templates: sentences with `{fact_name}` and `{parameter_name}` placeholders.

A template is parsed once at load time. Parameter placeholders become literal text then,
because a parameter's value (including a site override) is fixed for the life of the
rule set; fact placeholders stay slots filled at evaluation time with the value, rounded
to the fact's display precision, and a readable unit. A missing fact is shown as "not known"
rather than hiding the gap (the trace names which fact it was).

Only bare names are allowed: no attribute access, indexing, format specs or conversions,
so a template can never reach into anything but the facts.
"""

from collections.abc import Mapping
from dataclasses import dataclass
from string import Formatter

from service.engine.facts import FactKind, FactSpec
from service.engine.parameters import Parameter

__all__ = ["Template", "compile_template", "format_quantity", "format_value"]

# UCUM codes are exact but not what a reader expects in a sentence.
_DISPLAY_UNITS: dict[str, str] = {
    "mm[Hg]": "mmHg",
    "cm[H2O]": "cmH2O",
    "Cel": "°C",
    "a": "years",
    "[pH]": "",
    "1": "",
}
_UNSPACED_UNITS = frozenset({"%", "/min"})


def _with_unit(number: str, unit: str) -> str:
    display = _DISPLAY_UNITS.get(unit, unit)
    if not display:
        return number
    if display in _UNSPACED_UNITS:
        return number + display
    return f"{number} {display}"


def format_quantity(value: float, decimals: int, unit: str) -> str:
    """Format a measured or derived number with fixed decimals and a display unit."""
    text = f"{value:.{decimals}f}"
    if text[0] == "-" and float(text) == 0:
        text = text[1:]  # a tiny negative difference should not print as "-0.0"
    return _with_unit(text, unit)


def format_value(spec: FactSpec, value: float | bool | str) -> str:
    """Format a fact value of any kind for a sentence."""
    if spec.kind is FactKind.QUANTITY:
        return format_quantity(float(value), spec.decimals, spec.unit or "1")
    if spec.kind is FactKind.BOOLEAN:
        return "yes" if value else "no"
    return str(value)


def _format_parameter(parameter: Parameter) -> str:
    # Thresholds are written by people; `g` prints them as written (45, 0.21, 7.35).
    return _with_unit(f"{parameter.value:g}", parameter.unit)


# What a rationale shows for a fact that was not sent or could not be derived. The trace and
# `explain` name the missing fact itself; a sentence for clinicians stays readable.
NOT_KNOWN = "not known"


@dataclass(frozen=True, slots=True)
class Template:
    """A parsed rationale: literal text interleaved with fact slots."""

    source: str
    parts: tuple[str | FactSpec, ...]

    @property
    def facts(self) -> tuple[str, ...]:
        """Names of the facts the template shows."""
        return tuple(part.name for part in self.parts if isinstance(part, FactSpec))

    def render(self, facts: Mapping[str, float | bool | str]) -> str:
        """Fill the fact slots from `facts`."""
        out: list[str] = []
        for part in self.parts:
            if isinstance(part, str):
                out.append(part)
                continue
            value = facts.get(part.name)
            out.append(NOT_KNOWN if value is None else format_value(part, value))
        return "".join(out)


def compile_template(
    text: str, catalogue: Mapping[str, FactSpec], parameters: Mapping[str, Parameter]
) -> tuple[Template, list[tuple[str, str]]]:
    """Parse `text`; return the template and a list of (message, hint) problems."""
    problems: list[tuple[str, str]] = []
    parts: list[str | FactSpec] = []
    try:
        pieces = list(Formatter().parse(text))
    except ValueError as error:
        hint = "write literal braces as {{ and }}"
        return Template(text, (text,)), [(f"malformed placeholder: {error}", hint)]
    for literal, name, spec, conversion in pieces:
        if literal:
            parts.append(literal)
        if name is None:
            continue
        if spec or conversion or not name.isidentifier():
            problems.append(
                (
                    f"placeholder {{{name}}} is not a bare name",
                    "write {fact_name} or {parameter_name} without format specs or conversions",
                )
            )
        elif name in catalogue:
            parts.append(catalogue[name])
        elif name in parameters:
            parts.append(_format_parameter(parameters[name]))
        else:
            problems.append(
                (
                    f"placeholder {{{name}}} is neither a fact nor a parameter",
                    "use a fact from the catalogue or a parameter from ruleset.yaml",
                )
            )
    # Adjacent literals are joined so rendering touches as few parts as possible.
    merged: list[str | FactSpec] = []
    for part in parts:
        if isinstance(part, str) and merged and isinstance(merged[-1], str):
            merged[-1] += part
        else:
            merged.append(part)
    return Template(text, tuple(merged)), problems
