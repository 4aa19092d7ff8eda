"""Bearer authentication over real HTTP: static API keys and JWTs checked against a JWKS."""

from __future__ import annotations

import hashlib
import hmac
import json
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import httpx
import jwt
import pytest
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric import ec, rsa
from jwt.algorithms import ECAlgorithm, RSAAlgorithm

from service.api.auth import AuthConfigError, Authenticator
from service.config import ServerSettings
from tests.api.conftest import ALTITUDE, ASSESS, FHIR_JSON, ROOT, AppFactory, issue

Serve = Callable[..., httpx.Client]
ISSUER, AUDIENCE = "https://auth.hospital.test", "https://oxyrule.hospital.test/fhir"
API_KEY = "engine-key-7f3a9c2e51d04b8a"

RSA_KEY = rsa.generate_private_key(public_exponent=65537, key_size=2048)
EC_KEY = ec.generate_private_key(ec.SECP384R1())
OTHER_RSA_KEY = rsa.generate_private_key(public_exponent=65537, key_size=2048)


def public_jwks() -> dict[str, Any]:
    rsa_jwk = json.loads(RSAAlgorithm.to_jwk(RSA_KEY.public_key()))
    ec_jwk = json.loads(ECAlgorithm.to_jwk(EC_KEY.public_key()))
    return {"keys": [rsa_jwk | {"kid": "rsa-1", "use": "sig"}, ec_jwk | {"kid": "ec-1"}]}


def digest(key: str) -> str:
    return "sha256:" + hashlib.sha256(key.encode()).hexdigest()


def token(key: Any = RSA_KEY, alg: str = "RS384", kid: str | None = "rsa-1", **claims: Any) -> str:
    now = int(time.time())
    body = {"iss": ISSUER, "aud": AUDIENCE, "sub": "engine-7", "exp": now + 300, "iat": now}
    body.update(claims)
    headers = {"kid": kid} if kid else {}
    return jwt.encode({k: v for k, v in body.items() if v is not None}, key, alg, headers)


def tampered(signed: str) -> str:
    """The token with its claims changed after signing (a longer expiry), signature kept."""
    header, claims, signature = signed.split(".")
    body = json.loads(jwt.utils.base64url_decode(claims))
    body["exp"] += 86400
    forged = jwt.utils.base64url_encode(json.dumps(body).encode()).decode()
    return f"{header}.{forged}.{signature}"


def test_a_token_just_expired_within_the_leeway_is_accepted(secured: httpx.Client) -> None:
    # The default leeway (OXYRULE_JWT_LEEWAY_SECONDS, 30 s) absorbs clock skew, no more.
    assert post(secured, f"Bearer {token(exp=int(time.time()) - 5)}").status_code == 200
    refused(post(secured, f"Bearer {token(exp=int(time.time()) - 60)}"), "expired")


def jwt_settings(**extra: Any) -> dict[str, Any]:
    return {
        "jwt_jwks": json.dumps(public_jwks()),
        "jwt_issuer": ISSUER,
        "jwt_audience": AUDIENCE,
        "api_key_hashes": [digest(API_KEY)],
    } | extra


def post(client: httpx.Client, authorization: str | None) -> httpx.Response:
    headers = FHIR_JSON | ({"Authorization": authorization} if authorization else {})
    return client.post(ASSESS, content=ALTITUDE.read_bytes(), headers=headers)


@pytest.fixture
def secured(serve: Serve) -> httpx.Client:
    return serve(**jwt_settings())


def refused(response: httpx.Response, code: str, status: int = 401) -> str:
    assert response.status_code == status, response.text
    assert response.headers["www-authenticate"].startswith('Bearer realm="oxyrule"')
    found = issue(response.json())
    assert found["code"] == code
    assert found["location"] == ["http.Authorization"]
    diagnostics: str = found["diagnostics"]
    return diagnostics


def test_the_operation_is_open_when_no_credentials_are_configured(live: httpx.Client) -> None:
    assert post(live, None).status_code == 200


def test_a_configured_api_key_is_accepted_and_others_refused(secured: httpx.Client) -> None:
    assert post(secured, f"Bearer {API_KEY}").status_code == 200
    refused(post(secured, None), "login")
    diagnostics = refused(post(secured, "Bearer engine-key-wrong"), "security")
    assert "engine-key-wrong" not in diagnostics
    refused(post(secured, f"Basic {API_KEY}"), "login")
    refused(post(secured, "Bearer"), "login")


