"""``oxyrule serve``: check the settings, load the rule set once, then run uvicorn.

Start-up refuses, with one clear line on stderr and exit status 1 (never a traceback):
an unknown ``OXYRULE_*`` variable (a typo would otherwise be ignored), a setting out of its
range, a broken rule set, site file or code map, a rule set ``oxyrule lint`` rejects, and
unusable authentication settings. With one worker the app built here is served as it is; with
more, this process supervises (``Supervisor``): it verifies the rule set, copies it into a
private generation directory, and each worker process builds its app from the environment and
that copy (``app_from_environment``); a reload switches every worker at one instant
(``service.api.generations``). Workers drain on SIGTERM as a single server does.
"""

from __future__ import annotations

import gc
import logging
import logging.config
import os
import re
import signal
import socket
import sys
import time
from collections.abc import Callable, Mapping
from pathlib import Path
from types import FrameType
from typing import Any

import uvicorn
from fastapi import FastAPI
from pydantic import ValidationError
from pydantic_settings import SettingsError
from uvicorn.config import STARTUP_FAILURE
from uvicorn.supervisors.multiprocess import Multiprocess, Process

from service.api.app import create_app
from service.api.auth import AuthConfigError
from service.api.generations import STATE_VARIABLE, Generations, WorkerGenerations
from service.api.logs import SERVER_LOGGER, log_config
from service.api.protocol import HttpProtocol
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

    def __init__(
        self,
        config: uvicorn.Config,
        service: ServiceState | Callable[[], ServiceState | None],
        drain_seconds: float,
    ):
        super().__init__(config)
        # A worker process has no app yet when its server is made: it is found when needed.
        self.service = service if callable(service) else (lambda: service)
        self.drain_seconds = drain_seconds
        self.drain_until: float | None = None

    def handle_exit(self, sig: int, frame: FrameType | None) -> None:
        if self.drain_until is None:
            service = self.service()
            if service is not None:
                service.draining = True  # /readyz 503, and Connection: close on every answer
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


def build(settings: Settings, server: ServerSettings, generation: int | None = None) -> FastAPI:
    """The app, or a ``StartupError`` naming what is broken. ``generation``: a worker of a
    multi-worker server, serving that generation of the supervisor's copies."""
    try:
        if generation is None:
            return create_app(settings, server)
        workers = WorkerGenerations(Path(os.environ[STATE_VARIABLE]))
        runtime = workers.load(generation, settings)
        app = create_app(settings, server, runtime=runtime)
        service: ServiceState = app.state.service
        service.generations, service.generation = workers, generation
        return app
    except RuleSetError as exc:
        raise StartupError(f"the rule set cannot be loaded: {exc}") from None
    except (ServiceError, AuthConfigError) as exc:
        raise StartupError(str(exc)) from None
    except OSError as exc:
        raise StartupError(f"cannot read {exc.filename or 'a file'}: {exc.strerror}") from None


# File descriptors kept for HTTP beyond the assessments in flight: idle keep-alive connections,
# the listening sockets, log and rule files.
HTTP_DESCRIPTOR_RESERVE = 64


def ensure_descriptors(server: ServerSettings) -> int:
    """Make sure the process may open every connection its settings allow; the soft limit.

    300 idle MLLP peers once used every descriptor the process had, and then HTTP ``/healthz``
    failed too. Now MLLP peers are capped (``OXYRULE_MLLP_MAX_CONNECTIONS``) and the cap must
    fit: the soft limit is raised to what is needed when the hard limit allows, else start-up
    is refused naming the settings.
    """
    needed = server.max_concurrent_requests + HTTP_DESCRIPTOR_RESERVE
    if server.mllp_port is not None:
        needed += server.mllp_max_connections
    return ensure_descriptor_limit(needed)


def ensure_descriptor_limit(needed: int) -> int:
    """Raise the soft limit of open files to ``needed`` if it is lower (``StartupError`` when
    the hard limit does not allow it); the soft limit."""
    import resource

    soft, hard = resource.getrlimit(resource.RLIMIT_NOFILE)
    if soft != resource.RLIM_INFINITY and soft < needed:
        if hard == resource.RLIM_INFINITY or hard >= needed:
            resource.setrlimit(resource.RLIMIT_NOFILE, (needed, hard))
            return needed
        raise StartupError(
            f"the process may open {hard} files at most, and its settings need {needed} "
            "(OXYRULE_MAX_CONCURRENT_REQUESTS + OXYRULE_MLLP_MAX_CONNECTIONS + "
            f"{HTTP_DESCRIPTOR_RESERVE}): raise the limit (ulimit -n) or lower the settings"
        )
    return int(soft)


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


_WORKER: list[ServiceState] = []  # this worker process's service, once its app is built


def worker_service() -> ServiceState | None:
    """The service of this worker process (for its draining server), if built yet."""
    return _WORKER[0] if _WORKER else None


def app_from_environment() -> FastAPI:
    """The app of one worker process (uvicorn factory), from ``OXYRULE_*`` alone and, under a
    supervisor, the rule-set generation it committed last."""
    settings, server = load_settings({}, {})
    logging.config.dictConfig(log_config(server.log_level))
    generation = None
    if STATE_VARIABLE in os.environ:
        generation = WorkerGenerations(Path(os.environ[STATE_VARIABLE])).committed()
    app = build(settings, server, generation)
    _WORKER[:] = [app.state.service]
    settle_memory()
    return app


class WorkerProcess(Process):
    """uvicorn's worker process, whose server drains on SIGTERM as a single server does."""

    @property
    def server(self) -> uvicorn.Server:
        if self._server is None:
            self._server = DrainingServer(self.config, worker_service, DRAIN_SECONDS)
        return self._server


