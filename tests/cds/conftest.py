"""Fixtures of the CDS Hooks tests: hook fixtures, signed JWTs, the app, an EHR over HTTP."""

from __future__ import annotations

import json
import time
import uuid
import warnings
from collections.abc import Callable, Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import jwt
import pytest
from cryptography.hazmat.primitives.asymmetric import ec, rsa
from jwt.algorithms import ECAlgorithm, RSAAlgorithm

from service.api import create_app
from service.config import ServerSettings, Settings
from service.runtime import Runtime
from tests.api.conftest import log_lines as log_lines  # the service's JSON log lines
from tests.api.live import LiveServer
from tests.cds.ehr import Ehr, ehr_app

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    from fastapi.testclient import TestClient as TestClient

ROOT = Path(__file__).resolve().parents[2]
FIXTURES = ROOT / "fixtures" / "cds-hooks"
FIXTURE_EHR = "https://ehr.invented.test/fhir"  # the fhirServer the fixtures name
NOW = datetime(2026, 11, 21, 15, 0, tzinfo=UTC)  # the fixtures' data are from that morning
BASE = "https://oxyrule.hospital.test"  # OXYRULE_CDS_BASE_URL of the tests
ISSUER = "https://ehr.invented.test"
SERVICE_OF_HOOK = {
    "patient-view": "hypoxaemia-mechanism",
    "order-select": "oxygen-order-select",
    "order-sign": "oxygen-order-sign",
}

ES_KEY = ec.generate_private_key(ec.SECP384R1())
RS_KEY = rsa.generate_private_key(public_exponent=65537, key_size=2048)
OTHER_ES_KEY = ec.generate_private_key(ec.SECP384R1())


def public_jwk(key: Any, kid: str, alg: str) -> dict[str, Any]:
    algorithm = ECAlgorithm if alg.startswith("ES") else RSAAlgorithm
    jwk: dict[str, Any] = json.loads(algorithm.to_jwk(key.public_key()))
    return jwk | {"kid": kid, "use": "sig", "alg": alg}


def key_set() -> dict[str, Any]:
    return {
        "keys": [public_jwk(ES_KEY, "ehr-es-1", "ES384"), public_jwk(RS_KEY, "ehr-rs-1", "RS384")]
    }


def sign(
    path: str = "/cds-services/hypoxaemia-mechanism",
    *,
    key: Any = ES_KEY,
    alg: str = "ES384",
    kid: str | None = "ehr-es-1",
    header: dict[str, Any] | None = None,
    **claims: Any,
) -> str:
    """A JWT as a CDS client signs it for a call to ``path``; ``None`` drops a claim."""
    now = int(time.time())
    body: dict[str, Any] = {
        "iss": ISSUER,
        "aud": BASE + path,
        "exp": now + 120,
        "iat": now,
        "jti": str(uuid.uuid4()),
        "tenant": "invented-hospital",
    }
    body.update(claims)
    headers: dict[str, Any] = {"typ": "JWT"} | ({"kid": kid} if kid else {}) | (header or {})
    return jwt.encode({k: v for k, v in body.items() if v is not None}, key, alg, headers)


def hook_request(name: str, ehr_url: str | None = None) -> dict[str, Any]:
    """A fixture hook request; its fhirServer (and next links) pointed at ``ehr_url``."""
    text = (FIXTURES / f"{name}.hook.json").read_text()
    if ehr_url is not None:
        text = text.replace(FIXTURE_EHR, ehr_url)
    body: dict[str, Any] = json.loads(text)
    return body


def service_path(body: dict[str, Any]) -> str:
    return f"/cds-services/{SERVICE_OF_HOOK[body['hook']]}"


@pytest.fixture(scope="session")
def runtime() -> Runtime:
    return Runtime.load(Settings())


AppMaker = Callable[..., TestClient]


@pytest.fixture
def cds(runtime: Runtime) -> Iterator[AppMaker]:
    """A client of the app with CDS settings (unsigned unless clients are given), its clock
    at ``NOW``."""
    clients: list[TestClient] = []

    def make(**server: Any) -> TestClient:
        if "cds_clients" not in server:
            server.setdefault("cds_allow_unsigned", True)
        app = create_app(Settings(), ServerSettings(**server), runtime=runtime)
        app.state.service.cds.clock = lambda: NOW
        client = TestClient(app).__enter__()
        clients.append(client)
        return client

    yield make
    for client in clients:
        client.__exit__(None, None, None)


@pytest.fixture(scope="module")
def ehr_server() -> Iterator[tuple[Ehr, str]]:
    ehr = Ehr()
    with LiveServer(ehr_app(ehr)) as server:
        ehr.base = server.url
        yield ehr, server.url


@pytest.fixture
def ehr(ehr_server: tuple[Ehr, str]) -> Ehr:
    """The EHR server, reset to the fixtures' dataset, its token and a fresh request log."""
    server, url = ehr_server
    fresh = Ehr.from_file(FIXTURES / "ehr-server.json", token="invented-access-token-6c2f1e")
    server.resources, server.token, server.seen = fresh.resources, fresh.token, []
    server.page_size, server.delay_s, server.padding = 4, 0.0, 0
    server.jwks, server.jwks_status, server.base = key_set(), 200, url
    return server