@pytest.mark.parametrize(
    ("key", "alg", "kid"),
    [
        (RSA_KEY, "RS256", "rsa-1"),
        (RSA_KEY, "RS384", "rsa-1"),
        (EC_KEY, "ES384", "ec-1"),
        (EC_KEY, "ES384", None),
    ],
)
def test_a_jwt_signed_by_a_jwks_key_is_accepted(
    secured: httpx.Client, key: Any, alg: str, kid: str | None
) -> None:
    assert post(secured, f"Bearer {token(key, alg, kid)}").status_code == 200


@pytest.mark.parametrize(
    ("make", "code", "words"),
    [
        (lambda: token(exp=int(time.time()) - 3600), "expired", "expired"),
        (lambda: token(aud="https://elsewhere.test"), "security", "Audience"),
        (lambda: token(iss="https://rogue.test"), "security", "issuer"),
        (lambda: token(exp=None), "security", "exp"),
        (lambda: token(OTHER_RSA_KEY), "security", "Signature"),
        (lambda: token(kid="unknown"), "security", "no key"),
        (lambda: token(alg="none", key=None), "security", "'none'"),
        (lambda: token(b"k" * 32, "HS256"), "security", "'HS256'"),
        (lambda: "not.a.jwt", "security", "neither"),
        (lambda: token(nbf=int(time.time()) + 3600), "security", "not yet valid"),
        (lambda: token(iss=None), "security", "iss"),
        (lambda: token(aud=None), "security", "aud"),
        (lambda: tampered(token()), "security", "Signature"),
        (lambda: handmade({"alg": "RS256", "kid": "ec-1"}, b"\x01" * 256), "security", "no key"),
    ],
    ids=[
        "expired",
        "audience",
        "issuer",
        "no-exp",
        "bad-signature",
        "unknown-kid",
        "alg-none",
        "hs256",
        "garbage",
        "not-before-in-future",
        "no-issuer",
        "no-audience",
        "payload-changed-after-signing",
        "rsa-alg-with-an-ec-key-id",
    ],
)
def test_a_bad_jwt_is_refused_with_the_reason(
    secured: httpx.Client, make: Callable[[], str], code: str, words: str
) -> None:
    assert words in refused(post(secured, f"Bearer {make()}"), code)


def handmade(header: dict[str, Any], signature: bytes, secret: bytes | None = None) -> str:
    """A JWT built by hand (PyJWT refuses to sign some of the forgeries tested here)."""
    now = int(time.time())
    claims = {"iss": ISSUER, "aud": AUDIENCE, "exp": now + 60}
    signing_input = (
        jwt.utils.base64url_encode(json.dumps(header).encode())
        + b"."
        + jwt.utils.base64url_encode(json.dumps(claims).encode())
    )
    if secret is not None:
        signature = hmac.new(secret, signing_input, hashlib.sha256).digest()
    return (signing_input + b"." + jwt.utils.base64url_encode(signature)).decode()


def test_an_hmac_token_keyed_with_the_public_key_is_refused(secured: httpx.Client) -> None:
    # The classic confusion attack: HS256 with the RSA public key (PEM) as the shared secret.
    pem = RSA_KEY.public_key().public_bytes(
        serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo
    )
    forged = handmade({"alg": "HS256", "kid": "rsa-1"}, b"", secret=pem)
    assert "'HS256'" in refused(post(secured, f"Bearer {forged}"), "security")


def test_an_ec_token_whose_curve_does_not_fit_the_algorithm_is_refused(
    secured: httpx.Client,
) -> None:
    forged = handmade({"alg": "ES256", "kid": "ec-1"}, b"\x01" * 64)  # the key is P-384
    assert "no key" in refused(post(secured, f"Bearer {forged}"), "security")


def test_a_required_scope_is_enforced_with_403(serve: Serve) -> None:
    client = serve(**jwt_settings(jwt_required_scope="system/Observation.rs"))
    assert post(client, f"Bearer {token(scope='system/Observation.rs launch')}").status_code == 200
    diagnostics = refused(post(client, f"Bearer {token(scope='user/Patient.r')}"), "forbidden", 403)
    assert "system/Observation.rs" in diagnostics
    assert post(client, f"Bearer {API_KEY}").status_code == 200  # keys carry no scopes


