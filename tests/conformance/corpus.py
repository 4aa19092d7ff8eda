"""What the conformance checks run over: every fixture, and every error-producing test input.

``fixture_inputs()`` lists every ``*.bundle.json`` and ``*.hl7`` under ``fixtures/`` (as
``.ci/run`` does); ``error_inputs()`` lists invented inputs that the service must refuse or
report on (a FHIR body with the element each refusal must locate), from the hostile corpus
(``tests/hostile/corpus.py``) and a list of our own below. ``outputs()`` answers each one
through the functions the HTTP routes call (``service.api.answers``) and keeps what came out.
"""

from __future__ import annotations

import copy
import json
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from functools import cache
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[2]
FIXTURES = ROOT / "fixtures"
DEMO = FIXTURES / "demo" / "altitude-visitor.bundle.json"
V2_DEMO = FIXTURES / "hl7v2" / "altitude-visitor.hl7"

Json = dict[str, Any]


@dataclass(frozen=True, slots=True)
class Input:
    """One input as sent: a FHIR body (bytes, JSON or not) or an HL7 v2 message."""

    name: str
    kind: str  # "fhir" or "hl7v2"
    body: bytes


@dataclass(slots=True)
class Output:
    """What the service answered to one input, in every form it can answer."""

    input: Input
    sent: object  # the parsed FHIR body (None: not JSON, or an HL7 v2 message)
    fhir: list[Json] = field(default_factory=list)  # result Bundles and OperationOutcomes
    er7: list[str] = field(default_factory=list)  # HL7 v2 replies


def fixture_inputs() -> list[Input]:
    """Every fixture input, in path order."""
    found = sorted(FIXTURES.rglob("*.bundle.json")) + sorted(FIXTURES.rglob("*.hl7"))
    return [
        Input(
            str(p.relative_to(FIXTURES)),
            "hl7v2" if p.suffix == ".hl7" else "fhir",
            p.read_bytes(),
        )
        for p in found
    ]


def _demo() -> Json:
    data: Json = json.loads(DEMO.read_bytes())
    return data


def _gas(bundle: Json) -> Json:
    entry = next(e for e in bundle["entry"] if "valueQuantity" in e["resource"])
    resource: Json = entry["resource"]
    return resource


def _edit(change: Callable[[Json], object]) -> bytes:
    bundle = _demo()
    change(bundle)
    return json.dumps(bundle).encode()


def _set(target: Json, key: str, value: object) -> None:
    target[key] = value


def _own_error_inputs() -> Iterator[Input]:
    """Inputs of our own that each exercise one way of locating a problem."""

    def case(name: str, change: Callable[[Json], object]) -> Input:
        return Input(name, "fhir", _edit(change))

    yield case("gas-without-code", lambda b: _gas(b).pop("code"))
    yield case("gas-without-status", lambda b: _gas(b).pop("status"))
    yield case(
        "gas-misspelt-value", lambda b: _set(_gas(b), "valueQty", _gas(b).pop("valueQuantity"))
    )
    yield case("gas-value-string", lambda b: _set(_gas(b)["valueQuantity"], "value", "low"))
    yield case("gas-value-missing", lambda b: _gas(b)["valueQuantity"].pop("value"))
    yield case(
        "gas-unit-missing",
        lambda b: [_gas(b)["valueQuantity"].pop(k) for k in ("code", "system", "unit")],
    )
    yield case("gas-status-invented", lambda b: _set(_gas(b), "status", "bogus"))
    yield case("gas-coding-not-object", lambda b: _set(_gas(b)["code"], "coding", ["x"]))
    yield case("gas-time-invalid", lambda b: _set(_gas(b), "effectiveDateTime", "yesterday"))
    yield case("gas-two-values", lambda b: _set(_gas(b), "valueString", "low"))
    yield case("bundle-type-invented", lambda b: _set(b, "type", "pile"))
    yield case("bundle-entry-not-list", lambda b: _set(b, "entry", {}))
    yield case("entry-without-resource", lambda b: b["entry"][0].pop("resource"))
    yield case("resource-without-type", lambda b: b["entry"][0]["resource"].pop("resourceType"))
    yield case(
        "patient-birthdate-invalid", lambda b: _set(b["entry"][0]["resource"], "birthDate", "soon")
    )
    yield case(
        "gas-unknown-modifier",
        lambda b: _set(
            _gas(b),
            "modifierExtension",
            [
                {
                    "url": "https://example.org/fhir/StructureDefinition/not-done",
                    "valueBoolean": True,
                }
            ],
        ),
    )
    yield case(
        "gas-implicit-rules", lambda b: _set(_gas(b), "implicitRules", "https://example.org/rules")
    )
    yield case(
        "gas-unit-other-system",
        lambda b: _set(_gas(b)["valueQuantity"], "system", "https://example.org/units"),
    )
    yield case(
        "gas-unit-text-only",
        lambda b: _set(
            _gas(b), "valueQuantity", {"value": _gas(b)["valueQuantity"]["value"], "unit": "mmHg"}
        ),
    )
    yield Input(
        "not-a-bundle-patient", "fhir", json.dumps(_demo()["entry"][0]["resource"]).encode()
    )
    yield Input("not-json", "fhir", b"this is not JSON")
    yield Input("json-array", "fhir", b"[]")


