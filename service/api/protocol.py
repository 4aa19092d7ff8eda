"""uvicorn's HTTP/1.1 protocol (httptools), with what the service needs of the connection.

Three changes, nothing else:

* A request that is not valid HTTP/1.1 (conflicting ``Content-Length`` and
  ``Transfer-Encoding``, a malformed header, a bad request line) never reaches the app:
  uvicorn answered it with a plain-text 400 that was neither logged nor counted. It is
  answered here with an OperationOutcome (``expression`` ``http.request``) and a correlation
  id, written to the request log and counted in ``/metrics`` under the route ``other``.
* Each request's scope carries ``extensions["oxyrule.connection"]``, with which a streamed
  answer can close its connection once its last line is sent (``close``), or at once when its
  client has stopped reading (``abort``, a reset: a plain close would wait for ever for the
  unread answers to drain).

* A keep-alive connection whose last answer is still unread when the keep-alive timeout ends
  is reset, not closed: a close waits for the answer to drain, for ever if the client never
  reads, and keeps it in memory all that time (``service.api.sending``).

``oxyrule serve`` runs with it (``http=HttpProtocol``); so do the tests' live servers.
"""

from __future__ import annotations

import asyncio
import logging
import uuid
from typing import Any

import orjson
from uvicorn.protocols.http.httptools_impl import HttpToolsProtocol

from service.api.errors import FHIR_JSON, outcome
from service.api.logs import REQUEST_LOGGER

log = logging.getLogger(REQUEST_LOGGER)
CONNECTION = "oxyrule.connection"
MALFORMED = (
    "the request is not valid HTTP/1.1: a malformed request line or header, or both "
    "Content-Length and Transfer-Encoding (RFC 9112 §6.3)"
)


class Connection:
    """What a request may do to its connection (``scope["extensions"]["oxyrule.connection"]``)."""

    def __init__(self, transport: asyncio.Transport) -> None:
        self._transport = transport

    def close(self) -> None:
        """Close once what is already written has been sent."""
        self._transport.close()

    def abort(self) -> None:
        """Close at once, dropping what is not sent (the peer sees a reset)."""
        self._transport.abort()

    def drained(self) -> bool:
        """Nothing written is waiting to be sent. Then uvicorn's writing is not paused (it
        pauses above the buffer's high-water mark and resumes below its low one), so a send
        of at most the high-water mark goes straight into the buffer without waiting."""
        return not self._transport.is_closing() and not self._transport.get_write_buffer_size()


def _service_of(app: Any) -> Any:
    """The ``ServiceState`` of the app behind uvicorn's wrappers, if there is one."""
    for _ in range(8):
        service = getattr(getattr(app, "state", None), "service", None)
        if service is not None:
            return service
        app = getattr(app, "app", None)
        if app is None:
            return None
    return None


class HttpProtocol(HttpToolsProtocol):
    """See the module docstring."""

    def on_headers_complete(self) -> None:
        super().on_headers_complete()
        extensions: dict[str, Any] = dict(self.scope.get("extensions") or {})
        extensions[CONNECTION] = Connection(self.transport)
        self.scope["extensions"] = extensions

    def timeout_keep_alive_handler(self) -> None:
        """An idle keep-alive connection is closed; one whose last answer is still unread is
        reset instead (a close would wait for ever for the answer to drain, holding it)."""
        if not self.transport.is_closing() and self.transport.get_write_buffer_size():
            self.transport.abort()
            return
        super().timeout_keep_alive_handler()

    def send_400_response(self, msg: str) -> None:  # uvicorn's message is not used
        correlation_id = uuid.uuid4().hex
        body = orjson.dumps(outcome("structure", MALFORMED, "http.request"))
        head = (
            b"HTTP/1.1 400 Bad Request\r\n"
            + f"content-type: {FHIR_JSON}\r\n".encode()
            + f"content-length: {len(body)}\r\n".encode()
            + f"x-correlation-id: {correlation_id}\r\n".encode()
            + b"connection: close\r\n\r\n"
        )
        self.transport.write(head + body)
        self.transport.close()
        service = _service_of(self.app)
        if service is not None:
            service.metrics.request("other", "-", 400, 0.0)
        log.info(
            "request",
            extra={
                "correlation_id": correlation_id,
                "method": "-",
                "route": "other",
                "status": 400,
                "duration_ms": 0.0,
                "problem": "not valid HTTP/1.1",
            },
        )
