"""Settings of the bulk job (``OXYRULE_BULK_*``), apart from the service's own ``Settings``.

Kept apart because the service's settings enter the settings hash of every result, and one of
these is a secret (the pseudonym key) that must never be hashed, written or shown. The episode
settings decide which of a patient's data an assessment of one gas sees; they are written to
``summary/run.json`` beside the counts.
"""

from __future__ import annotations

from pydantic import Field, SecretStr
from pydantic_settings import BaseSettings, SettingsConfigDict

from service.exceptions import ServiceError


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
    lookback_hours: float = Field(
        12.0,
        gt=0,
        le=24 * 14,
        description="earlier gases and context within this many hours belong to a gas's episode",
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

    def public(self) -> dict[str, object]:
        """The settings that shape results, for ``run.json`` (never the key)."""
        return self.model_dump(exclude={"pseudonym_key"})
