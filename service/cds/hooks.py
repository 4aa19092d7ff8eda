"""The CDS Hooks adapter as one object: discovery, a hook call, feedback.

One ``CdsHooks`` per app (per worker): it holds the settings, the EHR-trust checker (with its
JWK Set cache and replay memory), the pooled HTTP client for FHIR and JWK Set reads, and the
clock. A hook call runs the same path as ``$assess-hypoxaemia`` - the ``Runtime`` reads one
Bundle and assesses it - between a CDS front (request, prefetch, fetch) and a CDS back (view,
cards):

    request.py → prefetch.py (+ fetch.py) → Runtime.read → recent data only → Runtime.assess
    → view.py → cards.py

Only observations of the last ``OXYRULE_CDS_MAX_DATA_AGE_HOURS`` (and only timed ones) are
assessed: a card shown when a chart is opened must not rest on an old gas (the specification
lists decisions on outdated data among its safety risks). Lung-function tests (DLCO, walk-test
oximetry) describe the patient for longer and have their own window,
``OXYRULE_CDS_MAX_LUNG_FUNCTION_AGE_DAYS``. The card says how many values were left out.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING, Any

import orjson

from service.cds.cards import CardContext, nothing_to_add, order_cards, patient_view_cards
from service.cds.errors import CdsError, Issue
from service.cds.feedback import Feedback, read_feedback
from service.cds.fetch import Budget, FhirReader, new_client
from service.cds.orders import read_orders
from service.cds.prefetch import gather, locate
from service.cds.request import FhirAccess, read_request
from service.cds.services import PATIENT_VIEW, SERVICES, CdsService, discovery
from service.cds.trust import CdsCaller, CdsTrust
from service.cds.view import view
from service.config import ServerSettings
from service.fhir.dates import effective_time
from service.fhir.outcome import BundleError
from service.fhir.shape import Collector
from service.intake.model import Intake, Quantity
from service.runtime import Runtime
from service.terminology.codes import concept_for

if TYPE_CHECKING:
    # httpx is imported where a fetch needs it: a worker that never fetches keeps ~7 MiB less
    # resident (measured with VmRSS; the memory budget is 80 MB a worker).
    import httpx

DISCOVERY_PATH = "/cds-services"
# Untimed values that are context, not observations of the moment (a Location's altitude).
_TIMELESS = frozenset({Quantity.ALTITUDE})
# Lung-function tests describe the patient for months: they have their own, longer window.
LUNG_FUNCTION = frozenset(
    {
        Quantity.DLCO,
        Quantity.DLCO_PERCENT_PREDICTED,
        Quantity.SPO2_EXERTIONAL_NADIR,
        Quantity.SPO2_EXERTIONAL_BASELINE,
    }
)


@dataclass(frozen=True, slots=True)
class Window:
    """The oldest moment a value of each kind may come from."""

    since: datetime  # gases, oximetry, oxygen settings and everything else
    lung_function_since: datetime

    def start(self, quantities: frozenset[Quantity]) -> datetime:
        """The window of an observation measuring ``quantities``: the long one only when all
        of them are lung-function tests."""
        if quantities and quantities <= LUNG_FUNCTION:
            return self.lung_function_since
        return self.since


def _quantities(resource: dict[str, Any]) -> frozenset[Quantity]:
    found = set()
    code = resource.get("code")
    for coding in (code.get("coding") or ()) if isinstance(code, dict) else ():
        if isinstance(coding, dict):
            system, value = coding.get("system"), coding.get("code")
            if isinstance(system, str) and isinstance(value, str):
                concept = concept_for(system, value)
                if concept is not None:
                    found.add(concept.quantity)
    return frozenset(found)


@dataclass(slots=True)
class HookAnswer:
    """The cards of one call, and what the metrics and the log may say about it."""

    cards: list[dict[str, Any]]
    pattern: str
    findings: list[str] = field(default_factory=list)
    quiet: str | None = None  # why there is no card (patient-view), for the log
    fetched: list[str] = field(default_factory=list)  # prefetch keys read from fhirServer


def drop_old(bundle: dict[str, Any], origins: list[str], window: Window) -> int:
    """Take Observations made before their window out of ``bundle`` (and ``origins``) before
    the reader sees them, so an old value can neither be used nor raise a finding; returns how
    many went. An Observation whose time cannot be read stays: the reader locates why."""
    kept_entries, kept_origins = [], []
    for entry, origin in zip(bundle["entry"], origins, strict=True):
        resource = entry["resource"]
        if resource.get("resourceType") == "Observation":
            made = effective_time(resource, origin, Collector())
            if made is not None and made < window.start(_quantities(resource)):
                continue
        kept_entries.append(entry)
        kept_origins.append(origin)
    left = len(origins) - len(kept_origins)
    bundle["entry"], origins[:] = kept_entries, kept_origins
    return left


def recent(intake: Intake, window: Window) -> tuple[Intake, int]:
    """The intake without values older than their window, or untimed (but for the altitude of
    a Location), and how many went."""
    kept = [
        m
        for m in intake.measurements
        if (m.time is None and m.quantity in _TIMELESS)
        or (m.time is not None and m.time >= window.start(frozenset({m.quantity})))
    ]
    left = len(intake.measurements) - len(kept)
    return Intake(patient=intake.patient, measurements=kept, issues=intake.issues), left


class CdsHooks:
    """See the module docstring."""

    def __init__(
        self,
        server: ServerSettings,
        *,
        clock: Callable[[], datetime] = lambda: datetime.now(UTC),
    ) -> None:
        """Raises ``CdsConfigError`` for an unusable inline JWK Set in the settings."""
        self.server = server
        self.clock = clock
        self._client: httpx.AsyncClient | None = None
        self.trust = CdsTrust(server, self.http)
        self.base = server.cds_base
        self.fhir_servers = frozenset(u.rstrip("/") for u in server.cds_fhir_servers)
        self.budget = Budget(
            timeout_s=server.cds_fetch_timeout_s,
            deadline_s=server.cds_fetch_deadline_s,
            max_pages=server.cds_fetch_max_pages,
            max_bytes=server.cds_fetch_max_bytes,
            max_entries=server.cds_fetch_max_entries,
        )
        self.discovery_body = orjson.dumps(discovery())

    def http(self) -> httpx.AsyncClient:
        """The worker's pooled client, made on first use (inside the running event loop)."""
        if self._client is None:
            self._client = new_client(
                timeout_s=self.server.cds_fetch_timeout_s,
                max_connections=self.server.cds_fetch_max_connections,
            )
        return self._client

    async def aclose(self) -> None:
        if self._client is not None:
            await self._client.aclose()
            self._client = None

    @staticmethod
    def service(service_id: str) -> CdsService:
        found = SERVICES.get(service_id)
        if found is None:
            raise CdsError.one(
                404,
                "not-found",
                f"no CDS service with that id; discovery: GET {DISCOVERY_PATH}",
                "http.path",
            )
        return found

    def audiences(self, path: str, *also: str) -> list[str]:
        """The ``aud`` values a JWT for ``path`` may carry: the endpoint's exact URL (and, for
        feedback, its service's URL too)."""
        base = self.base or ""
        return [base + path, *(base + p for p in also)]

    async def verify(self, authorization: str | None, path: str, *also: str) -> CdsCaller:
        return await self.trust.verify(authorization, self.audiences(path, *also))

    def _reader(self, access: FhirAccess | None) -> tuple[FhirReader | None, str]:
        if access is None:
            return None, "the request has no fhirServer to read it from"
        if access.server not in self.fhir_servers:
            return None, "its fhirServer is not one the service may read (OXYRULE_CDS_FHIR_SERVERS)"
        return FhirReader(self.http(), access.server, access.token, self.budget), ""

    async def call(self, service: CdsService, body: object, runtime: Runtime) -> HookAnswer:
        """The cards for one hook call.

        Raises:
            CdsError: 400 a bad request, 412 required data cannot be had, 422 data that
                cannot be read or is about another patient.
        """
        request = read_request(service, body)
        reader, why_not = self._reader(request.access)
        gathered = await gather(service, request, reader, why_not)
        now = self.clock()
        hours = self.server.cds_max_data_age_hours
        window = Window(
            now - timedelta(hours=hours),
            now - timedelta(days=self.server.cds_max_lung_function_age_days),
        )
        old = drop_old(gathered.bundle, gathered.origins, window)
        try:
            intake = runtime.read(gathered.bundle)
        except BundleError as exc:
            raise CdsError(
                422,
                [
                    Issue(p.code, p.diagnostics, locate(p.expression, gathered.origins))
                    for p in exc.problems
                ],
            ) from exc
        intake, untimed = recent(intake, window)
        v = view(runtime.assess_intake(intake, now=now))
        context = CardContext(
            patient_id=request.patient_id,
            encounter_id=request.encounter_id,
            pressure_unit=runtime.settings.pressure_unit,
            bench_url=self.server.cds_bench_url,
            notes=tuple(gathered.notes),
            not_used=old + untimed,
            max_age_hours=hours,
            lung_function_days=self.server.cds_max_lung_function_age_days,
            now=now,
        )
        findings = [f.code for f in v.findings]
        if service.hook == PATIENT_VIEW:
            cards = patient_view_cards(v, context)
            quiet = None if cards else nothing_to_add(v)
        else:
            assert request.draft_orders is not None  # read_request requires it for order hooks
            orders = read_orders(request.draft_orders, request.selections)
            cards = order_cards(v, orders, context)
            quiet = None if cards else "no oxygen order the recent gases bear on"
        return HookAnswer(cards, v.pattern, findings, quiet, gathered.fetched)

    @staticmethod
    def feedback(body: object) -> list[Feedback]:
        """The feedback items of a feedback call (400 ``CdsError`` when malformed)."""
        return read_feedback(body)
