"""Bearer authentication of the assess operation: static API keys and signed JWTs.

Off unless configured. ``Authorization: Bearer <token>`` is accepted when the token is

* a static API key whose sha256 digest is configured (``OXYRULE_API_KEY_HASHES``; the keys
  themselves are never stored). The presented key is hashed and compared with every digest in
  constant time (``hmac.compare_digest``, no early exit), for integration engines; or
* a JWT signed by a key of the configured JWKS (``OXYRULE_JWT_JWKS`` or ``_JWKS_FILE``), with
  the configured issuer and audience, an ``exp`` in the future, and an algorithm from the
  allow-list (RS256, RS384, ES256, ES384 at most): ``none`` and the HMAC algorithms are always
  refused, so a public key can never be used as a shared secret. For SMART-style clients whose
  token comes from the hospital's authorisation server.

Failures answer 401 with ``WWW-Authenticate: Bearer`` (or 403 for a missing scope); the reason
is stated, the token is never echoed or logged.
"""

from __future__ import annotations

import hashlib
import hmac
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import orjson

from service.api.errors import ApiError, HttpIssueType
from service.config import ServerSettings
from service.jwk import ASYMMETRIC, key_fits

if TYPE_CHECKING:
    # PyJWT (with cryptography) is imported where a token is read: a worker that reads none
    # keeps ~10 MiB less resident (measured with VmRSS; the memory budget is 80 MB a worker).
    import jwt


class AuthConfigError(ValueError):
    """Authentication settings that cannot be used; the message names the setting."""


def _refuse(code: HttpIssueType, diagnostics: str, error: str | None = "invalid_token") -> ApiError:
    challenge = 'Bearer realm="oxyrule"' + (f', error="{error}"' if error else "")
    return ApiError.issue(
        401, code, diagnostics, "http.Authorization", {"WWW-Authenticate": challenge}
    )


@dataclass(frozen=True, slots=True)
class Caller:
    """Who was let in: how (``api-key``, ``jwt`` or ``open``) and, for a JWT, its subject."""

    method: str
    subject: str | None = None


