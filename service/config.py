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

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

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
    hufner_ml_per_g: float = Field(1.34, ge=1.30, le=1.40)
    assumed_av_difference_ml_dl: float = Field(5.0, ge=0.5, le=15.0)
    respiratory_quotient: float = Field(0.8, ge=0.6, le=1.2)
    strict_fhir: bool = False
    site_file: Path | None = Field(
        None, description="a site override file (YAML, see service/site.py); None for none"
    )


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    """The process-wide settings, read once from the environment."""
    return Settings()
