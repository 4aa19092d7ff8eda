"""The EHR's signed JWT on every CDS Hooks call: real keys, real signatures, every refusal.

Tokens are signed in the test with an ES384 (P-384) and an RS384 key; the EHR's JWK Set is
served over real HTTP by ``tests/cds/ehr.py``. Each bad token must be refused with 401 and an
OperationOutcome located at ``http.Authorization`` - never a 5xx, never an echo of the token.
The rules are those of CDS Hooks 2.0 "Trusting CDS Clients" (header ``alg``, ``kid``, ``typ``,
optional ``jku``; claims ``iss``, ``aud``, ``exp``, ``iat``, ``jti``; no ``none``, no symmetric
algorithm).
"""

from __future__ import annotations

import asyncio
import base64
import hashlib
import hmac
import json
import re
import time
from collections.abc import Callable
from typing import Any

import jwt
import pytest
from cryptography.hazmat.primitives import serialization
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from service.api import create_app
from service.cds.errors import CdsConfigError, CdsError
from service.cds.replay import MemoryFull, ReplayMemory
from service.cds.trust import CdsTrust
from service.config import ServerSettings, Settings
from tests.cds.conftest import (
    BASE,
    ES_KEY,
    ISSUER,
    OTHER_ES_KEY,
    RS_KEY,
    AppMaker,
    TestClient,
    hook_request,
    key_set,
    public_jwk,
    sign,
)
from tests.cds.ehr import Ehr

SERVICE = "/cds-services/hypoxaemia-mechanism"
BODY = hook_request("patient-view-shunt")


def trusted(ehr: Ehr, **client: Any) -> dict[str, Any]:
    entry = {"iss": ISSUER, "jwks_urls": [ehr.base + "/jwks.json"]} | client
    return {"cds_clients": [entry], "cds_base_url": BASE}


@pytest.fixture
def app(cds: AppMaker, ehr: Ehr) -> TestClient:
    return cds(**trusted(ehr))


def call(client: TestClient, token: str | None, path: str = SERVICE) -> Any:
    headers = {"Authorization": f"Bearer {token}"} if token is not None else {}
    if path.endswith("/cds-services"):
        return client.get(path, headers=headers)
    body: Any = BODY if not path.endswith("/feedback") else FEEDBACK
    return client.post(path, json=body, headers=headers)


FEEDBACK = {
    "feedback": [
        {
            "card": "9368d37b-283f-44a0-93ea-547cebab93ed",
            "outcome": "overridden",
            "outcomeTimestamp": "2026-11-21T15:02:00Z",
        }
    ]
}


def refused(answer: Any, words: str, code: str = "security") -> None:
    assert answer.status_code == 401, answer.text
    assert answer.headers["www-authenticate"].startswith('Bearer realm="oxyrule-cds"')
    (issue,) = answer.json()["issue"]
    assert issue["expression"] == ["http.Authorization"]
    assert issue["code"] == code
    assert words in issue["diagnostics"], issue["diagnostics"]


def b64(data: bytes) -> str:
    return base64.urlsafe_b64encode(data).rstrip(b"=").decode()


def handmade(header: Any, claims: dict[str, Any] | None = None, signature: bytes = b"") -> str:
    """A token built by hand (PyJWT will not sign these forgeries)."""
    now = int(time.time())
    body = claims or {
        "iss": ISSUER,
        "aud": BASE + SERVICE,
        "exp": now + 60,
        "iat": now,
        "jti": f"hand-{time.time_ns()}",
    }
    head = header if isinstance(header, bytes) else json.dumps(header).encode()
    return f"{b64(head)}.{b64(json.dumps(body).encode())}.{b64(signature)}"


def hmac_forgery(alg: str, secret: bytes) -> str:
    unsigned = handmade({"alg": alg, "typ": "JWT", "kid": "ehr-rs-1"}).rsplit(".", 1)[0]
    digest = {"HS256": hashlib.sha256, "HS384": hashlib.sha384}[alg]
    signature = hmac.new(secret, unsigned.encode(), digest).digest()
    return f"{unsigned}.{b64(signature)}"


PEM = RS_KEY.public_key().public_bytes(
    serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo
)


