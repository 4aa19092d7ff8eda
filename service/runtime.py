"""The loaded service: settings, the compiled rule set and the local code map, built once.

Every surface (CLI, HTTP, HL7 v2) holds one ``Runtime`` and calls it per input. Loading is the
only I/O; assessing is pure apart from the clock and the decision id.
"""

from __future__ import annotations

import ctypes
import ctypes.util
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

import orjson

from service.assess import derive
from service.assess.assess import assess
from service.assess.catalogue import DEFAULT_CATALOGUE
from service.assess.presentation import PressureUnit
from service.assess.result import Assessment
from service.config import Settings
from service.engine import RuleSet, load_ruleset
from service.fhir.concept_map import read_concept_map
from service.fhir.extract import read_bundle
from service.fhir.operation import rebased_error, rebased_intake
from service.fhir.outcome import BundleError
from service.fhir.render import render_bundle
from service.intake.limits import DEFAULT_READ_LIMITS, ReadLimits
from service.intake.model import Intake
from service.site import SiteView, apply, read_site_file, settings_hash
from service.terminology.codes import code_for_fact
from service.terminology.local_codes import LocalCodeMap

CONCEPT_MAP_FILE = "concept-map.json"


def load_concept_map(rules_dir: Path) -> LocalCodeMap | None:
    """The site's local-code ConceptMap (``concept-map.json`` in the rule directory), if any."""
    path = rules_dir / CONCEPT_MAP_FILE
    if not path.is_file():
        return None
    return read_concept_map(orjson.loads(path.read_bytes()), source=str(path))


def give_back_freed_memory() -> None:
    """Hand the C heap's free pages back to the system (glibc ``malloc_trim``; elsewhere
    nothing). Loading compiles the rule program and the derived-fact table, whose syntax trees
    take ~7 MiB for a moment; glibc keeps such freed memory in the process, where it would
    count against a worker's memory budget for its whole life (measured: a served worker
    74 MiB after 30 requests without this, README, Performance)."""
    if _LIBC is not None:
        _LIBC.malloc_trim(0)


def _libc() -> ctypes.CDLL | None:
    # ctypes rather than a package: one call into the C library the interpreter already uses.
    name = ctypes.util.find_library("c")
    if name is None:
        return None
    try:
        library = ctypes.CDLL(name)
        library.malloc_trim.argtypes = [ctypes.c_size_t]
    except (OSError, AttributeError):  # not glibc (musl has no malloc_trim)
        return None
    return library


_LIBC = _libc()


def _bytes(path: Path) -> bytes:
    return path.read_bytes() if path.is_file() else b""


@dataclass(frozen=True, slots=True)
class Runtime:
    """Settings, rule set and code map of one running service."""

    settings: Settings
    ruleset: RuleSet
    concept_map: LocalCodeMap | None = None
    settings_hash: str = ""
    site_view: SiteView | None = None
    """What the site file changes (None without one)."""

    @property
    def site(self) -> str | None:
        """The site's label, or None without a site file."""
        return self.site_view.label if self.site_view is not None else None

    @classmethod
    def load(cls, settings: Settings | None = None) -> Runtime:
        """Load and check everything once.

        Raises:
            RuleSetError: a broken rule set or a bad parameter override.
            SiteFileError: a site file that cannot be used.
            LocatedError: a local-code ConceptMap that cannot be used.
        """
        settings = settings or Settings()
        parameters: dict[str, float] = {}
        site_bytes, overrides = b"", None
        if settings.site_file is not None:
            overrides, site_bytes = read_site_file(settings.site_file)
            settings, parameters = apply(settings, overrides), overrides.parameters
        ruleset = load_ruleset(
            settings.rules_dir, catalogue=DEFAULT_CATALOGUE, overrides=parameters
        )
        concept_map = load_concept_map(settings.rules_dir)
        digest = settings_hash(settings, site_bytes, _bytes(settings.rules_dir / CONCEPT_MAP_FILE))
        view = None
        if overrides is not None and settings.site_file is not None:
            view = SiteView.of(overrides, settings.site_file, ruleset.parameters)
        derive.prepare()
        give_back_freed_memory()
        return cls(settings, ruleset, concept_map, digest, view)

    def read(self, data: object, *, limits: ReadLimits = DEFAULT_READ_LIMITS) -> Intake:
        """A parsed FHIR Bundle as an ``Intake`` (validated as FHIR R4B first in strict mode).

        Raises:
            BundleError: the input cannot be read; its ``operation_outcome()`` says where
                (``TooLargeError``: over ``limits``).
        """
        if self.settings.strict_fhir:
            from service.fhir.models import validate_strict

            problems = [p for p in validate_strict(data) if p.severity in ("fatal", "error")]
            if problems:
                raise BundleError(problems)
        return read_bundle(data, concept_map=self.concept_map, limits=limits)

    def assess_intake(
        self,
        intake: Intake,
        *,
        now: datetime | None = None,
        decision_id: str | None = None,
        pressure_unit: PressureUnit | None = None,
    ) -> Assessment:
        """The assessment of an already-read input; its sentences show pressures in
        ``pressure_unit`` (default: the site's)."""
        return assess(
            intake,
            ruleset=self.ruleset,
            settings=self.settings,
            now=now,
            decision_id=decision_id,
            pressure_unit=pressure_unit,
        )

    def render(
        self,
        assessment: Assessment,
        *,
        pressure_unit: PressureUnit | None = None,
        addresses: Mapping[str, dict[str, object]] | None = None,
    ) -> dict[str, Any]:
        """The result Bundle for an assessment (README, What it answers); ``addresses`` are
        the input's (``Intake.addresses``), for the references to what was sent."""
        codes = list(
            dict.fromkeys(
                c for f in assessment.data_requested if (c := code_for_fact(f)) is not None
            )
        )
        return render_bundle(
            assessment,
            data_requirements=codes,
            settings=self.settings,
            pressure_unit=pressure_unit or self.settings.pressure_unit,
            settings_hash=self.settings_hash,
            site=self.site,
            addresses=addresses,
        )

    def assess_bundle(
        self,
        data: object,
        *,
        pressure_unit: PressureUnit | None = None,
        now: datetime | None = None,
        decision_id: str | None = None,
        limits: ReadLimits = DEFAULT_READ_LIMITS,
        root: str = "Bundle",
    ) -> dict[str, Any]:
        """A parsed FHIR Bundle in, the result Bundle out; ``root`` is the FHIRPath of the
        Bundle in what was sent (a Parameters body's ``resource``), for every location.

        Raises:
            BundleError: the input cannot be assessed; its ``operation_outcome()`` says where
                (``TooLargeError``: over ``limits``).
        """
        try:
            intake = rebased_intake(self.read(data, limits=limits), root)
        except BundleError as exc:
            raise rebased_error(exc, root) from None
        assessment = self.assess_intake(
            intake, now=now, decision_id=decision_id, pressure_unit=pressure_unit
        )
        return self.render(assessment, pressure_unit=pressure_unit, addresses=intake.addresses)
