"""Small builders for invented test Bundles (every resource tagged HTEST, no real people)."""

from __future__ import annotations

import copy
import json
from pathlib import Path
from typing import Any

from service.fhir import codes as fhir_codes
from service.terminology import codes

ROOT = Path(__file__).resolve().parents[2]
FIXTURES = ROOT / "fixtures" / "intake"
HTEST = {"system": fhir_codes.TEST_DATA_TAG_SYSTEM, "code": fhir_codes.TEST_DATA_TAG_CODE}
WHEN = "2026-01-05T10:00:00+01:00"

Json = dict[str, Any]


def tagged(resource: Json) -> Json:
    """The resource with the HTEST tag in ``meta.tag``."""
    meta = resource.setdefault("meta", {})
    meta.setdefault("tag", []).append(dict(HTEST))
    return resource


def quantity(value: object, unit: str | None) -> Json:
    """A UCUM valueQuantity (no unit element at all when ``unit`` is None)."""
    q: Json = {"value": value}
    if unit is not None:
        q.update(system=codes.UCUM, code=unit)
    return q


def observation(
    code: str | list[tuple[str, str]],
    value: object = None,
    unit: str | None = None,
    *,
    oid: str = "obs-1",
    status: object = "final",
    system: str = codes.LOINC,
    **extra: Any,
) -> Json:
    """An Observation; ``code`` is a LOINC code or a list of (system, code) codings."""
    pairs = [(system, code)] if isinstance(code, str) else code
    resource: Json = {
        "resourceType": "Observation",
        "id": oid,
        "status": status,
        "code": {"coding": [{"system": s, "code": c} for s, c in pairs]},
        "subject": {"reference": "Patient/pt-1"},
        "effectiveDateTime": WHEN,
    }
    if value is not None:
        resource["valueQuantity"] = quantity(value, unit)
    resource.update(extra)
    return tagged(resource)


def patient(pid: str = "pt-1", **extra: Any) -> Json:
    """An invented Patient."""
    resource: Json = {"resourceType": "Patient", "id": pid, "birthDate": "1961-04-12"}
    resource.update(extra)
    return tagged(resource)


def bundle(*resources: Json, kind: str = "collection") -> Json:
    """A Bundle of the resources, each entry with a fullUrl."""
    entries = []
    for n, resource in enumerate(resources):
        rid = resource.get("id", f"n{n}")
        url = f"https://example.org/fhir/{resource['resourceType']}/{rid}"
        entries.append({"fullUrl": url, "resource": resource})
    return tagged({"resourceType": "Bundle", "type": kind, "entry": entries})


def fixture(name: str) -> Json:
    """A fixture Bundle from ``fixtures/intake`` (a fresh copy)."""
    data: Json = json.loads((FIXTURES / name).read_text(encoding="utf-8"))
    return copy.deepcopy(data)


def fixture_names() -> list[str]:
    """The file names of every fixture Bundle."""
    return sorted(p.name for p in FIXTURES.glob("*.bundle.json"))
