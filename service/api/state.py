"""What one app holds for its whole life, and what one request records for its log line."""

from __future__ import annotations

import asyncio
from dataclasses import dataclass, field
from typing import Any

from service.api.auth import Authenticator
from service.api.metrics import Metrics
from service.cds.hooks import CdsHooks
from service.config import ServerSettings, Settings
from service.runtime import Runtime


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