V2_MESSAGE = (ROOT / "fixtures" / "hl7v2" / "post-operative-drowsiness.hl7").read_bytes()
BENCH_JSON = {"Content-Type": "application/json"}
BENCH_CASE = json.dumps({"input": ALTITUDE.read_text()}).encode()
BENCH_EXPORT = json.dumps({"input": ALTITUDE.read_text(), "name": "x"}).encode()
# Every route of the app: (method, path, body headers, body, whether it needs credentials).
# Only liveness, readiness, the CapabilityStatement and $versions are public: FHIR and SMART
# clients read them to learn how to talk and authenticate before they hold a token.
ROUTES: list[tuple[str, str, dict[str, str], bytes, bool]] = [
    ("GET", "/healthz", {}, b"", False),
    ("GET", "/readyz", {}, b"", False),
    ("GET", "/fhir/metadata", {}, b"", False),
    ("GET", "/fhir/$versions", {}, b"", False),
    ("GET", "/fhir/OperationDefinition/assess-hypoxaemia", {}, b"", True),
    ("GET", "/metrics", {}, b"", True),
    ("GET", "/docs", {}, b"", True),
    ("GET", "/openapi.json", {}, b"", True),
    ("POST", ASSESS, FHIR_JSON, ALTITUDE.read_bytes(), True),
    ("POST", "/hl7v2", {"Content-Type": "x-application/hl7-v2+er7"}, V2_MESSAGE, True),
    # The rule owner's bench (on by default): its page, files and calls are never public.
    ("GET", "/bench", {}, b"", True),
    ("GET", "/bench/static/bench.js", {}, b"", True),
    ("GET", "/bench/api/info", {}, b"", True),
    ("GET", "/bench/api/scenario?name=altitude-visitor", {}, b"", True),
    ("POST", "/bench/api/assess", BENCH_JSON, BENCH_CASE, True),
    ("POST", "/bench/api/fixture", BENCH_JSON, BENCH_EXPORT, True),
    ("GET", "/bench/api/fixtures", {}, b"", True),
    ("GET", "/bench/api/fixture?name=demo/altitude-visitor", {}, b"", True),
]
# The CDS Hooks routes answer to the EHR's signed JWT, not to these credentials (tests/cds/).
CDS_ROUTES = [
    ("GET", "/cds-services"),
    ("POST", "/cds-services/{service_id}"),
    ("POST", "/cds-services/{service_id}/feedback"),
]


def _routes(routes: list[Any]) -> list[Any]:
    """Every route, those of included routers too (FastAPI may wrap an included router)."""
    found: list[Any] = []
    for route in routes:
        inner = getattr(route, "original_router", None)
        found += _routes(list(inner.routes)) if inner is not None else [route]
    return found


def test_the_route_table_of_this_test_covers_every_route_of_the_app(make_app: AppFactory) -> None:
    app = make_app()
    documented = {
        (method.upper(), path)
        for path, operations in app.openapi()["paths"].items()
        for method in operations
    }
    undocumented = {  # the docs page, the OpenAPI document and the bench's routes
        (method, getattr(route, "path", ""))
        for route in _routes(app.routes)
        for method in set(getattr(route, "methods", None) or ()) - {"HEAD"}
    }
    served = documented | undocumented
    listed = {(method, path.split("?")[0]) for method, path, *_ in ROUTES}
    listed = (listed - {("GET", "/bench/static/bench.js")}) | {("GET", "/bench/static/{name}")}
    assert served == listed | set(CDS_ROUTES)


def test_the_service_credentials_do_not_open_the_cds_hooks_routes(secured: httpx.Client) -> None:
    # No CDS client is configured: API keys and the service's own JWTs are not EHR JWTs.
    for credentials in (f"Bearer {API_KEY}", f"Bearer {token()}"):
        answer = secured.get("/cds-services", headers={"Authorization": credentials})
        assert answer.status_code == 401
        assert "OXYRULE_CDS_CLIENTS" in issue(answer.json())["diagnostics"]


@pytest.mark.parametrize(
    ("method", "path", "headers", "body", "closed"),
    ROUTES,
    ids=[f"{method} {path}" for method, path, *_ in ROUTES],
)
def test_each_route_needs_credentials_unless_public(
    secured: httpx.Client,
    method: str,
    path: str,
    headers: dict[str, str],
    body: bytes,
    closed: bool,
) -> None:
    def call(authorization: str | None) -> httpx.Response:
        extra = {"Authorization": authorization} if authorization else {}
        return secured.request(method, path, content=body or None, headers=headers | extra)

    for credentials in (f"Bearer {API_KEY}", f"Bearer {token()}"):
        assert call(credentials).status_code == 200, (path, credentials[:12])
    if closed:
        refused(call(None), "login")
        refused(call("Bearer engine-key-wrong"), "security")
        refused(call(f"Bearer {token(exp=int(time.time()) - 3600)}"), "expired")
    else:
        assert call(None).status_code == 200
        assert call("Bearer engine-key-wrong").status_code == 200  # not even looked at


def test_an_unknown_path_is_refused_before_routing(secured: httpx.Client) -> None:
    refused(secured.get("/fhir/Patient/1"), "login")  # a 404 would tell what exists
    assert (
        secured.get("/fhir/Patient/1", headers={"Authorization": f"Bearer {API_KEY}"}).status_code
        == 404
    )


