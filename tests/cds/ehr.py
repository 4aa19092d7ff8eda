"""A small FHIR read/search server over invented resources, for tests over real HTTP.

It plays the EHR's FHIR server (``fhirServer`` of a hook request) and its JWK Set URL:

* ``GET /fhir/{Type}/{id}``: a read (Patient, Encounter, Location, Observation);
* ``GET /fhir/Observation?patient=&code=&_sort=-date&_count=&_offset=``: a search by patient
  and token (``system|code``, comma-separated: or), newest first, in pages of at most
  ``page_size`` entries with a ``next`` link (``_offset``), as a searchset Bundle;
* ``GET /fhir/Encounter?_id=&_include=Encounter:location``: the encounter and its location;
* ``GET /jwks.json``: the JWK Set the test puts in ``jwks``.

Every request is recorded (path, query, Authorization header) so tests can check what the
service asked for and with which token. ``token`` (when set) must be presented as a bearer
token, else 401; ``delay_s`` slows every answer; ``padding`` fattens search pages.
"""

from __future__ import annotations

import asyncio
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from urllib.parse import urlencode

from fastapi import FastAPI, Request, Response

Json = dict[str, Any]


@dataclass
class Ehr:
    """The server's data and behaviour; the tests change it between calls."""

    resources: list[Json] = field(default_factory=list)
    token: str | None = None
    page_size: int = 4
    delay_s: float = 0.0
    padding: int = 0
    jwks: Json = field(default_factory=lambda: {"keys": []})
    jwks_status: int = 200
    seen: list[tuple[str, str, str | None]] = field(default_factory=list)
    base: str = ""

    @classmethod
    def from_file(cls, path: Path, **options: Any) -> Ehr:
        bundle = json.loads(path.read_text())
        return cls(resources=[e["resource"] for e in bundle["entry"]], **options)

    def find(self, kind: str, rid: str) -> Json | None:
        return next(
            (r for r in self.resources if r["resourceType"] == kind and r.get("id") == rid), None
        )


def _codes(resource: Json) -> set[str]:
    return {
        f"{c.get('system')}|{c.get('code')}" for c in resource.get("code", {}).get("coding", [])
    }


def _page(ehr: Ehr, request: Request, matches: list[Json], mode: str = "match") -> Json:
    params = dict(request.query_params)
    count = min(int(params.get("_count", ehr.page_size)), ehr.page_size)
    offset = int(params.get("_offset", 0))
    chosen = matches[offset : offset + count]
    bundle: Json = {
        "resourceType": "Bundle",
        "type": "searchset",
        "total": len(matches),
        "link": [{"relation": "self", "url": str(request.url)}],
        "entry": [
            {
                "fullUrl": f"{ehr.base}/fhir/{r['resourceType']}/{r['id']}",
                "resource": r,
                "search": {"mode": mode},
            }
            for r in chosen
        ],
    }
    if offset + count < len(matches):
        following = params | {"_offset": str(offset + count)}
        bundle["link"].append(
            {"relation": "next", "url": f"{ehr.base}{request.url.path}?{urlencode(following)}"}
        )
    if ehr.padding:
        bundle["meta"] = {"tag": [{"display": "x" * ehr.padding}]}
    return bundle


def _answer(body: Json, status: int = 200) -> Response:
    return Response(json.dumps(body), status, media_type="application/fhir+json")


def _observations(ehr: Ehr, request: Request) -> Response:
    patient = request.query_params.get("patient")
    wanted = set((request.query_params.get("code") or "").split(","))
    matches = [
        r
        for r in ehr.resources
        if r["resourceType"] == "Observation"
        and r.get("subject", {}).get("reference") == f"Patient/{patient}"
        and _codes(r) & wanted
    ]
    matches.sort(key=lambda r: r.get("effectiveDateTime", ""), reverse=True)
    return _answer(_page(ehr, request, matches))


def _encounters(ehr: Ehr, request: Request) -> Response:
    found = ehr.find("Encounter", request.query_params.get("_id", ""))
    if found is None:
        return _answer(_page(ehr, request, []))
    bundle = _page(ehr, request, [found])
    if request.query_params.get("_include") == "Encounter:location":
        for place in found.get("location", []):
            _, _, rid = place["location"]["reference"].partition("/")
            location = ehr.find("Location", rid)
            if location is not None:
                bundle["entry"].append({"resource": location, "search": {"mode": "include"}})
    return _answer(bundle)


def _authorised(ehr: Ehr, request: Request) -> bool:
    if not request.url.path.startswith("/fhir") or ehr.token is None:
        return True
    return request.headers.get("authorization") == f"Bearer {ehr.token}"


def ehr_app(ehr: Ehr) -> FastAPI:
    app = FastAPI()

    @app.middleware("http")
    async def record(request: Request, call_next: Any) -> Response:
        ehr.seen.append((request.url.path, request.url.query, request.headers.get("authorization")))
        if ehr.delay_s:
            await asyncio.sleep(ehr.delay_s)
        if not _authorised(ehr, request):
            return _answer({"resourceType": "OperationOutcome", "issue": []}, 401)
        response: Response = await call_next(request)
        return response

    @app.get("/jwks.json")
    async def jwks() -> Response:
        return Response(json.dumps(ehr.jwks), ehr.jwks_status, media_type="application/json")

    @app.get("/fhir/Observation")
    async def observations(request: Request) -> Response:
        return _observations(ehr, request)

    @app.get("/fhir/Encounter")
    async def encounters(request: Request) -> Response:
        return _encounters(ehr, request)

    @app.get("/fhir/{kind}/{rid}")
    async def read(kind: str, rid: str) -> Response:
        found = ehr.find(kind, rid)
        if found is None:
            return _answer({"resourceType": "OperationOutcome", "issue": []}, 404)
        return _answer(found)

    return app
