"""Which public JSON Web Key may verify which JWS algorithm (RFC 7517, RFC 7518).

Shared by the bearer-token check of the FHIR routes (``service.api.auth``) and the CDS Hooks
client check (``service.cds.trust``): asymmetric algorithms only, so a public key can never
be used as an HMAC secret, and an EC key only with the curve its algorithm names.
"""

from __future__ import annotations

from collections.abc import Mapping

# JWS algorithm -> the key type it needs; EC algorithms -> their curve (RFC 7518 §3.4).
ASYMMETRIC = {"RS256": "RSA", "RS384": "RSA", "ES256": "EC", "ES384": "EC"}
EC_CURVES = {"ES256": "P-256", "ES384": "P-384"}


def key_fits(jwk: Mapping[str, object], alg: str) -> bool:
    """Whether ``jwk`` may verify a signature made with ``alg``: its type, its curve, and its
    own ``alg`` and ``use`` when it states them."""
    return (
        alg in ASYMMETRIC
        and jwk.get("kty") == ASYMMETRIC[alg]
        and jwk.get("alg", alg) == alg
        and jwk.get("use", "sig") == "sig"
        and (alg not in EC_CURVES or jwk.get("crv") == EC_CURVES[alg])
    )


def is_public(jwk: Mapping[str, object]) -> bool:
    """An RSA or EC key with no private part (no ``d``): the only kind a verifier may hold."""
    return jwk.get("kty") in ("RSA", "EC") and "d" not in jwk