def test_a_refusal_carries_cors_headers_and_a_preflight_needs_no_token(serve: Serve) -> None:
    origin = "https://viewer.hospital.test"
    client = serve(**jwt_settings(cors_origins=[origin]))
    preflight = client.options(
        ASSESS,
        headers={
            "Origin": origin,
            "Access-Control-Request-Method": "POST",
            "Access-Control-Request-Headers": "Authorization, Content-Type",
        },
    )
    assert preflight.status_code == 200
    answer = client.post(ASSESS, content=b"{}", headers=FHIR_JSON | {"Origin": origin})
    refused(answer, "login")
    assert answer.headers["access-control-allow-origin"] == origin  # a browser can read why


def test_a_jwks_file_is_read(tmp_path: Path, serve: Serve) -> None:
    path = tmp_path / "jwks.json"
    path.write_text(json.dumps(public_jwks()))
    settings = jwt_settings(jwt_jwks=None, jwt_jwks_file=path)
    client = serve(**settings)
    assert post(client, f"Bearer {token()}").status_code == 200


@pytest.mark.parametrize(
    ("settings", "words"),
    [
        ({"jwt_jwks": "{not json"}, "OXYRULE_JWT_JWKS: the JWKS is not JSON"),
        ({"jwt_jwks": '{"keys": []}'}, "non-empty 'keys'"),
        ({"jwt_jwks": '{"keys": [{"kty": "oct", "k": "c2VjcmV0"}]}'}, "private or symmetric"),
        ({"jwt_jwks": '{"keys": [{"kty": "RSA", "n": "x"}]}'}, "not a usable key"),
        ({"jwt_jwks": None, "jwt_jwks_file": Path("/nonexistent/jwks.json")}, "cannot read"),
    ],
)
def test_unusable_jwks_settings_stop_the_app(settings: dict[str, Any], words: str) -> None:
    with pytest.raises(AuthConfigError, match=words):
        Authenticator.from_settings(ServerSettings(**jwt_settings(**settings)))


@pytest.mark.parametrize(
    ("settings", "words"),
    [
        ({"api_key_hashes": ["plain-key"]}, "OXYRULE_API_KEY_HASHES"),
        ({"jwt_jwks": "{}"}, "OXYRULE_JWT_ISSUER and OXYRULE_JWT_AUDIENCE"),
        ({"jwt_algorithms": ["HS256"]}, "jwt_algorithms"),
        ({"jwt_algorithms": ["none"]}, "jwt_algorithms"),
    ],
)
def test_bad_authentication_settings_are_refused(settings: dict[str, Any], words: str) -> None:
    with pytest.raises(ValueError, match=words):
        ServerSettings(**settings)


@pytest.mark.parametrize(
    ("header", "words"),
    [
        ({"alg": "RS384", "kid": 7}, "kid must be a string"),
        ({"alg": "RS384", "kid": ["rsa-1"]}, "kid must be a string"),
        ({"alg": "RS384", "kid": {"id": "rsa-1"}}, "kid must be a string"),
        ({"alg": "RS384", "kid": None}, "kid must be a string"),
        ({"alg": "RS384", "kid": "rsa-1", "crit": ["exp"]}, "crit"),
        ({"alg": "RS384", "kid": "rsa-1", "b64": False}, "b64"),
        ({"alg": "INVENTED-NAME-ALG", "kid": "rsa-1"}, "not a JWA algorithm"),
        ({"alg": ["RS384"], "kid": "rsa-1"}, "not a JWA algorithm"),
    ],
    ids=[
        "kid-number",
        "kid-list",
        "kid-object",
        "kid-null",
        "crit",
        "b64",
        "alg-unknown",
        "alg-list",
    ],
)
def test_a_malformed_token_header_is_a_located_401_never_a_500(
    secured: httpx.Client, header: dict[str, Any], words: str
) -> None:
    # Each of these was a 500 before any signature check, on every protected route.
    forged = handmade(header, b"\x01" * 256)
    for route in (lambda c, a: post(c, a), lambda c, a: c.get("/metrics", headers=auth(a))):
        diagnostics = refused(route(secured, f"Bearer {forged}"), "security")
        assert words in diagnostics
        assert "INVENTED-NAME" not in diagnostics  # the header's text is never echoed


@pytest.mark.parametrize("segment", [b"[1, 2]", b"not json", b"\xff\xfe", b'"a string"'])
def test_a_token_whose_header_is_not_a_json_object_is_a_401(
    secured: httpx.Client, segment: bytes
) -> None:
    forged = jwt.utils.base64url_encode(segment).decode() + ".e30.c2ln"
    assert "neither" in refused(post(secured, f"Bearer {forged}"), "security")


def auth(authorization: str) -> dict[str, str]:
    return {"Authorization": authorization}
