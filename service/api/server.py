"""``oxyrule serve``: check the settings, load the rule set once, then run uvicorn.

Start-up refuses, with one clear line on stderr and exit status 1 (never a traceback):
an unknown ``OXYRULE_*`` variable (a typo would otherwise be ignored), a setting out of its
range, a broken rule set, site file or code map, and unusable authentication settings.
With one worker the app built here is served as it is; with more, each worker process builds
its own from the environment (``app_from_environment``), after this process checked it once.
"""

from __future__ import annotations

import gc
import logging
import logging.config
import os
import re
import sys
import time
from collections.abc import Mapping
from pathlib import Path
from types import FrameType
from typing import Any

import uvicorn
from fastapi import FastAPI
from pydantic import ValidationError
from pydantic_settings import SettingsError

from service.api.app import create_app
from service.api.auth import AuthConfigError
from service.api.logs import SERVER_LOGGER, log_config
from service.api.state import ServiceState
from service.config import ServerSettings, Settings
from service.engine import RuleSetError
from service.exceptions import ServiceError

PREFIX = "OXYRULE_"
EXIT_OK, EXIT_FAILED = 0, 1


# After SIGTERM the server keeps answering, with /readyz at 503, for this long before it stops
# accepting connections; then requests in flight get up to GRACEFUL_SECONDS to finish. The
# Deployment's preStop hook already waits 5 s before the signal, so this window is short.
DRAIN_SECONDS = 1.0
GRACEFUL_SECONDS = 10


class DrainingServer(uvicorn.Server):
    """Uvicorn's server, stopping in order on SIGTERM (or SIGINT) and exiting 0.

    Uvicorn on its own closes its listening socket at once, so a readiness probe cannot see the
    process go unready, and re-raises the signal once it has stopped, so the process dies by it
    (status 143). Here the first signal only sets the app draining (``/readyz`` answers 503
    while every other route still answers) and ends the main loop ``drain_seconds`` later;
    uvicorn then stops accepting, waits for requests in flight (``timeout_graceful_shutdown``)
    and runs the app's shutdown, and ``serve`` returns 0. A second signal stops at once (as
    uvicorn does) and a third forces it.
    """

    def __init__(self, config: uvicorn.Config, service: ServiceState, drain_seconds: float):
        super().__init__(config)
        self.service = service
        self.drain_seconds = drain_seconds
        self.drain_until: float | None = None

    def handle_exit(self, sig: int, frame: FrameType | None) -> None:
        if self.drain_until is None:
            self.service.draining = True
            self.drain_until = time.monotonic() + self.drain_seconds
            logging.getLogger(SERVER_LOGGER).info("stopping: draining")
            return
        if self.should_exit:
            self.force_exit = True
        self.should_exit = True

    async def on_tick(self, counter: int) -> bool:
        if self.drain_until is not None and time.monotonic() >= self.drain_until:
            self.should_exit = True
        return await super().on_tick(counter)


class StartupError(Exception):
    """The service cannot start; the message says why and names the setting."""


def known_variables() -> set[str]:
    return {
        PREFIX + name.upper() for name in (*Settings.model_fields, *ServerSettings.model_fields)
    }


# What Kubernetes injects for a Service named "oxyrule" (service links), not settings.
SERVICE_LINK = re.compile(rf"{PREFIX}(SERVICE_(HOST|PORT)(_\w+)?|PORT_\d+_(TCP|UDP|SCTP)\w*)")


def check_environment(environ: Mapping[str, str]) -> None:
    """Refuse ``OXYRULE_*`` variables that name no setting (a typo would be ignored)."""
    known = known_variables()
    unknown = sorted(
        k
        for k in environ
        if k.upper().startswith(PREFIX) and k.upper() not in known and not SERVICE_LINK.fullmatch(k)
    )
    if unknown:
        raise StartupError(
            f"unknown setting {', '.join(unknown)}; known: {', '.join(sorted(known_variables()))}"
        )


def _describe(exc: ValidationError, flags: Mapping[str, str]) -> str:
    lines = []
    for error in exc.errors(include_url=False, include_input=False):
        loc = [str(part) for part in error["loc"]]
        name = loc[0] if loc else ""
        where = flags.get(name) or (PREFIX + name.upper() if name else "settings")
        detail = error["msg"].removeprefix("Value error, ")
        lines.append(f"bad setting {where}: {detail}" if name else detail)
    return "; ".join(lines)