RELOAD_SECONDS = 60.0  # how long every worker has to load a new generation


class Supervisor(Multiprocess):
    """uvicorn's supervisor of worker processes, with draining workers and a reload that
    switches every worker to one verified rule set at once (``service.api.generations``).

    ``init_processes``, ``keep_subprocess_alive`` and ``handle_ttin`` are uvicorn's (0.55), only
    making ``WorkerProcess``es; ``handle_hup`` replaces uvicorn's restart of every worker.
    """

    def __init__(
        self,
        config: uvicorn.Config,
        sockets: list[socket.socket],
        generations: Generations,
        settings: Settings,
        identity: str,
    ) -> None:
        super().__init__(config, sockets)
        self.generations, self.settings, self.identity = generations, settings, identity
        self.log = logging.getLogger(SERVER_LOGGER)

    def _process(self) -> Process:
        return WorkerProcess(self.config, self.sockets)

    def init_processes(self) -> None:
        for _ in range(self.processes_num):
            process = self._process()
            process.start()
            self.processes.append(process)

    def keep_subprocess_alive(self) -> None:
        if self.should_exit.is_set():
            return
        for index, process in enumerate(self.processes):
            if process.is_alive(timeout=self.config.timeout_worker_healthcheck):
                continue
            process.kill()
            process.join()
            if process.exitcode == STARTUP_FAILURE:
                self.log.error("a worker failed to start: stopping")
                self.should_exit.set()
                return
            if self.should_exit.is_set():
                return
            self.log.info("a worker died: starting another")
            process = self._process()
            process.start()
            self.processes[index] = process

    def handle_ttin(self) -> None:
        self.processes_num += 1
        process = self._process()
        process.start()
        self.processes.append(process)

    def handle_hup(self) -> None:
        self.log.info(
            "SIGHUP: reloading the rule set",
            extra={"ruleset": self.identity, "workers": len(self.processes)},
        )
        try:
            published = self.generations.publish(self.settings)
        except Exception as exc:  # anything: refuse the new set, every worker keeps its own
            self.log.error(
                "rule set reload refused; still serving the loaded rule set",
                extra={"problem": f"{type(exc).__name__}: {exc}"[:2000]},
            )
            return
        self.generations.ask(published.number)
        waiting = {p.pid: p for p in self.processes if p.pid is not None and p.is_ready(1)}
        for pid in waiting:
            os.kill(pid, signal.SIGHUP)
        deadline = time.monotonic() + RELOAD_SECONDS
        while time.monotonic() < deadline and not self.should_exit.is_set():
            reports = self.generations.reports(published.number)
            refused = {pid: why for pid, why in reports.items() if why != "ready"}
            if refused:
                break
            if all(pid in reports or not p.process.is_alive() for pid, p in waiting.items()):
                self.generations.commit(published.number)
                self.log.info(
                    "rule set reloaded",
                    extra={"ruleset": published.identity, "previous": self.identity},
                )
                self.identity = published.identity
                return
            time.sleep(0.05)
        else:
            refused = dict.fromkeys(waiting, "not ready in time")
        self.log.error(
            "rule set reload refused; every worker still serves the loaded rule set",
            extra={"problem": "; ".join(sorted(set(refused.values())))[:2000]},
        )


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
        ensure_descriptors(server)
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
            "cds": service.cds.trust.mode,
            "mllp_port": server.mllp_port,
            "bench": f"http://{server.host}:{server.port}/bench" if server.bench else "off",
        },
    )
    if service.cds.trust.mode == "unsigned":
        logging.getLogger(SERVER_LOGGER).warning(
            "cds hooks accept calls without the EHR's JWT (OXYRULE_CDS_ALLOW_UNSIGNED): "
            "development only"
        )
    common: dict[str, Any] = {
        "host": server.host,
        "port": server.port,
        "log_config": log_config(server.log_level),
        "access_log": False,
        "server_header": False,
        "timeout_graceful_shutdown": GRACEFUL_SECONDS,
        "http": HttpProtocol,
    }
    if server.workers == 1:
        runner = DrainingServer(uvicorn.Config(app, **common), service, DRAIN_SECONDS)
        runner.run()
        if not runner.started:  # uvicorn logged why (the port is taken, say)
            return EXIT_FAILED
    else:
        return supervise(settings, server, common, rules, site=site, bench=bench)
    return EXIT_OK


def supervise(
    settings: Settings,
    server: ServerSettings,
    common: dict[str, Any],
    rules: Path | None,
    *,
    site: Path | None = None,
    bench: bool | None = None,
) -> int:
    """Run ``server.workers`` worker processes under a ``Supervisor`` until stopped."""
    # Worker processes read the environment: hand them the command line's choices.
    if rules is not None:
        os.environ[PREFIX + "RULES_DIR"] = str(rules)
    if site is not None:
        os.environ[PREFIX + "SITE_FILE"] = str(site)
    if bench is not None:
        os.environ[PREFIX + "BENCH"] = "true" if bench else "false"
    generations = Generations.create()
    try:
        try:
            published = generations.publish(settings)
        except Exception as exc:  # verified a moment ago: the files changed under us
            sys.stderr.write(f"oxyrule: cannot start: {exc}\n")
            return EXIT_FAILED
        generations.commit(published.number)
        os.environ[STATE_VARIABLE] = str(generations.root)
        config = uvicorn.Config(
            "service.api.server:app_from_environment",
            factory=True,
            workers=server.workers,
            **common,
        )
        supervisor = Supervisor(
            config, [config.bind_socket()], generations, settings, published.identity
        )
        supervisor.run()
    finally:
        os.environ.pop(STATE_VARIABLE, None)
        generations.close()
    return EXIT_OK
