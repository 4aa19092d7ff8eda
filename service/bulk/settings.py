"""Settings of the bulk job (``OXYRULE_BULK_*``), apart from the service's own ``Settings``.

Kept apart because the service's settings enter the settings hash of every result, and one of
these is a secret (the pseudonym key) that must never be hashed, written or shown. These
settings bound what the job holds and reads; which of a patient's data an assessment of one gas
sees is decided by the service's own settings (its pairing windows and oxygen-response window,
which enter the settings hash). The bulk settings are written to ``summary/run.json`` beside the
counts.
"""

from __future__ import annotations

import os

from pydantic import Field, SecretStr, model_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

from service.exceptions import ServiceError

# Settings an earlier version read, and what decides instead: refused rather than ignored.
RETIRED = {
    "OXYRULE_BULK_LOOKBACK_HOURS": "earlier gases are those within "
    "OXYRULE_OXYGEN_RESPONSE_WINDOW_HOURS, and each kind of value is paired within the "
    "service's own window (OXYRULE_PAIRING_WINDOW_MINUTES, OXYRULE_HAEMOGLOBIN_WINDOW_HOURS, …)",
}


class BulkLimitError(ServiceError):
    """A budget of the job was exceeded where going on would be wrong (the message says which
    setting raises it)."""


def location_limit(limit: int) -> BulkLimitError:
    return BulkLimitError(
        f"more than {limit} Location resources (OXYRULE_BULK_MAX_LOCATIONS): every worker "
        "keeps them all; raise the setting if the export really holds that many places"
    )


class BulkSettings(BaseSettings):
    """Every bulk setting, its default and its valid range."""

    model_config = SettingsConfigDict(env_prefix="OXYRULE_BULK_", extra="forbid", frozen=True)

    pseudonym_key: SecretStr | None = Field(
        None, description="secret key of --pseudonymise (HMAC-SHA-256); never written out"
    )
    max_episode_entries: int = Field(
        5000,
        ge=100,
        le=1_000_000,
        description="entries and components of one gas's episode read at most (else an error "
        "row); the service's request limit does not apply to episodes the job builds",
    )
    partition_mib: int = Field(
        32, ge=1, le=4096, description="local engine: raw input per partition held in memory"
    )
    max_line_bytes: int = Field(
        5 * 1024 * 1024, ge=1024, le=512 * 1024 * 1024, description="longest NDJSON line read"
    )
    max_patient_resources: int = Field(
        200_000, ge=10, le=10_000_000, description="resources of one patient assessed at most"
    )
    max_locations: int = Field(
        100_000, ge=1, le=10_000_000, description="Location resources kept for every worker"
    )

    @model_validator(mode="after")
    def _no_retired_settings(self) -> BulkSettings:
        for name, instead in RETIRED.items():
            if name in os.environ:
                raise ValueError(f"{name} is no longer read: {instead}")
        return self

    def public(self) -> dict[str, object]:
        """The settings that shape results, for ``run.json`` (never the key)."""
        return self.model_dump(exclude={"pseudonym_key"})