@pytest.mark.parametrize(
    ("alg", "key", "kid"),
    [("ES384", ES_KEY, "ehr-es-1"), ("RS384", RS_KEY, "ehr-rs-1")],
)
def test_a_jwt_signed_by_the_ehr_is_accepted(app: TestClient, alg: str, key: Any, kid: str) -> None:
    answer = call(app, sign(key=key, alg=alg, kid=kid))
    assert answer.status_code == 200, answer.text
    assert answer.json()["cards"]


def test_aud_may_be_an_array_and_jku_an_allow_listed_url(app: TestClient, ehr: Ehr) -> None:
    token = sign(aud=[BASE + SERVICE], header={"jku": ehr.base + "/jwks.json"})
    assert call(app, token).status_code == 200


def test_discovery_and_feedback_take_their_own_urls_as_aud(app: TestClient) -> None:
    assert call(app, sign("/cds-services"), "/cds-services").status_code == 200
    refused(call(app, sign(SERVICE), "/cds-services"), "aud")
    feedback = SERVICE + "/feedback"
    assert call(app, sign(feedback), feedback).status_code == 200
    assert call(app, sign(SERVICE), feedback).status_code == 200  # its service's URL
    refused(call(app, sign("/cds-services"), feedback), "aud")


def now() -> int:
    return int(time.time())


BAD: dict[str, tuple[Callable[[], str | None], str, str]] = {
    "no-authorization": (lambda: None, "signed JWT is required", "login"),
    "wrong-issuer": (lambda: sign(iss="https://rogue.invented.test"), "not a trusted", "security"),
    "wrong-audience": (lambda: sign("/cds-services/oxygen-order-sign"), "aud", "security"),
    "audience-of-another-host": (
        lambda: sign(aud="https://elsewhere.invented.test" + SERVICE),
        "aud",
        "security",
    ),
    "no-audience": (lambda: sign(aud=None), "aud", "security"),
    "expired": (lambda: sign(exp=now() - 120, iat=now() - 200), "expired", "expired"),
    "issued-in-the-future": (lambda: sign(iat=now() + 600, exp=now() + 700), "iat", "security"),
    "lives-too-long": (lambda: sign(exp=now() + 3600), "lives longer than 300 s", "security"),
    "no-iat": (lambda: sign(iat=None), "iat", "security"),
    "no-jti": (lambda: sign(jti=None), "jti", "security"),
    "empty-jti": (lambda: sign(jti=""), "jti", "security"),
    "no-exp": (lambda: sign(exp=None), "exp", "security"),
    "unknown-kid": (lambda: sign(kid="ehr-es-9"), "no key of the issuer has this kid", "security"),
    "no-kid": (lambda: sign(kid=None), "kid", "security"),
    "kid-of-a-key-of-another-type": (lambda: sign(kid="ehr-rs-1"), "does not fit", "security"),
    "signed-by-another-key": (lambda: sign(key=OTHER_ES_KEY), "Signature", "security"),
    "alg-none": (
        lambda: handmade({"alg": "none", "typ": "JWT", "kid": "ehr-es-1"}),
        "'none' is not accepted",
        "security",
    ),
    "hs256-keyed-with-the-public-key": (
        lambda: hmac_forgery("HS256", PEM),
        "'HS256' is not accepted",
        "security",
    ),
    "hs384": (lambda: hmac_forgery("HS384", b"k" * 48), "'HS384' is not accepted", "security"),
    "rs256-not-in-the-allow-list": (
        lambda: sign(key=RS_KEY, alg="RS256", kid="ehr-rs-1"),
        "'RS256' is not accepted",
        "security",
    ),
    "typ-missing": (lambda: sign(header={"typ": None}), "typ", "security"),
    "typ-wrong": (lambda: sign(header={"typ": "at+jwt"}), "typ", "security"),
    "crit-header": (lambda: sign(header={"crit": ["exp"]}), "critical extension", "security"),
    "jku-not-allow-listed": (
        lambda: sign(header={"jku": "https://rogue.invented.test/jwks.json"}),
        "jku",
        "security",
    ),
    "kid-not-a-string": (
        lambda: handmade({"alg": "ES384", "typ": "JWT", "kid": 7}),
        "Key ID",
        "security",
    ),
    "alg-not-a-string": (
        lambda: handmade({"alg": ["ES384"], "typ": "JWT", "kid": "ehr-es-1"}),
        "alg",
        "security",
    ),
    "header-not-json": (lambda: handmade(b"{not json"), "not a JWT", "security"),
    "header-a-json-array": (lambda: handmade(b'["ES384"]'), "not a JWT", "security"),
    "header-not-base64": (lambda: "%%%." + sign().split(".", 1)[1], "not a JWT", "security"),
    "two-parts": (lambda: ".".join(sign().split(".")[:2]), "not a JWT", "security"),
    "claims-not-json": (
        lambda: sign().split(".")[0] + "." + b64(b"{oops") + ".c2ln",
        "claims cannot be read",
        "security",
    ),
    "claims-changed-after-signing": (
        lambda: _tampered(sign()),
        "Signature",
        "security",
    ),
    "empty-bearer": (lambda: "", "Bearer <JWT>", "login"),
}


