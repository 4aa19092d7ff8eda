"""What one app holds for its whole life, and what one request records for its log line."""

from __future__ import annotations

import asyncio
from dataclasses import dataclass, field
from typing import Any

from service.api.auth import Authenticator
from service.api.budget import ByteBudget
from service.api.generations import WorkerGenerations
from service.api.metrics import Metrics
from service.cds.hooks import CdsHooks
from service.config import ServerSettings, Settings
from service.hl7v2.message import V2Limits
from service.intake.limits import ReadLimits
from service.runtime import Runtime
from service.work import WorkPool


@dataclass(slots=True)
class ServiceState:
    """The loaded runtime, the limits, the credentials checker and the metrics of one app.

    ``runtime`` is replaced whole by a reload (``service.api.reload``); a request reads it
    once and keeps the one it read, so it never sees two rule sets.
    """

    runtime: Runtime
    server: ServerSettings
    auth: Authenticator
    settings: Settings  # what the runtime was loaded from: a reload loads it again
    cds: CdsHooks  # the CDS Hooks adapter: EHR trust, JWK Sets, replay memory, HTTP client
    metrics: Metrics = field(default_factory=Metrics)
    conformance: dict[str, dict[str, Any]] = field(default_factory=dict)
    in_flight: int = 0
    draining: bool = False  # set at shutdown: /readyz answers 503 so traffic moves away
    reload_lock: asyncio.Lock = field(default_factory=asyncio.Lock)
    # Built from ``server`` (the budgets every request shares; see deploy/README.md).
    budget: ByteBudget = field(init=False)
    work: WorkPool = field(init=False)
    read_limits: ReadLimits = field(init=False)
    v2_limits: V2Limits = field(init=False)
    # A worker of a multi-worker server follows the supervisor's rule-set generations
    # (service.api.generations); None with one worker.
    generations: WorkerGenerations | None = None
    generation: int = 0
    prepared: dict[int, Runtime] = field(default_factory=dict)

    def __post_init__(self) -> None:
        server = self.server
        self.budget = ByteBudget(server.max_buffered_bytes)
        self.work = WorkPool(server.work_threads, inline_bytes=server.inline_bytes)
        self.read_limits = ReadLimits(server.max_bundle_entries, server.max_issues)
        self.v2_limits = V2Limits(
            max_segments=server.hl7_max_segments,
            max_field_parts=server.hl7_max_field_parts,
            max_parts=server.hl7_max_parts,
            max_issues=server.max_issues,
        )


@dataclass(slots=True)
class RequestRecord:
    """What the request log line and the metrics say about one request (no patient data)."""

    correlation_id: str
    method: str
    route: str
    status: int = 0
    pattern: str | None = None
    lines: int | None = None
    rejected: int | None = None
    bytes_in: int | None = None
    stream: str | None = None  # how a streamed answer ended (service.api.ndjson)
