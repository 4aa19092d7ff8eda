"""Service settings, read from ``OXYRULE_*`` environment variables and validated at start.

Physiological constants are not settings (they live in ``physiology/constants.py``). These are
the choices a site makes: which rule directory, how far apart in time a gas and its FiO2 may
be, whether room air may be assumed, the Hüfner factor and assumed a-v difference it prefers.
Nothing here is read at import time: call ``Settings()`` (or ``get_settings()``) when needed.
"""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path
from typing import Literal

from pydantic import Field, model_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

from service.physiology import constants as c
from service.physiology.atmosphere import AltitudeModel


def default_rules_dir() -> Path:
    """The shipped rule set: bundled in the wheel, or ``rules/`` beside the package."""
    package = Path(__file__).resolve().parent
    bundled = package / "_bundled" / "rules"
    return bundled if bundled.is_dir() else package.parent / "rules"


class Settings(BaseSettings):
    """Every setting, its default and its valid range."""

    model_config = SettingsConfigDict(env_prefix="OXYRULE_", extra="forbid", frozen=True)

    rules_dir: Path = Field(default_factory=default_rules_dir)
    pairing_window_minutes: float = Field(30.0, gt=0, le=24 * 60)
    same_sample_minutes: float = Field(
        5.0, gt=0, le=60, description="values of one gas drawn within this many minutes"
    )
    pressure_unit: Literal["mm[Hg]", "kPa"] = "mm[Hg]"
    site_altitude_m: float | None = Field(None, ge=-500, le=9000)
    altitude_model: AltitudeModel = AltitudeModel.WEST_1996
    assume_room_air: bool = False
    hufner_ml_per_g: float = Field(c.HUFNER_CONVENTIONAL_ML_PER_G, ge=1.30, le=1.40)
    assumed_av_difference_ml_dl: float = Field(c.ASSUMED_AV_DIFFERENCE_ML_DL, ge=0.5, le=15.0)
    respiratory_quotient: float = Field(c.DEFAULT_RESPIRATORY_QUOTIENT, ge=0.6, le=1.2)
    strict_fhir: bool = False
    site_file: Path | None = Field(
        None, description="a site override file (YAML, see service/site.py); None for none"
    )


# Asymmetric signatures only: `none` and the HMAC family are never accepted for bearer JWTs.
JwtAlgorithm = Literal["RS256", "RS384", "ES256", "ES384"]
JWT_ALGORITHMS: tuple[JwtAlgorithm, ...] = ("RS256", "RS384", "ES256", "ES384")