def _tampered(token: str) -> str:
    header, claims, signature = token.split(".")
    body = json.loads(base64.urlsafe_b64decode(claims + "=" * (-len(claims) % 4)))
    body["tenant"] = "another-hospital"
    return f"{header}.{b64(json.dumps(body).encode())}.{signature}"


@pytest.mark.parametrize("case", sorted(BAD))
def test_a_bad_jwt_is_refused_with_401_and_the_reason(app: TestClient, case: str) -> None:
    make, words, code = BAD[case]
    token = make()
    if case == "empty-bearer":
        answer = app.post(SERVICE, json=BODY, headers={"Authorization": "Bearer "})
    else:
        answer = call(app, token)
    refused(answer, words, code)
    if token:
        assert token not in answer.text


def test_a_replayed_jti_is_refused(app: TestClient) -> None:
    token = sign()
    assert call(app, token).status_code == 200
    refused(call(app, token), "jti replayed")
    assert call(app, sign()).status_code == 200  # a new jti is fine


def test_a_forged_token_cannot_use_up_a_jti(app: TestClient) -> None:
    jti = "shared-jti-4711"
    refused(call(app, sign(key=OTHER_ES_KEY, jti=jti)), "Signature")
    assert call(app, sign(jti=jti)).status_code == 200


def test_the_service_credentials_and_basic_auth_are_not_ehr_jwts(app: TestClient) -> None:
    refused(
        app.post(SERVICE, json=BODY, headers={"Authorization": "Basic dXNlcjpwYXNz"}),
        "Bearer <JWT>",
        "login",
    )


def test_with_no_trusted_client_every_call_is_refused(cds: AppMaker) -> None:
    client = cds(cds_allow_unsigned=False)
    refused(call(client, sign()), "OXYRULE_CDS_CLIENTS")
    refused(call(client, None, "/cds-services"), "OXYRULE_CDS_CLIENTS")


def test_an_inline_jwk_set_needs_no_fetch(cds: AppMaker, ehr: Ehr) -> None:
    client = cds(**trusted(ehr, jwks_urls=[], jwks=key_set()))
    assert call(client, sign()).status_code == 200
    assert ehr.seen == []


# --- the JWK Set cache ------------------------------------------------------------------------


def test_the_jwk_set_is_fetched_once_and_cached(app: TestClient, ehr: Ehr) -> None:
    for _ in range(3):
        assert call(app, sign()).status_code == 200
    assert [path for path, _, _ in ehr.seen] == ["/jwks.json"]


def test_a_new_kid_refreshes_the_set_at_most_once_per_interval(cds: AppMaker, ehr: Ehr) -> None:
    client = cds(**trusted(ehr), cds_jwks_min_refresh_s=60)
    assert call(client, sign()).status_code == 200
    rotated = public_jwk(OTHER_ES_KEY, "ehr-es-2", "ES384")
    ehr.jwks = {"keys": [*ehr.jwks["keys"], rotated]}
    refused(call(client, sign(key=OTHER_ES_KEY, kid="ehr-es-2")), "this kid")
    assert len(ehr.seen) == 1  # refetched too recently: the unknown kid cannot force a fetch
    keys = client.app.state.service.cds.trust.keys  # type: ignore[attr-defined]
    keys.clock = lambda: time.monotonic() + 61
    assert call(client, sign(key=OTHER_ES_KEY, kid="ehr-es-2")).status_code == 200
    assert len(ehr.seen) == 2


