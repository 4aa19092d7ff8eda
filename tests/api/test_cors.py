"""CORS is off unless origins are configured."""

from __future__ import annotations

from tests.api.conftest import AppFactory, TestClient

PREFLIGHT = {
    "Origin": "https://viewer.hospital.test",
    "Access-Control-Request-Method": "POST",
    "Access-Control-Request-Headers": "Content-Type, Authorization",
}


def test_cors_is_off_by_default(client: TestClient) -> None:
    response = client.options("/fhir/$assess-hypoxaemia", headers=PREFLIGHT)
    assert "access-control-allow-origin" not in response.headers
    response = client.get("/healthz", headers={"Origin": PREFLIGHT["Origin"]})
    assert "access-control-allow-origin" not in response.headers


def test_cors_allows_only_the_configured_origins(make_app: AppFactory) -> None:
    app = make_app(cors_origins=["https://viewer.hospital.test"])
    with TestClient(app) as client:
        allowed = client.options("/fhir/$assess-hypoxaemia", headers=PREFLIGHT)
        assert allowed.status_code == 200
        assert allowed.headers["access-control-allow-origin"] == PREFLIGHT["Origin"]
        other = client.options(
            "/fhir/$assess-hypoxaemia", headers=PREFLIGHT | {"Origin": "https://elsewhere.test"}
        )
        assert "access-control-allow-origin" not in other.headers
        assert other.status_code == 400
        assert other.json()["issue"][0]["expression"] == ["http.Origin"]
