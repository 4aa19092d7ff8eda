"""The one door to ``fhir.resources`` (FHIR R4B models), opened only when asked.

Validating with the R4B models costs ~90× a JSON parse and importing them ~220 ms
(README, Performance), so the per-request path never comes here: ``fhir.resources`` is imported
inside the functions below, never at module level. Uses: the optional strict input mode
(``validate_strict``) and the tests' check that every produced resource is valid R4B
(``validate_resource``).

The R4B models do not check required-binding codes (``status: "bogus"`` passes;
tests/fhir/test_models.py shows it), so strict mode adds that check for the code sets the
service depends on.
"""

from __future__ import annotations

from collections.abc import Mapping
from functools import lru_cache
from typing import TYPE_CHECKING, Any

from service.fhir import codes
from service.fhir.outcome import IssueType, LocatedError, Problem, error

if TYPE_CHECKING:
    from pydantic import ValidationError


_STATUSES = codes.OBSERVATION_STATUSES
_GENDERS = codes.ADMINISTRATIVE_GENDERS


class InvalidResourceError(LocatedError):
    """A resource the service produced (or was given) is not valid FHIR R4B."""


def _fhirpath(root: str, loc: tuple[int | str, ...]) -> str:
    """A pydantic error location as FHIRPath: ('entry', 2, 'status') → Bundle.entry[2].status."""
    path = root
    for part in loc:
        if isinstance(part, int):
            path += f"[{part}]"
        elif part.replace("_", "").isalnum():
            path += f".{part}"
        # other parts name pydantic validators (``function-after[...]``), not FHIR elements
    return path


def _problems(exc: ValidationError, root: str) -> list[Problem]:
    found: list[Problem] = []
    for err in exc.errors(include_url=False, include_input=False):
        code: IssueType = "value"
        if err["type"] == "missing":
            code = "required"
        elif err["type"] == "extra_forbidden":
            code = "structure"
        found.append(error(code, err["msg"], _fhirpath(root, tuple(err["loc"]))))
    return found


def _binding_problems(bundle: Mapping[str, Any]) -> list[Problem]:
    """Required-binding codes the R4B models let through, for the elements the service reads."""
    found: list[Problem] = []
    kind = bundle.get("type")
    if isinstance(kind, str) and kind not in codes.BUNDLE_TYPES:
        found.append(error("code-invalid", "not an R4 Bundle type", "Bundle.type"))
    entries = bundle.get("entry")
    for i, entry in enumerate(entries if isinstance(entries, list) else []):
        resource = entry.get("resource") if isinstance(entry, dict) else None
        if not isinstance(resource, dict):
            continue
        at = f"Bundle.entry[{i}].resource"
        kind = resource.get("resourceType")
        status, gender = resource.get("status"), resource.get("gender")
        if kind == "Observation" and isinstance(status, str) and status not in _STATUSES:
            found.append(error("code-invalid", "not an R4 Observation status", f"{at}.status"))
        if kind == "Patient" and isinstance(gender, str) and gender not in _GENDERS:
            found.append(error("code-invalid", "not an R4 administrative gender", f"{at}.gender"))
    return found


def validate_strict(data: object) -> list[Problem]:
    """Every problem the R4B Bundle model (plus the required bindings we rely on) finds.

    An empty list means the input is a valid R4B Bundle. Never raises for bad input.
    """
    from fhir.resources.R4B.bundle import Bundle
    from pydantic import ValidationError

    if not isinstance(data, dict) or data.get("resourceType") != "Bundle":
        return [error("structure", "expected a FHIR Bundle resource", "Bundle")]
    try:
        Bundle.model_validate(data)
    except ValidationError as exc:
        problems = _problems(exc, "Bundle")
    except (TypeError, ValueError) as exc:  # a model that fails outside pydantic's own checks
        problems = [error("structure", f"not a valid R4B Bundle ({type(exc).__name__})", "Bundle")]
    else:
        problems = []
    return problems + _binding_problems(data)


def validate_resource(data: Mapping[str, Any]) -> None:
    """Check one resource (any type) against its R4B model.

    Raises:
        InvalidResourceError: not valid R4B; each problem located from the resource type.
    """
    from fhir.resources.R4B import get_fhir_model_class
    from pydantic import ValidationError

    kind = data.get("resourceType")
    if not isinstance(kind, str):
        raise InvalidResourceError([error("required", "'resourceType' is required", "Resource")])
    try:
        model = get_fhir_model_class(kind)
    except (KeyError, ValueError) as exc:
        raise InvalidResourceError(
            [error("not-supported", f"not an R4B resource type: {kind}", kind)]
        ) from exc
    try:
        model.model_validate(dict(data))
    except ValidationError as exc:
        raise InvalidResourceError(_problems(exc, kind)) from exc


@lru_cache(maxsize=1024)
def is_resource_type(name: str) -> bool:
    """Whether ``name`` is a FHIR (R4B) resource type, as the R4B models know them.

    A data type (``Quantity``) or the abstract ``Resource`` and ``DomainResource`` are not.
    """
    if not name.isascii() or not name.isalpha() or not name[:1].isupper():
        return False
    from fhir.resources.R4B import get_fhir_model_class
    from fhir.resources.R4B.resource import Resource

    try:
        model = get_fhir_model_class(name)
    except ValueError:
        return False
    return issubclass(model, Resource) and name not in ("Resource", "DomainResource")