def load_settings(
    overrides: Mapping[str, Any], flags: Mapping[str, str]
) -> tuple[Settings, ServerSettings]:
    """Both settings objects from the environment and the command line's ``overrides``."""
    check_environment(os.environ)
    mine = {k: v for k, v in overrides.items() if v is not None}
    settings_keys = set(Settings.model_fields)
    try:
        settings = Settings(**{k: v for k, v in mine.items() if k in settings_keys})
        server = ServerSettings(**{k: v for k, v in mine.items() if k not in settings_keys})
    except ValidationError as exc:
        raise StartupError(_describe(exc, flags)) from None
    except SettingsError as exc:  # a JSON-valued variable that is not JSON
        field = str(exc).split('"')[1] if '"' in str(exc) else ""
        name = PREFIX + field.upper() if field else "an OXYRULE_ variable"
        raise StartupError(
            f'bad setting {name}: not valid JSON (a list is written ["a", "b"])'
        ) from None
    return settings, server


def build(settings: Settings, server: ServerSettings) -> FastAPI:
    """The app, or a ``StartupError`` naming what is broken."""
    try:
        return create_app(settings, server)
    except RuleSetError as exc:
        raise StartupError(f"the rule set cannot be loaded: {exc}") from None
    except (ServiceError, AuthConfigError) as exc:
        raise StartupError(str(exc)) from None
    except OSError as exc:
        raise StartupError(f"cannot read {exc.filename or 'a file'}: {exc.strerror}") from None


def settle_memory() -> None:
    """Take what start-up loaded (code, rule set, app: ~77,000 objects) out of the garbage
    collector's sight with ``gc.freeze()``, once it is all built.

    Otherwise every full collection, one every few hundred requests, walks all of it: measured
    45 ms for one collection against 0.5 ms frozen, a pause for every request in flight, which
    under load becomes a queue (tests/load/capacity.py). A reload re-freezes
    (``service.api.reload``).
    """
    gc.collect()
    gc.freeze()


def app_from_environment() -> FastAPI:
    """The app of one worker process (uvicorn factory), from ``OXYRULE_*`` alone."""
    settings, server = load_settings({}, {})
    logging.config.dictConfig(log_config(server.log_level))
    app = build(settings, server)
    settle_memory()
    return app


def serve(
    *,
    host: str | None = None,
    port: int | None = None,
    workers: int | None = None,
    rules: Path | None = None,
    site: Path | None = None,
    mllp_port: int | None = None,
    bench: bool | None = None,
) -> int:
    """Run the service until stopped; the process exit status."""
    overrides = {
        "host": host,
        "port": port,
        "workers": workers,
        "rules_dir": rules,
        "site_file": site,
        "mllp_port": mllp_port,
        "bench": bench,
    }
    names = {
        "host": "--host",
        "port": "--port",
        "workers": "--workers",
        "rules_dir": "--rules",
        "site_file": "--site",
        "mllp_port": "--mllp-port",
        "bench": "--no-bench",
    }
    flags = {k: flag for k, flag in names.items() if overrides[k] is not None}
    try:
        settings, server = load_settings(overrides, flags)
        logging.config.dictConfig(log_config(server.log_level))
        app = build(settings, server)
    except StartupError as exc:
        sys.stderr.write(f"oxyrule: cannot start: {exc}\n")
        return EXIT_FAILED
    service = app.state.service
    ruleset = service.runtime.ruleset
    if server.workers == 1:
        settle_memory()
    logging.getLogger(SERVER_LOGGER).info(
        "starting",
        extra={
            "host": server.host,
            "port": server.port,
            "workers": server.workers,
            "ruleset": f"{ruleset.id}|{ruleset.version}",
            "site": service.runtime.site_view.summary() if service.runtime.site_view else None,
            "auth": ",".join(service.auth.methods) or "off",
            "mllp_port": server.mllp_port,
            "bench": f"http://{server.host}:{server.port}/bench" if server.bench else "off",
        },
    )
    common: dict[str, Any] = {
        "host": server.host,
        "port": server.port,
        "log_config": log_config(server.log_level),
        "access_log": False,
        "server_header": False,
        "timeout_graceful_shutdown": GRACEFUL_SECONDS,
    }
    if server.workers == 1:
        runner = DrainingServer(uvicorn.Config(app, **common), service, DRAIN_SECONDS)
        runner.run()
        if not runner.started:  # uvicorn logged why (the port is taken, say)
            return EXIT_FAILED
    else:
        # Worker processes read the environment: hand them the command line's choices.
        if rules is not None:
            os.environ[PREFIX + "RULES_DIR"] = str(rules)
        if site is not None:
            os.environ[PREFIX + "SITE_FILE"] = str(site)
        if bench is not None:
            os.environ[PREFIX + "BENCH"] = "true" if bench else "false"
        uvicorn.run(
            "service.api.server:app_from_environment",
            factory=True,
            workers=server.workers,
            **common,
        )
    return EXIT_OK
