"""The input of ``$assess-hypoxaemia``: the Bundle itself, or a Parameters resource holding it.

FHIR operations take their input as a ``Parameters`` resource (R4 operations.html); the
OperationDefinition names ``resource`` (the Bundle) and ``units`` (a code). The service also
takes the Bundle as the whole body, as before. ``operation_input`` returns the Bundle, the
``units`` code if the body gave one, and the FHIRPath of the Bundle inside the body, so every
located problem and issue points into what was actually sent (``rebase``).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import TypeVar

from msgspec.structs import replace as struct_replace  # the intake records are Structs

from service.fhir.outcome import BundleError, LocatedError, NotABundleError, Problem, error
from service.intake.model import Intake

BUNDLE = "Bundle"
Located = TypeVar("Located", bound=LocatedError)
PARAMETERS_IN = frozenset({"resource", "units"})


@dataclass(frozen=True, slots=True)
class OperationInput:
    """What the body holds: the Bundle, the ``units`` code sent with it, and where it sits."""

    bundle: object
    units: str | None = None
    units_at: str | None = None
    root: str = BUNDLE  # the FHIRPath of the Bundle in the body


def operation_input(data: object) -> OperationInput:
    """The operation's input from the parsed body.

    Raises:
        NotABundleError: a Parameters body without a Bundle in ``resource`` (HTTP 400).
        BundleError: a Parameters body with a parameter the operation does not define, or
            one given twice, or ``units`` not a valueCode (HTTP 422).
    """
    if not isinstance(data, dict) or data.get("resourceType") != "Parameters":
        return OperationInput(data)
    parameters = data.get("parameter")
    if not isinstance(parameters, list):
        where = "Parameters"
        raise NotABundleError(
            [error("required", "a `resource` parameter holding the Bundle is required", where)]
        )
    problems: list[Problem] = []
    found: dict[str, tuple[int, dict[str, object]]] = {}
    for i, parameter in enumerate(parameters):
        at = f"Parameters.parameter[{i}]"
        name = parameter.get("name") if isinstance(parameter, dict) else None
        if not isinstance(parameter, dict) or name not in PARAMETERS_IN:
            problems.append(error("not-supported", "a parameter the operation does not define", at))
        elif name in found:
            problems.append(error("structure", f"`{name}` is given more than once (max 1)", at))
        else:
            found[str(name)] = (i, parameter)
    units, units_at = None, None
    if "units" in found:
        i, parameter = found["units"]
        units_at = f"Parameters.parameter[{i}].valueCode"
        code = parameter.get("valueCode")
        if not isinstance(code, str):
            problems.append(
                error("structure", "`units` is a valueCode", f"Parameters.parameter[{i}]")
            )
        else:
            units = code
    if "resource" not in found:
        problems.append(
            error("required", "a `resource` parameter holding the Bundle is required", "Parameters")
        )
        raise NotABundleError(problems)
    i, parameter = found["resource"]
    bundle = parameter.get("resource")
    root = f"Parameters.parameter[{i}].resource"
    if not isinstance(bundle, dict) or bundle.get("resourceType") != "Bundle":
        where = root if isinstance(bundle, dict) else f"Parameters.parameter[{i}]"
        diagnostics = "the `resource` parameter must hold a Bundle"
        raise NotABundleError([*problems, error("structure", diagnostics, where)])
    if problems:
        raise BundleError(problems)
    return OperationInput(bundle, units, units_at, root)


def rebased_path(expression: str, root: str) -> str:
    """``expression`` (rooted at ``Bundle``) rooted at ``root`` instead."""
    if root == BUNDLE or not (expression == BUNDLE or expression.startswith(BUNDLE + ".")):
        return expression
    return root + expression[len(BUNDLE) :]


def rebased_intake(intake: Intake, root: str) -> Intake:
    """The intake with every location rooted at ``root`` (the Bundle inside a Parameters)."""
    if root == BUNDLE:
        return intake
    intake.issues = [
        struct_replace(i, expression=rebased_path(i.expression, root)) for i in intake.issues
    ]
    intake.measurements = [
        struct_replace(
            m, source=struct_replace(m.source, expression=rebased_path(m.source.expression, root))
        )
        for m in intake.measurements
    ]
    return intake


def rebased_error(exc: Located, root: str) -> Located:
    """The same refusal, its problems located from ``root``."""
    if root == BUNDLE:
        return exc
    problems = [replace(p, expression=rebased_path(p.expression, root)) for p in exc.problems]
    return type(exc)(problems)