def _hostile_inputs() -> Iterator[Input]:
    from tests.hostile import corpus as hostile

    for case in hostile.CASES:
        if case.transport != "http" or case.path != "/fhir/$assess-hypoxaemia":
            continue
        body = case.body()
        if len(body) > 256 * 1024 or case.headers.get("Content-Type") != hostile.FHIR_JSON:
            continue  # the budget cases: refused before anything is read
        if case.params or "fhirVersion" in case.headers.get("Content-Type", ""):
            continue  # refused on a header or parameter: checked by the HTTP tests
        yield Input(f"hostile-{case.name}", "fhir", body)


def error_inputs() -> list[Input]:
    """Every error-producing input the conformance checks run over."""
    return [*_own_error_inputs(), *_hostile_inputs(), *_v2_error_inputs()]


def _v2_lines() -> list[str]:
    text = V2_DEMO.read_bytes().decode()
    return [s for s in text.replace("\r\n", "\r").replace("\n", "\r").split("\r") if s]


def _v2(name: str, edit: Callable[[list[list[str]]], object]) -> Input:
    segments = [line.split("|") for line in _v2_lines()]
    edit(segments)
    return Input(name, "hl7v2", "\r".join("|".join(s) for s in segments).encode() + b"\r")


def _field(segments: list[list[str]], segment: str, number: int, value: str) -> None:
    fields = next(s for s in segments if s[0] == segment)
    index = number if segment != "MSH" else number - 1
    fields += [""] * (index + 1 - len(fields))
    fields[index] = value


def _v2_error_inputs() -> Iterator[Input]:
    for version in ("2.3", "2.3.1", "2.4", "2.5", "2.5.1", "2.6", "2.7", "2.7.1", "2.8"):

        def labelled(s: list[list[str]], v: str = version) -> None:
            _field(s, "MSH", 12, v)

        def bad_value(s: list[list[str]], v: str = version) -> None:
            _field(s, "MSH", 12, v)
            _field(s, "OBX", 5, "low")

        yield _v2(f"v2-version-{version}", labelled)
        yield _v2(f"v2-version-{version}-bad-value", bad_value)
    yield _v2("v2-version-2.1", lambda s: _field(s, "MSH", 12, "2.1"))
    yield _v2("v2-no-control-id", lambda s: _field(s, "MSH", 10, ""))
    yield _v2("v2-unit-local", lambda s: _field(s, "OBX", 6, "mm[Hg]^mmHg^99LOCAL"))


@cache
def runtime() -> Any:
    from service.runtime import Runtime

    return Runtime.load()


def _parsed(body: bytes) -> object:
    try:
        return json.loads(body)
    except (ValueError, RecursionError):
        return None


def answer(item: Input) -> Output:
    """Every answer the service gives to ``item``."""
    from service.api.answers import answer_bundle, answer_v2
    from service.hl7v2.handle import Reply
    from service.hl7v2.message import DEFAULT_LIMITS
    from service.intake.limits import DEFAULT_READ_LIMITS

    rt = runtime()
    if item.kind == "fhir":
        out = Output(item, _parsed(item.body))
        for unit in ("mm[Hg]", "kPa"):
            answered = answer_bundle(rt, item.body, unit, DEFAULT_READ_LIMITS)
            out.fhir.append(json.loads(answered.body))
            if answered.status != 200:
                break  # a refusal does not depend on the unit
        return out
    out = Output(item, None)
    replies: tuple[Reply, ...] = ("ack", "result", "fhir")
    for reply in replies:
        response = answer_v2(rt, item.body, reply, None, DEFAULT_LIMITS)
        if reply == "fhir":
            out.fhir.append(json.loads(response.body))
        else:
            out.er7.append(response.body.decode())
    return out


@cache
def outputs() -> dict[str, Output]:
    """Every input's answers, computed once per process."""
    return {i.name: answer(i) for i in [*fixture_inputs(), *error_inputs()]}


def with_copy(data: Json) -> Json:
    return copy.deepcopy(data)