def test_an_expired_set_is_refetched_and_kept_stale_while_the_ehr_is_down(
    cds: AppMaker, ehr: Ehr
) -> None:
    client = cds(**trusted(ehr), cds_jwks_cache_s=10, cds_jwks_max_stale_s=100)
    keys = client.app.state.service.cds.trust.keys  # type: ignore[attr-defined]
    assert call(client, sign()).status_code == 200
    ehr.jwks_status = 503
    keys.clock = lambda: time.monotonic() + 50  # past the cache time, within the stale time
    assert call(client, sign()).status_code == 200
    assert len(ehr.seen) == 2
    keys.clock = lambda: time.monotonic() + 500  # past the stale time too
    refused(call(client, sign()), "the JWK Set URL answered 503")


def test_a_jwk_set_over_the_byte_budget_is_not_used(cds: AppMaker, ehr: Ehr) -> None:
    ehr.jwks = key_set() | {"padding": "x" * 5000}
    client = cds(**trusted(ehr), cds_jwks_max_bytes=4096)
    refused(call(client, sign()), "larger than 4096 bytes")


def test_private_keys_in_a_fetched_set_are_never_used(cds: AppMaker, ehr: Ehr) -> None:
    private = json.loads(jwt.algorithms.ECAlgorithm.to_jwk(ES_KEY)) | {
        "kid": "ehr-es-1",
        "alg": "ES384",
    }
    ehr.jwks = {"keys": [private]}
    refused(call(cds(**trusted(ehr)), sign()), "this kid")


# --- the replay memory ------------------------------------------------------------------------


def test_the_replay_memory_forgets_an_id_only_after_it_expires() -> None:
    clock = [1000.0]
    memory = ReplayMemory(capacity=2, clock=lambda: clock[0])
    assert memory.first_use("iss", "a", until=1100)
    assert not memory.first_use("iss", "a", until=1100)
    assert memory.first_use("other-iss", "a", until=1100)  # ids are per issuer
    with pytest.raises(MemoryFull):
        memory.first_use("iss", "b", until=1100)  # full of unexpired ids: refuse, never forget
    clock[0] = 1101
    assert memory.first_use("iss", "b", until=1200)
    assert len(memory) == 1


def test_a_full_replay_memory_answers_429_not_401(cds: AppMaker, ehr: Ehr) -> None:
    client = cds(**trusted(ehr), cds_jti_cache_size=10)
    for _ in range(10):
        assert call(client, sign()).status_code == 200
    answer = call(client, sign())
    assert answer.status_code == 429
    assert answer.headers["retry-after"]


# --- settings --------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("settings", "words"),
    [
        ({"cds_clients": [{"iss": ISSUER, "jwks_urls": ["https://e.test/j"]}]}, "BASE_URL"),
        (
            {
                "cds_clients": [{"iss": ISSUER, "jwks_urls": ["https://e.test/j"]}],
                "cds_base_url": BASE,
                "cds_allow_unsigned": True,
            },
            "not both",
        ),
        ({"cds_clients": [{"iss": ISSUER}], "cds_base_url": BASE}, "jwks_urls or an inline"),
        (
            {
                "cds_clients": [{"iss": ISSUER, "jwks_urls": ["ftp://e.test/j"]}],
                "cds_base_url": BASE,
            },
            "not an absolute http(s) URL",
        ),
        (
            {
                "cds_clients": [{"iss": ISSUER, "jwks": key_set()}] * 2,
                "cds_base_url": BASE,
            },
            "each iss may appear once",
        ),
        ({"cds_base_url": "https://x.test/?a=1"}, "no query"),
        ({"cds_jwt_algorithms": ["HS256"]}, "cds_jwt_algorithms"),
        ({"cds_jwt_algorithms": ["none"]}, "cds_jwt_algorithms"),
        ({"cds_bench_url": "https://x.test/{patient}"}, "only placeholder"),
    ],
)
def test_bad_cds_settings_are_refused(settings: dict[str, Any], words: str) -> None:
    with pytest.raises(ValueError, match=re.escape(words)):
        ServerSettings(**settings)


