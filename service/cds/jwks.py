"""The EHRs' JWK Sets: fetched from allow-listed URLs, cached, refreshed, bounded.

CDS Hooks 2.0 ("Trusting CDS Clients"): the client publishes its public keys as a JWK Set,
at the URL of the JWT's ``jku`` header or exchanged out of band; the ``kid`` names the key.
Only URLs listed for the issuer in ``OXYRULE_CDS_CLIENTS`` are ever fetched (the ``jku`` is
checked against that list before this module sees it), so a token cannot send the service
to a URL of its choosing.

Per URL: the set is kept ``OXYRULE_CDS_JWKS_CACHE_S`` seconds, then fetched again; a ``kid``
not in the set fetches it again at most once per ``OXYRULE_CDS_JWKS_MIN_REFRESH_S`` (key
rotation, without letting unknown kids hammer the EHR); when a fetch fails, the last good set
stays usable for ``OXYRULE_CDS_JWKS_MAX_STALE_S`` (an EHR's key server being down for a while
does not stop the cards). Bounded: one entry per allow-listed URL, a body of at most
``OXYRULE_CDS_JWKS_MAX_BYTES``, the per-request timeout of the shared client, and one fetch
per URL at a time (concurrent calls wait for it). Private (``d``) and symmetric keys in a set
are never used.
"""

from __future__ import annotations

import asyncio
import logging
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import orjson

from service.cds.errors import CdsConfigError
from service.jwk import is_public

if TYPE_CHECKING:
    # httpx is imported where a fetch needs it: a worker that never fetches keeps ~7 MiB less
    # resident (measured with VmRSS; the memory budget is 80 MB a worker).
    import httpx

    # PyJWT (with cryptography) is imported where a token is read: a worker that reads none
    # keeps ~10 MiB less resident (measured with VmRSS; the memory budget is 80 MB a worker).
    import jwt

log = logging.getLogger("oxyrule.cds")
Json = dict[str, Any]


class KeySetError(Exception):
    """No usable JWK Set could be had; ``reason`` is a fixed phrase."""

    def __init__(self, reason: str) -> None:
        self.reason = reason
        super().__init__(reason)


@dataclass(slots=True)
class KeySet:
    """The public keys of one set by ``kid``, parsed once when first used."""

    keys: dict[str, Json]
    fetched: float = 0.0  # monotonic seconds
    attempted: float = 0.0
    parsed: dict[str, jwt.PyJWK] = field(default_factory=dict)

    def key(self, kid: str) -> tuple[Json, jwt.PyJWK] | None:
        import jwt

        jwk = self.keys.get(kid)
        if jwk is None:
            return None
        found = self.parsed.get(kid)
        if found is None:
            try:
                found = self.parsed[kid] = jwt.PyJWK(jwk)
            except (jwt.PyJWKError, jwt.InvalidKeyError, ValueError, TypeError):
                return None
        return jwk, found


def key_set(document: object) -> KeySet:
    """The public keys of a JWK Set document; keys without a ``kid``, private or symmetric
    ones are left out.

    Raises:
        KeySetError: not a JWK Set.
    """
    keys = document.get("keys") if isinstance(document, Mapping) else None
    if not isinstance(keys, list):
        raise KeySetError("the JWK Set has no 'keys' list")
    found: dict[str, Json] = {}
    for jwk in keys:
        if isinstance(jwk, dict) and isinstance(jwk.get("kid"), str) and is_public(jwk):
            found.setdefault(jwk["kid"], jwk)
    return KeySet(found)


def inline_key_set(document: Mapping[str, Any], issuer: str) -> KeySet:
    """A JWK Set given in the settings, checked at start.

    Raises:
        CdsConfigError: not a JWK Set, or one holding a private or symmetric key.
    """
    import jwt

    where = f"OXYRULE_CDS_CLIENTS (iss {issuer!r}): jwks"
    keys = document.get("keys")
    if not isinstance(keys, list) or not keys:
        raise CdsConfigError(f"{where} needs a non-empty 'keys' list")
    for i, jwk in enumerate(keys):
        if not isinstance(jwk, dict) or not is_public(jwk):
            raise CdsConfigError(f"{where}: keys[{i}] is not a public RSA or EC key")
        if not isinstance(jwk.get("kid"), str):
            raise CdsConfigError(f"{where}: keys[{i}] has no kid (CDS Hooks requires one)")
        try:
            jwt.PyJWK(jwk)
        except (jwt.PyJWKError, jwt.InvalidKeyError, ValueError, TypeError) as exc:
            raise CdsConfigError(f"{where}: keys[{i}] is not a usable key ({exc})") from exc
    return key_set(document)


class JwksCache:
    """The JWK Sets of the allow-listed URLs, as the module docstring says."""

    def __init__(
        self,
        client: Callable[[], httpx.AsyncClient],
        *,
        ttl_s: float,
        min_refresh_s: float,
        max_stale_s: float,
        max_bytes: int,
        clock: Callable[[], float] = time.monotonic,
    ) -> None:
        self._client = client
        self.ttl_s, self.min_refresh_s, self.max_stale_s = ttl_s, min_refresh_s, max_stale_s
        self.max_bytes = max_bytes
        self.clock = clock
        self.sets: dict[str, KeySet] = {}
        self._locks: dict[str, asyncio.Lock] = {}
        self.fetches = 0

    async def key(self, url: str, kid: str) -> tuple[Json, jwt.PyJWK] | None:
        """The key ``kid`` of the set at ``url`` (fetched or refreshed as needed), or None.

        Raises:
            KeySetError: no set could be fetched, and none recent enough is kept.
        """
        entry = self.sets.get(url)
        if entry is None or self.clock() - entry.fetched >= self.ttl_s:
            entry = await self._refresh(url, entry)
        found = entry.key(kid)
        if found is None and self.clock() - entry.attempted >= self.min_refresh_s:
            entry = await self._refresh(url, entry)
            found = entry.key(kid)
        return found

    async def _refresh(self, url: str, seen: KeySet | None) -> KeySet:
        lock = self._locks.setdefault(url, asyncio.Lock())
        async with lock:
            current = self.sets.get(url)
            if current is not None and current is not seen:
                return current  # another call refreshed it while this one waited
            now = self.clock()
            try:
                fresh = await self._fetch(url)
            except KeySetError as error:
                log.warning("jwks fetch failed", extra={"problem": error.reason})
                if current is not None and now - current.fetched <= self.max_stale_s:
                    current.attempted = now
                    return current
                raise
            fresh.fetched = fresh.attempted = now
            self.sets[url] = fresh
            return fresh

    async def _fetch(self, url: str) -> KeySet:
        import httpx

        self.fetches += 1
        try:
            async with self._client().stream(
                "GET", url, headers={"Accept": "application/json"}
            ) as answer:
                if answer.status_code != 200:
                    raise KeySetError(f"the JWK Set URL answered {answer.status_code}")
                chunks, size = [], 0
                async for chunk in answer.aiter_bytes():
                    size += len(chunk)
                    if size > self.max_bytes:
                        raise KeySetError(f"the JWK Set is larger than {self.max_bytes} bytes")
                    chunks.append(chunk)
        except httpx.HTTPError as exc:
            raise KeySetError(f"the JWK Set could not be fetched ({type(exc).__name__})") from None
        try:
            return key_set(orjson.loads(b"".join(chunks)))
        except orjson.JSONDecodeError:
            raise KeySetError("the JWK Set is not JSON") from None
