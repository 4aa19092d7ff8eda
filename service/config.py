"""Service settings, read from ``OXYRULE_*`` environment variables and validated at start.

Physiological constants are not settings (they live in ``physiology/constants.py``). These are
the choices a site makes: which rule directory, how far apart in time a gas and its FiO2 may
be, whether room air may be assumed, the Hüfner factor and assumed a-v difference it prefers.
Nothing here is read at import time: call ``Settings()`` (or ``get_settings()``) when needed.
"""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path
from typing import Any, Literal
from urllib.parse import urlsplit

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

from service.physiology import constants as c
from service.physiology.atmosphere import AltitudeModel
from service.physiology.bounds import AGE_YEARS, ALTITUDE_M, RESPIRATORY_QUOTIENT
from service.physiology.oxygen_content import AV_DIFFERENCE_RANGE_ML_DL, HUFNER_RANGE_ML_PER_G

# The longest pairing window a site may set (minutes); the shortest is any positive time.
MAX_PAIRING_WINDOW_MINUTES = 24 * 60
# The longest titration window a site may set (minutes): beyond a day the lung itself changes.
MAX_TITRATION_WINDOW_MINUTES = 24 * 60


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
    titration_window_minutes: float = Field(
        120.0,
        gt=0,
        le=MAX_TITRATION_WINDOW_MINUTES,
        description=(
            "how far back from its last point an oxygen titration reaches: the gases and SpO2 "
            "readings fitted together for the shunt and V/Q term"
        ),
    )
    titration_settle_minutes: float = Field(
        5.0,
        ge=0,
        le=60,
        description=(
            "a titration point taken sooner than this after its FiO2 was changed is not yet in "
            "steady state and is left out"
        ),
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
        c.ASSUMED_AV_DIFFERENCE_RANGE_ML_DL,
        description="a-v content difference range when none is measured",
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


# CDS Hooks: the algorithms the EHR's JWT may be signed with (asymmetric only; the CDS Hooks
# specification forbids `none` and symmetric algorithms and recommends ES384 and RS384).
CdsJwtAlgorithm = Literal["ES256", "ES384", "RS256", "RS384"]
CDS_JWT_ALGORITHMS: tuple[CdsJwtAlgorithm, ...] = ("ES384", "RS384")  # the default allow-list


def absolute_http_url(text: str, what: str) -> str:
    """``text`` as an absolute http(s) URL without query or fragment, trailing ``/`` removed."""
    parts = urlsplit(text)
    if parts.scheme not in ("http", "https") or not parts.netloc:
        raise ValueError(f"{what}: {text!r} is not an absolute http(s) URL")
    if parts.query or parts.fragment:
        raise ValueError(f"{what}: {text!r} must have no query or fragment")
    return text.rstrip("/")


class CdsClient(BaseModel):
    """One EHR (CDS Client) trusted to call the CDS Hooks services, by its JWT ``iss``.

    Its public keys come from ``jwks_urls`` (JWK Set URLs: a JWT's ``jku`` header must be one
    of them; without ``jku`` every listed set is searched) and/or ``jwks``, a JWK Set given
    inline (exchanged out of band, as the specification allows when ``jku`` is omitted).
    """

    model_config = ConfigDict(extra="forbid", frozen=True)

    iss: str = Field(min_length=1)
    jwks_urls: list[str] = Field(default_factory=list)
    jwks: dict[str, Any] | None = None

    @field_validator("jwks_urls")
    @classmethod
    def _urls(cls, urls: list[str]) -> list[str]:
        return [absolute_http_url(u, "jwks_urls") for u in urls]

    @model_validator(mode="after")
    def _has_keys(self) -> CdsClient:
        if not self.jwks_urls and self.jwks is None:
            raise ValueError(f"client {self.iss!r}: give jwks_urls or an inline jwks")
        return self


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
    inline_bytes: int = Field(
        0,
        ge=0,
        le=1024 * 1024,
        description="FHIR bodies up to this size are assessed on the event loop itself, "
        "saving the hand-off to a work thread, at the cost of a longer latency tail under "
        "many connections (0, the default: every body goes to a thread)",
    )
    hl7_max_segments: int = Field(500, ge=10, le=1_000_000)
    hl7_max_field_parts: int = Field(256, ge=16, le=1_000_000)
    hl7_max_parts: int = Field(20_000, ge=100, le=10_000_000)
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
    # CDS Hooks (service/cds): who may call, where data may be fetched, and every budget.
    cds_base_url: str | None = Field(
        None,
        description="the public base URL of the service; a JWT's aud must be the exact URL of "
        "the endpoint called under it ({base}/cds-services/{id})",
    )
    cds_clients: list[CdsClient] = Field(
        default_factory=list, description="JSON list of trusted EHRs: iss, jwks_urls, jwks"
    )
    cds_allow_unsigned: bool = Field(
        False, description="development only: accept CDS calls without a JWT"
    )
    cds_jwt_algorithms: list[CdsJwtAlgorithm] = Field(
        default_factory=lambda: list(CDS_JWT_ALGORITHMS), min_length=1
    )
    cds_jwt_clock_skew_s: int = Field(30, ge=0, le=300, description="iat/exp leeway")
    cds_jwt_max_lifetime_s: int = Field(
        300, ge=10, le=3600, description="exp - iat at most; bounds the jti replay memory"
    )
    cds_jti_cache_size: int = Field(
        100_000, ge=10, le=10_000_000, description="JWT ids remembered per worker (replay)"
    )
    cds_jwks_cache_s: int = Field(3600, ge=10, le=86_400, description="JWK Set kept this long")
    cds_jwks_min_refresh_s: int = Field(
        60, ge=0, le=3600, description="an unknown kid refetches a JWK Set at most this often"
    )
    cds_jwks_max_stale_s: int = Field(
        86_400, ge=0, le=7 * 86_400, description="a JWK Set that cannot be refetched stays usable"
    )
    cds_jwks_max_bytes: int = Field(65_536, ge=1024, le=4 * 1024 * 1024)
    cds_fhir_servers: list[str] = Field(
        default_factory=list,
        description="JSON list of FHIR base URLs the service may fetch missing prefetch from "
        "(with the request's fhirAuthorization token); empty: prefetch only",
    )
    cds_fetch_timeout_s: float = Field(5.0, gt=0, le=60, description="each FHIR or JWKS request")
    cds_fetch_deadline_s: float = Field(
        10.0, gt=0, le=120, description="all FHIR requests of one hook call together"
    )
    cds_fetch_max_pages: int = Field(5, ge=1, le=100, description="pages read per prefetch key")
    cds_fetch_max_bytes: int = Field(
        4 * 1024 * 1024, ge=1024, le=256 * 1024 * 1024, description="largest FHIR response"
    )
    cds_fetch_max_entries: int = Field(
        1000, ge=1, le=100_000, description="resources read per hook call, all keys together"
    )
    cds_fetch_max_connections: int = Field(20, ge=1, le=1000)
    cds_max_data_age_hours: float = Field(
        24.0, gt=0, le=24 * 366, description="older observations are not used by the hooks"
    )
    cds_max_lung_function_age_days: float = Field(
        365.0, gt=0, le=3660, description="DLCO and walk-test oximetry older are not used"
    )
    cds_bench_url: str | None = Field(
        None,
        description="off unless set: a card link to the bench page; {decision_id} is replaced",
    )
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

    @model_validator(mode="after")
    def _check_cds(self) -> ServerSettings:
        if self.cds_clients and self.cds_allow_unsigned:
            raise ValueError(
                "OXYRULE_CDS_ALLOW_UNSIGNED and OXYRULE_CDS_CLIENTS: trust signed calls or "
                "none, not both"
            )
        if self.cds_clients and self.cds_base_url is None:
            raise ValueError(
                "OXYRULE_CDS_BASE_URL is required with OXYRULE_CDS_CLIENTS (a JWT's aud is "
                "checked against it)"
            )
        issuers = [c.iss for c in self.cds_clients]
        if len(set(issuers)) != len(issuers):
            raise ValueError("OXYRULE_CDS_CLIENTS: each iss may appear once")
        if self.cds_base_url is not None:
            absolute_http_url(self.cds_base_url, "OXYRULE_CDS_BASE_URL")
        for url in self.cds_fhir_servers:
            absolute_http_url(url, "OXYRULE_CDS_FHIR_SERVERS")
        if self.cds_bench_url is not None:
            _check_bench_url(self.cds_bench_url)
        return self

    @property
    def cds_base(self) -> str | None:
        """``cds_base_url`` without a trailing slash."""
        return None if self.cds_base_url is None else self.cds_base_url.rstrip("/")


def _check_bench_url(template: str) -> None:
    try:
        url = template.format(decision_id="00000000-0000-0000-0000-000000000000")
    except (KeyError, IndexError, ValueError) as exc:
        raise ValueError(
            "OXYRULE_CDS_BENCH_URL: the only placeholder allowed is {decision_id}"
        ) from exc
    parts = urlsplit(url)
    if parts.scheme not in ("http", "https") or not parts.netloc:
        raise ValueError("OXYRULE_CDS_BENCH_URL: not an absolute http(s) URL")


def _is_hex(text: str) -> bool:
    return all(c in "0123456789abcdefABCDEF" for c in text)


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    """The process-wide settings, read once from the environment."""
    return Settings()
