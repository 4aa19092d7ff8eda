"""Fixtures of the HTTP tests: a loaded runtime, apps built from settings, live servers."""

from __future__ import annotations

import io
import logging
import time
import warnings
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest
from fastapi import FastAPI

from service.api import create_app
from service.api.logs import JsonFormatter
from service.config import ServerSettings, Settings
from service.runtime import Runtime
from tests.api.live import LiveServer

with warnings.catch_warnings():
    # Starlette warns that its TestClient will move from httpx to another client; not ours.
    warnings.simplefilter("ignore")
    from fastapi.testclient import TestClient as TestClient

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "fixtures" / "demo"
ALTITUDE = DEMO / "altitude-visitor.bundle.json"
ASSESS = "/fhir/$assess-hypoxaemia"
FHIR_JSON = {"Content-Type": "application/fhir+json"}
NDJSON = {"Content-Type": "application/fhir+ndjson"}

AppFactory = Callable[..., FastAPI]


def pytest_configure(config: pytest.Config) -> None:
    config.addinivalue_line("markers", "slow: builds and installs the wheel (seconds)")


@pytest.fixture(scope="session")
def runtime() -> Runtime:
    return Runtime.load(Settings())


@pytest.fixture
def make_app(runtime: Runtime) -> AppFactory:
    """An app with the shared runtime and the given server settings."""

    def make(**server: Any) -> FastAPI:
        return create_app(Settings(), ServerSettings(**server), runtime=runtime)

    return make


@pytest.fixture
def client(make_app: AppFactory) -> Iterator[TestClient]:
    """An in-process client of an app with default server settings."""
    with TestClient(make_app()) as test_client:
        yield test_client


@pytest.fixture(scope="module")
def live(request: pytest.FixtureRequest) -> Iterator[httpx.Client]:
    """A client of a real uvicorn server with default settings (one per test module)."""
    app = create_app(Settings(), ServerSettings())
    with LiveServer(app) as server, httpx.Client(base_url=server.url, timeout=10) as client:
        yield client


@pytest.fixture
def serve(make_app: AppFactory) -> Iterator[Callable[..., httpx.Client]]:
    """Start a real server with the given settings; the client is closed at the end."""
    stack: list[tuple[LiveServer, httpx.Client]] = []

    def start(app: FastAPI | None = None, **server: Any) -> httpx.Client:
        live_server = LiveServer(app or make_app(**server)).__enter__()
        client = httpx.Client(base_url=live_server.url, timeout=10)
        stack.append((live_server, client))
        return client

    yield start
    for live_server, client in reversed(stack):
        client.close()
        live_server.__exit__(None, None, None)


@pytest.fixture
def log_lines() -> Iterator[Callable[[], list[str]]]:
    """The JSON lines the service logs during the test, as the formatter writes them."""
    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.setFormatter(JsonFormatter())
    logger = logging.getLogger("oxyrule")
    level = logger.level
    logger.addHandler(handler)
    logger.setLevel(logging.INFO)
    yield lambda: stream.getvalue().splitlines()
    logger.removeHandler(handler)
    logger.setLevel(level)


def logged_requests(log_lines: Callable[[], list[str]], count: int) -> list[str]:
    """The log's lines once it holds `count` request lines. A request's line is written once
    its answer has gone, so the last one may lag the client a little."""
    deadline = time.monotonic() + 5
    while True:
        lines = log_lines()
        if sum('"message":"request"' in line for line in lines) >= count:
            return lines
        assert time.monotonic() < deadline, "\n".join(lines)
        time.sleep(0.01)


def issue(body: dict[str, Any], index: int = 0) -> dict[str, Any]:
    """One issue of an OperationOutcome body, checking that it is one."""
    assert body["resourceType"] == "OperationOutcome", body
    found: dict[str, Any] = body["issue"][index]
    return found
