"""Structured logs: one JSON object per line, with a closed set of fields.

The formatter writes only the fields listed in ``FIELDS`` (plus time, level, logger and the
message), so whatever a caller passes in ``extra`` cannot carry a patient's name, identifier
or value into the log by accident, and exception tracebacks are never written. Messages are
fixed phrases; an internal error is logged by its type and the frames it passed through, never
by its text (which might quote input).
"""

from __future__ import annotations

import logging
import time
from typing import Any

import orjson

FIELDS = (
    "correlation_id",
    "method",
    "route",
    "status",
    "duration_ms",
    "pattern",
    "lines",
    "rejected",
    "bytes_in",
    "error_type",
    "frames",
    "ruleset",
    "host",
    "port",
    "workers",
    "auth",
    "mllp_port",
    "site",
    "bench",
    "setting",
    "problem",
    "previous",
    "cds",
    "cds_service",
    "outcome",
    "reason",
    "accepted_suggestions",
    "card",
    "cards",
    "indicator",
    "stream",
    "peer",
    "connections",
    "limit",
)

REQUEST_LOGGER = "oxyrule.http"
SERVER_LOGGER = "oxyrule.server"


class JsonFormatter(logging.Formatter):
    """One JSON object per record, with allow-listed fields only."""

    def format(self, record: logging.LogRecord) -> str:
        line: dict[str, Any] = {
            "time": time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(record.created))
            + f".{int(record.msecs):03d}Z",
            "level": record.levelname.lower(),
            "logger": record.name,
            "message": record.getMessage(),
        }
        for name in FIELDS:
            value = record.__dict__.get(name)
            if value is not None:
                line[name] = value
        return orjson.dumps(line, default=str).decode()


def log_config(level: str) -> dict[str, Any]:
    """A ``logging.config.dictConfig`` for the app and uvicorn: JSON lines on stderr.

    Uvicorn's access log is off (the app writes its own line per request); its error log keeps
    its fixed messages, formatted as JSON. python-hl7's loggers are silenced: they quote the
    fields they cannot read, which hold patient data; so are httpx's, whose request lines
    carry a patient id in the URL.
    """
    handler = {"class": "logging.StreamHandler", "formatter": "json", "stream": "ext://sys.stderr"}
    loggers = {
        name: {"handlers": ["stderr"], "level": level.upper(), "propagate": False}
        for name in ("oxyrule", "uvicorn", "uvicorn.error")
    }
    loggers["uvicorn.access"] = {"handlers": [], "level": "WARNING", "propagate": False}
    # python-hl7 logs the text of fields it cannot un-escape (patient data): never written.
    from service.hl7v2.message import hl7_library_loggers

    for logger in hl7_library_loggers():
        loggers[logger.name] = {"handlers": [], "level": "CRITICAL", "propagate": False}
    # httpx and httpcore (the CDS Hooks reads of an EHR's FHIR server) log each request's URL,
    # which holds the patient's id: never written.
    for name in ("httpx", "httpcore"):
        loggers[name] = {"handlers": [], "level": "CRITICAL", "propagate": False}
    return {
        "version": 1,
        "disable_existing_loggers": False,
        "formatters": {"json": {"()": JsonFormatter}},
        "handlers": {"stderr": handler},
        "loggers": loggers,
    }
