"""Fixtures of the fault tests: apps over real HTTP on loopback, raw sockets, captured logs."""

from __future__ import annotations

import io
import logging
import socket
from collections.abc import Callable, Iterator
from typing import Any

import pytest
from fastapi import FastAPI

from service.api import create_app
from service.api.logs import JsonFormatter
from service.config import ServerSettings, Settings
from service.runtime import Runtime
from tests.api.live import LiveServer


@pytest.fixture(scope="session")
def runtime() -> Runtime:
    return Runtime.load(Settings())


@pytest.fixture
def live_app(runtime: Runtime) -> Iterator[Callable[..., tuple[FastAPI, int]]]:
    """Start an app with the given server settings on a loopback port: (app, port)."""
    servers: list[LiveServer] = []

    def start(**server: Any) -> tuple[FastAPI, int]:
        app = create_app(Settings(), ServerSettings(**server), runtime=runtime)
        live = LiveServer(app).__enter__()
        servers.append(live)
        return app, live.port

    yield start
    for live in reversed(servers):
        live.__exit__(None, None, None)


@pytest.fixture
def logged() -> Iterator[Callable[[], str]]:
    """Everything logged during the test, by any logger, as the service's JSON lines."""
    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.setFormatter(JsonFormatter())
    root, oxyrule = logging.getLogger(), logging.getLogger("oxyrule")
    levels = root.level, oxyrule.level
    root.addHandler(handler)
    root.setLevel(logging.DEBUG)
    oxyrule.setLevel(logging.DEBUG)
    yield stream.getvalue
    root.removeHandler(handler)
    root.setLevel(levels[0])
    oxyrule.setLevel(levels[1])


def raw_connection(port: int, timeout: float = 10.0) -> socket.socket:
    sock = socket.create_connection(("127.0.0.1", port), timeout=timeout)
    return sock


def read_answer(sock: socket.socket) -> bytes:
    """Everything the server sends until it closes the connection (bounded by the timeout)."""
    chunks = []
    while chunk := sock.recv(65536):
        chunks.append(chunk)
    return b"".join(chunks)