class ServerSettings(BaseSettings):
    """How ``oxyrule serve`` listens, limits and authenticates (same ``OXYRULE_`` prefix).

    Kept apart from ``Settings`` because none of these changes a result: they are not part of
    the settings hash a result carries.
    """

    model_config = SettingsConfigDict(env_prefix="OXYRULE_", extra="forbid", frozen=True)

    host: str = Field("127.0.0.1", min_length=1, description="address the server binds")
    port: int = Field(8080, ge=1, le=65535)
    workers: int = Field(1, ge=1, le=64, description="server processes (metrics are per process)")
    max_body_bytes: int = Field(
        5 * 1024 * 1024, ge=1024, le=512 * 1024 * 1024, description="largest Bundle or NDJSON line"
    )
    body_timeout_s: float = Field(
        30.0,
        gt=0,
        le=3600,
        description="seconds to receive a whole Bundle or HL7 v2 body; an NDJSON body's grace",
    )
    body_min_bytes_per_s: float = Field(
        1024.0,
        gt=0,
        le=1024**3,
        description="an NDJSON body, after its grace, must keep arriving at this average rate",
    )
    max_concurrent_requests: int = Field(
        64, ge=1, le=10_000, description="assessments in flight per process before 429"
    )
    max_buffered_bytes: int = Field(
        32 * 1024 * 1024,
        ge=1024,
        le=16 * 1024**3,
        description="request body bytes held in the process at once (all requests); then 429",
    )
    ndjson_read_ahead_bytes: int = Field(
        16 * 1024 * 1024,
        ge=1024,
        le=16 * 1024**3,
        description="NDJSON lines read ahead of their answers, per request",
    )
    max_bundle_entries: int = Field(
        1000, ge=1, le=1_000_000, description="entries of one Bundle; beyond, 413"
    )
    max_issues: int = Field(
        100, ge=10, le=100_000, description="issues listed in one answer; the rest are counted"
    )
    work_threads: int = Field(
        2,
        ge=0,
        le=64,
        description="threads that parse and assess, off the event loop (0: on it, unsafe)",
    )
    hl7_max_segments: int = Field(500, ge=10, le=1_000_000)
    hl7_max_field_parts: int = Field(256, ge=16, le=1_000_000)
    hl7_max_parts: int = Field(20_000, ge=100, le=10_000_000)
    log_level: Literal["debug", "info", "warning", "error"] = "info"
    cors_origins: list[str] = Field(
        default_factory=list, description="JSON list of allowed origins; empty: CORS off"
    )
    # Bearer authentication of the assess operation: off unless keys or a JWKS are set.
    api_key_hashes: list[str] = Field(
        default_factory=list,
        description='JSON list of "sha256:<64 hex>" digests of the accepted static API keys',
    )
    jwt_jwks: str | None = Field(None, description="inline JWKS (JSON) that signs bearer JWTs")
    jwt_jwks_file: Path | None = Field(None, description="a file holding that JWKS instead")
    jwt_issuer: str | None = None
    jwt_audience: str | None = None
    jwt_algorithms: list[JwtAlgorithm] = Field(
        default_factory=lambda: list(JWT_ALGORITHMS), min_length=1
    )
    jwt_leeway_seconds: int = Field(30, ge=0, le=300)
    jwt_required_scope: str | None = Field(None, description="a scope every JWT must carry")
    # HL7 v2 over MLLP beside HTTP (off unless a port is set; one worker process only).
    mllp_port: int | None = Field(None, ge=1, le=65535, description="MLLP listener port")
    mllp_max_frame_bytes: int = Field(1024 * 1024, ge=1024, le=64 * 1024 * 1024)
    mllp_idle_timeout_s: float = Field(300.0, gt=0, le=86_400)
    mllp_max_connections: int = Field(
        100, ge=1, le=100_000, description="MLLP peers at once; beyond, refused and logged"
    )
    mllp_max_buffered_bytes: int = Field(
        16 * 1024 * 1024,
        ge=1024,
        le=16 * 1024**3,
        description="bytes of unfinished MLLP frames held at once (all peers); beyond, AR",
    )

    @model_validator(mode="after")
    def _check_mllp(self) -> ServerSettings:
        if self.mllp_port is not None and self.workers > 1:
            raise ValueError(
                "OXYRULE_MLLP_PORT needs OXYRULE_WORKERS=1 (each worker would bind the port); "
                "run `oxyrule mllp` as its own process to scale HTTP workers"
            )
        if self.mllp_port is not None and self.mllp_port == self.port:
            raise ValueError("OXYRULE_MLLP_PORT must differ from OXYRULE_PORT")
        return self

    @model_validator(mode="after")
    def _check_budgets(self) -> ServerSettings:
        for name, value, budget in (
            ("OXYRULE_MAX_BODY_BYTES", self.max_body_bytes, "OXYRULE_MAX_BUFFERED_BYTES"),
            (
                "OXYRULE_NDJSON_READ_AHEAD_BYTES",
                self.ndjson_read_ahead_bytes,
                "OXYRULE_MAX_BUFFERED_BYTES",
            ),
            (
                "OXYRULE_MLLP_MAX_FRAME_BYTES",
                self.mllp_max_frame_bytes,
                "OXYRULE_MLLP_MAX_BUFFERED_BYTES",
            ),
        ):
            limit = (
                self.mllp_max_buffered_bytes
                if budget.startswith("OXYRULE_MLLP")
                else self.max_buffered_bytes
            )
            if value > limit:
                raise ValueError(f"{name} must not exceed {budget} (one body must fit the budget)")
        return self

    @model_validator(mode="after")
    def _check_authentication(self) -> ServerSettings:
        for digest in self.api_key_hashes:
            hex_part = digest.removeprefix("sha256:")
            if not digest.startswith("sha256:") or len(hex_part) != 64 or not _is_hex(hex_part):
                raise ValueError(
                    'OXYRULE_API_KEY_HASHES: each entry must be "sha256:" + 64 hex digits'
                )
        if self.jwt_jwks is not None and self.jwt_jwks_file is not None:
            raise ValueError(
                "OXYRULE_JWT_JWKS and OXYRULE_JWT_JWKS_FILE: set one of them, not both"
            )
        if (self.jwt_jwks is not None or self.jwt_jwks_file is not None) and not (
            self.jwt_issuer and self.jwt_audience
        ):
            raise ValueError(
                "OXYRULE_JWT_ISSUER and OXYRULE_JWT_AUDIENCE are required when a JWKS is set"
            )
        return self


def _is_hex(text: str) -> bool:
    return all(c in "0123456789abcdefABCDEF" for c in text)


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    """The process-wide settings, read once from the environment."""
    return Settings()
