"""The hostile-input corpus: inputs a careless integration engine or an attacker would send.

Each ``Case`` is a recipe (most inputs are large, so they are built, not stored), what it
must be answered with (status, and for a refusal where it is located), and bounds on the time
and memory the answer may take. Every text sent that the service must not repeat carries
``MARKER``, an invented name; no answer may contain it.

Where a case is one of issue 13's defects, its comment says what it did before.
"""

from __future__ import annotations

import base64
import json
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "fixtures" / "demo" / "altitude-visitor.bundle.json"
V2_DEMO = ROOT / "fixtures" / "hl7v2" / "altitude-visitor.hl7"
MARKER = "INVENTEDNAME-ZQX"  # an invented name planted wherever input could be echoed

FHIR_JSON = "application/fhir+json"
NDJSON = "application/fhir+ndjson"
V2 = "x-application/hl7-v2+er7"


@dataclass(frozen=True, slots=True)
class Case:
    """One hostile input and what its answer must be."""

    name: str
    transport: str  # http (a Bundle), ndjson, hl7v2 (HTTP), mllp, jwt
    body: Callable[[], bytes]
    status: int  # HTTP status (mllp: 0)
    # The expression, HTTP location (or HL7 v2 ERR-2) that must locate the refusal; '' when
    # the body as a whole is at fault (no element of it can be named); None: not checked.
    where: str | None
    seconds: float = 2.0  # bound on the answer's time (generous: shared machine, and tracing)
    mebibytes: float = 64.0  # bound on the peak of memory allocated while answering
    headers: dict[str, str] = field(default_factory=dict)
    params: dict[str, str] = field(default_factory=dict)
    path: str = "/fhir/$assess-hypoxaemia"
    ack: str | None = None  # HL7 v2: the MSA-1 expected
    method: str = "POST"


def demo() -> dict[str, Any]:
    data: dict[str, Any] = json.loads(DEMO.read_bytes())
    return data


def dumps(data: object) -> bytes:
    return json.dumps(data).encode()


def with_entries(count: int, resource: dict[str, Any]) -> bytes:
    bundle = demo()
    bundle["entry"] += [{"resource": resource} for _ in range(count)]
    return dumps(bundle)


def changed(path: list[str | int], value: object) -> Callable[[], bytes]:
    def build() -> bytes:
        data: Any = demo()
        target = data
        for key in path[:-1]:
            target = target[key]
        target[path[-1]] = value
        return dumps(data)

    return build


def components(count: int) -> bytes:
    """One Observation holding ``count`` PaO2 components (each read as a value)."""
    bundle = demo()
    index = _quantity_index()
    resource = bundle["entry"][index]["resource"]
    component = {"code": resource["code"], "valueQuantity": resource.pop("valueQuantity")}
    resource["code"] = {"coding": [{"system": "http://loinc.org", "code": "24336-0"}]}
    resource["component"] = [component] * count
    return dumps(bundle)


def without(key: str) -> Callable[[], bytes]:
    def build() -> bytes:
        data = demo()
        del data[key]
        return dumps(data)

    return build


def _quantity_index() -> int:
    return next(i for i, e in enumerate(demo()["entry"]) if "valueQuantity" in e["resource"])


def duplicate_key() -> bytes:
    text = DEMO.read_text()
    value = demo()["entry"][_quantity_index()]["resource"]["valueQuantity"]["value"]
    return text.replace(f'"value": {value},', f'"value": {value}, "value": 30,', 1).encode()


def v2(transform: Callable[[list[str]], list[str]]) -> Callable[[], bytes]:
    def build() -> bytes:
        segments = V2_DEMO.read_text().replace("\r\n", "\n").split("\n")
        return "\r".join(transform([s for s in segments if s])).encode()

    return build


def field_of(segment: str, number: int, value: str) -> Callable[[list[str]], list[str]]:
    def transform(segments: list[str]) -> list[str]:
        index = next(i for i, s in enumerate(segments) if s.startswith(segment))
        fields = segments[index].split("|")
        fields += [""] * (number + 1 - len(fields))
        fields[number if segment != "MSH" else number - 1] = value
        segments[index] = "|".join(fields)
        return segments

    return transform


def jwt(header: dict[str, Any]) -> Callable[[], bytes]:
    def encode(part: dict[str, Any]) -> str:
        return base64.urlsafe_b64encode(json.dumps(part).encode()).rstrip(b"=").decode()

    token = f"{encode(header)}.{encode({'iss': 'x', 'aud': 'y'})}.c2lnbmF0dXJl"
    return lambda: token.encode()


NDJSON_LINE = json.dumps(json.loads(DEMO.read_bytes())).encode()

