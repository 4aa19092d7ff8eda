"""Keyed pseudonyms for patient and resource references (``oxyrule bulk --pseudonymise``).

HMAC-SHA-256 (RFC 2104, FIPS 198-1) of the reference under a secret key: the same reference
always gives the same pseudonym under one key, so rows of one patient stay linked, while
nobody without the key can compute or reverse it (a plain hash of a patient id can be reversed
by hashing every id). The key comes from the ``OXYRULE_BULK_PSEUDONYM_KEY`` setting and is never
written, logged or shown; pseudonymised data remain personal data and need the same care.
"""

from __future__ import annotations

import hashlib
import hmac
from dataclasses import dataclass, field

MIN_KEY_CHARS = 32  # 32 characters of a random key: at least 128 bits as hex or base64


class PseudonymKeyError(ValueError):
    """Pseudonymising was asked for without a usable key."""


@dataclass(frozen=True, slots=True)
class Pseudonymiser:
    """Replaces references by ``<Type>/<HMAC hex>``; ``None`` key leaves them as they are."""

    key: bytes | None = field(default=None, repr=False)

    @classmethod
    def from_setting(cls, key: str | None, *, required: bool) -> Pseudonymiser:
        """The pseudonymiser for a run: refuses to run without a long enough key when asked."""
        if not required:
            return cls(None)
        if not key:
            raise PseudonymKeyError(
                "--pseudonymise needs a secret key in OXYRULE_BULK_PSEUDONYM_KEY; "
                "nothing was written"
            )
        if len(key) < MIN_KEY_CHARS:
            raise PseudonymKeyError(
                f"OXYRULE_BULK_PSEUDONYM_KEY is too short: use at least {MIN_KEY_CHARS} "
                "random characters; nothing was written"
            )
        return cls(key.encode())

    @property
    def enabled(self) -> bool:
        return self.key is not None

    def __call__(self, reference: str | None) -> str | None:
        """The pseudonym of a reference (its type kept: ``Patient/3f1c…``), or it unchanged."""
        if reference is None or self.key is None:
            return reference
        head = reference.split("/", 1)[0]
        kind = head if head.isalpha() and head[:1].isupper() else "ref"
        digest = hmac.new(self.key, reference.encode(), hashlib.sha256).hexdigest()
        return f"{kind}/{digest}"