def test_a_private_key_in_an_inline_jwk_set_stops_the_app(runtime: Any) -> None:
    private = json.loads(jwt.algorithms.ECAlgorithm.to_jwk(ES_KEY)) | {"kid": "ehr-es-1"}
    server = ServerSettings(
        cds_clients=[{"iss": ISSUER, "jwks": {"keys": [private]}}], cds_base_url=BASE
    )
    with pytest.raises(CdsConfigError, match="not a public RSA or EC key"):
        create_app(Settings(), server, runtime=runtime)


# --- anything at all in the header and claims ---------------------------------------------

JSON_VALUES = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False) | st.text(max_size=20),
    lambda inner: (
        st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=8), inner, max_size=3)
    ),
    max_leaves=8,
)
HEADER_KEYS = st.sampled_from(["alg", "typ", "kid", "jku", "crit", "x5u", "jwk", "cty"])
CLAIM_KEYS = st.sampled_from(["iss", "aud", "exp", "iat", "nbf", "jti", "sub", "tenant"])


PROPER_HEADER = {"alg": "ES384", "typ": "JWT", "kid": "ehr-es-1"}
PROPER_CLAIMS = {"iss": ISSUER, "aud": BASE + SERVICE, "jti": "x"}


@given(
    header=st.dictionaries(HEADER_KEYS, JSON_VALUES, max_size=3).map(
        lambda extra: PROPER_HEADER | extra
    )
    | st.dictionaries(HEADER_KEYS, JSON_VALUES, max_size=6),
    claims=st.dictionaries(CLAIM_KEYS, JSON_VALUES, max_size=4).map(
        lambda extra: PROPER_CLAIMS | {"exp": int(time.time()) + 60} | extra
    )
    | st.dictionaries(CLAIM_KEYS, JSON_VALUES, max_size=8),
    signed=st.booleans(),
)
@settings(max_examples=300, deadline=None, suppress_health_check=list(HealthCheck))
def test_any_header_and_claims_give_a_refusal_never_an_error(
    header: dict[str, Any], claims: dict[str, Any], signed: bool
) -> None:
    trust = CdsTrust(
        ServerSettings(cds_clients=[{"iss": ISSUER, "jwks": key_set()}], cds_base_url=BASE),
        lambda: pytest.fail("no fetch: the key set is inline"),
    )
    if signed:  # a real signature over whatever claims were drawn
        try:
            token = jwt.encode(claims, ES_KEY, "ES384", header)
        except (TypeError, ValueError, NotImplementedError, jwt.PyJWTError):
            token = handmade(header, claims)
    else:
        token = handmade(header, claims, b"\x00" * 96)
    try:
        asyncio.run(trust.verify(f"Bearer {token}", [BASE + SERVICE]))
    except CdsError as refusal:
        assert refusal.status == 401
        assert refusal.issues[0].expression == "http.Authorization"


def test_a_browser_ehr_gets_cors_only_for_an_allowed_origin(cds: AppMaker, ehr: Ehr) -> None:
    origin = "https://ehr-web.invented.test"
    client = cds(**trusted(ehr), cors_origins=[origin])
    preflight = {
        "Origin": origin,
        "Access-Control-Request-Method": "POST",
        "Access-Control-Request-Headers": "Authorization, Content-Type",
    }
    allowed = client.options(SERVICE, headers=preflight)
    assert allowed.status_code == 200
    assert allowed.headers["access-control-allow-origin"] == origin
    refusal = client.post(SERVICE, json=BODY, headers={"Origin": origin})
    refused(refusal, "signed JWT is required", "login")
    assert refusal.headers["access-control-allow-origin"] == origin  # the EHR can read why
    other = client.options(SERVICE, headers=preflight | {"Origin": "https://elsewhere.test"})
    assert other.status_code == 400 and "access-control-allow-origin" not in other.headers


def test_a_second_jwk_set_url_is_tried_when_the_first_cannot_be_read(
    cds: AppMaker, ehr: Ehr
) -> None:
    dead = ehr.base + "/no-such-jwks.json"  # answered 404 by the EHR server
    client = cds(**trusted(ehr, jwks_urls=[dead, ehr.base + "/jwks.json"]))
    assert call(client, sign()).status_code == 200
    assert [p for p, _, _ in ehr.seen] == ["/no-such-jwks.json", "/jwks.json"]