class JwtVerifier:
    """Checks bearer JWTs against a JWKS, issuer, audience and algorithm allow-list."""

    def __init__(
        self,
        jwks: Mapping[str, Any],
        *,
        issuer: str,
        audience: str,
        algorithms: list[str],
        leeway: int,
        required_scope: str | None,
        source: str,
    ) -> None:
        import jwt

        bad = [a for a in algorithms if a not in ASYMMETRIC]
        if bad:
            raise AuthConfigError(f"OXYRULE_JWT_ALGORITHMS: not allowed: {', '.join(bad)}")
        keys = jwks.get("keys") if isinstance(jwks, Mapping) else None
        if not isinstance(keys, list) or not keys:
            raise AuthConfigError(f"{source}: a JWKS needs a non-empty 'keys' list")
        self.keys: list[tuple[dict[str, Any], jwt.PyJWK]] = []
        for i, key in enumerate(keys):
            if not isinstance(key, dict):
                raise AuthConfigError(f"{source}: keys[{i}] is not a JSON object")
            if "d" in key or key.get("kty") == "oct":
                raise AuthConfigError(
                    f"{source}: keys[{i}] is a private or symmetric key; give public keys only"
                )
            if key.get("kty") not in ("RSA", "EC"):
                raise AuthConfigError(f"{source}: keys[{i}]: kty must be RSA or EC")
            try:
                self.keys.append((key, jwt.PyJWK(key)))
            except (jwt.PyJWKError, jwt.InvalidKeyError, ValueError, TypeError) as exc:
                raise AuthConfigError(f"{source}: keys[{i}] is not a usable key ({exc})") from exc
        self.issuer, self.audience = issuer, audience
        self.algorithms, self.leeway, self.required_scope = list(algorithms), leeway, required_scope

    def _key_for(self, kid: object, alg: str) -> jwt.PyJWK:
        fitting = [
            pyjwk
            for jwk, pyjwk in self.keys
            if key_fits(jwk, alg) and (kid is None or jwk.get("kid") == kid)
        ]
        if len(fitting) != 1:
            reason = "no key" if not fitting else "more than one key (send a 'kid')"
            raise _refuse("security", f"the token's key: {reason} of the JWKS fits it")
        return fitting[0]

    def verify(self, token: str) -> Caller:
        import jwt

        header = _header(token)
        alg = header.get("alg")
        if not isinstance(alg, str) or alg not in self.algorithms:
            # Named only when it is a registered JWA algorithm: never the sender's text.
            known = isinstance(alg, str) and alg in JWA_ALGORITHMS
            named = f"{alg!r}" if known else "(not a JWA algorithm)"
            raise _refuse(
                "security",
                f"token algorithm {named} is not accepted; allowed: {', '.join(self.algorithms)}",
            )
        key = self._key_for(header.get("kid"), alg)
        try:
            claims: dict[str, Any] = jwt.decode(
                token,
                key=key.key,
                algorithms=[alg],
                audience=self.audience,
                issuer=self.issuer,
                leeway=self.leeway,
                options={"require": ["exp", "iss", "aud"]},
            )
        except jwt.ExpiredSignatureError as exc:
            raise _refuse("expired", "the token has expired") from exc
        except jwt.InvalidTokenError as exc:
            raise _refuse("security", f"the token is not valid: {_reason(exc)}") from None
        if self.required_scope is not None:
            scopes = str(claims.get("scope", "")).split()
            if self.required_scope not in scopes:
                raise ApiError.issue(
                    403,
                    "forbidden",
                    f"the token lacks the scope {self.required_scope!r}",
                    "http.Authorization",
                    {"WWW-Authenticate": 'Bearer realm="oxyrule", error="insufficient_scope"'},
                )
        subject = claims.get("sub")
        return Caller("jwt", subject if isinstance(subject, str) else None)


def _header(token: str) -> dict[str, Any]:
    """The token's JOSE header, checked before any key is looked up, or a 401.

    Every malformed header is a refusal, never an error of ours: PyJWT raises on a ``kid``
    that is not a string (a number, list, object or null) while it reads the header, and
    ``crit`` names extensions a recipient must understand or refuse (RFC 7515 §4.1.11): this
    service understands none, nor ``b64`` (RFC 7797, unencoded payloads).
    """
    import jwt

    not_a_jwt = _refuse("security", "the bearer token is neither a known key nor a JWT")
    try:  # read first by hand, so that each problem of the header is named
        raw = orjson.loads(jwt.utils.base64url_decode(token.split(".", 1)[0]))
    except (ValueError, TypeError, orjson.JSONDecodeError):  # binascii.Error is a ValueError
        raise not_a_jwt from None
    if not isinstance(raw, dict):
        raise not_a_jwt
    if "kid" in raw and not isinstance(raw["kid"], str):
        raise _refuse("security", "the token header's kid must be a string")
    if "crit" in raw or "b64" in raw:
        raise _refuse(
            "security", "the token header names extensions (crit, b64) this service does not take"
        )
    try:
        header: dict[str, Any] = jwt.get_unverified_header(token)
    except jwt.InvalidTokenError:  # DecodeError, and PyJWT's own checks of the header
        raise not_a_jwt from None
    return header


# The JWS algorithm names of the JWA registry (RFC 7518 §3.1, RFC 8037): the only algorithm
# names a refusal repeats.
JWA_ALGORITHMS = frozenset(
    {"none", "EdDSA", "ES256K"}
    | {f"{family}{bits}" for family in ("HS", "RS", "ES", "PS") for bits in (256, 384, 512)}
)

