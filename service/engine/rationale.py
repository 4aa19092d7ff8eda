"""Rationale templates: sentences with `{fact_name}` and `{parameter_name}` placeholders.

A template is parsed once at load time. Parameter placeholders are formatted then, because a
parameter's value (including a site override) is fixed for the life of the rule set; fact
placeholders stay slots filled at evaluation time with the value, rounded to the fact's
display precision, and a readable unit. A missing fact is shown as "not known" rather than
hiding the gap (the trace names which fact it was).

The unit a sentence shows is a rendering choice: ``render(facts, units)`` shows every number
whose catalogue unit is a key of ``units`` in the ``DisplayUnit`` given (a reader who asked for
kPa reads "PaCO2 8.67 kPa is above 6 kPa", from the same rule and the same facts). The engine
knows no conversion factor itself; the caller passes it.

Only bare names are allowed: no attribute access, indexing, format specs or conversions,
so a template can never reach into anything but the facts.
"""

from collections.abc import Mapping
from dataclasses import dataclass
from string import Formatter

from service.engine.facts import FactKind, FactSpec
from service.engine.parameters import Parameter

__all__ = [
    "DisplayUnit",
    "Template",
    "Units",
    "compile_template",
    "format_quantity",
    "format_value",
]


@dataclass(frozen=True, slots=True)
class DisplayUnit:
    """A unit a reader asked for in place of a catalogue unit."""

    unit: str
    """UCUM code of the unit shown, e.g. ``kPa``."""
    per_catalogue_unit: float
    """How many of it make one catalogue unit (0.133322 kPa per mm[Hg])."""
    extra_decimals: int = 0
    """Decimals shown beyond the fact's own (a kPa needs one more than a mmHg)."""
    parameter_decimals: int = 2
    """Decimals a converted threshold is rounded to before it is printed as written."""


Units = Mapping[str, DisplayUnit]
"""Display units keyed by the catalogue unit they replace; empty: catalogue units."""
NO_UNITS: Units = {}

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


def format_quantity(value: float, decimals: int, unit: str, units: Units = NO_UNITS) -> str:
    """Format a measured or derived number with fixed decimals and a display unit."""
    shown = units.get(unit)
    if shown is not None:
        value, unit = value * shown.per_catalogue_unit, shown.unit
        decimals += shown.extra_decimals
    text = f"{value:.{decimals}f}"
    if text[0] == "-" and float(text) == 0:
        text = text[1:]  # a tiny negative difference should not print as "-0.0"
    return _with_unit(text, unit)


def format_value(spec: FactSpec, value: float | bool | str, units: Units = NO_UNITS) -> str:
    """Format a fact value of any kind for a sentence."""
    if spec.kind is FactKind.QUANTITY:
        return format_quantity(float(value), spec.decimals, spec.unit or "1", units)
    if spec.kind is FactKind.BOOLEAN:
        return "yes" if value else "no"
    return str(value)


def _format_parameter(parameter: Parameter, units: Units = NO_UNITS) -> str:
    # Thresholds are written by people; `g` prints them as written (45, 0.21, 7.35). A
    # converted one is rounded first, so 45 mmHg reads 6 kPa rather than 5.99949 kPa.
    shown = units.get(parameter.unit)
    if shown is None:
        return _with_unit(f"{parameter.value:g}", parameter.unit)
    value = round(parameter.value * shown.per_catalogue_unit, shown.parameter_decimals) + 0.0
    return _with_unit(f"{value:g}", shown.unit)


@dataclass(frozen=True, slots=True)
class _ParameterSlot:
    """A parameter placeholder: its text in the catalogue unit, made once, and the parameter
    to format again when another unit is asked for."""

    parameter: Parameter
    text: str


@dataclass(frozen=True, slots=True)
class _FactSlot:
    """A fact placeholder: the fact's catalogue entry, and what a number of it shown in its
    catalogue unit needs (``format_quantity``'s format and unit text), worked out once."""

    spec: FactSpec
    quantity: bool
    """Whether the fact is a quantity (its floats are shown by ``format_quantity``)."""
    unit: str
    """The catalogue unit (``1`` for none)."""
    shape: str
    """The format of its number: ``.1f`` for one decimal."""
    suffix: str
    """What follows the number in the catalogue unit: `` mmHg``, ``%`` or nothing."""

    @classmethod
    def of(cls, spec: FactSpec) -> "_FactSlot":
        unit = spec.unit or "1"
        suffix = _with_unit("", unit)  # the number's text, then this (``_with_unit``)
        return cls(spec, spec.kind is FactKind.QUANTITY, unit, f".{spec.decimals}f", suffix)

    def shown(self, value: float, units: Units) -> str:
        """``format_quantity(value, decimals, unit, units)`` of a quantity's float."""
        if units and self.unit in units:
            return format_quantity(value, self.spec.decimals, self.unit, units)
        text = format(value, self.shape)
        if text[0] == "-" and float(text) == 0:
            text = text[1:]  # as ``format_quantity``: no "-0.0"
        return text + self.suffix


# What a rationale shows for a fact that was not sent or could not be derived. The trace and
# `explain` name the missing fact itself; a sentence for clinicians stays readable.
NOT_KNOWN = "not known"


@dataclass(frozen=True, slots=True)
class Template:
    """A parsed rationale: literal text interleaved with fact slots."""

    source: str
    parts: tuple[str | _FactSlot | _ParameterSlot, ...]

    @property
    def facts(self) -> tuple[str, ...]:
        """Names of the facts the template shows."""
        return tuple(part.spec.name for part in self.parts if isinstance(part, _FactSlot))

    def render(self, facts: Mapping[str, float | bool | str], units: Units = NO_UNITS) -> str:
        """Fill the slots from `facts`, numbers in `units` where it names their unit."""
        out: list[str] = []
        append = out.append
        for part in self.parts:
            # exact types: literals are str, slots are made here
            if type(part) is str:
                append(part)
            elif type(part) is _ParameterSlot:
                append(_format_parameter(part.parameter, units) if units else part.text)
            elif type(part) is _FactSlot:
                spec = part.spec
                value = facts.get(spec.name)
                if value is None:
                    append(NOT_KNOWN)
                    continue
                if type(value) is float:
                    # As stated (``FactCatalogue.as_stated``); the engine rounds only the facts
                    # its rules compare, and rounding again changes nothing.
                    value = round(value, spec.decimals)
                    if part.quantity:  # ``format_value``'s usual case, direct
                        append(part.shown(value, units))
                        continue
                append(format_value(spec, value, units))
        return "".join(out)


def compile_template(
    text: str, catalogue: Mapping[str, FactSpec], parameters: Mapping[str, Parameter]
) -> tuple[Template, list[tuple[str, str]]]:
    """Parse `text`; return the template and a list of (message, hint) problems."""
    problems: list[tuple[str, str]] = []
    parts: list[str | _FactSlot | _ParameterSlot] = []
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
            parts.append(_FactSlot.of(catalogue[name]))
        elif name in parameters:
            parameter = parameters[name]
            parts.append(_ParameterSlot(parameter, _format_parameter(parameter)))
        else:
            problems.append(
                (
                    f"placeholder {{{name}}} is neither a fact nor a parameter",
                    "use a fact from the catalogue or a parameter from ruleset.yaml",
                )
            )
    # Adjacent literals are joined so rendering touches as few parts as possible.
    merged: list[str | _FactSlot | _ParameterSlot] = []
    for part in parts:
        if isinstance(part, str) and merged and isinstance(merged[-1], str):
            merged[-1] += part
        else:
            merged.append(part)
    return Template(text, tuple(merged)), problems