CASES: tuple[Case, ...] = (
    # --- HTTP, one Bundle ---------------------------------------------------------------
    # 100,000 entries it does not read (3.7 MB): answered 47 MB, 100,004 issues, ~2 s before.
    Case(
        "bundle-100k-ignored-entries",
        "http",
        lambda: with_entries(100_000, {"resourceType": "Condition"}),
        413,
        "Bundle.entry",
        seconds=10.0,
        mebibytes=160.0,
        headers={"Content-Type": FHIR_JSON},
    ),
    Case(
        "bundle-1000-entries-at-the-limit",
        "http",
        lambda: with_entries(989, {"resourceType": "Condition"}),
        200,
        None,
        headers={"Content-Type": FHIR_JSON},
    ),
    Case(
        "bundle-500-bad-units-condensed",
        "http",
        lambda: with_entries(
            500,
            {
                **demo()["entry"][_quantity_index()]["resource"],
                "valueQuantity": {"value": 50, "code": MARKER},
            },
        ),
        422,
        "Bundle.entry[11].resource.valueQuantity.code",
        headers={"Content-Type": FHIR_JSON},
    ),
    # 20,000 components in one Observation (3.3 MB): 3 s and a 10.8 MB answer, past the
    # entry budget, before components counted as entries.
    Case(
        "bundle-20k-components",
        "http",
        lambda: components(20_000),
        413,
        f"Bundle.entry[{_quantity_index()}].resource.component",
        seconds=4.0,
        mebibytes=96.0,
        headers={"Content-Type": FHIR_JSON},
    ),
    # PaO2 58 then 30 was assessed as 30.
    Case(
        "bundle-duplicate-json-key",
        "http",
        duplicate_key,
        422,
        f"Bundle.entry[{_quantity_index()}].resource.valueQuantity.value",
        headers={"Content-Type": FHIR_JSON},
    ),
    Case(
        "bundle-without-type",
        "http",
        without("type"),
        422,
        "Bundle",  # the element that lacks it: Bundle.type would select nothing
        headers={"Content-Type": FHIR_JSON},
    ),
    Case(
        "bundle-invented-resource-type",
        "http",
        lambda: dumps({"resourceType": MARKER}),
        400,
        "",
        headers={"Content-Type": FHIR_JSON},
    ),
    Case(
        "bundle-invented-unit",
        "http",
        changed(["entry", _quantity_index(), "resource", "valueQuantity", "code"], MARKER),
        422,
        f"Bundle.entry[{_quantity_index()}].resource.valueQuantity.code",
        headers={"Content-Type": FHIR_JSON},
    ),
    Case(
        "bundle-nested-5000-deep",
        "http",
        lambda: b"[" * 5000 + b"]" * 5000,
        400,
        "",
        headers={"Content-Type": FHIR_JSON},
    ),
    Case(
        "bundle-not-json",
        "http",
        lambda: b"\xff\xfe\x00" + MARKER.encode(),
        400,
        "",
        headers={"Content-Type": FHIR_JSON},
    ),
    Case(
        "bundle-over-the-body-limit",
        "http",
        lambda: b" " * (5 * 1024 * 1024 + 1),
        413,
        "http.Content-Length",
        headers={"Content-Type": FHIR_JSON},
    ),
    Case(
        "fhir-version-invented",
        "http",
        DEMO.read_bytes,
        415,
        "http.Content-Type",
        headers={"Content-Type": f"{FHIR_JSON}; fhirVersion={MARKER}"},
    ),
    Case(
        "format-invented",
        "http",
        DEMO.read_bytes,
        406,
        "http._format",
        headers={"Content-Type": FHIR_JSON},
        params={"_format": MARKER},
    ),
    Case(
        "media-type-invented",
        "http",
        DEMO.read_bytes,
        415,
        "http.Content-Type",
        headers={"Content-Type": f"application/{MARKER}"},
    ),
    Case(
        "trailing-slash",
        "http",
        DEMO.read_bytes,
        404,
        "http.path",
        headers={"Content-Type": FHIR_JSON},
        path="/fhir/$assess-hypoxaemia/",
    ),
    Case("unknown-method", "http", lambda: b"", 405, "http.method", method="PUT", path="/healthz"),
    # --- NDJSON -------------------------------------------------------------------------
    Case(
        "ndjson-invented-resource-type",
        "ndjson",
        lambda: dumps({"resourceType": MARKER}) + b"\n" + NDJSON_LINE + b"\n",
        200,
        "",
        headers={"Content-Type": NDJSON},
    ),
    Case(
        "ndjson-100k-blank-lines",
        "ndjson",
        lambda: b"\n" * 100_000 + NDJSON_LINE + b"\n",
        200,
        None,
        headers={"Content-Type": NDJSON},
    ),
    Case(
        "ndjson-duplicate-key-line",
        "ndjson",
        lambda: duplicate_key().replace(b"\n", b" ") + b"\n",
        200,
        f"Bundle.entry[{_quantity_index()}].resource.valueQuantity.value",
        headers={"Content-Type": NDJSON},
    ),
    Case(
        "ndjson-line-over-the-limit",
        "ndjson",
        lambda: b'{"x": "' + b"a" * (5 * 1024 * 1024) + b'"}\n' + NDJSON_LINE + b"\n",
        200,
        "",
        mebibytes=96.0,
        headers={"Content-Type": NDJSON},
    ),
    Case(
        "ndjson-amplification-line",
        "ndjson",
        lambda: with_entries(20_000, {"resourceType": "Condition"}) + b"\n",
        200,
        "Bundle.entry",
        seconds=10.0,
        mebibytes=160.0,
        headers={"Content-Type": NDJSON},
    ),
    # --- HL7 v2 over HTTP ---------------------------------------------------------------
    # 100,000 carets in one field (101 kB): 69 s of quadratic parsing, on the event loop.
    Case(
        "v2-100k-components",
        "hl7v2",
        v2(field_of("OBX", 5, "48" + "^" * 100_000)),
        400,
        "OBX^1^5",
        ack="AR",
        headers={"Content-Type": V2},
    ),
    Case(
        "v2-60k-repetitions",
        "hl7v2",
        v2(field_of("PID", 3, "X~" * 60_000)),
        400,
        "PID^1^3",
        ack="AR",
        headers={"Content-Type": V2},
    ),
    Case(
        "v2-subcomponents",
        "hl7v2",
        v2(field_of("OBX", 3, "2703-7&" * 5_000)),
        400,
        "OBX^1^3",
        ack="AR",
        headers={"Content-Type": V2},
    ),
    Case(
        "v2-600-segments",
        "hl7v2",
        v2(lambda s: s + ["NTE|1||invented comment"] * 600),
        400,
        "NTE^1",
        ack="AR",
        headers={"Content-Type": V2},
    ),
    Case(
        "v2-msh9-invented",
        "hl7v2",
        v2(field_of("MSH", 9, MARKER)),
        400,
        "MSH^1^9^1^1",
        ack="AR",
        headers={"Content-Type": V2},
    ),
    Case(
        "v2-unit-invented",
        "hl7v2",
        v2(field_of("OBX", 6, f"{MARKER}^^UCUM")),
        422,
        "OBX^1^6",
        ack="AE",
        headers={"Content-Type": V2},
    ),
    Case(
        "v2-binary",
        "hl7v2",
        lambda: bytes(range(256)) * 100,
        400,
        None,
        ack="AR",
        headers={"Content-Type": V2},
    ),
    # --- JWT (a JWKS is configured) -------------------------------------------------------
    # Each of these was a 500 on every protected route, before any signature check.
    Case("jwt-kid-number", "jwt", jwt({"alg": "RS256", "kid": 7}), 401, "http.Authorization"),
    Case("jwt-kid-list", "jwt", jwt({"alg": "RS256", "kid": [MARKER]}), 401, "http.Authorization"),
    Case(
        "jwt-kid-object",
        "jwt",
        jwt({"alg": "RS256", "kid": {"a": MARKER}}),
        401,
        "http.Authorization",
    ),
    Case("jwt-kid-null", "jwt", jwt({"alg": "RS256", "kid": None}), 401, "http.Authorization"),
    Case(
        "jwt-crit",
        "jwt",
        jwt({"alg": "RS256", "kid": "k", "crit": [MARKER]}),
        401,
        "http.Authorization",
    ),
    Case("jwt-alg-invented", "jwt", jwt({"alg": MARKER}), 401, "http.Authorization"),
    Case("jwt-100kB", "jwt", lambda: b"a" * 100_000, 401, "http.Authorization"),
    # --- MLLP -----------------------------------------------------------------------------
    # 8 such 41 kB messages delayed a normal ACK from 0.01 s to 40 s.
    Case(
        "mllp-40k-components",
        "mllp",
        v2(field_of("OBX", 5, "48" + "^" * 40_000)),
        0,
        "OBX^1^5",
        ack="AR",
    ),
    Case(
        "mllp-frame-over-the-limit",
        "mllp",
        lambda: b"MSH|" + b"x" * (1024 * 1024),
        0,
        None,
        ack="AR",
    ),
    Case(
        "mllp-start-blocks",
        "mllp",
        lambda: b"\x0b" * 200 + V2_DEMO.read_bytes(),
        0,
        None,
        ack="AR",
        seconds=6.0,
    ),
)
