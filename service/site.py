"""Site configuration without forking the rules: one YAML override file.

A site tunes rule thresholds by parameter name and sets its physiology choices here; the file
is validated when the service starts (unknown keys, out-of-range values and unknown parameter
names stop it), and its content enters the settings hash that every result carries. Example::

    site: invented-district-hospital      # a label, shown in results
    parameters:                           # rule parameters by name (ruleset.yaml), in their unit
      paco2_margin: 3
    hufner_ml_per_g: 1.36
    assumed_av_difference_ml_dl: 3.5
    pairing_window_minutes: 20
    titration_window_minutes: 90
    pressure_unit: kPa
    site_altitude_m: 1600
    assume_room_air: false
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal, Protocol

import yaml
from pydantic import BaseModel, ConfigDict, Field, ValidationError

from service.config import MAX_PAIRING_WINDOW_MINUTES, MAX_TITRATION_WINDOW_MINUTES, Settings
from service.exceptions import ServiceError
from service.physiology.bounds import ALTITUDE_M
from service.physiology.oxygen_content import AV_DIFFERENCE_RANGE_ML_DL, HUFNER_RANGE_ML_PER_G


class SiteFileError(ServiceError):
    """A site override file that cannot be used; the message names the file and the field."""


class SiteOverrides(BaseModel):
    """The keys a site file may set; each is optional."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    site: str = Field(min_length=1)
    parameters: dict[str, float] = Field(default_factory=dict)
    hufner_ml_per_g: float | None = Field(
        None, ge=HUFNER_RANGE_ML_PER_G[0], le=HUFNER_RANGE_ML_PER_G[1]
    )
    assumed_av_difference_ml_dl: float | None = Field(
        None, ge=AV_DIFFERENCE_RANGE_ML_DL[0], le=AV_DIFFERENCE_RANGE_ML_DL[1]
    )
    pairing_window_minutes: float | None = Field(None, gt=0, le=MAX_PAIRING_WINDOW_MINUTES)
    titration_window_minutes: float | None = Field(None, gt=0, le=MAX_TITRATION_WINDOW_MINUTES)
    titration_settle_minutes: float | None = Field(None, ge=0, le=60)
    pressure_unit: Literal["mm[Hg]", "kPa"] | None = None
    site_altitude_m: float | None = Field(None, ge=ALTITUDE_M[0], le=ALTITUDE_M[1])
    assume_room_air: bool | None = None


def read_site_file(path: Path) -> tuple[SiteOverrides, bytes]:
    """The validated overrides and the file's bytes (for the settings hash)."""
    try:
        raw = path.read_bytes()
        overrides = SiteOverrides.model_validate(yaml.safe_load(raw))
    except OSError as exc:
        raise SiteFileError(f"{path}: cannot read the site file ({exc.strerror})") from None
    except yaml.YAMLError as exc:
        raise SiteFileError(f"{path}: not valid YAML: {exc}") from None
    except ValidationError as exc:
        details = "; ".join(
            f"{'.'.join(str(p) for p in e['loc']) or '(file)'}: {e['msg']}" for e in exc.errors()
        )
        raise SiteFileError(f"{path}: {details}") from None
    return overrides, raw


class _Threshold(Protocol):
    """What the site view needs of a rule-set parameter (``service.engine.Parameter``)."""

    @property
    def value(self) -> float: ...
    @property
    def default(self) -> float: ...
    @property
    def unit(self) -> str: ...


@dataclass(frozen=True, slots=True)
class ParameterChange:
    """A rule threshold the site changed: its name, the rule set's value, the site's."""

    name: str
    rule_set: float
    site: float
    unit: str

    def __str__(self) -> str:
        unit = "" if self.unit == "1" else f" {self.unit}"
        return f"{self.name} {self.site:g}{unit} (rule set: {self.rule_set:g})"


@dataclass(frozen=True, slots=True)
class SiteView:
    """What a site file changes, for every surface to show beside the rule set's identity
    (``explain``, ``test``, the report, the start-up log, ``/readyz``, the bench, results)."""

    label: str
    file: str
    parameters: tuple[ParameterChange, ...]
    settings: tuple[tuple[str, str], ...]
    """Settings the file sets, as (name, value in words)."""

    @classmethod
    def of(
        cls, overrides: SiteOverrides, path: Path, parameters: Mapping[str, _Threshold]
    ) -> SiteView:
        """The view of a loaded site file; ``parameters`` are the rule set's, overrides in."""
        changes = tuple(
            ParameterChange(name, p.default, p.value, p.unit)
            for name in sorted(overrides.parameters)
            if (p := parameters.get(name)) is not None
        )
        chosen = overrides.model_dump(exclude={"site", "parameters"}, exclude_none=True)
        return cls(
            overrides.site,
            str(path),
            changes,
            tuple((name, _words(value)) for name, value in sorted(chosen.items())),
        )

    def summary(self) -> str:
        """One line: ``site NAME: paco2_margin 10 mm[Hg] (rule set: 0); pressure_unit kPa``."""
        changes = [str(c) for c in self.parameters] + [f"{n} {v}" for n, v in self.settings]
        return f"site {self.label}: " + ("; ".join(changes) or "no change to the rule set")

    def as_json(self) -> dict[str, Any]:
        """Plain data for tools and the bench."""
        return {
            "label": self.label,
            "file": self.file,
            "parameters": [
                {"name": c.name, "rule_set": c.rule_set, "site": c.site, "unit": c.unit}
                for c in self.parameters
            ],
            "settings": dict(self.settings),
        }


def _words(value: object) -> str:
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:g}"
    return str(value)


def apply(settings: Settings, overrides: SiteOverrides) -> Settings:
    """Settings with the site's choices applied (the rule parameters go to the rule set)."""
    updates = overrides.model_dump(exclude={"site", "parameters"}, exclude_none=True)
    return Settings(**{**settings.model_dump(), **updates})


def settings_hash(settings: Settings, *extra: bytes) -> str:
    """sha256 over the settings that change results, plus extra bytes (site file, code map)."""
    chosen = settings.model_dump(mode="json", exclude={"rules_dir", "site_file", "strict_fhir"})
    digest = hashlib.sha256(json.dumps(chosen, sort_keys=True).encode())
    for chunk in extra:
        digest.update(len(chunk).to_bytes(8, "big"))
        digest.update(chunk)
    return digest.hexdigest()
