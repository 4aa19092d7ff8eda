"""CORS is off unless origins are configured (over real HTTP)."""

from __future__ import annotations

from collections.abc import Callable

import httpx

from tests.api.conftest import ASSESS, issue

Serve = Callable[..., httpx.Client]
ORIGIN = "https://viewer.hospital.test"
PREFLIGHT = {
    "Origin": ORIGIN,
    "Access-Control-Request-Method": "POST",
    "Access-Control-Request-Headers": "Content-Type, Authorization",
}


def test_cors_is_off_by_default(live: httpx.Client) -> None:
    response = live.options(ASSESS, headers=PREFLIGHT)
    assert "access-control-allow-origin" not in response.headers
    assert issue(response.json())["code"] == "not-supported"  # 405, as FHIR
    response = live.get("/healthz", headers={"Origin": ORIGIN})
    assert "access-control-allow-origin" not in response.headers


def test_cors_allows_only_the_configured_origins(serve: Serve) -> None:
    client = serve(cors_origins=[ORIGIN])
    allowed = client.options(ASSESS, headers=PREFLIGHT)
    assert allowed.status_code == 200
    assert allowed.headers["access-control-allow-origin"] == ORIGIN
    simple = client.get("/fhir/metadata", headers={"Origin": ORIGIN})
    assert simple.headers["access-control-allow-origin"] == ORIGIN
    assert "x-correlation-id" in simple.headers["access-control-expose-headers"].lower()
    other = client.options(ASSESS, headers=PREFLIGHT | {"Origin": "https://elsewhere.test"})
    assert "access-control-allow-origin" not in other.headers
    assert other.status_code == 400
    assert issue(other.json())["location"] == ["http.Origin"]