# What each failed check is called in a refusal: fixed phrases, so that nothing of the token
# (and nothing PyJWT might one day quote from it) is repeated.
_REASONS: tuple[tuple[str, str], ...] = (  # PyJWT's exception classes, by name
    ("InvalidSignatureError", "Signature verification failed"),
    ("InvalidAudienceError", "Audience (aud) is not this service"),
    ("InvalidIssuerError", "the issuer (iss) is not the configured one"),
    ("ImmatureSignatureError", "the token is not yet valid (nbf or iat in the future)"),
    ("InvalidIssuedAtError", "the issued-at time (iat) is not a number"),
    ("InvalidAlgorithmError", "the algorithm does not fit the key"),
    ("DecodeError", "the token cannot be decoded"),
)


def _reason(exc: jwt.InvalidTokenError) -> str:
    import jwt

    if isinstance(exc, jwt.MissingRequiredClaimError):
        return f"the token lacks the required claim {exc.claim}"  # one of ours: exp, iss, aud
    return next(
        (text for kind, text in _REASONS if isinstance(exc, getattr(jwt, kind))), "a check failed"
    )


class Authenticator:
    """The configured ways in; ``enabled`` is False when none is configured."""

    def __init__(self, key_digests: list[bytes], verifier: JwtVerifier | None) -> None:
        self.key_digests = key_digests
        self.verifier = verifier

    @property
    def enabled(self) -> bool:
        return bool(self.key_digests) or self.verifier is not None

    @property
    def methods(self) -> list[str]:
        return (["api-key"] if self.key_digests else []) + (["jwt"] if self.verifier else [])

    @classmethod
    def from_settings(cls, server: ServerSettings) -> Authenticator:
        """Build from the settings; a JWKS that cannot be used raises ``AuthConfigError``."""
        digests = [bytes.fromhex(d.removeprefix("sha256:")) for d in server.api_key_hashes]
        verifier = None
        if server.jwt_jwks is not None or server.jwt_jwks_file is not None:
            source, jwks = _read_jwks(server)
            assert server.jwt_issuer is not None and server.jwt_audience is not None
            verifier = JwtVerifier(
                jwks,
                issuer=server.jwt_issuer,
                audience=server.jwt_audience,
                algorithms=list(server.jwt_algorithms),
                leeway=server.jwt_leeway_seconds,
                required_scope=server.jwt_required_scope,
                source=source,
            )
        return cls(digests, verifier)

    def _is_known_key(self, token: str) -> bool:
        presented = hashlib.sha256(token.encode("utf-8")).digest()
        found = False
        for digest in self.key_digests:
            found |= hmac.compare_digest(presented, digest)
        return found

    def check(self, authorization: str | None) -> Caller:
        """The caller behind an ``Authorization`` header, or a 401/403 ``ApiError``."""
        if not self.enabled:
            return Caller("open")
        if not authorization:
            raise _refuse("login", "authentication required: send Authorization: Bearer", None)
        scheme, _, token = authorization.strip().partition(" ")
        token = token.strip()
        if scheme.lower() != "bearer" or not token:
            raise _refuse("login", "the Authorization header must be 'Bearer <token>'")
        if self.key_digests and self._is_known_key(token):
            return Caller("api-key")
        if self.verifier is not None:
            return self.verifier.verify(token)
        raise _refuse("security", "the bearer token is not a known API key")


def _read_jwks(server: ServerSettings) -> tuple[str, Any]:
    if server.jwt_jwks_file is not None:
        source = "OXYRULE_JWT_JWKS_FILE"
        try:
            text = server.jwt_jwks_file.read_bytes()
        except OSError as exc:
            raise AuthConfigError(f"{source}: cannot read {server.jwt_jwks_file}: {exc}") from exc
    else:
        source, text = "OXYRULE_JWT_JWKS", (server.jwt_jwks or "").encode()
    try:
        return source, orjson.loads(text)
    except orjson.JSONDecodeError as exc:
        raise AuthConfigError(f"{source}: the JWKS is not JSON ({exc.msg})") from exc
