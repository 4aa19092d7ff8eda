"""Trusting CDS Clients: the EHR's signed JWT on every CDS Hooks call, verified.

CDS Hooks 2.0 ("Trusting CDS Clients") has the client send ``Authorization: Bearer <JWT>``
on every call - discovery, service and feedback - signed with its private key. Checked here,
in this order, each failure a 401 OperationOutcome located at ``http.Authorization`` whose
diagnostics name the failed check (never the token):

1. header: a compact JWS whose header is a JSON object; ``alg`` in
   ``OXYRULE_CDS_JWT_ALGORITHMS`` (ES384 and RS384 by default; ``none`` and HMAC never: the
   specification forbids both); ``typ`` ``JWT``; ``kid`` present; no ``crit`` (no extension is
   understood);
2. issuer: ``iss`` is one of ``OXYRULE_CDS_CLIENTS``; a ``jku`` must be one of that client's
   ``jwks_urls`` (the allow-list of ``iss`` and ``jku`` the specification asks for);
3. key: the ``kid`` in the client's inline JWK Set or at its JWK Set URL(s) (``jwks.py``:
   cached, refreshed, bounded), of the type and curve the algorithm needs;
4. claims (PyJWT verifies the signature and these): ``aud`` equal to the exact URL of the
   endpoint called under ``OXYRULE_CDS_BASE_URL`` (a string, or an array holding it);
   ``exp`` in the future and ``iat`` not in the future, within ``OXYRULE_CDS_JWT_CLOCK_SKEW_S``;
   ``exp - iat`` at most ``OXYRULE_CDS_JWT_MAX_LIFETIME_S``; ``jti`` present;
5. replay: ``(iss, jti)`` not seen before by this worker (``replay.py``); recorded only once
   everything else has passed, so an unsigned token cannot use up an id.

With ``OXYRULE_CDS_ALLOW_UNSIGNED`` (development only) nothing is checked; with neither
clients nor that setting every call is refused, so the hooks are never open by accident.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from service.cds.errors import CdsError
from service.cds.jwks import JwksCache, KeySet, KeySetError, inline_key_set
from service.cds.replay import MemoryFull, ReplayMemory
from service.config import CdsClient, ServerSettings
from service.jwk import key_fits

if TYPE_CHECKING:
    # httpx is imported where a fetch needs it: a worker that never fetches keeps ~7 MiB less
    # resident (measured with VmRSS; the memory budget is 80 MB a worker).
    import httpx

    # PyJWT (with cryptography) is imported where a token is read: a worker that reads none
    # keeps ~10 MiB less resident (measured with VmRSS; the memory budget is 80 MB a worker).
    import jwt

MAX_KID, MAX_JTI = 256, 256
CHALLENGE = 'Bearer realm="oxyrule-cds"'


def refuse(code: str, diagnostics: str, error: str | None = "invalid_token") -> CdsError:
    """A 401 with the reason, located at the Authorization header."""
    challenge = CHALLENGE + (f', error="{error}"' if error else "")
    return CdsError.one(
        401, code, diagnostics, "http.Authorization", {"WWW-Authenticate": challenge}
    )


@dataclass(frozen=True, slots=True)
class CdsCaller:
    """Who called: the trusted issuer, or ``None`` when unsigned calls are allowed."""

    issuer: str | None


@dataclass(frozen=True, slots=True)
class _Client:
    settings: CdsClient
    inline: KeySet | None


class CdsTrust:
    """Verifies the EHR's JWT as the module docstring says."""

    def __init__(
        self,
        server: ServerSettings,
        client: Callable[[], httpx.AsyncClient],
        *,
        clock: Callable[[], float] = time.time,
        monotonic: Callable[[], float] = time.monotonic,
    ) -> None:
        """Raises ``CdsConfigError`` when an inline JWK Set of the settings is unusable."""
        self.unsigned = server.cds_allow_unsigned
        self.algorithms = list(server.cds_jwt_algorithms)
        self.skew = server.cds_jwt_clock_skew_s
        self.max_lifetime = server.cds_jwt_max_lifetime_s
        self.clock = clock
        self.clients = {
            c.iss: _Client(c, inline_key_set(c.jwks, c.iss) if c.jwks is not None else None)
            for c in server.cds_clients
        }
        self.keys = JwksCache(
            client,
            ttl_s=server.cds_jwks_cache_s,
            min_refresh_s=server.cds_jwks_min_refresh_s,
            max_stale_s=server.cds_jwks_max_stale_s,
            max_bytes=server.cds_jwks_max_bytes,
            clock=monotonic,
        )
        self.replay = ReplayMemory(server.cds_jti_cache_size, clock)

    @property
    def mode(self) -> str:
        """``jwt``, ``unsigned`` or ``closed`` (no client configured), for the start-up log."""
        return "unsigned" if self.unsigned else "jwt" if self.clients else "closed"

    async def verify(self, authorization: str | None, audiences: Sequence[str]) -> CdsCaller:
        """The caller of a CDS call to the endpoint whose URL is ``audiences[0]`` (feedback
        also accepts its service's URL), or a 401 ``CdsError`` (429 when the replay memory is
        full)."""
        if self.unsigned:
            return CdsCaller(None)
        if not self.clients:
            raise refuse(
                "security",
                "no CDS client is trusted: the operator must set OXYRULE_CDS_CLIENTS",
                None,
            )
        token = _bearer(authorization)
        header = self._header(token)
        alg, kid = header["alg"], header["kid"]
        issuer, client = self._issuer(token)
        pyjwk = await self._key(client, kid, alg, header.get("jku"))
        claims = self._claims(token, pyjwk, alg, issuer, audiences)
        self._remember(issuer, claims)
        return CdsCaller(issuer)

    def _header(self, token: str) -> dict[str, Any]:
        import jwt

        try:
            header = jwt.get_unverified_header(token)
        except jwt.DecodeError:
            raise refuse(
                "security", "the bearer token is not a JWT (its header cannot be read)"
            ) from None
        except jwt.InvalidTokenError as exc:  # a kid that is no string, an unknown crit
            raise refuse("security", f"the JWT header is not acceptable: {_reason(exc)}") from None
        alg = header.get("alg")
        if not isinstance(alg, str) or alg not in self.algorithms:
            raise refuse(
                "security",
                f"JWT algorithm {alg!r} is not accepted; allowed: {', '.join(self.algorithms)}"
                if isinstance(alg, str) and len(alg) <= 16
                else "the JWT header has no usable alg",
            )
        typ = header.get("typ")
        if not isinstance(typ, str) or typ.upper() != "JWT":
            raise refuse("security", "the JWT header must have typ JWT")
        kid = header.get("kid")
        if not isinstance(kid, str) or not kid or len(kid) > MAX_KID:
            raise refuse("security", "the JWT header must name its key (kid)")
        if "crit" in header:
            raise refuse("security", "the JWT header asks for extensions (crit) not understood")
        jku = header.get("jku")
        if jku is not None and not isinstance(jku, str):
            raise refuse("security", "the JWT header's jku must be a URL")
        return header

    def _issuer(self, token: str) -> tuple[str, _Client]:
        import jwt

        try:
            unverified = jwt.decode(token, options={"verify_signature": False})
        except jwt.InvalidTokenError:
            raise refuse("security", "the JWT claims cannot be read") from None
        issuer = unverified.get("iss")
        client = self.clients.get(issuer) if isinstance(issuer, str) else None
        if client is None:
            raise refuse("security", "the JWT issuer (iss) is not a trusted CDS client")
        return str(issuer), client

    async def _key(self, client: _Client, kid: str, alg: str, jku: str | None) -> jwt.PyJWK:
        urls = client.settings.jwks_urls
        if jku is not None:
            if jku.rstrip("/") not in urls:
                raise refuse("security", "the JWT's jku is not a JWK Set URL of this issuer")
            urls = [jku.rstrip("/")]
        found = client.inline.key(kid) if client.inline is not None and jku is None else None
        failure: KeySetError | None = None
        for url in urls:
            if found is not None:
                break
            try:
                found = await self.keys.key(url, kid)
            except KeySetError as error:  # another listed set may still hold the key
                failure = error
        if found is None and failure is not None:
            raise refuse("security", f"the issuer's keys cannot be had: {failure.reason}")
        if found is None:
            raise refuse("security", "no key of the issuer has this kid")
        jwk, pyjwk = found
        if not key_fits(jwk, alg):
            raise refuse("security", f"the key named by kid does not fit algorithm {alg}")
        return pyjwk

    def _claims(
        self, token: str, key: jwt.PyJWK, alg: str, issuer: str, audiences: Sequence[str]
    ) -> dict[str, Any]:
        import jwt

        try:
            claims: dict[str, Any] = jwt.decode(
                token,
                key=key.key,
                algorithms=[alg],
                audience=list(audiences),
                issuer=issuer,
                leeway=self.skew,
                options={"require": ["iss", "aud", "exp", "iat", "jti"]},
            )
        except jwt.ExpiredSignatureError:
            raise refuse("expired", "the JWT has expired") from None
        except jwt.InvalidAudienceError:
            raise refuse(
                "security", "the JWT's aud is not the URL of the endpoint called"
            ) from None
        except jwt.InvalidTokenError as exc:
            raise refuse("security", f"the JWT is not valid: {_reason(exc)}") from None
        iat, exp = claims["iat"], claims["exp"]
        if not all(isinstance(t, int | float) and not isinstance(t, bool) for t in (iat, exp)):
            raise refuse("security", "the JWT's iat and exp must be numbers")
        if iat > self.clock() + self.skew:
            raise refuse("security", "the JWT was issued in the future (iat)")
        if exp - iat > self.max_lifetime:
            raise refuse(
                "security",
                f"the JWT lives longer than {self.max_lifetime} s (exp - iat); "
                "setting OXYRULE_CDS_JWT_MAX_LIFETIME_S",
            )
        jti = claims["jti"]
        if not isinstance(jti, str) or not jti or len(jti) > MAX_JTI:
            raise refuse("security", "the JWT's jti must be a non-empty string")
        return claims

    def _remember(self, issuer: str, claims: dict[str, Any]) -> None:
        try:
            first = self.replay.first_use(issuer, claims["jti"], claims["exp"] + self.skew)
        except MemoryFull:
            raise CdsError.one(
                429,
                "throttled",
                "too many recent JWTs to remember; retry shortly (OXYRULE_CDS_JTI_CACHE_SIZE)",
                "http.Authorization",
                {"Retry-After": "5"},
            ) from None
        if not first:
            raise refuse("security", "the JWT was used before (jti replayed)")


def _bearer(authorization: str | None) -> str:
    if not authorization:
        raise refuse("login", "the EHR's signed JWT is required: Authorization: Bearer", None)
    scheme, _, token = authorization.strip().partition(" ")
    token = token.strip()
    if scheme.lower() != "bearer" or not token:
        raise refuse("login", "the Authorization header must be 'Bearer <JWT>'")
    return token


def _reason(exc: jwt.InvalidTokenError) -> str:
    # PyJWT's messages name the failed check (signature, issuer, claim); none quote the token.
    text = str(exc).splitlines()[0][:200] if str(exc) else ""
    return text or type(exc).__name__
