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
from service.physiology.bounds import AGE_YEARS, ALTITUDE_M, RESPIRATORY_QUOTIENT
from service.physiology.oxygen_content import AV_DIFFERENCE_RANGE_ML_DL, HUFNER_RANGE_ML_PER_G

# The longest pairing window a site may set (minutes); the shortest is any positive time.
MAX_PAIRING_WINDOW_MINUTES = 24 * 60


def default_rules_dir() -> Path:
    """The shipped rule set: bundled in the wheel, or ``rules/`` beside the package."""
    package = Path(__file__).resolve().parent
    bundled = package / "_bundled" / "rules"
    return bundled if bundled.is_dir() else package.parent / "rules"


class Settings(BaseSettings):
    """Every setting, its default and its valid range."""

    model_config = SettingsConfigDict(env_prefix="OXYRULE_", extra="forbid", frozen=True)

    rules_dir: Path = Field(default_factory=default_rules_dir)
    pairing_window_minutes: float = Field(30.0, gt=0, le=MAX_PAIRING_WINDOW_MINUTES)
    same_sample_minutes: float = Field(
        5.0, gt=0, le=60, description="values of one gas drawn within this many minutes"
    )
    setting_window_hours: float = Field(
        4.0,
        gt=0,
        le=24,
        description="how long an oxygen or ventilator setting charted before a gas stays in force",
    )
    haemoglobin_window_hours: float = Field(
        24.0, gt=0, le=7 * 24, description="how far from a gas its Hb may be measured"
    )
    dyshaemoglobin_window_hours: float = Field(
        4.0, gt=0, le=48, description="how far from a gas its COHb and MetHb may be measured"
    )
    temperature_window_hours: float = Field(
        4.0, gt=0, le=48, description="how far from a gas the body temperature may be taken"
    )
    lung_function_window_days: float = Field(
        180.0, gt=0, le=3 * 365, description="how old a DLCO or a walk test may be"
    )
    oxygen_response_window_hours: float = Field(
        12.0, gt=0, le=72, description="gases this close may be compared for the response to O2"
    )
    unknown_site_altitude_m: float = Field(
        4100.0,
        ge=0,
        le=ALTITUDE_M[1],
        description="highest site considered when neither pressure nor altitude is known",
    )
    unknown_age_years: tuple[float, float] = Field(
        (18.0, 100.0), description="the ages considered when the birth date is not known"
    )
    av_difference_range_ml_dl: tuple[float, float] = Field(
        (3.5, 7.0), description="a-v content difference range when none is measured"
    )
    pressure_unit: Literal["mm[Hg]", "kPa"] = "mm[Hg]"
    site_altitude_m: float | None = Field(None, ge=ALTITUDE_M[0], le=ALTITUDE_M[1])
    altitude_model: AltitudeModel = AltitudeModel.WEST_1996
    assume_room_air: bool = False
    hufner_ml_per_g: float = Field(
        c.HUFNER_CONVENTIONAL_ML_PER_G, ge=HUFNER_RANGE_ML_PER_G[0], le=HUFNER_RANGE_ML_PER_G[1]
    )
    assumed_av_difference_ml_dl: float = Field(
        c.ASSUMED_AV_DIFFERENCE_ML_DL,
        ge=AV_DIFFERENCE_RANGE_ML_DL[0],
        le=AV_DIFFERENCE_RANGE_ML_DL[1],
    )
    respiratory_quotient: float = Field(
        c.DEFAULT_RESPIRATORY_QUOTIENT, ge=RESPIRATORY_QUOTIENT[0], le=RESPIRATORY_QUOTIENT[1]
    )
    strict_fhir: bool = False
    site_file: Path | None = Field(
        None, description="a site override file (YAML, see service/site.py); None for none"
    )

    @model_validator(mode="after")
    def _ranges_in_order(self) -> Settings:
        for name, (low, high), limits in (
            ("unknown_age_years", self.unknown_age_years, AGE_YEARS),
            (
                "av_difference_range_ml_dl",
                self.av_difference_range_ml_dl,
                AV_DIFFERENCE_RANGE_ML_DL,
            ),
        ):
            if not limits[0] <= low <= high <= limits[1]:
                raise ValueError(f"{name}: want low <= high within {limits[0]:g} to {limits[1]:g}")
        return self


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
        description="seconds to receive a whole body (an NDJSON body: each line); then 408",
    )
    max_concurrent_requests: int = Field(
        64, ge=1, le=10_000, description="assessments in flight per process before 429"
    )
    log_level: Literal["debug", "info", "warning", "error"] = "info"
    bench: bool = Field(
        True,
        description="serve the rule owner's bench at /bench (for local use; set false in "
        "production). It stores nothing and needs the same credentials as every other route",
    )
    fixtures_dir: Path | None = Field(
        None,
        description="the rule set's fixtures for the bench's fixture panel (default: the "
        "fixtures folder beside the rule directory)",
    )
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
