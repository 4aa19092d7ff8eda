"""The grouped map: one patient's records in, result rows and error rows out.

Both engines call ``Assessor.patient`` for each patient group (the local engine from its
partition files, Spark from the sorted Arrow batches of its shuffle), so the two cannot differ
in what they assess. Each episode Bundle goes through the service's own FHIR reader and
``Runtime.assess_intake`` — the code behind ``oxyrule assess`` — and ``rows.result_row``.

An ``Assessor`` holds the loaded runtime (rule set, code map) of one worker process; it is
built once per process from a picklable ``JobContext``.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import datetime

from service.config import Settings
from service.engine.ruleset import RuleSet
from service.fhir.extract import read_bundle
from service.fhir.outcome import BundleError, TooLargeError
from service.runtime import Runtime

from .episodes import EpisodeWindows, cut_episodes, patient_data, read_limits
from .errors import ErrorCode, ErrorRow, Stage
from .pseudonym import Pseudonymiser
from .records import Record
from .rows import result_row
from .settings import BulkSettings


@dataclass(frozen=True, slots=True)
class JobContext:
    """What every worker needs to assess patients, sent to each worker process once."""

    settings: Settings
    bulk: BulkSettings
    pseudonym: Pseudonymiser
    now: datetime  # the job's clock: the same for every assessment of the run
    ruleset_hash: str  # the driver's rule set: every worker must assess with the same one

    def windows(self, ruleset: RuleSet) -> EpisodeWindows:
        """The windows of these settings and the worker's rule set (the driver's: checked)."""
        return EpisodeWindows.of(self.settings, ruleset)


@dataclass(slots=True)
class PatientOutcome:
    """What one patient gave: result rows, error rows."""

    results: list[dict[str, object]] = field(default_factory=list)
    errors: list[ErrorRow] = field(default_factory=list)


class RuleSetMismatchError(RuntimeError):
    """A worker's rule set is not the driver's: the job stops rather than mix verdicts."""


# One runtime per worker process and settings (loading the rule set is the costly part).
_RUNTIMES: dict[str, Runtime] = {}


def runtime_for(settings: Settings) -> Runtime:
    """The process's runtime for these settings, loaded on first use."""
    key = settings.model_dump_json()
    runtime = _RUNTIMES.get(key)
    if runtime is None:
        runtime = _RUNTIMES[key] = Runtime.load(settings)
    return runtime


class Assessor:
    """Assesses patient groups with one loaded runtime and the shared Locations."""

    def __init__(self, context: JobContext, locations: dict[str, dict[str, object]]) -> None:
        self.context = context
        self.runtime = runtime_for(context.settings)
        if self.runtime.ruleset.content_hash != context.ruleset_hash:
            raise RuleSetMismatchError(
                "a worker loaded another rule set than the one the job was started with "
                f"({self.runtime.ruleset.identity}); ship the same rule directory to every node"
            )
        self.locations = locations
        self.windows = context.windows(self.runtime.ruleset)
        self.limits = read_limits(context.bulk.max_episode_entries)

    def patient(self, key: str, records: Iterable[Record]) -> PatientOutcome:
        """Every gas episode of one patient, assessed; every problem, reported."""
        c = self.context
        pseudonym = c.pseudonym
        data = patient_data(
            key,
            records,
            concept_map=self.runtime.concept_map,
            pseudonym=pseudonym,
            max_resources=c.bulk.max_patient_resources,
        )
        outcome = PatientOutcome(errors=data.errors)
        patient = pseudonym(key)
        assert patient is not None
        for episode in cut_episodes(data, windows=self.windows, locations=self.locations):
            try:
                intake = read_bundle(
                    episode.bundle, concept_map=self.runtime.concept_map, limits=self.limits
                )
            except TooLargeError:
                outcome.errors.append(
                    _episode_too_large(patient, episode.observation, c.bulk, pseudonym)
                )
                continue
            except BundleError as exc:  # read once already: should not happen; never fatal
                outcome.errors.append(_episode_error(patient, episode.observation, exc, pseudonym))
                continue
            assessment = self.runtime.assess_intake(intake, now=c.now, decision_id="bulk")
            outcome.results.append(
                result_row(
                    assessment,
                    settings=self.runtime.settings,
                    patient=patient,
                    observation=pseudonym(episode.observation),
                    time=episode.time,
                    location=episode.location,
                    specimen=episode.specimen,
                    earlier_gases=episode.earlier_gases,
                    settings_hash=self.runtime.settings_hash,
                )
            )
        return outcome


def _episode_too_large(
    patient: str, observation: str | None, bulk: BulkSettings, pseudonym: Pseudonymiser
) -> ErrorRow:
    return ErrorRow(
        None,
        None,
        Stage.EPISODE,
        ErrorCode.EPISODE_TOO_LARGE,
        "error",
        f"the episode of this gas holds more than {bulk.max_episode_entries} entries and "
        "components (OXYRULE_BULK_MAX_EPISODE_ENTRIES): not assessed",
        resource_type="Observation",
        resource_id=pseudonym(observation),
        patient=patient,
    )


def _episode_error(
    patient: str, observation: str | None, exc: BundleError, pseudonym: Pseudonymiser
) -> ErrorRow:
    first = exc.problems[0]
    return ErrorRow(
        None,
        None,
        Stage.EPISODE,
        ErrorCode.EPISODE_UNREADABLE,
        "error",
        f"the episode of this gas could not be read: {first.diagnostics}",
        resource_type="Observation",
        resource_id=pseudonym(observation),
        patient=patient,
        expression=first.expression,
    )
